"""Never a 500: every route of the dashboard, on an empty and on a filled vault, with junk parameters.

Runs on every back-end (SQLite and PostgreSQL), since junk reaches the database
differently on each (PostgreSQL refuses NUL characters and out-of-range integers).
"""

from __future__ import annotations

import hashlib
import re

import pytest

from magvault.paths import part

from browser.webui_data import build_collection, csrf_token

webui = part("webui")

JUNK_QUERIES = [
    {"x_min": "abc", "x_max": "-1e999", "origin": "Nowhere", "sort": "'; drop table run; --", "order": "sideways",
     "page": "99999999999999999999", "limit": "-5", "since": "yesterday", "until": "9999-99-99",
     "specimen": "<script>alert(1)</script>", "user": "u" * 500, "run": "abc", "kind": "nope", "status": "gone",
     "version": "0", "max_points": "1", "primary_only": "maybe", "all_versions": "2", "q": "%_*",
     "size": "12", "v": "old", "transition": "zz", "superstructure": "99C", "run_kind": "nope",
     "quantity": "q" * 100, "method": "", "branch": "up"},
    {"specimen": "A\x00B", "run": "2147483648", "x_min": "nan", "page": "0", "limit": "1e3", "since": "",
     "version": "99999999999", "max_points": "99999999999", "size": "", "unknown_parameter": "1"},
]


def _paths(rule: str, made, sha: str | None) -> list[str]:
    """Concrete URLs for a rule: existing records, missing ones and junk in every path parameter."""
    values = {
        "code": [made.piece if made else "EMPTY", "NOPE-1", "a/b/../c", "x" * 300],
        "run_id": [str(made.thermo_run) if made else "1", str(made.planned_run) if made else "2", "999999",
                   "2147483647"],
        "image_id": [str(made.image) if made else "1", "999999"],
        "sha256": [sha or "0" * 64, "0" * 64, "zz"],
        "filename": ["css/magvault.css", "nope.css", "../secret"],
    }
    names = re.findall(r"<(?:[a-z]+(?:\([^)]*\))?:)?(\w+)>", rule)
    if not names:
        return [rule]
    urls = []
    for i in range(max(len(values[n]) for n in names)):
        url = rule
        for n in names:
            options = values[n]
            url = re.sub(r"<(?:[a-z]+(?:\([^)]*\))?:)?" + n + ">", options[min(i, len(options) - 1)], url)
        urls.append(url)
    return urls


def _crawl(app, made, sha) -> list[tuple[str, str, int, str]]:
    client = app.test_client()
    token = csrf_token(client.get("/bench").get_data(as_text=True))
    seen = []
    for rule in app.url_map.iter_rules():
        methods = rule.methods or set()
        for url in _paths(rule.rule, made, sha):
            if "GET" in methods:
                for query in [None, *JUNK_QUERIES]:
                    with client.get(url, query_string=query) as r:
                        seen.append(("GET", url, r.status_code, rule.rule))
            if "POST" in methods:
                for data in ({"csrf_token": token},
                             {"csrf_token": token, **{k: v for k, v in JUNK_QUERIES[0].items()},
                              "code": "x" * 70, "mass": "heavy", "parent": "NOPE", "reason": "", "by": "abc",
                              "token": "zz", "ncols": "99999", "target-0": "nonsense", "source-0": "A",
                              "pixel_size": "-1 um", "at": "soon", "commit": "Save"},
                             {"csrf_token": token, "reason": "x", "by": "2147483647", "ncols": "-1",
                              "corrections": "{not json", "token": "A" * 30, "reread": "1"}):
                    with client.post(url, data=data) as r:
                        seen.append(("POST", url, r.status_code, rule.rule))
    return seen


@pytest.mark.parametrize("filled", [False, True], ids=["empty", "filled"])
def test_no_route_ever_answers_500(vault, db_url, filled):
    made = build_collection(vault) if filled else None
    sha = hashlib.sha256(made.thermo_bytes).hexdigest() if made else None
    app = webui.create_app(db_url, {"TESTING": True})
    try:
        seen = _crawl(app, made, sha)
    finally:
        app.extensions["magvault"].close()
    # 501 is the plain "this installation cannot derive" answer; anything else from 500 up is a defect.
    failures = [s for s in seen if s[2] >= 500 and s[2] != 501]
    assert not failures, failures[:20]
    assert {s[3] for s in seen} == {r.rule for r in app.url_map.iter_rules()}  # every route was visited
    # Junk was really refused somewhere, and real pages really answered.
    codes = {s[2] for s in seen}
    assert {200, 400, 404} <= codes
    if filled:
        assert ("GET", f"/run/{made.thermo_run}", 200) in [s[:3] for s in seen]
        assert ("GET", f"/specimen/{made.piece}", 200) in [s[:3] for s in seen]
