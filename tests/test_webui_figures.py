"""Figures, unit display and scale bars of the dashboard, checked against outside references.

References used here: pint (unit conversions, including the CGS units of NIST
SP 811 / the IEEE magnetic-units table: 1 erg/G = 1 emu = 1e-3 A m^2, 1 Oe ->
mu0*H = 1e-4 T), plotly's own figure validation, and the LTTB algorithm
(Steinarsson 2013) as implemented in magvault.analysis.decimate (checked there
against the published algorithm).
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pandas as pd
import pint
import plotly.io
import pytest

from magvault.analysis.decimate import lttb
from magvault.paths import part

part("webui")
from magvault.webui import figures, formatting  # noqa: E402

UREG = pint.UnitRegistry()


def _figure(panel) -> dict:
    return json.loads(panel.figure_json)


def _array(spec) -> np.ndarray:
    """A plotly data array as JSON: a list, or a typed array {'dtype', 'bdata'} (base64)."""
    if isinstance(spec, dict):
        import base64

        return np.frombuffer(base64.b64decode(spec["bdata"]), dtype=np.dtype(spec["dtype"]))
    return np.asarray(spec, dtype=float)


def _thermo_series(n=4000):
    t = np.linspace(300.0, 700.0, n)
    m = 1e-5 * np.clip(1 - t / 598.0, 0, None) ** 0.36 + 1e-9
    if n > 1234:
        m[1234] = 5e-5  # a single spike: LTTB must keep it, an every-n-th thinning would not
    return pd.DataFrame({"temperature_K": t, "moment_A_m2": m, "moment_A_m2_per_kg": m / 4e-5,
                         "branch": np.where(np.arange(n) < n // 2, "heating", "cooling")})


MAPPING = [  # as stored by an import: SI = value * factor + offset
    {"source": "Temp (°C)", "source_unit": "°C", "target": "temperature_K", "factor": 1.0, "offset": 273.15,
     "guessed": True},
    {"source": "Moment (emu)", "source_unit": "emu", "target": "moment_A_m2", "factor": 1e-3, "offset": 0.0,
     "guessed": True},
]


def test_long_curves_are_decimated_with_lttb_and_keep_their_extremes():
    series = _thermo_series()
    panels = figures.run_panels(series, "thermomagnetic", MAPPING, max_points=500)
    assert [p.key for p in panels] == ["exported", "normalised"]
    for p in panels:
        assert p.n_points == 4000 and p.n_shown == 1000 and p.decimated
    fig = _figure(panels[1])
    heating = fig["data"][0]
    assert heating["name"] == "heating" and fig["data"][1]["name"] == "cooling"
    # The heating trace holds exactly LTTB's choice (Steinarsson 2013) from the heating rows.
    rows = np.arange(2000)
    expected = lttb(series["temperature_K"].to_numpy()[rows], series["moment_A_m2"].to_numpy()[rows], 500)
    np.testing.assert_array_equal(_array(heating["x"]), series["temperature_K"].to_numpy()[expected])
    assert 1234 in expected  # the spike survives
    assert _array(heating["x"])[0] == 300.0 and np.isclose(_array(heating["x"])[-1], series["temperature_K"][1999])


def test_short_curves_are_drawn_whole():
    series = _thermo_series(300)
    panels = figures.run_panels(series, "thermomagnetic", MAPPING, max_points=500)
    assert all(p.n_shown == p.n_points == 300 and not p.decimated for p in panels)
    full = figures.run_panels(_thermo_series(), "thermomagnetic", MAPPING, max_points=None, webgl=True)
    assert all(p.n_shown == 4000 for p in full)
    assert {t["type"] for t in _figure(full[0])["data"]} == {"scattergl"}


def test_as_exported_panel_gives_back_the_files_numbers_checked_with_pint():
    series = _thermo_series(200)
    exported = _figure(figures.run_panels(series, "thermomagnetic", MAPPING, max_points=None)[0])
    x = np.concatenate([_array(t["x"]) for t in exported["data"]])
    y = np.concatenate([_array(t["y"]) for t in exported["data"]])
    # pint as the outside reference: kelvin -> degree Celsius, A m^2 -> erg/gauss (= emu) in pint's
    # Gaussian context; pint's mu0 is the CODATA value, so it differs from the exact factor by ~7e-11.
    want_x = UREG.Quantity(series["temperature_K"].to_numpy(), "kelvin").to("degC").magnitude
    want_y = UREG.Quantity(series["moment_A_m2"].to_numpy(), "A * m**2").to("erg / gauss", "Gaussian").magnitude
    np.testing.assert_allclose(x, want_x, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(y, want_y, rtol=1e-9)
    assert exported["layout"]["xaxis"]["title"]["text"] == "Temp (°C)"
    assert exported["layout"]["yaxis"]["title"]["text"] == "Moment (emu)"


def test_field_in_oersted_is_shown_back_in_oersted_checked_with_pint():
    h_oe = np.linspace(-10000, 10000, 101)
    mu0h = (UREG.Quantity(h_oe, "oersted").to("A/m", "Gaussian") * UREG.mu_0).to("tesla").magnitude  # pint
    series = pd.DataFrame({"mu0H_T": h_oe * 1e-4, "moment_A_m2": np.tanh(h_oe / 900) * 4e-6})
    np.testing.assert_allclose(series["mu0H_T"], mu0h, rtol=1e-9)  # the stored factor, 1 Oe -> 1e-4 T
    mapping = [{"source": "Field (Oe)", "source_unit": "Oe", "target": "mu0H_T", "factor": 1e-4, "offset": 0.0},
               {"source": "Moment (emu)", "source_unit": "emu", "target": "moment_A_m2", "factor": 1e-3,
                "offset": 0.0}]
    fig = _figure(figures.run_panels(series, "hysteresis", mapping, max_points=None)[0])
    np.testing.assert_allclose(_array(fig["data"][0]["x"]), h_oe, rtol=1e-12, atol=1e-9)


def test_without_a_mass_the_normalised_panel_is_scaled_and_says_so():
    series = _thermo_series(100).drop(columns=["moment_A_m2_per_kg"])
    panel = figures.run_panels(series, "thermomagnetic", MAPPING, max_points=None)[1]
    y = np.concatenate([_array(t["y"]) for t in _figure(panel)["data"]])
    assert math.isclose(np.max(np.abs(y)), 1.0)
    assert "no mass recorded" in panel.note
    assert _figure(panel)["layout"]["yaxis"]["title"]["text"] == "Moment / max |Moment|"


def test_a_volume_susceptibility_is_scaled_with_its_symbol_and_the_reason():
    T = np.linspace(5.0, 60.0, 50)
    series = pd.DataFrame({"temperature_K": T, "chi_vol": 0.11 + 0.002 * (T > 32)})
    panel = figures.run_panels(series, "susceptibility", [], max_points=None)[-1]
    assert _figure(panel)["layout"]["yaxis"]["title"]["text"] == "χ / max |χ|"
    assert "needs the density" in panel.note and "no mass recorded" not in panel.note


def test_a_legend_of_many_blocks_grows_the_figure_below_the_axis_title():
    f = np.linspace(4e5, 7e5, 200)
    series = pd.concat([pd.DataFrame({"frequency_Hz": f, "amplitude": np.exp(-((f - 5e5 - t) / 2e3) ** 2),
                                      "block_temperature_K": t}) for t in np.arange(300.0, 660.0, 25.0)])
    layout = _figure(figures.run_panels(series, "resonance", [], max_points=None)[0])["layout"]
    assert layout["legend"]["yanchor"] == "top" and layout["legend"]["y"] < -0.15
    assert layout["height"] > 380 and layout["margin"]["b"] > 60


def test_labels_are_unicode_and_figures_are_valid_plotly():
    for kind, frame in [
        ("thermomagnetic", _thermo_series(50)),
        ("diffraction", pd.DataFrame({"two_theta_deg": np.linspace(20, 80, 50), "intensity_counts": np.ones(50)})),
        ("calorimetry", pd.DataFrame({"temperature_K": np.linspace(5, 300, 50),
                                      "heat_capacity_J_per_mol_K": np.linspace(0.1, 50, 50)})),
        ("resonance", pd.DataFrame({"frequency_Hz": np.tile(np.linspace(3e5, 4e5, 25), 2), "amplitude": np.ones(50),
                                    "block_temperature_K": np.repeat([300.0, 350.0], 25)})),
    ]:
        for panel in figures.run_panels(frame, kind, None, max_points=None):
            plotly.io.from_json(panel.figure_json)  # plotly validates every property
            x_title, y_title = figures.axis_titles(panel.figure_json)
            assert "$" not in x_title + y_title and "\\" not in x_title + y_title
    cal = figures.run_panels(pd.DataFrame({"temperature_K": [5.0, 6.0], "heat_capacity_J_per_mol_K": [1.0, 2.0]}),
                             "calorimetry", None, which=("si",))[0]
    assert figures.axis_titles(cal.figure_json)[1] == "Heat capacity Cp (J mol⁻¹ K⁻¹)"
    res = figures.run_panels(pd.DataFrame({"frequency_Hz": [1.0, 2.0, 1.0, 2.0], "amplitude": [1.0, 2.0, 3.0, 4.0],
                                           "block_temperature_K": [300.0, 300.0, 350.0, 350.0]}), "resonance", None)
    assert [t["name"] for t in _figure(res[0])["data"]] == ["300 K", "350 K"]


def test_a_series_with_nothing_to_plot_gives_no_panels():
    assert figures.run_panels(pd.DataFrame({"branch": ["heating"]}), "thermomagnetic") == []
    assert figures.run_panels(pd.DataFrame({"temperature_K": []}), "thermomagnetic") == []


def test_figure_json_cannot_break_out_of_its_script_block():
    text = json.dumps({"name": "</script><script>alert(1)</script> & more"})
    safe = figures.script_json(text)
    assert "</" not in safe and "<" not in safe and "&" not in safe
    assert json.loads(safe) == json.loads(text)


# --- numbers with units -----------------------------------------------------------------------

def _parse(shown: str) -> tuple[float, float | None, str]:
    """'(1.2340 ± 0.0050) × 10⁻⁸ A m²' -> (value, uncertainty, unit text) for pint."""
    sup = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻", "0123456789-")
    m = re.fullmatch(r"\(?([-\d.]+)(?: ± ([\d.]+))?\)?(?: × 10([⁰¹²³⁴⁵⁶⁷⁸⁹⁻]+))?\s*(.*)", shown)
    assert m, shown
    power = 10.0 ** int(m.group(3).translate(sup)) if m.group(3) else 1.0
    unit = (m.group(4).replace("µ", "u").replace("²", "**2").replace("kg⁻¹", "/ kg").replace("A m", "A * m")
            or "dimensionless")
    return float(m.group(1)) * power, (float(m.group(2)) * power if m.group(2) else None), unit


@pytest.mark.parametrize("value, unc, unit, shown", [
    (0.0123, 0.0004, "T", "12.30 ± 0.40 mT"),
    (2.5e-7, 3e-9, "m", "250.0 ± 3.0 nm"),
    (5.5e5, 120.0, "Hz", "550.00 ± 0.12 kHz"),
    (1.234e-8, 5e-11, "A m^2", "(1.2340 ± 0.0050) × 10⁻⁸ A m²"),
    (3.2, None, "A m^2/kg", "3.2 A m² kg⁻¹"),
    (593.24, 0.81, "K", "593.24 ± 0.81 K"),
])
def test_quantities_are_shown_in_readable_units_that_pint_reads_back(value, unc, unit, shown):
    assert formatting.quantity(value, unc, unit) == shown
    v, u, text = _parse(shown)
    si = {"A m^2": "A * m**2", "A m^2/kg": "A * m**2 / kg"}.get(unit, unit)
    assert math.isclose(UREG.Quantity(v, text).to(si).magnitude, value, rel_tol=1e-3)
    if unc is not None:
        assert math.isclose(UREG.Quantity(u, text).to(si).magnitude, unc, rel_tol=0.05)


def test_masses_use_mg_below_a_gram_and_survive_binary_round_off():
    # 1e-7 kg read from '0.1 mg' comes back as 1.00000000000002e-07: still two digits of uncertainty.
    assert formatting.mass(1.613e-4, 1.00000000000002e-07) == "161.30 ± 0.10 mg"
    assert formatting.mass(1.25e-5, 2e-8) == "12.500 ± 0.020 mg"
    assert formatting.mass(2.5e-3, None) == "2.5 g"
    assert formatting.mass(None) == "–" and formatting.mass(float("nan")) == "–"
    assert math.isclose(UREG.Quantity(161.30, "mg").to("kg").magnitude, 1.613e-4)


def test_conditions_are_labelled_with_units_and_uncertainties():
    shown = {c.label: c.shown for c in formatting.conditions({
        "temperature_K": 573.0, "temperature_uncertainty_K": 2.0, "duration_s": 7200.0, "atmosphere": "argon",
        "wavelength_m": 1.5406e-10, "sweep_rate_K_per_s": 1 / 30, "field_T": 0.1, "mass_kg": 1.25e-5,
        "started": "2026-02-04T15:35:00Z"})}
    assert shown["Started"] == "2026-02-04 15:35 UTC"
    assert shown["Temperature"] == "573.0 ± 2.0 K"
    assert shown["Duration"] == "2 h"
    assert shown["Atmosphere"] == "argon"
    assert shown["Wavelength"] == "0.15406 nm (1.5406 Å)"
    assert shown["Sweep rate"] == "0.0333333 K s⁻¹ (2 K min⁻¹)"
    assert shown["Applied field μ₀H"] == "100 mT"
    assert shown["Mass"] == "12.5 mg"
    # pint: 1/30 K/s is 2 K/min; 1.5406e-10 m is 1.5406 angstrom.
    assert math.isclose(UREG.Quantity(1 / 30, "K/s").to("K/min").magnitude, 2.0)
    assert math.isclose(UREG.Quantity(1.5406e-10, "m").to("angstrom").magnitude, 1.5406)


@pytest.mark.parametrize("pixel_m, width", [(0.25e-6, 1024), (12e-9, 512), (1.7e-6, 640), (3e-5, 2048)])
def test_scale_bars_are_round_lengths_spanning_the_right_fraction(pixel_m, width):
    bar = formatting.scale_bar(pixel_m, width, target=0.25)
    field = pixel_m * width
    mantissa = bar.length_m / 10 ** math.floor(math.log10(bar.length_m) + 1e-12)
    assert any(math.isclose(mantissa, m) for m in (1, 2, 5))
    assert bar.length_m <= 0.25 * field * (1 + 1e-12) and bar.length_m > 0.25 * field / 2.5
    assert math.isclose(bar.fraction, bar.length_m / field)
    # The label means the same length to pint.
    number, unit = bar.label.split()
    assert math.isclose(UREG.Quantity(float(number), unit.replace("µ", "u")).to("m").magnitude, bar.length_m)


def test_no_scale_bar_without_a_pixel_size():
    assert formatting.scale_bar(None, 100) is None
    assert formatting.scale_bar(1e-6, None) is None
    assert formatting.scale_bar(0.0, 100) is None


def test_block_tracks_draw_the_modulus_and_damping_with_the_transition_marked():
    """Per-block resonance results: f^2 relative to the lowest block (proportional to the elastic
    modulus, Migliori & Sarrao 1997) with its uncertainty doubled in relative terms, Q^-1 in units of
    1e-3, FWHM left out beside Q^-1, and the primary transition as a vertical line."""
    T = np.array([300.0, 400.0, 500.0, 590.0])
    f = np.array([400e3, 396e3, 392e3, 380e3])
    rows = []
    for t, fi in zip(T, f):
        rows += [("frequency_Hz", "mode 1", t, fi, 1.0, "Hz", "lorentzian-fit"),
                 ("inverse_Q", "mode 1", t, 3e-4 if t < 590 else 8e-4, 1e-5, "1", "lorentzian-fit"),
                 ("fwhm_Hz", "mode 1", t, 0.3 * fi * 1e-3, 2.0, "Hz", "lorentzian-fit")]
    tracks = pd.DataFrame(rows, columns=["quantity", "track", "block_temperature_K", "value", "uncertainty",
                                         "unit", "method"])
    panels = figures.track_panels(tracks, [{"kind": "ordering", "temperature_K": 588.0, "primary": True},
                                           {"kind": "ordering", "temperature_K": 570.0, "primary": False}])
    assert [p.title for p in panels] == ["Resonance frequency squared", "Damping Q⁻¹ = FWHM / f"]
    f2, damping = (_figure(p) for p in panels)
    y = _array(f2["data"][0]["y"])
    np.testing.assert_allclose(y, (f / f[0]) ** 2, rtol=1e-12)
    np.testing.assert_allclose(_array(f2["data"][0]["error_y"]["array"]), 2 * y * 1.0 / f, rtol=1e-12)
    np.testing.assert_allclose(_array(damping["data"][0]["y"]), [0.3, 0.3, 0.3, 0.8], rtol=1e-12)
    lines = [s for s in f2["layout"]["shapes"] if s.get("type") == "line"]
    assert [round(s["x0"], 6) for s in lines] == [588.0]
    assert figures.track_panels(tracks[tracks["block_temperature_K"] < 400]) == []  # too few temperatures
