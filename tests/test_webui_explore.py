"""The pages that look across the collection, through Flask's test client: shifts, overlay, map, coupled, saved.

What the pages show is checked against the Vault's own queries (the page must
say what the Vault says) and, for the numbers the pages compute themselves,
against outside references: the ``uncertainties`` package for the band of the
whole-collection line, numpy's linear interpolation for where a marker sits on
its curve, and Savitzky & Golay (1964) for the slope curves (see
test_webui_explore_curves.py).  The collection is invented
(tests/browser/webui_data.py: build_explore_collection).
"""

from __future__ import annotations

import base64
import json
import re
from urllib.parse import parse_qs, urlparse

import numpy as np
import pytest
from click.testing import CliRunner
from uncertainties import correlated_values

from magvault.paths import part
from magvault.textviews import fmt_unc

from browser.webui_data import EXPLORE_OTHER_ORIGIN, csrf_token, explore_sqlite, text_of

webui = part("webui")

EXPLORE_PAGES = ["/shifts", "/overlay", "/map", "/coupled", "/loops", "/saved"]


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    path, made = explore_sqlite(tmp_path_factory.mktemp("webui_explore"))
    app = webui.create_app(path, {"TESTING": True})
    yield app, made, path
    app.extensions["magvault"].close()


def _get(client, url, status=200) -> str:
    r = client.get(url)
    assert r.status_code == status, (url, r.status_code, text_of(r.get_data(as_text=True))[:600])
    return r.get_data(as_text=True)


def _decode(value):
    """plotly.js typed arrays ({dtype, bdata}) back to numpy; everything else as it is."""
    if isinstance(value, dict) and set(value) >= {"dtype", "bdata"}:
        return np.frombuffer(base64.b64decode(value["bdata"]), dtype=np.dtype(value["dtype"]).newbyteorder("<"))
    if isinstance(value, dict):
        return {k: _decode(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_decode(v) for v in value]
    return value


def figure(page: str, plot_id: str) -> dict:
    m = re.search(rf'<script type="application/json" data-explore-figure="{plot_id}">(.*?)</script>', page, re.S)
    assert m, f"no figure {plot_id}"
    return _decode(json.loads(m.group(1)))


def flagged_list(page: str) -> list[str]:
    block = re.search(r'<ul class="flagged" id="flagged-list">(.*?)</ul>', page, re.S)
    return re.findall(r'<a class="code" href="[^"]+">([^<]+)</a>', block.group(1)) if block else []


def _flagged(frame) -> set[str]:
    return set(frame.loc[frame["flagged"].eq(True).fillna(False).astype(bool), "specimen"])


# --- shifts ----------------------------------------------------------------------------------

@pytest.mark.parametrize("mode", ["trend", "collection", "earliest", "treatment"])
def test_shift_explorer_lists_what_the_vault_flags_first(site, mode):
    app, made, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), f"/shifts?kind=low-t&against={mode}")
    expected = _flagged(vault.shifts("low-t", against=mode))
    assert expected, "the invented collection flags someone in every mode"
    assert set(flagged_list(page)) == expected
    # The table lists every specimen the reference applies to, flagged rows first; the others by reason.
    frame = vault.shifts("low-t", against=mode)
    table = re.search(r'<table class="data compact" data-sortable id="shift-table">(.*?)</table>', page, re.S).group(1)
    rows = re.findall(r'<tr class="(flagged|)">\s*<td data-value="([^"]+)"', table)
    assert {code for _, code in rows} == set(frame.loc[frame["shift_K"].notna(), "specimen"])
    for _, r in frame[frame["shift_K"].isna()].iterrows():
        assert re.search(rf"{re.escape(r['note'])}: [^<]*\b{re.escape(r['specimen'])}\b", page), r["specimen"]
    marks = [cls == "flagged" for cls, _ in rows]
    assert marks == sorted(marks, reverse=True) and sum(marks) == len(expected)
    # Each flagged specimen links to its page, at the part where the likely cause shows.
    anchor = {"trend": "#composition", "treatment": "#history", "earliest": "#history", "collection": ""}[mode]
    for code in expected:
        assert f'<a class="code" href="/specimen/{code}{anchor}">' in page


