"""The dashboard's pages through Flask's test client: what a user sees and what the forms do.

Outside references: periodictable's standard atomic weights for x in Fe(1-x)S
(x = 1 - n(Fe)/n(S) from the weight fractions), pint for the mass units, and
hashlib's SHA-256 for the identity of downloaded originals.  Data are invented
(tests/browser/webui_data.py).
"""

from __future__ import annotations

import hashlib
import io
import json
import re

import numpy as np
import pytest

from magvault.paths import part

from browser.webui_data import (ORIGIN, csrf_token, filled_sqlite, form_with_action, loop_csv, png_bytes, text_of,
                                thermomagnetic_csv, tiff16_bytes, two_thermometer_csv)

webui = part("webui")


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    path, made = filled_sqlite(tmp_path_factory.mktemp("webui_pages"))
    app = webui.create_app(path, {"TESTING": True})
    yield app, made
    app.extensions["magvault"].close()


def _get(client, url, status=200) -> str:
    r = client.get(url)
    assert r.status_code == status, (url, r.status_code)
    return r.get_data(as_text=True)


def _post(client, url, data, page_url, status=302, **kw):
    data = {"csrf_token": csrf_token(_get(client, page_url)), **data}
    r = client.post(url, data=data, **kw)
    assert r.status_code == status, (url, r.status_code, text_of(r.get_data(as_text=True))[:800])
    return r


# --- collection -----------------------------------------------------------------------------

def test_collection_lists_counts_and_links(site):
    app, made = site
    text = text_of(_get(app.test_client(), "/"))
    n = len(app.extensions["magvault"].specimens())
    assert f"{n} specimens, 3 runs" in text
    page = _get(app.test_client(), "/")
    for code in (made.root, made.piece, made.grandchild, made.powder):
        assert f'href="/specimen/{code}"' in page
    assert "hysteresis 1" in text and "thermomagnetic 1" in text and "susceptibility 1" in text


def test_collection_filters_by_origin_composition_and_run_kind(site):
    app, made = site
    c = app.test_client()
    rows = lambda page: re.findall(r'<tr>\s*<td><a href="/specimen/([^"]+)"', page)  # noqa: E731
    by_origin = rows(_get(c, f"/?origin={ORIGIN.replace(' ', '+')}"))
    assert set(by_origin) == {"TF1", "TF1-a", "TF1-b", "TF1-a1"}
    # x of TF1 (and its pieces, inherited) is about 0.114; SX2's about 0.03.
    assert set(rows(_get(c, "/?x_min=0.1&x_max=0.13"))) == {"TF1", "TF1-a", "TF1-b", "TF1-a1"}
    assert rows(_get(c, "/?x_max=0.05")) == ["SX2"]
    assert rows(_get(c, "/?run_kind=hysteresis")) == ["TF1-a"]
    assert rows(_get(c, "/?superstructure=2C")) == ["SX2"]
    assert set(rows(_get(c, "/?q=tf1-a"))) == {"TF1-a", "TF1-a1"}
    text = text_of(_get(c, "/?run_kind=hysteresis"))
    assert "1 of" in text and "2 of 3 runs" in text


def test_collection_shows_and_filters_by_derived_transitions(site):
    app, made = site
    c = app.test_client()
    rows = lambda page: re.findall(r'<tr>\s*<td><a href="/specimen/([^"]+)"', page)  # noqa: E731
    page = _get(c, "/?transition=ordering")
    assert rows(page) == [made.piece]
    assert "ordering (heating): 597.9 ± 1.2 K" in text_of(page)
    assert rows(_get(c, "/?transition=low-t")) == []


def test_collection_sorts_by_mass_both_ways(site):
    app, _ = site
    c = app.test_client()
    rows = lambda page: re.findall(r'<tr>\s*<td><a href="/specimen/([^"]+)"', page)  # noqa: E731
    frame = app.extensions["magvault"].specimens().sort_values("mass_kg")
    assert rows(_get(c, "/?sort=mass&order=asc"))[:5] == list(frame["code"])[:5]
    assert rows(_get(c, "/?sort=mass&order=desc"))[0] == frame["code"].iloc[-1]
    page = _get(c, "/?sort=mass&order=asc")
    assert 'aria-sort="ascending"' in page


