"""Run conditions: from file metadata and from ``KEY=VALUE`` overrides, in SI.

Canonical keys (DESIGN.md section 5): ``field_T`` (mu0*H), ``sweep_rate_K_per_s``,
``temperature_K`` (isothermal runs), ``frequency_Hz``, ``wavelength_m``,
``atmosphere``, ``operator``, ``started`` (ISO 8601, UTC, ``...Z``), ``mass_kg``.

X-ray wavelengths may be given by line name.  Cu K-alpha1 = 1.54059292 A is the
value of International Tables for Crystallography Vol. C (2006), Table 4.2.2.6;
the other lines are the values usually tabulated beside it (recalled, and checked
in the tests against the weighted K-alpha means that periodictable carries);
``K-alpha`` without a number is the weighted mean (2 K-alpha1 + K-alpha2)/3.
"""

from __future__ import annotations

import datetime as _dt
import math
import re

from ..errors import InvalidValue
from .canonical import CONDITION_KEYS
from .headers import split_header
from .spelling import si_conversion

__all__ = ["XRAY_LINES_ANGSTROM", "xray_wavelength_m", "parse_overrides", "conditions_from_metadata",
           "parse_started", "SHORT_KEYS"]

# Angstrom.  Cu K-alpha1: ITC Vol. C (2006) Table 4.2.2.6; the rest as usually tabulated.
_K_ALPHA = {
    "cu": (1.54059292, 1.54442740),
    "co": (1.7889960, 1.7928350),
    "mo": (0.70931715, 0.713607),
    "fe": (1.9360410, 1.9399730),
    "cr": (2.2897260, 2.2936510),
    "ag": (0.5594075, 0.563798),
}
XRAY_LINES_ANGSTROM: dict[str, float] = {}
for _el, (_a1, _a2) in _K_ALPHA.items():
    XRAY_LINES_ANGSTROM[f"{_el} k-alpha1"] = _a1
    XRAY_LINES_ANGSTROM[f"{_el} k-alpha2"] = _a2
    XRAY_LINES_ANGSTROM[f"{_el} k-alpha"] = (2.0 * _a1 + _a2) / 3.0

_LINE = re.compile(r"(?P<el>cu|co|mo|fe|cr|ag)\s*[-_]?\s*k\s*[-_]?\s*(?:alpha|α|a)\s*(?P<n>[12])?(?![a-z])",
                   re.IGNORECASE)


def xray_wavelength_m(text: str) -> float | None:
    """Wavelength in metres of an X-ray line name such as 'Cu K-alpha1', 'CuKa1', 'Mo Kα'; else None."""
    m = _LINE.search(str(text).strip())
    if not m:
        return None
    key = f"{m.group('el').lower()} k-alpha{m.group('n') or ''}"
    return XRAY_LINES_ANGSTROM[key] * 1e-10


# Short keys (and spellings seen in file metadata) -> (canonical key, family for units).
SHORT_KEYS: dict[str, str] = {
    "field": "field_T", "appliedfield": "field_T", "magneticfield": "field_T", "h": "field_T",
    "b": "field_T", "mu0h": "field_T", "measuringfield": "field_T", "fieldstrength": "field_T",
    "sweeprate": "sweep_rate_K_per_s", "rate": "sweep_rate_K_per_s", "ramprate": "sweep_rate_K_per_s",
    "heatingrate": "sweep_rate_K_per_s", "temperaturerate": "sweep_rate_K_per_s",
    "ramp": "sweep_rate_K_per_s", "sweep": "sweep_rate_K_per_s",
    "temperature": "temperature_K", "temp": "temperature_K", "t": "temperature_K",
    "sampletemperature": "temperature_K", "measurementtemperature": "temperature_K",
    "frequency": "frequency_Hz", "freq": "frequency_Hz", "f": "frequency_Hz",
    "wavelength": "wavelength_m", "lambda": "wavelength_m", "λ": "wavelength_m",
    "xraywavelength": "wavelength_m", "radiation": "wavelength_m", "xrayline": "wavelength_m",
    "anode": "wavelength_m", "tube": "wavelength_m", "source": "wavelength_m", "line": "wavelength_m",
    "atmosphere": "atmosphere", "gas": "atmosphere", "environment": "atmosphere",
    "purgegas": "atmosphere", "purge": "atmosphere",
    "operator": "operator", "user": "operator", "measuredby": "operator", "analyst": "operator",
    "operatorrole": "operator",
    "started": "started", "start": "started", "starttime": "started", "date": "started",
    "datetime": "started", "timestamp": "started", "measured": "started", "measurementdate": "started",
    "startedat": "started",
    "mass": "mass_kg", "samplemass": "mass_kg", "specimenmass": "mass_kg", "weight": "mass_kg",
    "sampleweight": "mass_kg", "specimenweight": "mass_kg",
}
_FAMILY = {"field_T": "field", "sweep_rate_K_per_s": "sweep_rate", "temperature_K": "temperature",
           "frequency_Hz": "frequency", "wavelength_m": "wavelength", "mass_kg": "mass"}