def test_the_causes_are_named_beside_the_flagged_specimens(site):
    app, made, _ = site
    client = app.test_client()
    treatment = text_of(_get(client, "/shifts?against=treatment"))
    assert re.search(rf"{made.annealed} shift .*? treated: anneal 2026-03-05", treatment)
    trend = text_of(_get(client, "/shifts?against=trend"))
    assert re.search(rf"{made.foreign} shift .*? origin {EXPLORE_OTHER_ORIGIN}", trend)
    # The specimen's own page shows the cause: its treatment in the time line, its origin.
    page = text_of(_get(client, f"/specimen/{made.annealed}"))
    assert "anneal" in page.split("Treatments and runs in time order", 1)[1]
    assert EXPLORE_OTHER_ORIGIN in text_of(_get(client, f"/specimen/{made.foreign}"))


def test_every_reference_mode_is_one_link_away_with_its_count(site):
    app, _, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), "/shifts")
    nav = re.search(r'<nav aria-label="Reference" class="mode-nav">(.*?)</nav>', page, re.S).group(1)
    for mode in ("trend", "collection", "earliest", "treatment"):
        link = re.search(rf'<a href="(/shifts\?[^"]*against={mode}[^"]*)"[^>]*>(.*?)</a>', nav, re.S)
        assert link, mode
        count = re.search(r'<span class="n"[^>]*>(\d+)</span>', link.group(2))
        assert int(count.group(1)) == len(_flagged(vault.shifts("low-t", against=mode)))


def test_trend_mode_draws_the_whole_collection_line_and_its_band(site):
    """The band is sqrt([1, x] C [1, x]^T); the ``uncertainties`` package propagates C through a + b x."""
    app, _, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), "/shifts?against=trend")
    fig = figure(page, "shift-plot")
    res = vault.correlate("low-t", against="x")
    line = next(t for t in fig["data"] if str(t.get("name", "")).startswith("fit to all"))
    x, y = np.asarray(line["x"], float), np.asarray(line["y"], float)
    np.testing.assert_allclose(y, res.intercept + res.slope * x, rtol=1e-12)
    upper = np.asarray(fig["data"][0]["y"], float)
    a, b = correlated_values([res.intercept, res.slope], res.covariance)
    np.testing.assert_allclose(upper - y, [(a + b * xi).std_dev for xi in x], rtol=1e-9)
    assert "each specimen's flag comes from the fit without it" in text_of(page)
    # Flagged specimens are a trace of their own, named on the plot, with error bars both ways.
    flagged = next(t for t in fig["data"] if t.get("name") == "flagged")
    assert set(flagged["text"]) == _flagged(vault.shifts("low-t", against="trend"))
    assert flagged["error_x"]["array"] and flagged["error_y"]["array"]
    assert all(h.startswith("/specimen/") for h in flagged["customdata"])
    # Other modes draw the points without the line.
    other = figure(_get(app.test_client(), "/shifts?against=collection"), "shift-plot")
    assert not any(str(t.get("name", "")).startswith("fit to all") for t in other["data"])


def test_shift_settings_reach_the_vault(site):
    app, made, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    page = _get(client, "/shifts?against=reference&reference=32.0+K&sigma=5")
    assert set(flagged_list(page)) == _flagged(vault.shifts("low-t", reference="32.0 K", sigma=5))
    first = made.runs[made.annealed][0]
    page = _get(client, f"/shifts?against=run&against_run={first}")
    assert set(flagged_list(page)) == _flagged(vault.shifts("low-t", against_run=first)) == {made.annealed}
    page = _get(client, "/shifts?against=collection&by=origin")
    assert ">Group<" in page and EXPLORE_OTHER_ORIGIN in text_of(page)


