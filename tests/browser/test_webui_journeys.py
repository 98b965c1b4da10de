"""Journeys through the dashboard in headless Chromium, at a tablet's 768 px and a desk's 1280 x 800.

Each journey is what a person at the bench does, with screenshots written to
test-artifacts/ for a human to look at.  Every page must draw without console
errors (a content-security-policy violation is one) and without sideways
scrolling at 768 px.
"""

from __future__ import annotations

import re

import pytest
from playwright.sync_api import expect

from webui_data import loop_csv, png_bytes, two_thermometer_csv

pytestmark = pytest.mark.browser


def _fits(page, width: int) -> None:
    scroll = page.evaluate("document.documentElement.scrollWidth")
    assert scroll <= width, f"{page.url} scrolls sideways: {scroll} px wide at {width} px"


def _clean(page) -> None:
    problems = page.problems.take()
    assert not problems, problems


def _shot(page, artifacts, name: str) -> None:
    page.screenshot(path=str(artifacts / f"{name}.png"), full_page=True)


def _drawn(page, n: int) -> None:
    expect(page.locator(".plot-area[data-drawn=yes]")).to_have_count(n, timeout=20000)


def test_log_cut_run_upload_correct_and_find_it_at_tablet_width(live, tablet, artifacts):
    base, made, app = live
    page = tablet
    page.goto(base + "/")
    page.get_by_role("navigation", name="Main").get_by_role("link", name="Bench").click()
    expect(page).to_have_url(base + "/bench")
    expect(page.get_by_role("heading", name="Before a run: safety")).to_be_visible()
    _fits(page, 768)
    _shot(page, artifacts, "bench-768")

    # A new crystal, then a piece cut from it.
    page.get_by_label("New specimen code").fill("JR-1")
    page.locator("#sp-kind").select_option("single crystal")
    page.locator("#sp-mass").fill("210.0 ± 0.1 mg")
    page.locator("#sp-origin").fill("Tarnwick Fell")
    page.get_by_role("button", name="Register specimen").click()
    expect(page.locator("h1")).to_contain_text("JR-1")
    expect(page.locator(".facts")).to_contain_text("210.00 ± 0.10 mg")
    page.locator(".head-actions").get_by_role("link", name="Cut a piece").click()
    expect(page.locator("#pc-parent")).to_have_value("JR-1")
    page.locator("#pc-code").fill("JR-1-a")
    page.locator("#pc-mass").fill("30.00 ± 0.02 mg")
    page.get_by_role("button", name="Record the piece").click()
    expect(page.locator("h1")).to_contain_text("JR-1-a")
    expect(page.locator("ul.tree a", has_text="JR-1")).to_be_visible()
    expect(page.locator("ul.tree .here")).to_have_text("JR-1-a")
    _fits(page, 768)
    _shot(page, artifacts, "piece-768")

    # Log the run before measuring...
    page.locator(".head-actions").get_by_role("link", name="Log a run").click()
    expect(page.locator("#run-specimen")).to_have_value("JR-1-a")
    page.locator("#run-kind").select_option("thermomagnetic")
    page.get_by_role("button", name="Log the run").click()
    flash = page.locator(".flash-ok").inner_text()
    run_id = int(re.search(r"Run (\d+) logged as planned", flash).group(1))
    expect(page.locator("#imp-run")).to_have_value(str(run_id))

    # ...then attach its export, correct the guessed columns, and save.
    page.locator("#imp-file").set_input_files(files=[{"name": "jr1a_heating.csv", "mimeType": "text/csv",
                                                      "buffer": two_thermometer_csv()}])
    page.get_by_role("button", name="Read the file and preview").click()
    expect(page.locator("h1")).to_contain_text("Check before saving")
    expect(page.locator("table.rows tbody tr").first.locator("td").first).to_have_text("300")
    _drawn(page, 1)
    _fits(page, 768)
    _shot(page, artifacts, "preview-guessed-768")
    page.get_by_label("Setpoint (K)", exact=True).select_option("ignore")
    page.get_by_label("Sample temp (K)", exact=True).select_option("temperature_K")
    page.get_by_role("button", name="Read again with these columns").click()
    expect(page.locator("table.rows tbody tr").first.locator("td").first).to_have_text("298.5")
    expect(page.locator("table.mapping tr.corrected")).to_have_count(2)
    _drawn(page, 1)
    _shot(page, artifacts, "preview-corrected-768")
    page.get_by_role("button", name="Save the run").click()
    expect(page.locator("h1")).to_contain_text(f"Run {run_id}")
    expect(page.locator("h1 .status")).to_have_text("recorded")
    _drawn(page, 2)
    _fits(page, 768)
    _shot(page, artifacts, "run-768")
    _clean(page)

    # Find it again from the collection.
    page.get_by_role("navigation", name="Main").get_by_role("link", name="Collection").click()
    page.locator("details.filters summary").click()
    page.get_by_label("Search").fill("JR-1-a")
    page.get_by_role("button", name="Apply").click()
    row = page.locator("table.collection tbody tr")
    expect(row).to_have_count(1)
    expect(row.locator("td").nth(7)).to_have_text("1")  # its one run
    _fits(page, 768)
    _shot(page, artifacts, "collection-search-768")
    row.get_by_role("link", name="JR-1-a").click()
    expect(page.locator("#runs")).to_contain_text("jr1a_heating.csv")
    page.locator("#runs").get_by_role("link", name=str(run_id)).click()
    expect(page).to_have_url(f"{base}/run/{run_id}")
    _clean(page)


