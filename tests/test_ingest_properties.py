"""Property-based round trips: random tables written in random shapes read back to 1e-9.

The expected factors are written here from the NBS/IEEE table "Units for Magnetic
Properties" (1 emu = 1e-3 A m^2; 1 Oe -> 1e-4 T as mu0*H; 1 G = 1e-4 T), the SI
prefixes and the Celsius definition T/K = t/°C + 273.15 (NIST SP 811, 2008), not
taken from the code under test.
"""

from __future__ import annotations

import io

import numpy as np
import openpyxl
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from magvault.errors import InputFileError
from magvault.ingest import read_export

# family -> [(header as written, factor, offset, target)]
SPELLINGS = {
    "temperature": [("Temperature (K)", 1.0, 0.0, "temperature_K"), ("T_K", 1.0, 0.0, "temperature_K"),
                    ("Temp (°C)", 1.0, 273.15, "temperature_K"), ("T [degC]", 1.0, 273.15, "temperature_K"),
                    ("Temp_C", 1.0, 273.15, "temperature_K"), ("Temperature/K", 1.0, 0.0, "temperature_K")],
    "moment": [("Moment (emu)", 1e-3, 0.0, "moment_A_m2"), ("M [emu]", 1e-3, 0.0, "moment_A_m2"),
               ("M_emu", 1e-3, 0.0, "moment_A_m2"), ("Moment (A m2)", 1.0, 0.0, "moment_A_m2"),
               ("M (Am²)", 1.0, 0.0, "moment_A_m2"), ("m (A·m²)", 1.0, 0.0, "moment_A_m2"),
               ("sigma (emu/g)", 1.0, 0.0, "moment_A_m2_per_kg"), ("M (Am2/kg)", 1.0, 0.0, "moment_A_m2_per_kg")],
    "field": [("Field (Oe)", 1e-4, 0.0, "mu0H_T"), ("field/Oe", 1e-4, 0.0, "mu0H_T"),
              ("H (kOe)", 0.1, 0.0, "mu0H_T"), ("B (mT)", 1e-3, 0.0, "mu0H_T"),
              ("mu0H (T)", 1.0, 0.0, "mu0H_T"), ("B (G)", 1e-4, 0.0, "mu0H_T")],
    "time": [("Time (s)", 1.0, 0.0, "time_s"), ("time/min", 60.0, 0.0, "time_s"), ("t (h)", 3600.0, 0.0, "time_s")],
    "heat_capacity": [("Cp (J/mol/K)", 1.0, 0.0, "heat_capacity_J_per_mol_K"),
                      ("Cp (J mol-1 K-1)", 1.0, 0.0, "heat_capacity_J_per_mol_K"),
                      ("C_p (J/(g K))", 1000.0, 0.0, "heat_capacity_J_per_kg_K")],
    "two_theta": [("2theta (deg)", 1.0, 0.0, "two_theta_deg"), ("2θ (°)", 1.0, 0.0, "two_theta_deg"),
                  ("2Th", 1.0, 0.0, "two_theta_deg")],
    "intensity": [("intensity (counts)", 1.0, 0.0, "intensity_counts"), ("I (counts)", 1.0, 0.0, "intensity_counts"),
                  ("Counts", 1.0, 0.0, "intensity_counts")],
}
KINDS = {
    "thermomagnetic": (["temperature", "moment"], ["field", "time"]),
    "hysteresis": (["field", "moment"], ["temperature"]),
    "calorimetry": (["temperature", "heat_capacity"], ["time"]),
    "diffraction": (["two_theta", "intensity"], []),
}
SHAPE_NAMES = ("delimited", "sectioned", "commented", "blocks", "spreadsheet")

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False,
                   allow_subnormal=False).map(lambda x: 0.0 if abs(x) < 1e-30 else x)


@st.composite
def tables(draw):
    kind = draw(st.sampled_from(sorted(KINDS)))
    required, optional = KINDS[kind]
    families = required + [f for f in optional if draw(st.booleans())]
    families = draw(st.permutations(families))
    columns = [draw(st.sampled_from(SPELLINGS[f])) for f in families]
    n_rows = draw(st.integers(min_value=1, max_value=25))
    values = np.array([[draw(finite) for _ in columns] for _ in range(n_rows)], dtype=np.float64)
    shape = draw(st.sampled_from(SHAPE_NAMES))
    sep = draw(st.sampled_from([",", ";", "\t", "  "]))
    if shape == "commented":
        sep = draw(st.sampled_from(["  ", ", "]))
    decimal = "." if sep.strip() == "," else draw(st.sampled_from([".", ","]))
    comment = draw(st.sampled_from(["#", "!", ";"]))
    n_blocks = draw(st.integers(min_value=1, max_value=3))
    block_c = [draw(st.floats(min_value=-200.0, max_value=700.0, allow_nan=False)) for _ in range(n_blocks)]
    return kind, columns, values, shape, sep, decimal, comment, block_c