def test_bad_settings_are_named_and_defaults_used(site):
    app, _, _ = site
    client = app.test_client()
    text = text_of(_get(client, "/shifts?kind=nope&sigma=-2&against=run&against_run=abc&bins=a,b&by=colour"))
    assert "transition: 'nope' is not one of" in text
    assert "flag at: expected a positive number of σ" in text
    assert "reference run: expected a run id" in text
    assert "field bin edges: expected numbers in tesla" in text
    assert "group references by: 'colour' is not one of" in text
    assert "flagged against the composition trend" in text  # the defaults were used
    text = text_of(_get(client, "/shifts?against=run&against_run=999999"))
    assert "reference run: run 999999 not found" in text
    text = text_of(_get(client, "/overlay?t_min=50&t_max=10&span=custom&ref_T=-4&colour=mood&source=lineage"))
    assert "to: 10 K is not above from (50 K)" in text
    assert "reference temperature: expected a positive number of kelvin" in text
    assert "colour by: 'mood' is not one of" in text
    assert "lineage of: choose the specimen at the top of the lineage" in text
    text = text_of(_get(client, "/map?kinds=nope&x_min=0.2&x_max=0.1&layout=3d"))
    assert "transitions: 'nope' not in the catalogue" in text and "x to: 0.1 is below x from (0.2)" in text
    text = text_of(_get(client, "/coupled?compare=methods&kind=low-t&a=planted-second&b=planted-second"))
    assert "B: choose a method other than A (planted-second)" in text


# --- overlay ---------------------------------------------------------------------------------

def _curves(fig) -> list[dict]:
    return [t for t in fig["data"] if t.get("mode") == "lines" and str(t.get("meta", "")).startswith("/run/")]


def test_overlay_marks_each_transition_on_its_own_curve(site):
    """Each marker is a line shape at the stored temperature, centred on its curve's value there (numpy.interp)."""
    app, made, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), "/overlay?run_kind=thermomagnetic&kind=low-t&span=whole")
    fig = figure(page, "overlay-plot")
    stored = vault.transitions(kind="low-t", primary_only=True)
    rows = re.findall(r'<tr data-run="(\d+)" data-shape="(\d+)"', page)
    assert sorted(int(r) for r, _ in rows) == sorted(stored["run"].tolist())
    curves = {int(t["meta"].rsplit("/", 1)[1]): t for t in _curves(fig)}
    assert set(curves) == set(stored["run"])
    shapes = fig["layout"]["shapes"]
    for run, shape_index in rows:
        t_k = float(stored.loc[stored["run"] == int(run), "temperature_K"].iloc[0])
        shape = shapes[int(shape_index)]
        assert shape["type"] == "line" and shape["x0"] == shape["x1"] == pytest.approx(t_k, abs=1e-9)
        curve = curves[int(run)]
        x, y = np.asarray(curve["x"], float), np.asarray(curve["y"], float)
        assert (shape["y0"] + shape["y1"]) / 2 == pytest.approx(float(np.interp(t_k, x, y)), abs=2e-3)
        assert shape["line"]["color"] == curve["line"]["color"]
    # A band of ±u per marker, and the hover names specimen, run and the transition with its uncertainty.
    bands = [s for s in shapes if s["type"] == "rect"]
    assert len(bands) == len(rows)
    assert all(b["x1"] - b["x0"] == pytest.approx(0.30, abs=1e-9) for b in bands)  # u = 0.15 K planted
    hover = next(t for t in fig["data"] if t.get("mode") == "markers" and t.get("customdata"))
    assert any(re.search(rf"{made.annealed}</b> · run \d+<br>low-t \d+\.\d+ ± 0\.15 K", h) for h in hover["hovertext"])
    assert all(h.startswith("/run/") for h in hover["customdata"])
    assert all(re.search(r"run \d+ \(heating\)<br>low-t \d+\.\d+ ± 0\.15 K", c["hovertemplate"])
               for c in _curves(fig))
    assert "no derived low-t" in text_of(page)  # the furnace runs are left out, and the page says why


