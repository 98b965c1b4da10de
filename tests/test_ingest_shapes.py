"""Every shape and every run kind, from small invented files written here.

Converted values are compared with factors of the NBS/IEEE table "Units for Magnetic
Properties" (1 emu = 1e-3 A m^2, 1 Oe -> 1e-4 T as mu0*H, 1 emu/g = 1 A m^2/kg) and
with the Celsius definition T/K = t/°C + 273.15 (NIST SP 811, 2008).
"""

from __future__ import annotations

import codecs
import io

import numpy as np
import openpyxl
import pytest

from magvault.errors import InputFileError
from magvault.ingest import RUN_KINDS, SHAPES, read_export

EMU = 1e-3      # A m^2 per emu (NBS/IEEE)
OE = 1e-4       # T (mu0*H) per Oe (NBS/IEEE)


def read(text: str | bytes, kind: str, name: str = "fixture.txt", **kw):
    data = text.encode("utf-8") if isinstance(text, str) else text
    return read_export(data, source_name=name, run_kind=kind, **kw)


def xlsx(rows: list[list], title: str = "Sheet1", extra_sheet: str | None = None) -> bytes:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for r in rows:
        ws.append(r)
    if extra_sheet:
        ws2 = wb.create_sheet(extra_sheet)
        ws2.append(["T (K)", "Cp (J/(mol K))"])
        ws2.append([10.0, 1.5])
        ws2.append([20.0, 3.0])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


# ---------------------------------------------------------------------------
# Fixture files (all invented), one per shape and spelling family
# ---------------------------------------------------------------------------

CSV_CGS = """Temperature (K),Moment (emu),Field (Oe)
300.0,1.5e-3,5000
310.0,1.4e-3,5000
320.0,1.2e-3,5000
330.0,0.9e-3,5000
"""

SEMICOLON_DECIMAL_COMMA = """T_K;M_emu
300,5;1,5e-3
310,5;1,4e-3
320,5;1,2e-3
"""

TAB_CELSIUS = "Temp (°C)\tM [emu]\n26.85\t2.0e-3\n36.85\t1.9e-3\n46.85\t1.7e-3\n"

WHITESPACE_RUNS = """field/Oe     M_emu
-10000     -1.0e-3
-5000      -0.8e-3
0          0.1e-3
5000       0.8e-3
10000      1.0e-3
"""

SECTIONED = """Thermomagnetic sweep of piece K-12
mass = 12.5 mg
field = 5000 Oe
sweep rate = 2 K/min
atmosphere: argon
operator: lab technician
started = 2026-03-04T10:15:00Z

[data]
Temperature (K),Moment (emu)
300,1.0e-3
400,0.9e-3
500,0.6e-3
600,0.1e-3
"""

SECTIONED_KEY_COMMA = """Sample mass,3.2,mg
Applied field,0.1,T
Date,2026-03-04T12:00:00+01:00
---data---
Field (mT);Moment (A m2)
-500;-2,0e-6
0;0,1e-6
500;2,0e-6
"""

COMMENTED_DIFFRACTION = """# powder pattern of an invented crystal
# wavelength: 1.54059292 A
# operator: student
# 2theta (deg)  intensity (counts)  sigma (counts)
42.00  100  10
42.02  144  12
42.04  400  20
42.06  144  12
"""

COMMENTED_HEADERLESS = """! radiation: Cu K-alpha1
! counting: step scan
43.10, 121
43.12, 169
43.14, 121
"""

BLOCKS_RESONANCE = """specimen piece = R-4
frequency range = 300-900 kHz

[block temperature = 300 K]
f (kHz)  amplitude (V)
500.00   0.10
500.25   0.80
500.50   0.10

[block temperature = 310 K]
f (kHz)  amplitude (V)
499.80   0.12
500.05   0.75
500.30   0.11
"""

BLOCKS_HYSTERESIS = """# loops at several temperatures
# block: temperature = 10 K
Field (Oe),Moment (emu)
-10000,-1.0e-3
10000,1.0e-3

# block: temperature = 26.85 °C
Field (Oe),Moment (emu)
-10000,-0.5e-3
10000,0.5e-3
"""

SUSCEPTIBILITY = """frequency = 976 Hz
field = 300 A/m
[measurements]
T (K)\tchi' (SI)\tchi'' (SI)
300\t1.0e-3\t1.0e-5
310\t1.1e-3\t1.2e-5
320\t1.3e-3\t1.5e-5
"""

BACKFIELD = """Field (mT),Mr (Am2/kg)
0,0.50
-20,0.30
-40,0.00
-60,-0.30
-80,-0.45
"""

