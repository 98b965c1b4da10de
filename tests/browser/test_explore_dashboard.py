"""The pages that look across the collection, in headless Chromium over the invented demo.

- Each low-temperature marker of the overlay (a layout shape, so an element of
  its own) sits where its temperature from /api/transitions falls on the
  rendered axis, within two pixels; the axis is read from the drawn tick marks
  and their labels, never from the figure's JSON.
- From the collection page, at most three clicks reach the list of flagged
  specimens for each reference mode; it holds every specimen the demo's
  manifest says must be flagged and none it says must not; the flagged
  specimen's page shows the cause (its anneal, its composition, its origin).
- The composition map draws one point per primary transition of the selection.
- An overlay of 200 demo-sized curves carries at most 2 MB of figure data,
  renders (WebGL, through Chromium's software renderer) and says how many
  points it drew.
Screenshots go to test-artifacts/ at 1280 x 800 and 768 px.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from playwright.sync_api import expect

from magvault.textviews import fmt_unc

pytestmark = pytest.mark.browser

MODE_LINKS = {"trend": "the composition trend", "collection": "the rest of the collection",
              "earliest": "its own first run", "treatment": "its runs before its latest treatment"}


def _drawn(page, plot_id: str) -> None:
    expect(page.locator(f"#{plot_id}[data-drawn=yes]")).to_have_count(1, timeout=30000)


def _clean(page) -> None:
    problems = page.problems.take()
    assert not problems, problems


def _fits(page, width: int) -> None:
    scroll = page.evaluate("document.documentElement.scrollWidth")
    assert scroll <= width, f"{page.url} scrolls sideways: {scroll} px wide at {width} px"


def _shot(page, artifacts, name: str) -> None:
    page.screenshot(path=str(artifacts / f"{name}.png"), full_page=True)


def _number(label: str) -> float:
    return float(label.replace("\u2212", "-").replace(",", "").replace("\u2009", "").strip())


AXIS_AND_MARKERS = """(plotId) => {
  const gd = document.getElementById(plotId);
  const ticks = [...gd.querySelectorAll('.xaxislayer-above path.xtick')]
    .map(p => p.getBoundingClientRect()).map(b => b.x + b.width / 2);
  const labels = [...gd.querySelectorAll('.xaxislayer-above g.xtick text')].map(t => t.textContent);
  const markers = {};
  gd.querySelectorAll('.layer-above .shapelayer path[data-index]').forEach(p => {
    const b = p.getBoundingClientRect();
    markers[p.getAttribute('data-index')] = {x: b.x + b.width / 2, y: b.y + b.height / 2, h: b.height};
  });
  const area = (gd.querySelector('.bglayer rect.bg') || gd.querySelector('.draglayer .nsewdrag'))
    .getBoundingClientRect();
  return {ticks, labels, markers, area: {left: area.left, right: area.right}};
}"""


def test_low_t_markers_sit_on_their_temperatures_within_two_pixels(demo_live, desk, artifacts):
    base, _, _ = demo_live
    page = desk
    page.goto(base + "/overlay?run_kind=thermomagnetic&kind=low-t")
    _drawn(page, "overlay-plot")
    api = page.request.get(base + "/api/transitions?kind=low-t&primary_only=true").json()
    wanted = [r for r in api if r["run_kind"] == "thermomagnetic" and r["branch"] in ("heating", None)]
    temperature = {(r["run"], r["branch"] or ""): r["temperature_K"] for r in wanted}
    rows = page.locator("#marker-table tbody tr").evaluate_all(
        "rows => rows.map(r => [Number(r.dataset.run), Number(r.dataset.shape), r.dataset.branch])")
    assert sorted((run, branch) for run, _, branch in rows) == sorted(temperature)  # one marker per transition

    geo = page.evaluate(AXIS_AND_MARKERS, "overlay-plot")
    assert len(geo["ticks"]) == len(geo["labels"]) >= 3, geo
    values = np.array([_number(t) for t in geo["labels"]])
    pixels = np.array(geo["ticks"])
    slope, offset = np.polyfit(values, pixels, 1)
    assert np.abs(offset + slope * values - pixels).max() < 0.5  # the rendered axis is linear
    for run, shape, branch in rows:
        t_k = temperature[(run, branch)]
        x = geo["markers"][str(shape)]["x"]
        assert abs(x - (offset + slope * t_k)) <= 2.0, (run, t_k, x, offset + slope * t_k)
        assert geo["area"]["left"] <= x <= geo["area"]["right"]
        assert geo["markers"][str(shape)]["h"] > 4  # a visible tick, not a dot
    _shot(page, artifacts, "overlay-low-t-1280")
    _clean(page)


AXES = """(plotId) => {
  const gd = document.getElementById(plotId);
  const read = (axis) => ({
    ticks: [...gd.querySelectorAll(`.${axis}axislayer-above path.${axis}tick`)].map(p => p.getBoundingClientRect())
      .map(b => axis === 'x' ? b.x + b.width / 2 : b.y + b.height / 2),
    labels: [...gd.querySelectorAll(`.${axis}axislayer-above g.${axis}tick text`)].map(t => t.textContent)});
  return {x: read('x'), y: read('y')};
}"""


def _axis(ticks: list[float], labels: list[str]):
    values = np.array([_number(t) for t in labels])
    slope, offset = np.polyfit(values, np.array(ticks), 1)
    return lambda v: offset + slope * np.asarray(v, float)


def _figure(page, plot_id: str) -> dict:
    import base64

    doc = json.loads(page.evaluate(f"document.querySelector('script[data-explore-figure=\"{plot_id}\"]').textContent"))
    for t in doc["data"]:
        for key in ("x", "y"):
            v = t.get(key)
            if isinstance(v, dict) and "bdata" in v:
                t[key] = np.frombuffer(base64.b64decode(v["bdata"]), dtype="<" + v["dtype"]).astype(float)
    return doc


def test_hover_names_the_transition_and_a_click_opens_the_run(demo_live, desk):
    base, _, _ = demo_live
    page = desk
    page.goto(base + "/overlay?run_kind=thermomagnetic&kind=low-t")
    _drawn(page, "overlay-plot")
    rows = page.locator("#marker-table tbody tr").evaluate_all(
        "rows => rows.map(r => [Number(r.dataset.run), Number(r.dataset.shape), r.cells[0].textContent.trim()])")
    geo = page.evaluate(AXIS_AND_MARKERS, "overlay-plot")
    # The marker farthest from all others, so that hover and click cannot land on another run's marker.
    xs = {shape: geo["markers"][str(shape)]["x"] for _, shape, _ in rows}
    run, shape, code = max(rows, key=lambda r: min(abs(xs[r[1]] - xs[s]) for _, s, _ in rows if s != r[1]))
    m = geo["markers"][str(shape)]
    page.mouse.move(m["x"], m["y"])
    hover = page.locator("#overlay-plot .hoverlayer .hovertext")
    expect(hover.first).to_be_visible()
    label = " ".join(page.evaluate("""() => [...document.querySelectorAll('#overlay-plot .hoverlayer .hovertext')]
        .map(h => h.textContent)"""))
    assert code in label and f"run {run}" in label and re.search(r"low-t \d+\.\d+ ± \d\.\d+ K", label), label
    page.mouse.click(m["x"], m["y"])
    expect(page).to_have_url(f"{base}/run/{run}", timeout=10000)
    _clean(page)

    # A click on a curve, away from every marker and every other curve, opens that curve's run.
    page.goto(base + "/overlay?run_kind=thermomagnetic&kind=low-t")
    _drawn(page, "overlay-plot")
    axes = page.evaluate(AXES, "overlay-plot")
    px, py = _axis(**axes["x"]), _axis(**axes["y"])
    curves = [t for t in _figure(page, "overlay-plot")["data"] if t.get("mode") == "lines"]
    markers = np.array([[v["x"], v["y"]] for v in page.evaluate(AXIS_AND_MARKERS, "overlay-plot")["markers"].values()])
    best = None
    for t_k in np.arange(10.0, 55.0, 0.5):
        at = np.array([[px(t_k), py(np.interp(t_k, c["x"], c["y"]))] for c in curves])
        for i, point in enumerate(at):
            others = np.delete(at, i, axis=0)
            gap = min(np.hypot(*(others - point).T).min(), np.hypot(*(markers - point).T).min())
            if best is None or gap > best[0]:
                best = (gap, point, curves[i]["meta"])
    gap, point, href = best
    assert gap > 25, "no curve stands apart enough to click it unambiguously"
    page.mouse.move(*point)
    page.mouse.click(*point)
    expect(page).to_have_url(base + href, timeout=10000)
    _clean(page)


@pytest.mark.parametrize("mode", list(MODE_LINKS))
def test_flagged_specimens_within_three_clicks_and_their_cause(demo_live, desk, artifacts, mode):
    base, manifest, app = demo_live
    expected = manifest["expected_flags"][mode]
    page = desk
    page.goto(base + "/")
    clicks = 0
    page.get_by_role("navigation", name="Explore the collection").get_by_role("link", name="Shifts").click()
    clicks += 1
    page.wait_for_load_state("load")  # as a reader would: the page has arrived before the next click
    page.get_by_role("navigation", name="Reference").get_by_role(
        "link", name=re.compile("^" + re.escape(MODE_LINKS[mode]))).click()
    clicks += 1
    assert clicks <= 3
    expect(page.locator("#flagged-h")).to_contain_text(MODE_LINKS[mode])
    flagged = set(page.locator("#flagged-list a.code").all_inner_texts())
    assert set(expected["must"]) <= flagged, (mode, flagged)
    assert not set(expected["must_not"]) & flagged, (mode, flagged)
    # Flagged rows come first in the table and stand out.
    first = page.locator("#shift-table tbody tr").first
    expect(first).to_have_class(re.compile("flagged"))
    _drawn(page, "shift-plot")
    _fits(page, 1280)
    _shot(page, artifacts, f"shifts-{mode}-1280")
    _clean(page)

    # Follow the specimen whose planted cause this mode reveals to its page: the cause is shown there.
    role = {"treatment": "anneal", "earliest": "anneal", "trend": "off-trend", "collection": "foreign"}[mode]
    code = manifest["roles"][role]
    assert code in expected["must"]
    page.locator("#flagged-list a.code", has_text=code).click()
    expect(page.locator("h1")).to_contain_text(code)
    doc = page.request.get(f"{base}/api/specimens/{code}").json()
    if mode in ("treatment", "earliest"):
        treatment = page.locator("#history li.treatment", has_text="anneal")
        expect(treatment).to_be_visible()
        expect(page.locator("#history li.run-line").last).to_be_visible()  # runs after the anneal
    elif mode == "trend":
        composition = page.locator("#composition")
        expect(composition).to_be_visible()
        expect(composition).to_contain_text(f"x = {fmt_unc(doc['x'], doc['x_uncertainty'])}")
    else:
        others = {page.request.get(f"{base}/api/specimens/{c}").json()["origin"] for c in expected["must_not"]}
        assert doc["origin"] not in others  # the cause: material from another origin
        expect(page.locator("dl.facts")).to_contain_text(doc["origin"])
    _shot(page, artifacts, f"shifts-{mode}-cause-1280")
    _clean(page)


def test_composition_map_draws_one_point_per_primary_transition(demo_live, desk, tablet, artifacts):
    base, _, _ = demo_live
    for page, width in ((desk, 1280), (tablet, 768)):
        page.goto(base + "/map")
        _drawn(page, "map-plot")
        transitions = page.request.get(base + "/api/transitions?primary_only=true").json()
        with_x = {s["code"] for s in page.request.get(base + "/api/specimens").json() if s["x"] is not None}
        expected = [t for t in transitions if t["branch"] in ("heating", None) and t["specimen"] in with_x]
        counts = page.evaluate("""() => [...document.querySelectorAll('#map-plot .scatterlayer .trace')]
            .map(t => t.querySelectorAll('.points path.point').length)""")
        assert sum(counts) == len(expected) > 0
        kinds = {t["kind"] for t in expected}
        legend = page.evaluate("""() => [...document.querySelectorAll('#map-plot .legend .traces text.legendtext')]
            .map(t => t.textContent.trim())""")
        assert set(legend) == kinds
        _fits(page, width)
        _shot(page, artifacts, f"map-{width}")
        _clean(page)


def test_two_hundred_curves_stay_small_and_render(many_live, desk, artifacts):
    base, ids, _ = many_live
    page = desk
    page.goto(base + "/overlay?span=whole")
    _drawn(page, "overlay-plot")
    size = page.evaluate("document.querySelector('script[data-explore-figure=\"overlay-plot\"]').textContent.length")
    assert size <= 2_000_000, size
    assert page.locator("#overlay-plot canvas").count() > 0  # WebGL layer (software renderer in headless Chromium)
    text = page.locator(".points-drawn").inner_text()
    drawn, total = (int(n.replace(",", "")) for n in re.match(r"([\d,]+) of ([\d,]+) points drawn", text).groups())
    assert total == 200 * 801 and 0 < drawn < total
    figure = _figure(page, "overlay-plot")
    assert sum(1 for t in figure["data"] if t["type"] == "scattergl") == len(ids)
    assert page.locator("#overlay-plot .layer-above .shapelayer path").count() == len(ids)
    _shot(page, artifacts, "overlay-200-curves-1280")
    _clean(page)


def test_shift_table_sorts_by_a_column(demo_live, desk):
    base, _, _ = demo_live
    page = desk
    page.goto(base + "/shifts?against=trend")
    _drawn(page, "shift-plot")
    column = page.locator("#shift-table thead th").filter(has_text="σ")
    column.get_by_role("button").click()
    expect(column).to_have_attribute("aria-sort", "ascending")
    values = page.locator("#shift-table tbody td:nth-child(5)").all_inner_texts()
    sigmas = [abs(float(v.replace("\u2212", "-"))) for v in values]
    assert sigmas == sorted(sigmas) and len(sigmas) > 5
    column.get_by_role("button").click()
    expect(column).to_have_attribute("aria-sort", "descending")
    values = page.locator("#shift-table tbody td:nth-child(5)").all_inner_texts()
    assert [abs(float(v)) for v in values] == sorted(sigmas, reverse=True)
    _clean(page)


PAGES = {"shifts": "/shifts", "overlay": "/overlay?colour=treatment", "map": "/map?layout=apart",
         "coupled": "/coupled", "saved": "/saved"}


@pytest.mark.parametrize("width", [1280, 768])
def test_explore_pages_fit_are_labelled_and_quiet(demo_live, desk, tablet, artifacts, width):
    base, _, _ = demo_live
    page = desk if width == 1280 else tablet
    for name, url in PAGES.items():
        page.goto(base + url)
        if page.locator(".explore-plot").count():
            expect(page.locator(".explore-plot[data-drawn=yes]")).to_have_count(
                page.locator(".explore-plot").count(), timeout=30000)
        page.wait_for_load_state("networkidle")
        _fits(page, width)
        unlabelled = page.evaluate("""() => [...document.querySelectorAll('input, select, textarea')]
            .filter(el => el.type !== 'hidden' && el.type !== 'submit' && el.labels.length === 0)
            .map(el => el.name)""")
        assert not unlabelled, (url, unlabelled)
        duplicated = page.evaluate("""() => { const ids = [...document.querySelectorAll('[id]')].map(e => e.id);
            return ids.filter((id, i) => ids.indexOf(id) !== i); }""")
        assert not duplicated, (url, duplicated)
        _shot(page, artifacts, f"{name}-{width}")
        _clean(page)


def test_save_a_shift_query_and_reopen_it(demo_live, desk, artifacts):
    base, manifest, app = demo_live
    page = desk
    page.goto(base + "/shifts?against=treatment")
    before = set(page.locator("#flagged-list a.code").all_inner_texts())
    page.locator("#save > summary").click()
    page.get_by_label("Name", exact=True).fill("low-t after treatment")
    page.get_by_role("button", name="Save", exact=True).click()
    expect(page.locator(".flash-ok")).to_contain_text("Saved as “low-t after treatment”")
    vault = app.extensions["magvault"]
    rerun = vault.run_saved_query("low-t after treatment")
    assert set(rerun.loc[rerun["flagged"].eq(True).fillna(False).astype(bool), "specimen"]) == before
    page.get_by_role("navigation", name="Explore the collection").get_by_role("link", name="Saved queries").click()
    row = page.locator("#saved-table tbody tr", has_text="low-t after treatment")
    _shot(page, artifacts, "saved-list-1280")
    row.get_by_role("link", name="Open in Shifts").click()
    expect(page.locator("#flagged-h")).to_contain_text(MODE_LINKS["treatment"])
    assert set(page.locator("#flagged-list a.code").all_inner_texts()) == before
    # The same saved query serves as the overlay's selection: the curves of the specimens it flags.
    page.goto(base + "/saved")
    page.locator("#saved-table tbody tr", has_text="low-t after treatment").get_by_role(
        "link", name="overlay its specimens").click()
    _drawn(page, "overlay-plot")
    shown = {t.strip() for t in page.locator("#marker-table tbody tr td:first-child").all_text_contents()}
    assert shown == before
    _shot(page, artifacts, "overlay-from-saved-1280")
    _clean(page)