def test_overlay_normalisations_and_the_derivative(site):
    app, _, _ = site
    client = app.test_client()
    fig = figure(_get(client, "/overlay?norm=max&span=whole"), "overlay-plot")
    assert fig["layout"]["yaxis"]["title"]["text"] == "M / max|M|"
    for c in _curves(fig):
        assert np.max(np.abs(c["y"])) == pytest.approx(1.0, abs=1e-6)
    fig = figure(_get(client, "/overlay?norm=reference&ref_T=20&span=whole"), "overlay-plot")
    assert fig["layout"]["yaxis"]["title"]["text"] == "M / M(20 K)"
    for c in _curves(fig):
        at_20 = float(np.interp(20.0, np.asarray(c["x"], float), np.asarray(c["y"], float)))
        assert at_20 == pytest.approx(1, abs=1e-4)
    fig = figure(_get(client, "/overlay?norm=none&span=whole"), "overlay-plot")
    assert fig["layout"]["yaxis"]["title"]["text"] == "Mass moment (A m² kg⁻¹)"
    page = _get(client, "/overlay?y=derivative&norm=max")
    fig = figure(page, "overlay-plot")
    assert fig["layout"]["yaxis"]["title"]["text"] == "d(M / max|M|)/dT (K⁻¹)"
    assert "Savitzky–Golay slope, 9-point window, quadratic" in text_of(page)
    # The step down makes a dip in the slope at the marked temperature.
    shapes = fig["layout"]["shapes"]
    for c in _curves(fig):
        run = c["meta"]
        marker = next(s for s in shapes if s["type"] == "line" and s["name"] == f"marker run {run.rsplit('/', 1)[1]}")
        x, y = np.asarray(c["x"], float), np.asarray(c["y"], float)
        assert x[np.argmin(y)] == pytest.approx(marker["x0"], abs=1.0)
    fig = figure(_get(client, "/overlay?y=derivative&norm=none"), "overlay-plot")
    assert fig["layout"]["yaxis"]["title"]["text"] == "dM/dT (A m² kg⁻¹ K⁻¹)"


def test_overlay_colours_by_the_chosen_property(site):
    app, made, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    fig = figure(_get(client, "/overlay?colour=treatment"), "overlay-plot")
    groups = {int(c["meta"].rsplit("/", 1)[1]): c.get("legendgroup") for c in _curves(fig)}
    before, after = made.runs[made.annealed]
    assert groups[before] == "before any treatment" and groups[after] == "after anneal"
    assert {g for r, g in groups.items() if r != after} == {"before any treatment"}
    assert fig["layout"]["legend"]["title"]["text"] == "Treatment before the run"
    fig = figure(_get(client, "/overlay?colour=parent"), "overlay-plot")
    assert {c.get("legendgroup") for c in _curves(fig)} == {"HR1", made.foreign, made.no_composition}
    fig = figure(_get(client, "/overlay?colour=x"), "overlay-plot")
    bar = next(t for t in fig["data"] if t.get("marker", {}).get("showscale"))
    xs = vault.specimens().set_index("code")["x"]
    assert bar["marker"]["cmin"] == pytest.approx(xs[made.pieces + [made.foreign]].min())
    assert bar["marker"]["cmax"] == pytest.approx(xs[made.pieces + [made.foreign]].max())
    unknown = [c for c in _curves(fig) if made.no_composition in c["hovertemplate"]]
    assert unknown and {c["line"]["color"] for c in unknown} == {"#8d979f"}  # grey: no x


def test_overlay_selections_by_filters_lineage_and_saved_query(site):
    app, made, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()

    def specimens_drawn(url):
        fig = figure(_get(client, url), "overlay-plot")
        return {re.search(r"<b>([^<]+)</b>", c["hovertemplate"]).group(1) for c in _curves(fig)}

    assert specimens_drawn(f"/overlay?origin={EXPLORE_OTHER_ORIGIN.replace(' ', '+')}") == {made.foreign}
    assert specimens_drawn("/overlay?x_min=0.104&x_max=0.111") == {"HR1-c", "HR1-d", made.foreign}
    assert specimens_drawn("/overlay?source=lineage&root=HR1") == set(made.pieces)
    vault.save_query("explore-collection", "shifts", {"kind": "low-t", "against": "collection"}, replace=True)
    drawn = specimens_drawn("/overlay?source=saved&saved=explore-collection&saved_rows=flagged")
    assert drawn == _flagged(vault.shifts("low-t", against="collection"))
    assert specimens_drawn("/overlay?source=saved&saved=explore-collection&saved_rows=all") == set(
        vault.shifts("low-t", against="collection")["specimen"])