CALORIMETRY_TAB = "T (K)\tCp (J/mol/K)\n400\t50.0\n450\t55.0\n500\t70.0\n"


def test_delimited_comma_cgs_thermomagnetic():
    r = read(CSV_CGS, "thermomagnetic")
    assert r.shape == "delimited"
    s = r.series
    np.testing.assert_allclose(s["temperature_K"], [300, 310, 320, 330])
    np.testing.assert_allclose(s["moment_A_m2"], np.array([1.5e-3, 1.4e-3, 1.2e-3, 0.9e-3]) * EMU, rtol=1e-12)
    np.testing.assert_allclose(s["mu0H_T"], 5000 * OE, rtol=1e-12)
    assert list(s["branch"]) == ["heating"] * 4
    assert s["moment_A_m2"].dtype == np.float64
    by_target = {c.target: c for c in r.columns}
    assert by_target["moment_A_m2"].source == "Moment (emu)"
    assert by_target["moment_A_m2"].source_unit == "emu"
    assert by_target["moment_A_m2"].factor == pytest.approx(EMU)
    assert by_target["mu0H_T"].guessed is True


def test_delimited_semicolon_with_decimal_comma():
    r = read(SEMICOLON_DECIMAL_COMMA, "thermomagnetic")
    np.testing.assert_allclose(r.series["temperature_K"], [300.5, 310.5, 320.5])
    np.testing.assert_allclose(r.series["moment_A_m2"], np.array([1.5e-3, 1.4e-3, 1.2e-3]) * EMU, rtol=1e-12)


def test_delimited_tab_celsius_header():
    r = read(TAB_CELSIUS, "thermomagnetic")
    np.testing.assert_allclose(r.series["temperature_K"], [300.0, 310.0, 320.0], atol=1e-9)
    temp_map = next(c for c in r.columns if c.target == "temperature_K")
    assert temp_map.offset == pytest.approx(273.15)


def test_delimited_runs_of_spaces_hysteresis():
    r = read(WHITESPACE_RUNS, "hysteresis")
    np.testing.assert_allclose(r.series["mu0H_T"], np.array([-10000, -5000, 0, 5000, 10000]) * OE, rtol=1e-12)
    assert "branch" not in r.series.columns


def test_sectioned_metadata_and_conditions():
    r = read(SECTIONED, "thermomagnetic")
    assert r.shape == "sectioned"
    assert r.metadata["mass"] == "12.5 mg"
    assert r.metadata["title"] == "Thermomagnetic sweep of piece K-12"
    c = r.conditions
    assert c["mass_kg"] == pytest.approx(12.5e-6, rel=1e-12)
    assert c["field_T"] == pytest.approx(5000 * OE, rel=1e-12)
    assert c["sweep_rate_K_per_s"] == pytest.approx(2 / 60, rel=1e-12)
    assert c["atmosphere"] == "argon" and c["operator"] == "lab technician"
    assert c["started"] == "2026-03-04T10:15:00Z"
    assert len(r.series) == 4


def test_sectioned_key_comma_lines_and_dash_marker():
    r = read(SECTIONED_KEY_COMMA, "hysteresis")
    assert r.shape == "sectioned"
    assert r.conditions["mass_kg"] == pytest.approx(3.2e-6)
    assert r.conditions["field_T"] == pytest.approx(0.1)
    # ISO 8601 with an offset becomes UTC.
    assert r.conditions["started"] == "2026-03-04T11:00:00Z"
    np.testing.assert_allclose(r.series["mu0H_T"], [-0.5, 0.0, 0.5])
    np.testing.assert_allclose(r.series["moment_A_m2"], [-2e-6, 0.1e-6, 2e-6])


def test_commented_diffraction_with_header_in_last_comment():
    r = read(COMMENTED_DIFFRACTION, "diffraction")
    assert r.shape == "commented"
    assert list(r.series.columns) == ["two_theta_deg", "intensity_counts", "intensity_sigma_counts"]
    np.testing.assert_allclose(r.series["intensity_counts"], [100, 144, 400, 144])
    # International Tables for Crystallography Vol. C (2006), Table 4.2.2.6: Cu K-alpha1.
    assert r.conditions["wavelength_m"] == pytest.approx(1.54059292e-10, rel=1e-12)
    assert r.conditions["operator"] == "student"


def test_commented_headerless_two_columns_with_line_name():
    r = read(COMMENTED_HEADERLESS, "diffraction")
    assert list(r.series.columns) == ["two_theta_deg", "intensity_counts"]
    np.testing.assert_allclose(r.series["two_theta_deg"], [43.10, 43.12, 43.14])
    assert r.conditions["wavelength_m"] == pytest.approx(1.54059292e-10, rel=1e-12)
    assert any("no header row" in w for w in r.warnings)