def test_collection_shows_junk_filters_as_inline_errors(site):
    app, _ = site
    text = text_of(_get(app.test_client(), "/?x_min=abc&x_max=0.01&origin=Nowhere&sort=colour&page=-3"))
    assert "x from: expected a number, got 'abc'" in text
    assert "origin: 'Nowhere' is not one of" in text
    assert "sort by: 'colour' is not one of" in text
    assert "page: expected a whole number from 1 to 1" in text
    text = text_of(_get(app.test_client(), "/?x_min=0.2&x_max=0.1"))
    assert "x to: 0.1 is below x from (0.2)" in text


# --- specimen --------------------------------------------------------------------------------

def test_specimen_page_shows_lineage_composition_orientation_and_images(site):
    app, made = site
    page = _get(app.test_client(), f"/specimen/{made.piece}")
    text = text_of(page)
    # Lineage from the parent crystal down to the grandchild, with links.
    tree = re.search(r'<ul class="tree">(.*?)</section>', page, re.S).group(1)
    assert [m for m in re.findall(r'href="/specimen/([^"]+)"', tree)] == ["TF1", "TF1-a1", "TF1-b"]
    assert '<strong class="here" aria-current="true">TF1-a</strong>' in tree
    assert "Mass 40.000 ± 0.020 mg" in text
    # x in Fe(1-x)S from 60.5 wt% Fe and 39.2 wt% S, independently with periodictable's atomic weights.
    import periodictable

    x_ref = 1 - (60.5 / periodictable.Fe.mass) / (39.2 / periodictable.S.mass)
    shown = re.search(r"x = (0\.\d+) ± (0\.\d+) in Fe", text)
    assert shown and abs(float(shown.group(1)) - x_ref) < float(shown.group(2)) / 10
    assert "inherited from TF1" in text
    assert "Fe 60.50 ± 0.30 wt%" in text
    assert "hexagonal, by Laue, ± 2°" in text
    assert "Domain walls on the polished face" in text
    assert f'/image/{made.image}/thumbnail' in page and f'/image/{made.image}/original' in page
    assert re.search(r'<svg class="scalebar"[^>]*aria-label="scale bar 20 µm"', page)


def test_specimen_page_orders_treatments_and_runs_in_time(site):
    app, made = site
    page = _get(app.test_client(), f"/specimen/{made.piece}")
    timeline = re.search(r'<ol class="timeline">(.*?)</ol>', page, re.S).group(1)
    order = re.findall(r'(Before any treatment|<strong>anneal</strong>|href="/run/(\d+)")', timeline)
    labels = [o[1] or o[0] for o in order]
    assert labels == ["Before any treatment", str(made.thermo_run), "<strong>anneal</strong>", str(made.loop_run)]
    assert "Temperature 573 K" in text_of(timeline) and "Duration 2 h" in text_of(timeline)


def test_specimen_page_shows_derived_values_with_units_and_uncertainties(site):
    app, made = site
    derived = re.search(r'<section class="card" id="derived".*?</section>', _get(app.test_client(),
                                                                             f"/specimen/{made.piece}"), re.S)
    text = text_of(derived.group(0))
    assert "ordering 597.9 ± 1.2 K planted-for-tests primary heating" in text
    assert "Hc 12.30 ± 0.40 mT planted-loop" in text
    assert "Ms 0.3010 ± 0.0020 A m² kg⁻¹ planted-loop" in text
    # pint reads the shown coercive field back as the stored SI value.
    import pint

    assert pint.UnitRegistry().Quantity(12.30, "mT").to("T").magnitude == pytest.approx(0.0123)


