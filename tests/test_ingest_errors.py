"""Errors a user can act on: each names the file, the line (1-based) and the column."""

from __future__ import annotations

import io

import numpy as np
import openpyxl
import pytest

from magvault.errors import InputFileError, InvalidValue
from magvault.ingest import decode_text, read_export
from magvault.ingest.sniff import Delimiting
from magvault.ingest.table import TableSpec, parse_table


def read(text, kind="thermomagnetic", name="bad.csv", **kw):
    data = text.encode("utf-8") if isinstance(text, str) else text
    return read_export(data, source_name=name, run_kind=kind, **kw)


def test_non_numeric_cell_names_line_and_column():
    with pytest.raises(InputFileError) as info:
        read("Temperature (K),Moment (emu)\n300,1e-3\n310,1.1e-3\n320,abc\n")
    e = info.value
    assert (e.path, e.line, e.column) == ("bad.csv", 4, "Moment (emu)")
    assert "expected a number" in e.message and "'abc'" in e.message
    assert e.message.startswith("bad.csv, line 4, column 'Moment (emu)'")


def test_decimal_comma_in_a_decimal_point_table_gets_a_hint():
    with pytest.raises(InputFileError) as info:
        read("T (K);M (emu)\n300.5;1.5e-3\n310,5;1.4e-3\n")
    assert info.value.line == 3 and "decimal comma" in info.value.message


def test_ragged_rows_short_and_long():
    with pytest.raises(InputFileError) as info:
        read("T (K),M (emu),H (Oe)\n300,1e-3,10\n310,1e-3\n")
    assert info.value.line == 3 and "2 fields" in info.value.message and "has 3" in info.value.message
    with pytest.raises(InputFileError) as info:
        read("T (K),M (emu)\n300,1e-3\n310,1e-3\n320,1e-3,7\n")
    assert info.value.line == 4 and "3 fields" in info.value.message


def test_line_numbers_count_blank_lines_and_metadata():
    text = "mass = 1 mg\n\n[data]\nT (K),M (emu)\n300,1e-3\n\n310,1e-3\n320,x\n"
    with pytest.raises(InputFileError) as info:
        read(text)
    assert info.value.line == 8 and info.value.column == "M (emu)"


def test_commented_rows_between_comments_report_their_own_line():
    text = "# T (K) M (emu)\n300 1e-3\n# a remark\n310 1e-3\n# another\n320 oops\n"
    with pytest.raises(InputFileError) as info:
        read(text)
    assert info.value.line == 6 and info.value.column == "M (emu)"


def test_blocks_error_line_inside_second_block():
    text = ("[block temperature = 300 K]\nf (kHz) amplitude\n1 2\n3 4\n\n"
            "[block temperature = 310 K]\nf (kHz) amplitude\n5 6\n7 eight\n")
    with pytest.raises(InputFileError) as info:
        read(text, "resonance")
    assert info.value.line == 9 and info.value.column == "amplitude"


def test_blocks_with_different_columns_are_refused():
    text = ("[block temperature = 300 K]\nf (kHz) amplitude\n1 2\n\n"
            "[block temperature = 310 K]\nf (kHz) phase (deg)\n5 6\n")
    with pytest.raises(InputFileError) as info:
        read(text, "resonance")
    assert info.value.line == 6 and "differ" in info.value.message


def test_block_header_without_unit_is_refused():
    with pytest.raises(InputFileError) as info:
        read("[block temperature = 300]\nf (kHz) amplitude\n1 2\n", "resonance")
    assert info.value.line == 1 and "no unit" in info.value.message


def test_spreadsheet_bad_cell_names_row_and_cell():
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "loop"
    for row in (["Title row"], ["Field (Oe)", "Moment (emu)"], [-100, -1e-3], [100, "n.a.!"]):
        ws.append(row)
    buf = io.BytesIO()
    wb.save(buf)
    with pytest.raises(InputFileError) as info:
        read(buf.getvalue(), "hysteresis", name="loop.xlsx")
    e = info.value
    assert (e.line, e.column) == (4, "Moment (emu)") and "cell B4" in e.message


def test_missing_required_column_names_what_is_there_and_what_is_needed():
    with pytest.raises(InputFileError) as info:
        read("Field (Oe),Moment (emu)\n0,1e-3\n10,2e-3\n", "thermomagnetic")
    m = info.value.message
    assert "needs temperature_K" in m and "mu0H_T (from 'Field (Oe)')" in m and "--map" in m


def test_unit_missing_on_a_column_that_needs_one():
    with pytest.raises(InputFileError) as info:
        read("Temp,Moment (emu)\n300,1e-3\n310,1e-3\n")
    assert info.value.column == "Temp" and "Temp=temperature_K" in info.value.message


def test_ambiguous_unit_in_a_column_is_refused_with_candidates():
    with pytest.raises(InputFileError) as info:
        read("T (K),chi (emu)\n300,1e-3\n310,1e-3\n", "susceptibility")
    assert info.value.column == "chi (emu)" and "emu/(cm3 Oe)" in info.value.message