_QUANTITY = {"field_T": "field", "sweep_rate_K_per_s": "temperature_rate", "temperature_K": "temperature",
             "frequency_Hz": "frequency", "wavelength_m": "length", "mass_kg": "mass"}
_EXAMPLE = {"field_T": "field=0.1 T", "sweep_rate_K_per_s": "sweep_rate=2 K/min",
            "temperature_K": "temperature=300 K", "frequency_Hz": "frequency=976 Hz",
            "wavelength_m": "wavelength=1.5406 A or wavelength=Cu K-alpha1", "mass_kg": "mass=12 mg",
            "atmosphere": "atmosphere=argon", "operator": "operator=technician",
            "started": "started=2026-03-04T10:15:00Z"}
_NUMBER_UNIT = re.compile(
    r"^\s*(?P<num>[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?)"
    r"(?:\s*(?:\+/-|\+-|±)\s*[-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?)?\s*(?P<unit>.*?)\s*$")


def _key_norm(key: str) -> str:
    return re.sub(r"[\s_\-.]", "", key.strip().lower())


def canonical_key(key: str) -> str | None:
    """Canonical condition key for a canonical or short key (any case), else None."""
    k = key.strip()
    if k in CONDITION_KEYS:
        return k
    for ck in CONDITION_KEYS:
        if ck.lower() == k.lower():
            return ck
    return SHORT_KEYS.get(_key_norm(k))


def _number(text: str) -> float:
    t = text.strip()
    if "," in t and "." not in t:
        t = t.replace(",", ".")
    return float(t)


def parse_started(text: str) -> tuple[str, bool]:
    """ISO 8601 date/time -> ('YYYY-MM-DDTHH:MM:SSZ' in UTC, had_time_zone).

    A time without a zone is taken as UTC (the caller is told so it can warn).

    Raises
    ------
    ValueError
        Not an ISO 8601 date or date-time.
    """
    t = str(text).strip()
    if re.fullmatch(r"\d{4}-\d{2}-\d{2}", t):
        d = _dt.date.fromisoformat(t)
        return f"{d.isoformat()}T00:00:00Z", False
    if not re.match(r"^\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}", t):
        raise ValueError(f"not an ISO 8601 date-time: {text!r}")
    dt = _dt.datetime.fromisoformat(t.replace("z", "Z"))
    had_zone = dt.tzinfo is not None
    if had_zone:
        dt = dt.astimezone(_dt.timezone.utc)
    dt = dt.replace(tzinfo=None)
    stamp = dt.isoformat(timespec="microseconds" if dt.microsecond else "seconds")
    return stamp + "Z", had_zone


def _value(ckey: str, text: str, *, field: str, allow_bare: bool) -> object:
    """Parse one value for a canonical key; raises ValueError with a short reason."""
    typ = CONDITION_KEYS[ckey]
    text = str(text).strip()
    if not text:
        raise ValueError("empty value")
    if typ is str:
        if ckey == "started":
            return parse_started(text)[0]
        return text
    if ckey == "wavelength_m":
        line = xray_wavelength_m(text)
        m = _NUMBER_UNIT.match(text)
        if line is not None and not (m and m.group("unit") and si_unit_ok(m.group("unit"), ckey)):
            return line
    m = _NUMBER_UNIT.match(text)
    if not m:
        raise ValueError(f"{text!r} is not a number with a unit")
    number = _number(m.group("num"))
    unit = m.group("unit").strip()
    if not unit:
        if not allow_bare:
            raise ValueError(f"{text!r} has no unit")
        return number
    conv = si_conversion(unit, field, _FAMILY[ckey])
    if conv.quantity != _QUANTITY[ckey]:
        raise ValueError(f"unit {unit!r} is a {conv.quantity.replace('_', ' ')}, not a "
                         f"{_QUANTITY[ckey].replace('_', ' ')}")
    return number * conv.factor + conv.offset


def si_unit_ok(unit: str, ckey: str) -> bool:
    try:
        return si_conversion(unit, ckey, _FAMILY[ckey]).quantity == _QUANTITY[ckey]
    except InvalidValue:
        return False