def test_unknown_specimen_is_a_404_naming_it(site):
    app, _ = site
    r = app.test_client().get("/specimen/NOPE-9")
    assert r.status_code == 404
    assert "specimen 'NOPE-9' not found" in text_of(r.get_data(as_text=True))
    assert "Collection page lists them" in text_of(r.get_data(as_text=True))


def test_treatment_form_records_and_reports_bad_values_inline(site):
    app, made = site
    c = app.test_client()
    url = f"/specimen/{made.second_piece}/treatments"
    page_url = f"/specimen/{made.second_piece}"
    r = _post(c, url, {"kind": "quench", "at": "yesterday", "conditions": ""}, page_url, status=422)
    assert "cannot read 'yesterday' as an ISO 8601 date" in text_of(r.get_data(as_text=True))
    r = _post(c, url, {"kind": "anneal", "at": "2026-03-01T10:00", "conditions": "temperature=hot"}, page_url,
              status=422)
    assert "temperature" in text_of(r.get_data(as_text=True))
    _post(c, url, {"kind": "anneal", "at": "2026-03-01T10:00", "conditions": "temperature=600 K\nduration=30 min"},
          page_url)
    treatments = app.extensions["magvault"].specimen(made.second_piece)["treatments"]
    assert treatments[-1]["conditions"] == {"temperature_K": 600.0, "duration_s": 1800.0}


# --- run ---------------------------------------------------------------------------------------

def test_run_page_plots_lists_conditions_and_offers_the_raw_file(site):
    app, made = site
    c = app.test_client()
    page = _get(c, f"/run/{made.thermo_run}")
    text = text_of(page)
    blocks = re.findall(r'<script type="application/json" data-figure="plot-(\w+)">(.*?)</script>', page, re.S)
    assert [k for k, _ in blocks] == ["exported", "normalised"]
    exported = json.loads(blocks[0][1])
    assert exported["layout"]["xaxis"]["title"]["text"] == "Temp (°C)"
    assert json.loads(blocks[1][1])["layout"]["yaxis"]["title"]["text"] == "Mass moment (A m² kg⁻¹)"
    assert "1500 of 3000 points drawn (largest-triangle-three-buckets)" in text
    assert "Mass 40 mg" in text and "furnace-magnetometer" in text
    sha = hashlib.sha256(made.thermo_bytes).hexdigest()
    assert f"SHA-256 {sha}" in text and f'href="/raw/{sha}"' in page
    r = c.get(f"/raw/{sha}")
    assert r.status_code == 200 and r.data == made.thermo_bytes
    assert 'filename=tf1a_heating.csv' in r.headers["Content-Disposition"]
    assert r.headers["Content-Disposition"].startswith("attachment")
    assert c.get("/raw/" + "0" * 64).status_code == 404 and c.get("/raw/not-a-hash").status_code == 404


def test_run_page_shows_how_values_were_derived(site):
    app, made = site
    page = _get(app.test_client(), f"/run/{made.thermo_run}")
    derived = text_of(re.search(r'<section class="card" id="derived".*?</section>', page, re.S).group(0))
    assert "ordering 597.9 ± 1.2 K 8.5 K planted-for-tests primary heating" in derived
    assert "planted-for-tests version 1.0 current · 1 transition(s), 0 result(s)" in derived
    assert f"Inputs run {made.thermo_run}" in derived
    sha = hashlib.sha256(made.thermo_bytes).hexdigest()
    assert f"Input bytes {sha[:16]}…" in derived
    assert "smooth 5" in derived and "window_K 20.0" in derived
    assert "invented numbers for the dashboard's tests" in derived


def test_run_series_as_csv_is_the_stored_series(site):
    app, made = site
    r = app.test_client().get(f"/run/{made.thermo_run}/series.csv")
    assert r.status_code == 200 and r.mimetype == "text/csv"
    import pandas as pd

    got = pd.read_csv(io.StringIO(r.get_data(as_text=True)))
    want = app.extensions["magvault"].series(made.thermo_run)
    assert list(got.columns) == list(want.columns)
    np.testing.assert_allclose(got["moment_A_m2"], want["moment_A_m2"], rtol=1e-9)