def test_overlay_states_points_drawn_and_decimates_to_its_budget(site):
    """Largest-triangle-three-buckets keeps at most the per-curve share of the budget (Steinarsson 2013)."""
    app, _, path = site
    small = webui.create_app(path, {"TESTING": True, "MAGVAULT_OVERLAY_POINTS": 1600})
    try:
        page = _get(small.test_client(), "/overlay?span=whole")
        fig = figure(page, "overlay-plot")
        curves = _curves(fig)
        per_curve = max(60, min(1500, 1600 // len(curves)))
        assert all(len(c["x"]) <= per_curve for c in curves)
        drawn = sum(len(c["x"]) for c in curves)
        total = len(curves) * 391  # every low-T run of the collection has 391 points
        assert f"{drawn:,} of {total:,} points drawn" in text_of(page)
        assert f"at most {per_curve} per curve" in text_of(page)
    finally:
        small.extensions["magvault"].close()


def test_large_overlays_use_webgl_and_only_they_allow_eval(site, monkeypatch):
    app, _, _ = site
    client = app.test_client()
    r = client.get("/overlay")
    assert "'unsafe-eval'" not in r.headers["Content-Security-Policy"]
    assert {c["type"] for c in _curves(figure(r.get_data(as_text=True), "overlay-plot"))} == {"scatter"}
    monkeypatch.setattr(webui.views.overlay, "WEBGL_CURVES", 3)
    r = client.get("/overlay")
    assert "script-src 'self' 'unsafe-eval'" in r.headers["Content-Security-Policy"]
    assert {c["type"] for c in _curves(figure(r.get_data(as_text=True), "overlay-plot"))} == {"scattergl"}
    assert "drawn with WebGL" in text_of(r.get_data(as_text=True))


# --- composition map and coupled -------------------------------------------------------------

def test_map_draws_one_point_per_primary_transition_and_lists_the_rest(site):
    app, made, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), "/map")
    fig = figure(page, "map-plot")
    stored = vault.transitions(primary_only=True)
    stored = stored[stored["branch"].isin(["heating"]) | stored["branch"].isna()]
    with_x = set(vault.specimens().dropna(subset=["x"])["code"])
    expected = stored[stored["specimen"].isin(with_x)]
    drawn = {t["name"]: t for t in fig["data"]}
    assert set(drawn) == set(expected["kind"])
    for kind, trace in drawn.items():
        runs = sorted(int(h.rsplit("/", 1)[1]) for h in trace["customdata"])
        assert runs == sorted(expected.loc[expected["kind"] == kind, "run"].tolist())
        assert len(trace["error_x"]["array"]) == len(trace["error_y"]["array"]) == len(runs)
        assert all(re.match(r"[\w-]+ · run \d+", h) for h in trace["hovertext"])
    text = text_of(page)
    assert f"{len(expected)} points" in text
    for run in made.runs[made.no_composition]:
        assert re.search(rf"{made.no_composition} , run {run} : low-t .*? no composition x", text)
    page = _get(app.test_client(), "/map?kinds=ordering&layout=apart")
    assert [t["name"] for t in figure(page, "map-plot")["data"]] == ["ordering"]
    page = _get(app.test_client(), f"/map?origin={EXPLORE_OTHER_ORIGIN.replace(' ', '+')}")
    assert {h for t in figure(page, "map-plot")["data"] for h in t["hovertext"] if made.foreign not in h} == set()


def test_coupled_table_matches_the_vault_and_draws_the_identity_line(site):
    app, _, _ = site
    vault = app.extensions["magvault"]
    page = _get(app.test_client(), "/coupled?compare=methods&kind=low-t&a=planted-for-tests&b=planted-second")
    expected = vault.coupled(kind="low-t", methods="planted-for-tests,planted-second")
    rows = re.findall(r'<td data-value="([^"]+)"><a href="/specimen/', page)
    assert sorted(rows) == sorted(expected["specimen"])
    for _, r in expected.iterrows():
        assert fmt_unc(r["difference_K"], r["difference_uncertainty_K"], "K") in text_of(page)
    fig = figure(page, "coupled-plot")
    identity = next(t for t in fig["data"] if t["name"] == "B = A")
    assert identity["x"] == identity["y"] and len(identity["x"]) == 2
    points = [t for t in fig["data"] if t["name"] != "B = A"]
    assert sum(len(t["x"]) for t in points) == len(expected)
    # With nothing chosen, the page proposes a comparison the vault can answer.
    text = text_of(_get(app.test_client(), "/coupled"))
    assert re.search(r"\d+ specimens", text)