def test_commented_headerless_needs_a_mapping_for_other_kinds():
    text = "# resonance sweep\n500.0 0.1\n500.5 0.2\n"
    with pytest.raises(InputFileError) as info:
        read(text, "resonance")
    assert "col1=" in info.value.message and info.value.line == 2
    r = read(text, "resonance", mapping={"col1": "frequency_Hz", "col2": "amplitude"})
    np.testing.assert_allclose(r.series["frequency_Hz"], [500.0, 500.5])


def test_blocks_resonance_long_table_with_block_temperature():
    r = read(BLOCKS_RESONANCE, "resonance")
    assert r.shape == "blocks"
    s = r.series
    assert list(s.columns) == ["frequency_Hz", "amplitude", "block_temperature_K"]
    np.testing.assert_allclose(s["frequency_Hz"], np.array([500.0, 500.25, 500.5, 499.8, 500.05, 500.3]) * 1e3)
    np.testing.assert_allclose(s["block_temperature_K"], [300, 300, 300, 310, 310, 310])
    assert r.metadata["specimen piece"] == "R-4"


def test_blocks_hysteresis_comment_block_headers_in_celsius():
    r = read(BLOCKS_HYSTERESIS, "hysteresis")
    np.testing.assert_allclose(r.series["block_temperature_K"], [10, 10, 300, 300], atol=1e-9)
    np.testing.assert_allclose(r.series["moment_A_m2"], np.array([-1, 1, -0.5, 0.5]) * 1e-3 * EMU)


def test_plain_block_headers_and_blocks_without_repeated_header():
    text = ("mass = 1 mg\n\nField: 0.5 T\nf (kHz)  amplitude\n300 0.1\n301 0.2\n\n"
            "Field: 1.0 T\n300.5 0.1\n301.5 0.3\n")
    r = read(text, "resonance")
    assert r.shape == "blocks"
    np.testing.assert_allclose(r.series["block_field_T"], [0.5, 0.5, 1.0, 1.0])


def test_susceptibility_with_quadrature_and_field_in_a_per_m():
    r = read(SUSCEPTIBILITY, "susceptibility")
    assert r.shape == "sectioned"
    assert {"chi_vol", "chi_quad_vol", "temperature_K"} <= set(r.series.columns)
    np.testing.assert_allclose(r.series["chi_quad_vol"], [1.0e-5, 1.2e-5, 1.5e-5])
    assert r.conditions["frequency_Hz"] == pytest.approx(976.0)
    # H = 300 A/m stored as mu0*H: 300 * 4 pi 1e-7 T to 1e-9 (pint's CODATA mu0).
    assert r.conditions["field_T"] == pytest.approx(300 * 4e-7 * np.pi, rel=1e-9)


def test_backfield_mass_normalised_moment():
    r = read(BACKFIELD, "backfield")
    assert "moment_A_m2_per_kg" in r.series.columns
    np.testing.assert_allclose(r.series["mu0H_T"], [0, -0.02, -0.04, -0.06, -0.08])


def test_calorimetry_molar_and_specific():
    r = read(CALORIMETRY_TAB, "calorimetry")
    np.testing.assert_allclose(r.series["heat_capacity_J_per_mol_K"], [50, 55, 70])
    r2 = read("T (K),Cp (J/g/K)\n400,0.5\n450,0.6\n", "calorimetry")
    np.testing.assert_allclose(r2.series["heat_capacity_J_per_kg_K"], [500.0, 600.0])


def test_spreadsheet_title_rows_metadata_and_first_sheet():
    data = xlsx([["Heat capacity of piece Q-7"], ["mass", "12.5 mg"], [],
                 ["T (K)", "Cp (J/(mol K))"], [300, 50.5], [310, "51,5"], [320, None]],
                title="Cp run", extra_sheet="second")
    r = read(data, "calorimetry", name="q7.xlsx")
    assert r.shape == "spreadsheet" and r.encoding == "xlsx"
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310, 320])
    np.testing.assert_allclose(r.series["heat_capacity_J_per_mol_K"][:2], [50.5, 51.5])
    assert np.isnan(r.series["heat_capacity_J_per_mol_K"][2])
    assert r.metadata["title"] == "Heat capacity of piece Q-7"
    assert r.conditions["mass_kg"] == pytest.approx(12.5e-6)
    r2 = read(data, "calorimetry", name="q7.xlsx", sheet="second")
    np.testing.assert_allclose(r2.series["temperature_K"], [10, 20])


def test_spreadsheet_units_row():
    data = xlsx([["Temperature", "Moment"], ["°C", "emu"], [26.85, 1e-3], [36.85, 2e-3]])
    r = read(data, "thermomagnetic", name="u.xlsx")
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)
    np.testing.assert_allclose(r.series["moment_A_m2"], [1e-6, 2e-6])