def test_attach_an_image_and_see_its_scale_bar(live, tablet, artifacts):
    base, made, _ = live
    page = tablet
    page.goto(f"{base}/specimen/{made.root}")
    page.locator("#images summary").click()
    page.locator("#img-file").set_input_files(files=[{"name": "tf1_face.png", "mimeType": "image/png",
                                                     "buffer": png_bytes(640, 400)}])
    page.get_by_label("Pixel size").fill("0.25 um")
    page.get_by_label("Caption").fill("Polished face, reflected light")
    page.get_by_role("button", name="Attach image").click()
    figure = page.locator("figure.micrograph", has_text="Polished face, reflected light")
    expect(figure).to_be_visible()
    image = figure.locator("img")
    page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=image.element_handle())
    # 640 px x 0.25 um = 160 um across; the bar is the round length under a quarter of it: 20 um, 1/8.
    expect(figure.locator("svg.scalebar text")).to_have_text("20 µm")
    bar_px = figure.locator("svg.scalebar rect").evaluate("r => r.width.baseVal.value")  # without its outline
    picture = image.bounding_box()
    assert bar_px / picture["width"] == pytest.approx(20 / 160, rel=0.01)
    figure.scroll_into_view_if_needed()
    _fits(page, 768)
    _shot(page, artifacts, "images-768")
    _clean(page)


def test_retract_a_run_with_a_reason_and_find_it_in_the_events(live, desk, artifacts):
    base, made, app = live
    run_id = app.extensions["magvault"].ingest(data=loop_csv(701), source_name="sx2_loop.csv", specimen=made.powder,
                                               kind="hysteresis").run_id
    page = desk
    page.goto(f"{base}/run/{run_id}")
    _drawn(page, 2)
    assert page.locator("#retract-reason").evaluate("el => el.required")  # the browser asks for a reason first
    page.locator("#retract-reason").fill("sample shifted in the holder")
    page.get_by_role("button", name="Retract this run").click()
    expect(page.locator(".banner-bad")).to_contain_text("Retracted: sample shifted in the holder")
    expect(page.locator("h1 .status")).to_have_text("retracted")
    page.get_by_role("navigation", name="Main").get_by_role("link", name="Audit log").click()
    page.get_by_label("Specimen").fill(made.powder)
    page.get_by_role("button", name="Filter").click()
    entry = page.locator("li.event", has_text="retract run").first
    expect(entry).to_contain_text("sample shifted in the holder")
    expect(entry.get_by_role("link", name=str(run_id))).to_be_visible()
    _shot(page, artifacts, "events-retracted-1280")
    _clean(page)