# --- saved queries -----------------------------------------------------------------------------

def _save(client, page_url: str, page: str, name: str, replace: bool = False):
    html = _get(client, page_url)
    args = re.search(r'name="args" type="hidden" value="([^"]*)"', html).group(1).replace("&amp;", "&")
    data = {"csrf_token": csrf_token(html), "page": page, "args": args, "name": name}
    if replace:
        data["replace"] = "y"
    return client.post("/saved", data=data)


def test_a_query_saved_on_the_page_runs_the_same_from_the_command_line(site):
    app, _, path = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    r = _save(client, "/shifts?against=treatment&sigma=4", "shifts", "after anneal")
    assert r.status_code == 302 and r.headers["Location"].startswith("/shifts?")
    doc = vault.saved_query("after anneal")
    assert doc["query"] == "shifts"
    assert doc["parameters"] == {"kind": "low-t", "against": "treatment", "sigma": 4.0, "branch": "heating"}
    from magvault.cli import main

    out = CliRunner().invoke(main, ["--db", path, "query", "run", "after anneal", "--json"])
    assert out.exit_code == 0, out.output
    cli_flagged = {row["specimen"] for row in json.loads(out.output) if row["flagged"]}
    opened = client.get("/saved/open?name=after+anneal")
    assert opened.status_code == 302
    target = opened.headers["Location"]
    assert parse_qs(urlparse(target).query) == {"kind": ["low-t"], "sigma": ["4.0"], "branch": ["heating"],
                                               "against": ["treatment"]}
    assert set(flagged_list(_get(client, target))) == cli_flagged
    listing = text_of(_get(client, "/saved"))
    assert "after anneal" in listing and "against = treatment" in listing


def test_saving_twice_needs_replace_and_the_message_names_the_field(site):
    app, _, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    assert _save(client, "/coupled?compare=methods&kind=low-t&a=planted-for-tests&b=planted-second", "coupled",
                 "two methods").status_code == 302
    r = _save(client, "/coupled?compare=methods&kind=low-t&a=planted-second&b=planted-for-tests", "coupled",
              "two methods")
    assert r.headers["Location"].endswith("#save")
    assert "name: a saved query named 'two methods' exists already" in text_of(_get(client, r.headers["Location"]))
    assert vault.saved_query("two methods")["parameters"]["methods"] == "planted-for-tests,planted-second"
    _save(client, "/coupled?compare=methods&kind=low-t&a=planted-second&b=planted-for-tests", "coupled",
          "two methods", replace=True)
    assert vault.saved_query("two methods")["parameters"]["methods"] == "planted-second,planted-for-tests"
    r = _save(client, "/coupled", "coupled", "   ")
    assert "name: give the query a name" in text_of(_get(client, r.headers["Location"]))
    assert len(vault.run_saved_query("two methods")) == len(vault.coupled(kind="low-t",
                                                                          methods="planted-second,planted-for-tests"))


def test_saved_overlay_and_map_reopen_with_their_settings(site):
    app, made, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    _save(client, "/overlay?source=lineage&root=HR1&colour=treatment&y=derivative", "overlay", "HR1 slopes")
    params = vault.saved_query("HR1 slopes")["parameters"]
    assert params["source"] == "lineage" and params["root"] == "HR1" and params["y"] == "derivative"
    target = client.get("/saved/open?name=HR1+slopes").headers["Location"]
    fig = figure(_get(client, target), "overlay-plot")
    assert {re.search(r"<b>([^<]+)</b>", c["hovertemplate"]).group(1) for c in _curves(fig)} == set(made.pieces)
    assert fig["layout"]["yaxis"]["title"]["text"].startswith("d(")
    # The command line lists an overlay but leaves drawing it to the dashboard.
    with pytest.raises(Exception, match="open it in the dashboard"):
        vault.run_saved_query("HR1 slopes")
    _save(client, "/map?kinds=low-t&branch=heating&origin=Kestle+Deep", "composition_map", "low-t map")
    assert vault.saved_query("low-t map")["parameters"] == {"kinds": ["low-t"], "branch": "heating"}
    assert len(vault.run_saved_query("low-t map")) == len(vault.composition_map(kinds=["low-t"]))
    assert "bookmark it to keep them" in text_of(_get(client, "/map?kinds=low-t&origin=Kestle+Deep"))