def fmt(x, decimal: str) -> str:
    if isinstance(x, str):  # a planted bad cell
        return x
    s = repr(float(x))
    return s.replace(".", ",") if decimal == "," else s


def render(kind, columns, values, shape, sep, decimal, comment, block_c):
    headers = [c[0] for c in columns]
    rows = [sep.join(fmt(v, decimal) for v in row) for row in values]
    header = sep.join(headers)
    if shape == "delimited":
        return "\n".join([header, *rows]) + "\n", None
    if shape == "sectioned":
        marker = "[data]" if len(rows) % 2 else "--- measurements ---"
        meta = ["Invented run for a property test", "mass = 12.5 mg", "operator: technician", ""]
        return "\n".join([*meta, marker, header, *rows]) + "\n", None
    if shape == "commented":
        meta = [f"{comment} wavelength: 1.54059292 A", f"{comment} note = generated"]
        return "\n".join([*meta, f"{comment} {header}", *rows]) + "\n", None
    if shape == "blocks":
        parts = np.array_split(np.arange(len(rows)), len(block_c))
        out = ["atmosphere = argon", ""]
        expected_block = np.empty(len(rows))
        for k, idx in enumerate(parts):
            if len(idx) == 0:
                continue
            out.append(f"[block temperature = {block_c[k]!r} °C]")
            out.append(header)
            out.extend(rows[i] for i in idx)
            out.append("")
            expected_block[idx] = block_c[k] + 273.15
        return "\n".join(out), expected_block
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Invented run for a property test"])
    ws.append(headers)
    for row in values:
        ws.append([v if isinstance(v, str) else float(v) for v in row])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue(), None


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables())
def test_random_tables_round_trip_in_every_shape(table):
    kind, columns, values, shape, sep, decimal, comment, block_c = table
    data, expected_block = render(*table)
    data = data.encode("utf-8") if isinstance(data, str) else data
    overrides = {"wavelength_m": 1.5406e-10} if kind == "diffraction" else None
    parsed = read_export(data, source_name=f"random.{shape}", run_kind=kind, overrides=overrides)
    assert parsed.shape == shape
    for j, (header, factor, offset, target) in enumerate(columns):
        expected = values[:, j] * factor + offset
        got = parsed.series[target].to_numpy()
        scale = np.max(np.abs(expected)) if len(expected) else 1.0
        np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12 * max(scale, 1.0),
                                   err_msg=f"{header} in {shape}")
    if expected_block is not None:
        np.testing.assert_allclose(parsed.series["block_temperature_K"].to_numpy(), expected_block,
                                   rtol=1e-9, atol=1e-9)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables(), st.data())
def test_a_bad_cell_is_reported_at_its_line_and_column(table, data):
    """Plant one non-numeric cell anywhere; the error names the line it was written on
    (1-based, as a text editor counts; the sheet row for a workbook) and its column."""
    kind, columns, values, shape, sep, decimal, comment, block_c = table
    r = data.draw(st.integers(min_value=0, max_value=len(values) - 1), label="row")
    j = data.draw(st.integers(min_value=0, max_value=len(columns) - 1), label="column")
    bad = "oops7"
    marked = values.astype(object)
    marked[r, j] = bad
    rendered, _ = render(kind, columns, marked, shape, sep, decimal, comment, block_c)
    if isinstance(rendered, str):
        lines = rendered.split("\n")
        expected_line = next(k for k, ln in enumerate(lines) if bad in ln) + 1
        payload = rendered.encode("utf-8")
    else:
        expected_line = r + 3          # title row, header row, then the rows
        payload = rendered
    overrides = {"wavelength_m": 1.5406e-10} if kind == "diffraction" else None
    try:
        read_export(payload, source_name="bad." + shape, run_kind=kind, overrides=overrides)
    except InputFileError as exc:
        assert exc.line == expected_line, (exc.message, expected_line)
        assert exc.column == columns[j][0]
        assert bad in exc.message
    else:
        raise AssertionError("a non-numeric cell was accepted")