def test_every_page_at_desk_width_reachable_labelled_and_quiet(live, desk, artifacts):
    base, made, _ = live
    page = desk
    page.goto(base + "/")
    for name, heading in (("Bench", "Bench"), ("Audit log", "Audit log"), ("Collection", "Collection")):
        page.get_by_role("navigation", name="Main").get_by_role("link", name=name, exact=True).click()
        expect(page.locator("h1")).to_contain_text(heading)
    pages = {"collection": "/", "bench": "/bench", "events": "/events?limit=30",
             "specimen": f"/specimen/{made.piece}", "run": f"/run/{made.thermo_run}",
             "run-loop": f"/run/{made.loop_run}", "run-planned": f"/run/{made.planned_run}"}
    for name, url in pages.items():
        page.goto(base + url)
        if name in ("run", "run-loop"):
            _drawn(page, 2)
        page.wait_for_load_state("networkidle")
        _fits(page, 1280)
        _shot(page, artifacts, f"{name}-1280")
        # Every control a person can use has a label, and no id is used twice.
        unlabelled = page.evaluate("""() => [...document.querySelectorAll('input, select, textarea')]
            .filter(el => el.type !== 'hidden' && el.type !== 'submit' && el.labels.length === 0)
            .map(el => el.name)""")
        assert not unlabelled, (url, unlabelled)
        duplicated = page.evaluate("""() => { const ids = [...document.querySelectorAll('[id]')].map(e => e.id);
            return ids.filter((id, i) => ids.indexOf(id) !== i); }""")
        assert not duplicated, (url, duplicated)
    _clean(page)
    # The full data, drawn with WebGL (software rendering in headless Chromium).
    page.goto(f"{base}/run/{made.thermo_run}/full")
    _drawn(page, 2)
    _shot(page, artifacts, "run-full-1280")
    _clean(page)


def test_keyboard_reaches_the_forms_in_order(live, tablet):
    base, _, _ = live
    page = tablet
    page.goto(base + "/bench")
    page.keyboard.press("Tab")
    assert page.evaluate("document.activeElement.textContent") == "Skip to content"
    page.locator("#sp-code").focus()
    order = []
    for _ in range(7):
        order.append(page.evaluate("document.activeElement.id"))
        page.keyboard.press("Tab")
    assert order == ["sp-code", "sp-kind", "sp-mass", "sp-dims", "sp-origin", "sp-storage", "sp-notes"]
    assert page.evaluate("document.activeElement.id") == "sp-submit"
    page.locator("#sp-code").focus()
    page.keyboard.type("KB-1")
    page.keyboard.press("Tab")
    page.keyboard.press("Tab")
    page.keyboard.type("7.5 mg")
    page.keyboard.press("Enter")
    expect(page.locator("h1")).to_contain_text("KB-1")
    expect(page.locator(".facts")).to_contain_text("7.5 mg")
    _clean(page)


def test_an_export_over_the_upload_limit_is_refused_with_the_limit_named(browser, tmp_path):
    """In the browser before sending (forms.js) and, with scripts off, by the server (413)."""
    import threading

    from werkzeug.serving import make_server

    import magvault
    from magvault.paths import part
    from webui_data import thermomagnetic_csv

    path = str(tmp_path / "limit.db")
    with magvault.open(path, create=True) as vault:
        vault.add_specimen("LM-1", mass="10 mg")
    app = part("webui").create_app(path, {"MAX_CONTENT_LENGTH": 64 * 1024})
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    big = {"name": "long_run.csv", "mimeType": "text/csv", "buffer": thermomagnetic_csv(20000)}
    try:
        for scripts in (True, False):
            context = browser.new_context(java_script_enabled=scripts, viewport={"width": 768, "height": 1024})
            page = context.new_page()
            page.goto(f"http://127.0.0.1:{server.server_port}/bench")
            page.locator("#imp-specimen").fill("LM-1")
            page.locator("#imp-file").set_input_files(files=[big])
            if scripts:
                note = "export file: long_run.csv is 407 kB; the limit is 64 kB."
                expect(page.locator("#import .size-note")).to_have_text(note)
                assert page.locator("#imp-file").evaluate("el => el.validationMessage") == note
            else:
                page.get_by_role("button", name="Read the file and preview").click()
                expect(page.locator("h1")).to_contain_text("File too large")
                expect(page.locator("main")).to_contain_text("larger than the limit of 64 kB")
            context.close()
    finally:
        server.shutdown()
        thread.join(timeout=10)
        server.server_close()
        app.extensions["magvault"].close()