def test_planned_run_page_works_without_data_or_derivations(site):
    app, made = site
    text = text_of(_get(app.test_client(), f"/run/{made.planned_run}"))
    assert "No data yet" in text and "Attach the export at the bench" in text
    assert "Nothing derived from this run yet" in text and "Derive again" not in text
    assert app.test_client().get(f"/run/{made.planned_run}/full").status_code == 404
    assert app.test_client().get(f"/run/{made.planned_run}/series.csv").status_code == 404


def test_retract_needs_a_reason_and_lands_in_the_events(site):
    app, made = site
    vault = app.extensions["magvault"]
    run = vault.ingest(data=loop_csv(601), source_name="retract_me.csv", specimen=made.powder, kind="hysteresis").run_id
    c = app.test_client()
    r = _post(c, f"/run/{run}/retract", {"reason": ""}, f"/run/{run}", status=422)
    assert "reason: required" in text_of(r.get_data(as_text=True))
    assert vault.run(run)["status"] == "recorded"
    _post(c, f"/run/{run}/retract", {"reason": "holder contaminated with grease"}, f"/run/{run}")
    assert vault.run(run)["status"] == "retracted"
    text = text_of(_get(c, f"/run/{run}"))
    assert "Retracted: holder contaminated with grease" in text and "Retract this run" not in text
    events = text_of(_get(c, f"/events?specimen={made.powder}"))
    assert "retract run" in events and "holder contaminated with grease" in events


def test_supersede_points_to_the_replacing_run(site):
    app, made = site
    vault = app.extensions["magvault"]
    old = vault.ingest(data=loop_csv(501), source_name="old.csv", specimen=made.powder, kind="hysteresis").run_id
    new = vault.ingest(data=loop_csv(401), source_name="new.csv", specimen=made.powder, kind="hysteresis").run_id
    c = app.test_client()
    form = form_with_action(_get(c, f"/run/{old}"), f"/run/{old}/supersede")
    assert str(new) in form["selects"]["by"] and str(old) not in form["selects"]["by"]
    r = _post(c, f"/run/{old}/supersede", {"by": "", "reason": "re-measured"}, f"/run/{old}", status=422)
    assert "replaced by: choose the run" in text_of(r.get_data(as_text=True))
    r = _post(c, f"/run/{old}/supersede", {"by": str(new), "reason": ""}, f"/run/{old}", status=422)
    assert "reason: required" in text_of(r.get_data(as_text=True))
    _post(c, f"/run/{old}/supersede", {"by": str(new), "reason": "re-measured after recentring"}, f"/run/{old}")
    doc = vault.run(old)
    assert doc["status"] == "superseded" and doc["superseded_by"] == new
    assert f'Superseded by <a href="/run/{new}">run {new}</a>' in _get(c, f"/run/{old}")


def test_derive_action_is_offered_on_the_run_page(site):
    app, made = site
    vault = app.extensions["magvault"]
    c = app.test_client()
    page = _get(c, f"/run/{made.thermo_run}")
    assert f'action="/run/{made.thermo_run}/derive"' in page
    _post(c, f"/run/{made.thermo_run}/derive", {}, f"/run/{made.thermo_run}")
    derived = text_of(_get(c, f"/run/{made.thermo_run}"))
    assert vault.derivations(made.thermo_run) and "version" in derived
    # A resonance run (a spectrum of one block here) is offered the same action.
    csv = "Frequency (kHz),Amplitude (V)\n" + "".join(
        f"{f / 10},{1 / (1 + (f / 10 - 500) ** 2):.5f}\n" for f in range(4900, 5100))
    rus = vault.ingest(data=csv.encode(), source_name="rus.csv", specimen=made.piece, kind="resonance",
                       overrides=["temperature=300 K"])
    assert f'action="/run/{rus.run_id}/derive"' in _get(c, f"/run/{rus.run_id}")
    _post(c, f"/run/{rus.run_id}/derive", {}, f"/run/{rus.run_id}")
    page = _get(c, f"/run/{rus.run_id}")
    per_block = page[page.index('id="per-block"'):]
    n = len(vault.results(run=rus.run_id))
    assert n and f"Values per temperature block ({n})" in text_of(per_block)
    assert "frequency_Hz" in per_block and "300 K" in text_of(per_block)