def test_queries_saved_by_the_command_line_open_in_their_page(site):
    app, _, _ = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    # As `magvault shifts ... --save` stores them: sigma as typed, text values.
    vault.save_query("cli earliest", "shifts", {"kind": "low-t", "against": "earliest", "sigma": "3",
                                                "branch": "heating"}, replace=True)
    vault.save_query("cli line", "correlate", {"kind": "low-t", "against": "x"}, replace=True)
    vault.save_query("cli field line", "correlate", {"kind": "low-t", "against": "field"}, replace=True)
    page = _get(client, client.get("/saved/open?name=cli+earliest").headers["Location"])
    assert set(flagged_list(page)) == _flagged(vault.shifts("low-t", against="earliest"))
    assert "against=trend" in client.get("/saved/open?name=cli+line").headers["Location"]
    r = client.get("/saved/open?name=cli+field+line")
    assert r.headers["Location"] == "/saved"
    assert "command line only" in text_of(_get(client, "/saved"))
    r = client.get("/saved/open?name=never+saved")
    assert "no saved query named “never saved”" in text_of(_get(client, r.headers["Location"]))


def test_a_saved_query_is_deleted_from_the_page_and_the_command_line_with_its_event(site):
    app, _, path = site
    vault = app.extensions["magvault"]
    client = app.test_client()
    vault.save_query("to drop", "shifts", {"kind": "low-t", "against": "collection"}, replace=True)
    vault.save_query("to drop too", "shifts", {"kind": "low-t", "against": "earliest"}, replace=True)
    html = _get(client, "/saved")
    r = client.post("/saved/delete", data={"csrf_token": csrf_token(html), "name": "to drop"})
    assert r.status_code == 302
    assert "Deleted “to drop” (shifts)" in text_of(_get(client, r.headers["Location"]))
    assert "to drop" not in {d["name"] for d in vault.saved_queries()}
    assert client.post("/saved/delete", data={"name": "to drop too"}).status_code == 400  # no CSRF token
    from magvault.cli import main

    out = CliRunner().invoke(main, ["--db", path, "query", "delete", "to drop too", "--json"])
    assert out.exit_code == 0, out.output
    assert json.loads(out.output)["parameters"] == {"kind": "low-t", "against": "earliest"}
    out = CliRunner().invoke(main, ["--db", path, "query", "delete", "to drop too"])
    assert out.exit_code == 1 and "no saved query named 'to drop too'" in out.output
    log = vault.events()
    deleted = log[(log["entity"] == "saved_query") & (log["action"] == "delete")]
    assert {"to drop", "to drop too"} <= set(deleted["entity_id"].astype(str))


# --- every page ------------------------------------------------------------------------------------

def test_every_page_links_the_explore_pages_and_keeps_a_strict_policy(site):
    app, made, _ = site
    client = app.test_client()
    for url in ["/", "/bench", f"/specimen/{made.annealed}", *EXPLORE_PAGES]:
        r = client.get(url)
        page = r.get_data(as_text=True)
        nav = re.search(r'<nav aria-label="Explore the collection" class="explore-nav">(.*?)</nav>', page, re.S)
        assert re.findall(r'href="([^"]+)"', nav.group(1)) == EXPLORE_PAGES, url
        current = re.findall(r'href="([^"]+)"\s*aria-current="page"', nav.group(1))
        assert current == ([url] if url in EXPLORE_PAGES else []), url
        for tag in re.findall(r"<script\b[^>]*>", page):
            assert re.search(r'src="/', tag) or 'type="application/json"' in tag, (url, tag)
        assert not re.search(r'(src|href)="(https?:)?//', page), url
        assert not re.search(r'\sstyle="', page), url  # no inline styles: the policy would refuse them
        csp = r.headers["Content-Security-Policy"]
        assert "script-src 'self';" in csp, url
