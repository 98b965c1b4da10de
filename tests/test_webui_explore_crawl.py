"""Never a 500 on the pages that look across the collection: junk settings, odd saved queries, both back-ends.

The general crawl (test_webui_crawl.py) visits these routes with its generic
junk; here each page gets the junk that reaches its own settings (reference
modes, run ids beyond 32 bits, non-finite numbers, unknown kinds, saved
queries whose parameters no longer fit), on an empty and on a filled vault.
"""

from __future__ import annotations

import pytest

from magvault.paths import part

from browser.webui_data import build_explore_collection, csrf_token, text_of

webui = part("webui")

JUNK = {
    "/shifts": [
        {"kind": "nope", "against": "sideways", "sigma": "0", "by": "mood", "branch": "up", "method": "x" * 300},
        {"against": "run", "against_run": "99999999999"}, {"against": "run", "against_run": "-3"},
        {"against": "run", "against_run": "1"}, {"against": "reference", "reference": "abc"},
        {"against": "reference", "reference": "-5 K"}, {"against": "reference", "reference": "1e999 K"},
        {"against": "reference", "reference": "300 Oe"}, {"sigma": "nan"}, {"sigma": "inf"}, {"sigma": "1e-320"},
        {"by": "field", "bins": "1e999,2"}, {"by": "field", "bins": "a,b"}, {"by": "field", "bins": "0.5,0.1"},
        {"by": "direction", "against": "trend"}, {"by": "parent", "against": "earliest"},
        {"kind": "ordering", "method": "planted-second"}, {"against": "treatment", "branch": "cooling"},
    ],
    "/overlay": [
        {"run_kind": "hysteresis", "kind": "nope", "source": "elsewhere", "norm": "cube", "y": "integral"},
        {"source": "lineage", "root": "NOPE"}, {"source": "lineage", "root": "HR1"}, {"source": "saved"},
        {"source": "saved", "saved": "never"}, {"source": "saved", "saved": "odd overlay"},
        {"source": "saved", "saved": "loop a"}, {"source": "saved", "saved": "odd shifts", "saved_rows": "all"},
        {"source": "saved", "saved": "odd coupled"}, {"norm": "reference", "ref_T": "-1"},
        {"norm": "reference", "ref_T": "1e400"}, {"norm": "reference", "ref_T": "1e6"},
        {"span": "custom", "t_min": "abc", "t_max": "-inf"}, {"span": "custom", "t_min": "1e6", "t_max": "2e6"},
        {"span": "custom", "t_min": "40", "t_max": "40"}, {"runs": "all", "branch": "both", "colour": "field"},
        {"runs": "all", "colour": "treatment", "y": "derivative", "norm": "none"}, {"colour": "specimen"},
        {"run_kind": "calorimetry"}, {"run_kind": "susceptibility", "norm": "none"},
        {"x_min": "2", "x_max": "1"}, {"q": "%_*"}, {"origin": "Nowhere", "superstructure": "99C"},
    ],
    "/map": [
        {"kinds": ["nope", "low-t"], "branch": "sideways", "layout": "3d"}, {"kinds": ["ordering"], "layout": "apart"},
        {"x_min": "nan", "x_max": "inf"}, {"q": "<script>"}, {"branch": "cooling"},
    ],
    "/coupled": [
        {"compare": "methods", "kind": "low-t", "a": "x", "b": "x"},
        {"compare": "run_kinds", "kind": "low-t", "a": "thermomagnetic", "b": "thermomagnetic"},
        {"compare": "run_kinds", "kind": "low-t", "a": "thermomagnetic", "b": "susceptibility"},
        {"compare": "kinds", "a": "low-t", "b": "ordering", "sigma": "-1"}, {"compare": "kinds", "a": "low-t"},
        {"compare": "methods", "kind": "", "a": "planted-for-tests", "b": "planted-second"},
        {"compare": "nonsense", "kind": "nope"}, {"sigma": "abc", "branch": "cooling"},
    ],
    "/loops": [{"psd_md": "4.5", "colour": "mood"}, {"psd_md": "nan"}, {"psd_md": "5", "colour": "origin"},
               {"psd_md": ["4", "5"]}],
    "/saved": [{"name": "x"}],
    "/saved/open": [{}, {"name": ""}, {"name": "never"}, {"name": "odd overlay"}, {"name": "odd shifts"},
                    {"name": "odd coupled"}, {"name": "odd map"}, {"name": "loop a"}, {"name": "x" * 300}],
}