def test_text_units_row_below_header():
    r = read("Temperature,Moment\nK,emu\n300,1e-3\n310,2e-3\n", "thermomagnetic")
    assert r.shape == "delimited"
    np.testing.assert_allclose(r.series["moment_A_m2"], [1e-6, 2e-6])


def test_every_shape_can_be_forced():
    texts = {"delimited": CSV_CGS, "sectioned": SECTIONED, "commented": "# T (K) M (emu)\n300 1e-3\n310 2e-3\n",
             "blocks": BLOCKS_HYSTERESIS}
    kinds = {"delimited": "thermomagnetic", "sectioned": "thermomagnetic", "commented": "thermomagnetic",
             "blocks": "hysteresis"}
    for shape in SHAPES:
        if shape == "spreadsheet":
            data = xlsx([["T (K)", "M (emu)"], [300, 1e-3], [310, 2e-3]])
            assert read(data, "thermomagnetic", name="a.xlsx", shape=shape).shape == shape
            continue
        assert read(texts[shape], kinds[shape], shape=shape).shape == shape


def test_every_run_kind_is_covered():
    cases = {
        "thermomagnetic": CSV_CGS, "hysteresis": WHITESPACE_RUNS, "backfield": BACKFIELD,
        "susceptibility": SUSCEPTIBILITY, "resonance": BLOCKS_RESONANCE,
        "diffraction": COMMENTED_DIFFRACTION, "calorimetry": CALORIMETRY_TAB,
    }
    assert set(cases) == set(RUN_KINDS)
    for kind, text in cases.items():
        assert len(read(text, kind).series) >= 3


def test_thermomagnetic_branches_from_temperature_direction():
    up = np.linspace(300, 700, 60)
    down = np.linspace(700, 300, 60)
    temps = np.concatenate([up, np.full(10, 700.0), down])
    text = "T (K),M (emu)\n" + "".join(f"{t:.3f},{1e-3:.1e}\n" for t in temps)
    r = read(text, "thermomagnetic")
    labels = np.asarray(r.series["branch"], dtype=object)
    assert (labels[:60] == "heating").all()
    # A plateau keeps the previous branch; only rows within half a smoothing window
    # (4 rows here) of the start of cooling may take the next label.
    assert (labels[60:66] == "heating").all()
    assert (labels[70:] == "cooling").all()


def test_branch_column_in_file_is_normalised():
    r = read("T (K),M (emu),Branch\n300,1e-3,up\n310,1e-3,up\n305,1e-3,down\n", "thermomagnetic")
    assert list(r.series["branch"]) == ["heating", "heating", "cooling"]


def test_other_columns_keep_their_name_lower_cased_with_si_unit():
    r = read("T (K),M (emu),Pressure (kPa),Comment\n300,1e-3,101.3,ok\n310,1e-3,101.2,ok\n", "thermomagnetic")
    assert "pressure_Pa" in r.series.columns
    np.testing.assert_allclose(r.series["pressure_Pa"], [101300.0, 101200.0])
    assert list(r.series["comment"]) == ["ok", "ok"]


def test_utf16_with_bom_is_text_not_binary():
    body = "Temp (°C)\tM [emu]\r\n26.85\t1.5e-3\r\n36.85\t1.0e-3\r\n"
    r = read(codecs.BOM_UTF16_LE + body.encode("utf-16-le"), "thermomagnetic")
    assert r.encoding == "utf-16-le"
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)


def test_utf16_without_bom_needs_an_encoding():
    body = "Temp (°C)\tM [emu]\r\n26.85\t1.5e-3\r\n36.85\t1.0e-3\r\n".encode("utf-16-le")
    with pytest.raises(InputFileError) as info:
        read(body, "thermomagnetic")
    assert "encoding='utf-16-le'" in info.value.message
    r = read(body, "thermomagnetic", encoding="utf-16-le")
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)


def test_utf8_bom_and_latin1_fallback():
    r = read(codecs.BOM_UTF8 + "Temp (°C),M [emu]\n26.85,1e-3\n36.85,1e-3\n".encode(), "thermomagnetic")
    assert r.encoding == "utf-8"
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)
    r = read("Temp (°C),M [emu]\n26.85,1e-3\n36.85,1e-3\n".encode("latin-1"), "thermomagnetic")
    assert r.encoding == "latin-1"
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)


def test_cr_only_and_crlf_line_ends():
    for nl in ("\r", "\r\n"):
        r = read(CSV_CGS.replace("\n", nl), "thermomagnetic")
        assert len(r.series) == 4