def test_a_resonance_run_with_blocks_draws_its_tracks_against_temperature(site):
    """Three temperature blocks of one Lorentzian mode softening with temperature: the run page draws
    f^2 and Q^-1 against block temperature from the derived per-block results."""
    app, made = site
    vault = app.extensions["magvault"]
    c = app.test_client()
    text = ""
    for t, f0 in ((300, 500.0), (350, 498.0), (400, 495.0)):
        text += f"[block temperature = {t} K]\nf (kHz)  amplitude (V)\n"
        text += "".join(f"{f0 + d / 100:.2f}  {0.002 + 0.3 / (1 + ((d / 100) / 0.1) ** 2):.6f}\n"
                        for d in range(-150, 151, 2)) + "\n"
    run = vault.ingest(data=text.encode(), source_name="rus_blocks.txt", specimen=made.piece, kind="resonance")
    _post(c, f"/run/{run.run_id}/derive", {}, f"/run/{run.run_id}")
    tracks = vault.block_tracks(run.run_id)
    assert sorted(tracks["block_temperature_K"].unique()) == [300.0, 350.0, 400.0]
    page = _get(c, f"/run/{run.run_id}")
    assert "Across the temperature blocks" in page and 'data-figure="plot-track-0"' in page
    assert "Resonance frequency squared" in page


def test_specimen_page_leads_with_primary_transitions_and_folds_the_rest(site):
    app, made = site
    vault = app.extensions["magvault"]
    c = app.test_client()
    vault.derive(run=made.thermo_run)  # real analyses: a primary row per kind and branch, and each method's
    page = _get(c, f"/specimen/{made.piece}")
    derived = page[page.index('id="derived"'):page.index('id="images"')]
    rows = vault.transitions(specimen=made.piece)
    primaries, others = int(rows["primary"].sum()), int((~rows["primary"]).sum())
    assert primaries and others
    assert f"Estimates by each method ({others})" in text_of(derived)
    first_table = derived[:derived.index("Estimates by each method")]
    assert first_table.count('<tr class="primary">') == primaries and "thermomagnetic" in first_table


# --- bench ---------------------------------------------------------------------------------------

def test_bench_shows_the_safety_cautions(site):
    app, _ = site
    text = text_of(_get(app.test_client(), "/bench"))
    for words in ("sulfur dioxide (SO₂)", "hydrogen sulfide (H₂S)", "Liquid nitrogen and helium",
                  "pacemakers", "Fine mineral powders", "local safety rules and its trained staff"):
        assert words in text


def test_bench_registers_a_specimen_and_a_piece_with_inline_errors(site):
    app, _ = site
    c = app.test_client()
    vault = app.extensions["magvault"]
    r = _post(c, "/bench/specimen", {"code": "BX-1", "mass": "12.5"}, "/bench", status=422)
    page = r.get_data(as_text=True)
    errors = re.search(r'id="sp-mass-errors">(.*?)</ul>', page, re.S)
    assert errors and "mass" in text_of(errors.group(1)) and "unit" in text_of(errors.group(1))
    assert 'aria-invalid="true"' in page
    r = _post(c, "/bench/specimen", {"code": "BX-1", "mass": "12.50 ± 0.02 mg", "kind": "single crystal",
                                     "origin": ORIGIN}, "/bench")
    assert r.headers["Location"].endswith("/specimen/BX-1")
    assert vault.specimen("BX-1")["mass_kg"] == pytest.approx(12.5e-6)
    r = _post(c, "/bench/specimen", {"code": "BX-1"}, "/bench", status=422)
    assert "specimen 'BX-1' already exists" in text_of(r.get_data(as_text=True))
    r = _post(c, "/bench/piece", {"parent": "NOPE", "code": "BX-1-a"}, "/bench", status=422)
    assert "specimen 'NOPE' not found" in text_of(r.get_data(as_text=True))
    r = _post(c, "/bench/piece", {"parent": "BX-1", "code": "BX-1-a", "mass": "20 mg", "same_orientation": "y"},
              "/bench")
    doc = vault.specimen("BX-1-a")
    assert doc["parent"] == "BX-1" and doc["same_orientation"]
    follow = c.get(r.headers["Location"])
    assert "weigh 20 mg in all, more than BX-1" in text_of(follow.get_data(as_text=True))


