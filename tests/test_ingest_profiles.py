"""Column guessing, mappings, profiles, preview and mass normalisation."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import periodictable
import pytest

from magvault.errors import InvalidValue
from magvault.ingest import (
    ColumnMap, Profile, add_mass_normalised, parse_map, preview_export, read_export,
)

EMU = 1e-3  # A m^2 per emu, NBS/IEEE table "Units for Magnetic Properties"


def read(text, kind="thermomagnetic", **kw):
    return read_export(text.encode(), source_name="p.csv", run_kind=kind, **kw)


@pytest.mark.parametrize("header, target", [
    ("Temperature (K)", "temperature_K"), ("temp (K)", "temperature_K"), ("T [K]", "temperature_K"),
    ("Sample Temp (K)", "temperature_K"), ("M (emu)", "moment_A_m2"), ("Moment (A·m²)", "moment_A_m2"),
    ("magnetisation (emu/g)", "moment_A_m2_per_kg"), ("H (Oe)", "mu0H_T"), ("B (mT)", "mu0H_T"),
    ("μ0H (T)", "mu0H_T"), ("Field (kOe)", "mu0H_T"), ("χ (SI)", "chi_vol"), ("chi' (SI)", "chi_vol"),
    ("χ'' (SI)", "chi_quad_vol"), ('chi" (SI)', "chi_quad_vol"), ("k (SI)", "chi_vol"),
    ("chi (m3/kg)", "chi_mass_m3_per_kg"), ("chi'' (cm3/g)", "chi_quad_mass_m3_per_kg"),
    ("Time (min)", "time_s"), ("time_s", "time_s"),
])
def test_guessing_from_names_and_units(header, target):
    kind = "susceptibility" if target.startswith("chi") else "thermomagnetic"
    text = f"{header},Z\n1.0,5\n2.0,6\n"
    r = read_export(text.encode(), source_name="g.csv", run_kind=kind, _check_required=False)
    assert next(c.target for c in r.columns if c.source == header) == target
    assert next(c.target for c in r.columns if c.source == "Z") == "z"


@pytest.mark.parametrize("header, target, kind", [
    ("f (kHz)", "frequency_Hz", "resonance"), ("Freq (MHz)", "frequency_Hz", "resonance"),
    ("Amp", "amplitude", "resonance"), ("phase (deg)", "phase_rad", "resonance"),
    ("2Th", "two_theta_deg", "diffraction"), ("2θ (°)", "two_theta_deg", "diffraction"),
    ("I", "intensity_counts", "diffraction"), ("Counts", "intensity_counts", "diffraction"),
    ("esd", "intensity_sigma_counts", "diffraction"),
    ("Cp (J/(mol K))", "heat_capacity_J_per_mol_K", "calorimetry"),
])
def test_guessing_other_kinds(header, target, kind):
    base = {"resonance": ("f0 (Hz),A0", "1,2"), "diffraction": ("angle,I0", "1,2"),
            "calorimetry": ("T (K),Cp0 (J/mol/K)", "1,2")}[kind]
    text = f"{header},{base[0]}\n1.0,{base[1]}\n2.0,{base[1]}\n"
    r = read_export(text.encode(), source_name="g.csv", run_kind=kind, _check_required=False)
    assert next(c.target for c in r.columns if c.source == header) == target


def test_names_that_do_not_matter_to_the_run_kind_are_not_guessed():
    """An 'I' column in a magnetometer export is a current, not a diffraction intensity."""
    r = read("T (K),M (emu),I (A)\n300,1e-3,0.5\n310,1e-3,0.5\n")
    assert next(c.target for c in r.columns if c.source == "I (A)") == "i_A"


def test_duplicate_guesses_keep_the_first_and_warn():
    r = read("T (K),T sample (K),M (emu)\n300,301,1e-3\n310,311,1e-3\n")
    targets = [c.target for c in r.columns]
    assert targets[0] == "temperature_K" and targets[1] == "t_sample_K"
    assert any("already taken" in w for w in r.warnings)


def test_parse_map_pairs_quotes_and_errors():
    assert parse_map("Temp=temperature_K, M=moment_A_m2") == {"Temp": "temperature_K", "M": "moment_A_m2"}
    assert parse_map('"Moment, raw"=moment_A_m2,T=temperature_K') == {"Moment, raw": "moment_A_m2",
                                                                        "T": "temperature_K"}
    assert parse_map("a=b=branch") == {"a=b": "branch"}
    for bad, word in (("", "empty"), ("Temp", "no '='"), ("Temp=kelvin", "kelvin"), ("=temperature_K", "source"),
                      ("T=temperature_K,T=time_s", "twice")):
        with pytest.raises(InvalidValue) as info:
            parse_map(bad)
        assert word in info.value.message


def test_mapping_corrects_a_wrong_guess_and_records_it():
    text = "Temp (°C),Time (s),M (emu)\n26.85,0,1e-3\n36.85,1,1e-3\n"
    r = read(text, mapping=parse_map("Temp=temperature_K, Time=ignore"))
    assert "time_s" not in r.series.columns
    temp = next(c for c in r.columns if c.target == "temperature_K")
    assert temp.guessed is False and temp.source == "Temp (°C)" and temp.offset == pytest.approx(273.15)
    np.testing.assert_allclose(r.series["temperature_K"], [300.0, 310.0], atol=1e-9)


def test_unitless_column_mapped_explicitly_is_read_in_the_target_unit():
    r = read("Temp,M (emu)\n300,1e-3\n310,1e-3\n", mapping={"Temp": "temperature_K"})
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310])


def test_profile_round_trip_units_and_report():
    profile = Profile(name="oven-export", mapping={"Temp": "temperature_K", "Signal": "moment_A_m2"},
                      units={"Temp": "°C", "Signal": "emu"}, shape="delimited", run_kind="thermomagnetic")
    d = profile.to_dict()
    assert json.loads(json.dumps(d)) == d
    again = Profile.from_dict(d)
    assert again == profile and hash(again) == hash(profile)
    r = read("Temp,Signal,Extra\n26.85,1.0,5\n36.85,2.0,6\n", profile=profile)
    assert r.profile_name == "oven-export"
    np.testing.assert_allclose(r.series["temperature_K"], [300, 310], atol=1e-9)
    np.testing.assert_allclose(r.series["moment_A_m2"], [1.0 * EMU, 2.0 * EMU])
    assert all(not c.guessed for c in r.columns if c.target in ("temperature_K", "moment_A_m2"))
    # A saved profile may name a column a particular file lacks: a warning, not an error.
    r2 = read("Temp,Signal\n26.85,1.0\n36.85,2.0\n",
              profile=Profile("p2", {"Temp": "temperature_K", "Signal": "moment_A_m2", "Gone": "time_s"},
                              {"Temp": "°C", "Signal": "emu"}))
    assert any("'Gone'" in w for w in r2.warnings)


def test_profile_validation():
    with pytest.raises(InvalidValue):
        Profile(name="", mapping={})
    with pytest.raises(InvalidValue):
        Profile(name="x", mapping={"a": "not_a_target"})
    with pytest.raises(InvalidValue):
        Profile(name="x", mapping={}, shape="csv")
    with pytest.raises(InvalidValue):
        Profile.from_dict({"name": "x", "mapping": {}, "colour": "red"})
    with pytest.raises(InvalidValue, match="diffraction"):
        read("T (K),M (emu)\n300,1e-3\n310,1e-3\n", profile=Profile("d", {}, run_kind="diffraction"))


def test_as_profile_reuses_the_mapping():
    r = read("Temp,M (emu)\n300,1e-3\n310,1e-3\n", mapping={"Temp": "temperature_K"})
    p = r.as_profile("saved")
    assert p.mapping["Temp"] == "temperature_K" and p.run_kind == "thermomagnetic"
    r2 = read("Temp,M (emu)\n320,1e-3\n330,1e-3\n", profile=p)
    np.testing.assert_allclose(r2.series["temperature_K"], [320, 330])


def test_preview_shows_shape_mapping_and_rows_even_when_not_importable():
    text = "Field (Oe),Moment (emu)\n100,1e-3\n200,2e-3\n"
    out = preview_export(text.encode(), source_name="v.csv", run_kind="thermomagnetic", n=2)
    assert "shape: delimited" in out
    assert "Field (Oe)" in out and "mu0H_T" in out and "0.0001" in out
    assert "not importable yet" in out and "temperature_K" in out
    ok = read(text, "hysteresis").preview(1)
    assert "first 1 rows" in ok and "0.01" in ok


def test_column_map_is_frozen():
    c = ColumnMap("T (K)", "K", "temperature_K", 1.0)
    with pytest.raises(AttributeError):
        c.target = "x"  # type: ignore[misc]


def test_add_mass_normalised_moment_and_never_mutates():
    series = pd.DataFrame({"temperature_K": [300.0, 310.0], "moment_A_m2": [2.0e-6, 1.0e-6]})
    before = series.copy()
    out = add_mass_normalised(series, 12.5e-6)
    pd.testing.assert_frame_equal(series, before)
    np.testing.assert_allclose(out["moment_A_m2_per_kg"], [0.16, 0.08])
    back = add_mass_normalised(out[["moment_A_m2_per_kg"]], 12.5e-6)
    np.testing.assert_allclose(back["moment_A_m2"], [2.0e-6, 1.0e-6])
    assert add_mass_normalised(series, None).equals(series)
    for bad in (0.0, -1.0, float("nan"), "heavy"):
        with pytest.raises(InvalidValue):
            add_mass_normalised(series, bad)


def test_add_mass_normalised_susceptibility_and_heat_capacity():
    """chi_mass = chi_vol / density; c = C_mol / M with the molar mass of Fe7S8 from
    periodictable (IUPAC atomic weights)."""
    mass, volume = 4.6e-6, 1.0e-9          # density 4600 kg/m^3
    series = pd.DataFrame({"chi_vol": [4.6e-3], "chi_quad_vol": [4.6e-5],
                           "heat_capacity_J_per_mol_K": [400.0]})
    molar = periodictable.formula("Fe7S8").mass / 1000.0   # kg/mol
    out = add_mass_normalised(series, mass, volume_m3=volume, molar_mass_kg_per_mol=molar)
    np.testing.assert_allclose(out["chi_mass_m3_per_kg"], [1e-6])
    np.testing.assert_allclose(out["chi_quad_mass_m3_per_kg"], [1e-8])
    np.testing.assert_allclose(out["heat_capacity_J_per_kg_K"], [400.0 / 0.647395], rtol=1e-5)