def test_mapped_unit_that_does_not_fit_the_target():
    with pytest.raises(InputFileError) as info:
        read("A (emu),B (K)\n1e-3,300\n2e-3,310\n", mapping={"A": "temperature_K"})
    assert info.value.column == "A (emu)" and "temperature" in info.value.message


def test_text_column_mapped_to_a_number():
    with pytest.raises(InputFileError) as info:
        read("T (K),M (emu),Note\n300,1e-3,first\n310,1e-3,second\n", mapping={"Note": "time_s"})
    assert (info.value.line, info.value.column) == (2, "Note")


def test_diffraction_without_wavelength_is_refused_with_advice():
    with pytest.raises(InputFileError) as info:
        read("2theta (deg),I (counts)\n40,10\n40.02,12\n", "diffraction")
    assert "wavelength=Cu K-alpha1" in info.value.message
    r = read("2theta (deg),I (counts)\n40,10\n40.02,12\n", "diffraction",
             overrides={"wavelength_m": 1.5406e-10})
    assert r.conditions["wavelength_m"] == 1.5406e-10


def test_empty_binary_and_undecodable_inputs():
    with pytest.raises(InputFileError, match="empty"):
        read(b"")
    with pytest.raises(InputFileError, match="empty"):
        read(b"\n \n\t\n")
    with pytest.raises(InputFileError, match="binary"):
        read(b"T (K),M\x00(emu)\n\x00\x01\x02\x03")
    with pytest.raises(InputFileError, match="binary"):
        read(bytes(range(1, 32)) * 20)
    with pytest.raises(InputFileError, match="PDF"):
        read(b"%PDF-1.4 ...")
    with pytest.raises(InputFileError) as info:
        read("T (K),M (emu)\n300,1e-3\n\u00b0 310,1e-3\n".encode("latin-1"), encoding="utf-8")
    assert info.value.line == 3


def test_decode_text_honours_bom_before_binary_check():
    text, enc = decode_text("\ufeffT (K)\n1\n".encode("utf-16-le"), "a.txt")
    assert (text, enc) == ("T (K)\n1\n", "utf-16-le")
    text, enc = decode_text("Temp (°C)\n1\n".encode("latin-1"), "a.txt")
    assert text == "Temp (°C)\n1\n" and enc == "latin-1"
    with pytest.raises(InputFileError, match="xlsx"):
        decode_text(b"PK\x03\x04rest", "a.xlsx")


def test_zip_that_is_not_a_workbook():
    with pytest.raises(InputFileError, match="not a readable .xlsx"):
        read(b"PK\x03\x04 not really a zip", name="x.xlsx")


def test_spreadsheet_shape_forced_on_text():
    with pytest.raises(InputFileError, match="ZIP signature"):
        read("T (K),M (emu)\n1,2\n", shape="spreadsheet")


@pytest.mark.parametrize("kwargs, field_word", [
    ({"run_kind": "magnetism"}, "run kind"),
    ({"run_kind": "thermomagnetic", "shape": "csv"}, "shape"),
    ({"run_kind": "thermomagnetic", "mapping": {"T (K)": "temp_K"}}, "temp_K"),
    ({"run_kind": "thermomagnetic", "mapping": {"Tmp": "temperature_K"}}, "Tmp"),
    ({"run_kind": "thermomagnetic", "encoding": "no-such-codec"}, "encoding"),
])
def test_bad_arguments_raise_invalid_value(kwargs, field_word):
    with pytest.raises(InvalidValue) as info:
        read_export(b"T (K),M (emu)\n300,1e-3\n310,1e-3\n", source_name="a.csv", **kwargs)
    assert not isinstance(info.value, InputFileError)
    assert field_word in info.value.message


def test_parallel_ranges_report_the_same_lines_as_one_range():
    """A large table is cut into ranges parsed on threads; values and line numbers must
    match a single-range parse, and an error in a late range names its true line."""
    rng = np.random.default_rng(7)
    n = 20_000
    values = rng.normal(size=(n, 3))
    body = "".join(f"{a!r},{b!r},{c!r}\n" for a, b, c in values.tolist())
    raw = ("h1,h2,h3\n" + body).encode()
    spec = TableSpec(Delimiting(",", ".", 3), ("h1", "h2", "h3"), header_line=1, source_name="big.csv")
    start = raw.index(b"\n") + 1
    one = parse_table(raw, spec, start=start, first_line=2, parallel_min_bytes=10 ** 12)
    many = parse_table(raw, spec, start=start, first_line=2, parallel_min_bytes=10_000, workers=3)
    for a, b in zip(one.columns, many.columns):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(one.row_lines, many.row_lines)
    np.testing.assert_array_equal(many.columns[1], values[:, 1])
    lines = raw.split(b"\n")
    lines[15_001] = b"1.0,bad,2.0"        # file line 15002
    lines[9_000] = b""                     # a blank line earlier: still counted as a line
    bad = b"\n".join(lines)
    with pytest.raises(InputFileError) as info:
        parse_table(bad, spec, start=start, first_line=2, parallel_min_bytes=10_000, workers=3)
    assert (info.value.line, info.value.column) == (15_002, "h2")