def test_bench_logs_a_planned_run_and_refuses_a_bad_direction(site):
    app, made = site
    c = app.test_client()
    r = _post(c, "/bench/run", {"specimen": made.powder, "kind": "thermomagnetic", "direction": "sideways"},
              "/bench", status=422)
    assert "'sideways' is not a direction" in text_of(r.get_data(as_text=True))
    r = _post(c, "/bench/run", {"specimen": made.powder, "kind": "thermomagnetic", "status": "planned",
                                "direction": "-z", "started": "2026-03-04T09:30"}, "/bench")
    run_id = int(re.search(r"run=(\d+)", r.headers["Location"]).group(1))
    doc = app.extensions["magvault"].run(run_id)
    assert doc["status"] == "planned" and doc["direction"] == "-Z" and doc["started"] == "2026-03-04T09:30:00Z"
    # The import form now offers that run.
    assert f'<option selected value="{run_id}">' in _get(c, f"/bench?run={run_id}") or \
        f'value="{run_id}" selected' in _get(c, f"/bench?run={run_id}")


def _preview(c, data: bytes, name: str, fields: dict, status=200):
    token = csrf_token(_get(c, "/bench"))
    r = c.post("/bench/import", data={"csrf_token": token, **fields, "file": (io.BytesIO(data), name)},
               content_type="multipart/form-data")
    assert r.status_code == status, text_of(r.get_data(as_text=True))[:1000]
    return r.get_data(as_text=True)