def _check_range(ckey: str, value: object, field: str) -> None:
    if not isinstance(value, float):
        return
    if not math.isfinite(value):
        raise InvalidValue(f"{field}: not a finite number", field=field)
    if ckey in ("mass_kg", "frequency_Hz", "wavelength_m") and value <= 0:
        raise InvalidValue(f"{field}: must be greater than zero", field=field)
    if ckey == "temperature_K" and value < 0:
        raise InvalidValue(f"{field}: {value:g} K is below absolute zero", field=field)
    if ckey == "wavelength_m" and not (1e-12 <= value <= 1e-8):
        raise InvalidValue(f"{field}: {value:g} m is not an X-ray wavelength (expected about 1e-10 m; "
                           "write e.g. wavelength=1.5406 A)", field=field)


def parse_overrides(items: list[str]) -> dict[str, object]:
    """Parse ``KEY=VALUE`` overrides of run conditions.

    ``KEY`` is a canonical key with an SI number (``wavelength_m=1.5406e-10``) or a
    short key with a unit or a name (``wavelength=1.5406 A``, ``wavelength=Cu K-alpha1``,
    ``field=0.1 T``, ``sweep_rate=2 K/min``, ``mass=12 mg``, ``temperature=300 K``,
    ``atmosphere=argon``, ``operator=...``, ``started=2026-03-04T10:15:00Z``).

    Returns
    -------
    dict
        Canonical key -> float (SI) or str.

    Raises
    ------
    InvalidValue
        One line naming the key and what was expected.
    """
    out: dict[str, object] = {}
    for item in items or []:
        if not isinstance(item, str) or "=" not in item:
            raise InvalidValue(f"--set: {item!r} is not KEY=VALUE; e.g. 'wavelength=Cu K-alpha1'",
                               field="set")
        key, text = item.split("=", 1)
        key = key.strip()
        ckey = canonical_key(key)
        if ckey is None:
            raise InvalidValue(f"--set {key}: unknown key; expected one of "
                               + ", ".join(CONDITION_KEYS) + " or the short forms field, sweep_rate, "
                               "temperature, frequency, wavelength, mass", field=key)
        is_canonical = key in CONDITION_KEYS or key.lower() == ckey.lower()
        try:
            value = _value(ckey, text, field=key, allow_bare=is_canonical)
        except (ValueError, InvalidValue) as exc:
            reason = exc.message if isinstance(exc, InvalidValue) else str(exc)
            raise InvalidValue(f"--set {key}: {reason}; expected e.g. {_EXAMPLE[ckey]}"
                               + (f" or {ckey}=<SI number>" if CONDITION_KEYS[ckey] is float else ""),
                               field=key) from None
        if isinstance(value, (int, float)):
            value = float(value)
        _check_range(ckey, value, f"--set {key}")
        out[ckey] = value
    return out


def conditions_from_metadata(metadata: dict[str, str]) -> tuple[dict[str, object], list[str]]:
    """Canonical conditions from raw file metadata; unreadable values become warnings."""
    out: dict[str, object] = {}
    warnings: list[str] = []
    date_part = time_part = None
    for raw_key, text in metadata.items():
        name, key_unit = split_header(re.sub(r"\s*\(\d+\)$", "", raw_key))
        norm = _key_norm(name)
        if norm == "time" and re.match(r"^\d{1,2}:\d{2}", str(text).strip()):
            time_part = str(text).strip()
            continue
        ckey = canonical_key(name)
        if ckey is None or ckey in out:
            continue
        value_text = str(text).strip()
        if key_unit and CONDITION_KEYS[ckey] is float and _NUMBER_UNIT.match(value_text) and \
                not _NUMBER_UNIT.match(value_text).group("unit"):
            value_text = f"{value_text} {key_unit}"
        try:
            if ckey == "started":
                value, had_zone = parse_started(value_text)
                if re.fullmatch(r"\d{4}-\d{2}-\d{2}", value_text):
                    date_part = value_text
                elif not had_zone:
                    warnings.append(f"metadata {raw_key!r}: no time zone in {value_text!r}; taken as UTC")
            else:
                value = _value(ckey, value_text, field=raw_key, allow_bare=False)
                if isinstance(value, (int, float)):
                    value = float(value)
                    _check_range(ckey, value, f"metadata {raw_key!r}")
        except (ValueError, InvalidValue) as exc:
            reason = exc.message if isinstance(exc, InvalidValue) else str(exc)
            if ckey == "wavelength_m" and _key_norm(name) in ("anode", "tube", "source", "line"):
                continue  # e.g. 'source: sealed tube' is not a wavelength; nothing to say
            warnings.append(f"metadata {raw_key!r} = {text!r} not used as {ckey}: {reason}")
            continue
        out[ckey] = value
    if date_part and time_part and "started" in out:
        try:
            value, had_zone = parse_started(f"{date_part}T{time_part}")
            out["started"] = value
            if not had_zone:
                warnings.append(f"metadata date/time {date_part} {time_part}: no time zone; taken as UTC")
        except ValueError:
            pass
    return out, warnings
