"""Run conditions from file metadata and from KEY=VALUE overrides."""

from __future__ import annotations

import math

import periodictable
import pytest

from magvault.errors import InvalidValue
from magvault.ingest import XRAY_LINES_ANGSTROM, parse_overrides, read_export, xray_wavelength_m
from magvault.ingest.conditions import conditions_from_metadata, parse_started


def test_cu_k_alpha1_from_international_tables():
    """International Tables for Crystallography Vol. C (2006), Table 4.2.2.6:
    Cu K-alpha1 = 1.54059292(45) A."""
    for spelling in ("Cu K-alpha1", "CuKa1", "Cu Kα1", "cu k alpha 1", "Cu-Kalpha1"):
        assert xray_wavelength_m(spelling) == pytest.approx(1.54059292e-10, rel=1e-12)


@pytest.mark.parametrize("element", ["Cu", "Co", "Mo"])
def test_weighted_k_alpha_means_agree_with_periodictable(element):
    """periodictable carries K-alpha = (2 K-alpha1 + K-alpha2)/3 to four or five figures
    (its xsf module); our weighted means must round to the same value."""
    ours = XRAY_LINES_ANGSTROM[f"{element.lower()} k-alpha"]
    theirs = getattr(periodictable, element).K_alpha
    assert ours == pytest.approx(theirs, abs=1e-4)
    assert xray_wavelength_m(f"{element} K-alpha") == pytest.approx(ours * 1e-10, rel=1e-12)


def test_co_and_mo_k_alpha1_values():
    """Co K-alpha1 ~ 1.78900 A and Mo K-alpha1 ~ 0.70932 A (from memory; tolerance 5e-5 A,
    which also covers the older wavelength scale)."""
    assert xray_wavelength_m("Co K-alpha1") == pytest.approx(1.78900e-10, abs=5e-15)
    assert xray_wavelength_m("Mo K-alpha1") == pytest.approx(0.70932e-10, abs=5e-15)
    assert xray_wavelength_m("a sealed tube") is None


def test_overrides_canonical_and_short_forms():
    got = parse_overrides([
        "wavelength=1.5406 A", "field=0.1 T", "sweep_rate=2 K/min", "mass=12 mg",
        "temperature=300 K", "atmosphere=argon", "frequency=976 Hz", "operator=lab technician",
        "started=2026-03-04T11:15:00+01:00",
    ])
    assert got["wavelength_m"] == pytest.approx(1.5406e-10, rel=1e-12)
    assert got["field_T"] == pytest.approx(0.1)
    assert got["sweep_rate_K_per_s"] == pytest.approx(2 / 60, rel=1e-12)
    assert got["mass_kg"] == pytest.approx(12e-6, rel=1e-12)
    assert got["temperature_K"] == 300.0 and got["frequency_Hz"] == 976.0
    assert got["atmosphere"] == "argon" and got["operator"] == "lab technician"
    assert got["started"] == "2026-03-04T10:15:00Z"
    assert parse_overrides(["wavelength_m=1.5406e-10"]) == {"wavelength_m": 1.5406e-10}
    assert parse_overrides(["wavelength=Cu K-alpha1"])["wavelength_m"] == pytest.approx(1.54059292e-10)
    # A field in oersted is mu0*H = 1e-4 T per Oe (NBS/IEEE table).
    assert parse_overrides(["field=5000 Oe"])["field_T"] == pytest.approx(0.5, rel=1e-12)
    # Celsius sweep rates are kelvin per unit time.
    assert parse_overrides(["sweep_rate=3 °C/min"])["sweep_rate_K_per_s"] == pytest.approx(0.05)
    assert parse_overrides(["temperature=26.85 °C"])["temperature_K"] == pytest.approx(300.0)


@pytest.mark.parametrize("item, key", [
    ("wavelength", "wavelength"),          # no '='
    ("colour=blue", "colour"),             # unknown key
    ("mass=12", "mass"),                   # short key needs a unit
    ("field=0.1 K", "field"),              # wrong dimension
    ("wavelength_m=1.5406", "wavelength_m"),  # not an X-ray wavelength in metres
    ("mass_kg=-1", "mass_kg"),
    ("started=yesterday", "started"),
    ("temperature=", "temperature"),
])
def test_bad_overrides_name_the_key(item, key):
    with pytest.raises(InvalidValue) as info:
        parse_overrides([item])
    assert key in info.value.message
    assert "\n" not in info.value.message


def test_metadata_keys_with_units_decimal_commas_and_date_time():
    meta = {"Sample mass [mg]": "12,5", "Applied field": "1 kOe", "Date": "2026-03-04",
            "Time": "10:15:00", "Ramp rate": "0.5 K/s", "Radiation": "Mo K-alpha1",
            "source": "sealed tube"}
    cond, warnings = conditions_from_metadata(meta)
    assert cond["mass_kg"] == pytest.approx(12.5e-6)
    assert cond["field_T"] == pytest.approx(0.1)
    assert cond["started"] == "2026-03-04T10:15:00Z"
    assert cond["sweep_rate_K_per_s"] == pytest.approx(0.5)
    assert cond["wavelength_m"] == pytest.approx(xray_wavelength_m("Mo K-alpha1"))
    assert any("UTC" in w for w in warnings)


def test_unreadable_metadata_becomes_a_warning():
    cond, warnings = conditions_from_metadata({"mass": "heavy", "wavelength": "1.54"})
    assert cond == {}
    assert any("'mass'" in w for w in warnings) and any("'wavelength'" in w for w in warnings)


def test_parse_started_iso_8601_to_utc():
    assert parse_started("2026-03-04T10:15:00Z") == ("2026-03-04T10:15:00Z", True)
    assert parse_started("2026-03-04 12:15:00+02:00") == ("2026-03-04T10:15:00Z", True)
    assert parse_started("2026-03-04T10:15") == ("2026-03-04T10:15:00Z", False)
    with pytest.raises(ValueError):
        parse_started("04/03/2026")


def test_overrides_win_over_file_metadata():
    text = "mass = 10 mg\nfield = 1000 Oe\n[data]\nT (K),M (emu)\n300,1e-3\n310,1e-3\n"
    r = read_export(text.encode(), source_name="m.txt", run_kind="thermomagnetic",
                    overrides=parse_overrides(["mass=11 mg"]))
    assert r.conditions["mass_kg"] == pytest.approx(11e-6)
    assert r.conditions["field_T"] == pytest.approx(0.1)
    assert math.isclose(r.conditions["field_T"], 1000 * 1e-4)