def test_import_preview_correction_and_commit(site):
    app, made = site
    vault = app.extensions["magvault"]
    c = app.test_client()
    n_runs = len(vault.runs())
    page = _preview(c, two_thermometer_csv(), "../../two_thermometers.csv",
                    {"specimen": made.grandchild, "kind": "thermomagnetic"})
    text = text_of(page)
    assert "Read as delimited" in text and "400 rows" in text and "Nothing is saved yet" in text
    assert "two_thermometers.csv" in text and "../" not in text
    assert "also looks like temperature_K" in text  # the reader's warning is shown
    assert len(vault.runs()) == n_runs  # nothing written by the preview
    form = form_with_action(page, "/bench/import/confirm")
    fields = form["fields"]
    sources = {fields[f"source-{i}"]: i for i in range(int(fields["ncols"]))}
    assert fields[f"current-{sources['Setpoint (K)']}"] == "temperature_K"
    # The user says the sample thermometer is the temperature and leaves the set-point out.
    fields[f"target-{sources['Setpoint (K)']}"] = "ignore"
    fields[f"target-{sources['Sample temp (K)']}"] = "temperature_K"
    fields["reread"] = "Read again with these columns"
    r = c.post("/bench/import/confirm", data={k: v for k, v in fields.items() if v is not None})
    assert r.status_code == 200
    again = r.get_data(as_text=True)
    rows = re.search(r'<table class="data rows">(.*?)</table>', again, re.S).group(1)
    first = re.findall(r'<td class="num">([^<]*)</td>', rows)[:2]
    file_row = two_thermometer_csv().decode().splitlines()[1].split(",")
    assert float(first[0]) == float(file_row[1])  # the sample thermometer, not the set-point
    # emu -> A m^2 with pint (Gaussian context; erg/G is the emu).
    import pint

    ureg = pint.UnitRegistry()
    want = ureg.Quantity(float(file_row[2]), "erg/gauss").to("A*m**2", "Gaussian").magnitude
    assert float(first[1]) == pytest.approx(want, rel=1e-5)  # shown to 6 significant digits
    form = form_with_action(again, "/bench/import/confirm")
    assert json.loads(form["fields"]["corrections"]) == {"Setpoint (K)": "ignore", "Sample temp (K)": "temperature_K"}
    fields = {k: v for k, v in form["fields"].items() if v is not None}
    fields["commit"] = "Save the run"
    r = c.post("/bench/import/confirm", data=fields)
    assert r.status_code == 302, text_of(r.get_data(as_text=True))[:800]
    run_id = int(r.headers["Location"].rsplit("/", 1)[1])
    series = vault.series(run_id)
    assert "sample_temp_K" not in series.columns and series["temperature_K"].iloc[0] == pytest.approx(298.5)
    doc = vault.run(run_id)
    assert doc["source_name"] == "two_thermometers.csv" and doc["specimen"] == made.grandchild
    assert f'href="/run/{run_id}"' in _get(c, f"/specimen/{made.grandchild}")
    # The same bytes again are refused until the user ticks "import again".
    page = _preview(c, two_thermometer_csv(), "two_thermometers.csv",
                    {"specimen": made.grandchild, "kind": "thermomagnetic"})
    fields = {k: v for k, v in form_with_action(page, "/bench/import/confirm")["fields"].items() if v is not None}
    fields["commit"] = "Save the run"
    r = c.post("/bench/import/confirm", data=fields)
    assert r.status_code == 422
    assert f"already imported for this specimen as run {run_id}" in text_of(r.get_data(as_text=True))
    assert "tick “import again”" in text_of(r.get_data(as_text=True))


def test_import_into_a_logged_run_and_typed_columns(site):
    app, made = site
    vault = app.extensions["magvault"]
    c = app.test_client()
    planned = vault.log_run(made.powder, "thermomagnetic")
    csv = b"T,Signal\n300,1.0e-3\n400,0.8e-3\n500,0.5e-3\n"
    page = _preview(c, csv, "plain.csv", {"run": str(planned)}, status=422)
    assert "column 'T': has no unit" in text_of(page)
    page = _preview(c, csv, "plain.csv", {"run": str(planned), "mapping": "T=temperature_K, Signal=moment_A_m2"})
    fields = {k: v for k, v in form_with_action(page, "/bench/import/confirm")["fields"].items() if v is not None}
    fields["commit"] = "Save the run"
    r = c.post("/bench/import/confirm", data=fields)
    assert r.headers["Location"].endswith(f"/run/{planned}")
    assert vault.run(planned)["status"] == "recorded"
    np.testing.assert_allclose(vault.series(planned)["moment_A_m2"], [1.0e-3, 0.8e-3, 0.5e-3])


def test_import_form_reports_missing_and_unreadable_files(site):
    app, made = site
    c = app.test_client()
    token = csrf_token(_get(c, "/bench"))
    r = c.post("/bench/import", data={"csrf_token": token, "specimen": made.powder, "kind": "thermomagnetic"},
               content_type="multipart/form-data")
    assert r.status_code == 422 and "export file: choose the file" in text_of(r.get_data(as_text=True))
    page = _preview(c, b"\x00\x01\x02binary\xff" * 50, "blob.bin", {"specimen": made.powder,
                                                                   "kind": "thermomagnetic"}, status=422)
    assert "blob.bin" in text_of(page)
    page = _preview(c, thermomagnetic_csv(50), "x.csv", {"specimen": "NOPE", "kind": "thermomagnetic"}, status=422)
    assert "specimen 'NOPE' not found" in text_of(page)
    # An expired or forged upload token asks for the file again.
    token = csrf_token(_get(c, "/bench"))
    r = c.post("/bench/import/confirm", data={"csrf_token": token, "token": "A" * 24, "kind": "thermomagnetic",
                                              "specimen": made.powder, "commit": "Save the run"})
    assert r.status_code == 422 and "choose it again" in text_of(r.get_data(as_text=True))