ODD_SAVED = [  # as another client (or an older version) might have stored them
    ("odd overlay", "overlay", {"source": "lineage", "root": "GONE", "_external": True, "_scheme": "javascript",
                                "colour": 7, "t_min": "cold"}),
    ("odd shifts", "shifts", {"kind": "low-t", "against": "trend", "unexpected": 1}),
    ("odd coupled", "coupled", {"kinds": "low-t"}),
    ("odd map", "composition_map", {"kinds": "low-t,nope", "branch": "sideways"}),
    ("loop a", "overlay", {"source": "saved", "saved": "loop b"}),
    ("loop b", "overlay", {"source": "saved", "saved": "loop a"}),
]


def _visit(client, seen):
    for url, queries in JUNK.items():
        for query in [None, *queries]:
            r = client.get(url, query_string=query)
            seen.append(("GET", url, query, r.status_code))
    token = csrf_token(client.get("/shifts").get_data(as_text=True))
    posts = [{"page": "shifts", "args": "against=run&against_run=99999999999", "name": "junk 1"},
             {"page": "overlay", "args": "source=saved&saved=loop+a&_scheme=javascript&_external=1", "name": "junk 2"},
             {"page": "composition_map", "args": "kinds=nope", "name": "junk 3"},
             {"page": "coupled", "args": "compare=kinds", "name": "junk 4"},
             {"page": "elsewhere", "args": "", "name": "junk 5"}, {"page": "shifts", "args": "%zz&&==", "name": ""},
             {"page": "shifts", "args": "", "name": "x" * 70}, {"page": "shifts", "args": "", "name": "tab\there"},
             {"page": "correlate", "args": "kind=low-t", "name": "junk 6"}]
    for data in posts:
        r = client.post("/saved", data={"csrf_token": token, **data})
        seen.append(("POST", "/saved", data, r.status_code))
        assert r.status_code == 302, (data, r.status_code)


@pytest.mark.parametrize("filled", [False, True], ids=["empty", "filled"])
def test_explore_pages_never_answer_500(vault, db_url, filled):
    if filled:
        build_explore_collection(vault)
    for name, query, params in ODD_SAVED:
        vault.save_query(name, query, params)
    app = webui.create_app(db_url, {"TESTING": True})
    try:
        seen: list = []
        client = app.test_client()
        _visit(client, seen)
        failures = [s for s in seen if s[3] >= 500]
        assert not failures, failures[:10]
        assert {s[3] for s in seen} <= {200, 302}
        # Junk was named on the page, not silently ignored.
        text = text_of(client.get("/shifts", query_string=JUNK["/shifts"][0]).get_data(as_text=True))
        assert "compare with: 'sideways' is not one of" in text and "branch: 'up' is not one of" in text
        text = text_of(client.get("/overlay", query_string={"source": "saved", "saved": "loop a"}).get_data(
            as_text=True))
        assert "refers to saved queries 3 deep" in text
        text = text_of(client.get("/overlay", query_string={"source": "saved", "saved": "odd shifts"}).get_data(
            as_text=True))
        assert "saved query 'odd shifts' has parameters this version cannot use" in text
        # A saved overlay's odd names never reach url_for's own options.
        assert client.get("/saved/open", query_string={"name": "odd overlay"}).headers["Location"].startswith(
            "/overlay?")
        names = {d["name"] for d in app.extensions["magvault"].saved_queries()}
        assert "junk 5" not in names and "junk 6" not in names
    finally:
        app.extensions["magvault"].close()