# --- images --------------------------------------------------------------------------------------

def test_images_keep_their_original_bytes_and_get_png_thumbnails(site):
    app, made = site
    c = app.test_client()
    from PIL import Image

    tiff = tiff16_bytes()
    r = _post(c, "/images", {"specimen": made.second_piece, "pixel_size": "12 nm", "caption": "Twin lamellae",
                             "file": (io.BytesIO(tiff), "twins.tif")}, f"/specimen/{made.second_piece}",
              content_type="multipart/form-data")
    images = app.extensions["magvault"].images(specimen=made.second_piece)
    image = images[-1]
    assert image["media_type"] == "image/tiff" and image["pixel_size_m"] == pytest.approx(12e-9)
    original = c.get(f"/image/{image['id']}/original")
    assert hashlib.sha256(original.data).hexdigest() == hashlib.sha256(tiff).hexdigest()
    assert "filename=twins.tif" in original.headers["Content-Disposition"]
    thumb = c.get(f"/image/{image['id']}/thumbnail")
    assert thumb.mimetype == "image/png"
    with Image.open(io.BytesIO(thumb.data)) as im:
        assert im.format == "PNG" and max(im.size) <= 480 and im.size[0] == 300
    # Cached by content: a second request is a hit, and the ETag answers a revalidation.
    cache = app.extensions["magvault.thumbs"]
    hits = cache.hits
    again = c.get(f"/image/{image['id']}/thumbnail")
    assert again.data == thumb.data and cache.hits == hits + 1
    assert c.get(f"/image/{image['id']}/thumbnail", headers={"If-None-Match": thumb.headers["ETag"]}).status_code == 304
    assert c.get(f"/image/{image['id']}/thumbnail?size=7").status_code == 400
    # 300 px x 12 nm = 3.6 um field: the bar is 0.5 um, 13.9 % of the width.
    page = _get(c, f"/specimen/{made.second_piece}")
    assert re.search(r'aria-label="scale bar 500 nm">\s*<rect x="4%" y="16" width="13.889%"', page)


def test_image_form_errors_are_inline(site):
    app, made = site
    c = app.test_client()
    r = _post(c, "/images", {"specimen": made.root, "pixel_size": "0.25 um",
                             "file": (io.BytesIO(b"not an image at all"), "notes.txt")}, f"/specimen/{made.root}",
              status=422, content_type="multipart/form-data")
    assert "not a readable image" in text_of(r.get_data(as_text=True))
    r = _post(c, "/images", {"specimen": made.root, "pixel_size": "quarter micron",
                             "file": (io.BytesIO(png_bytes(40, 30)), "a.png")}, f"/specimen/{made.root}",
              status=422, content_type="multipart/form-data")
    page = r.get_data(as_text=True)
    assert re.search(r'id="img-pixel_size-errors">.*pixel size', page, re.S)


# --- events --------------------------------------------------------------------------------------

def test_events_filter_by_specimen_user_and_date(site):
    app, made = site
    c = app.test_client()
    everything = text_of(_get(c, "/events?limit=5000"))
    assert "create specimen TF1" in everything
    text = text_of(_get(c, f"/events?specimen={made.root}"))
    assert "create specimen TF1" in text and "create specimen SX2" not in text
    user = app.extensions["magvault"].events()["user"].iloc[0]
    assert "create specimen" in text_of(_get(c, f"/events?user={user}"))
    assert "No entries match" in text_of(_get(c, "/events?user=nobody-at-all"))
    assert "No entries match" in text_of(_get(c, "/events?since=2999-01-01"))
    text = text_of(_get(c, "/events?since=last+week&limit=abc"))
    assert "since: cannot read 'last week'" in text and "show at most: expected a whole number" in text
