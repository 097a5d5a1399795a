"""residuals.csv (DESIGN.md §5): exact round trip and errors for people."""

import csv
import os

import numpy as np
import pytest

from timingkit.formats.errors import InputError
from timingkit.outputs import residual_table
from timingkit.outputs.residual_table import CORE_COLUMNS, ResidualTable, read_csv

# Invented demo data (invented sites), not observations.
MJD_TEXT = ["58849.000142889802083", "58851.997000000000000", "58900.5",
            "59001.123456789012345"]


def make_table():
    return ResidualTable.from_columns(
        MJD_TEXT,
        ["desert-dish", "lake-array", "desert-dish", "lake-array"],
        [1400.0, 820.0, np.inf, 1369.8437500001],
        [1.2, 0.85, 3.0, 0.1234567890123],
        [0.0123456789, -12.3456781234, 1234.5678904444, -0.0000004],
        [3.6971234567891234e-07, -3.7e-04, 0.036971234567891234, -1.2e-11],
        [0, 2987654321, -12, 656000000000],
        {"backend": ["wide-a", "wide-b", "wide-a", "narrow, odd"],
         "note": ["", "x", "y", "z"]})


def test_header_is_design_columns_then_flags(tmp_path):
    path = tmp_path / "residuals.csv"
    make_table().write_csv(path)
    with open(path, newline="") as handle:
        header = next(csv.reader(handle))
    # DESIGN.md §5: the residuals.csv columns, in this order, plus the TOA flags.
    assert header == ["mjd", "site", "freq_mhz", "err_us", "residual_us",
                      "residual_phase", "pulse_number", "backend", "note"]
    assert tuple(header[:7]) == CORE_COLUMNS


def test_round_trip_exact(tmp_path):
    table = make_table()
    path = tmp_path / "residuals.csv"
    table.write_csv(path)
    back = read_csv(path)
    assert list(back.mjd_text) == MJD_TEXT          # text preserved, not re-printed
    assert back.mjd[0] == float(MJD_TEXT[0])
    assert list(back.site) == list(table.site)
    # freq_mhz / err_us: shortest round-trip repr -> bit-identical floats.
    assert np.array_equal(back.freq_mhz, table.freq_mhz)
    assert np.isinf(back.freq_mhz[2])
    assert np.array_equal(back.err_us, table.err_us)
    # residual_us printed with 6 decimals (1 ps): equal to the printed precision.
    assert np.array_equal(back.residual_us, np.round(table.residual_us, 6))
    assert np.max(np.abs(back.residual_us - table.residual_us)) <= 0.5e-6 + 1e-12
    assert back.residual_us[0] == 0.012346
    assert back.residual_us[3] == 0.0 or back.residual_us[3] == -0.0
    # residual_phase printed with 13 significant digits.
    assert np.allclose(back.residual_phase, table.residual_phase, rtol=5.1e-13, atol=0)
    assert back.residual_phase[1] == -3.7e-04
    assert back.pulse_number.dtype == np.int64
    assert list(back.pulse_number) == [0, 2987654321, -12, 656000000000]
    assert list(back.flags) == ["backend", "note"]
    assert list(back.flags["backend"]) == ["wide-a", "wide-b", "wide-a", "narrow, odd"]
    assert list(back.flags["note"]) == ["", "x", "y", "z"]
    # Writing the table read back gives the identical file.
    again = tmp_path / "again.csv"
    back.write_csv(again)
    assert again.read_bytes() == path.read_bytes()


def test_classmethod_reader_is_the_same(tmp_path):
    path = tmp_path / "residuals.csv"
    make_table().write_csv(path)
    assert list(ResidualTable.read_csv(path).mjd_text) == MJD_TEXT


def test_sub_nanosecond_digits_printed(tmp_path):
    table = make_table()
    path = tmp_path / "r.csv"
    table.write_csv(path)
    rows = list(csv.DictReader(open(path, newline="")))
    assert rows[1]["residual_us"] == "-12.345678"
    assert rows[2]["residual_us"] == "1234.567890"
    assert rows[0]["residual_phase"] == "3.697123456789e-07"
    assert rows[2]["freq_mhz"] == "inf"


def test_empty_table_round_trip(tmp_path):
    empty = ResidualTable.from_columns([], [], [], [], [], [], [])
    path = tmp_path / "empty.csv"
    empty.write_csv(path)
    back = read_csv(path)
    assert len(back) == 0 and back.columns == list(CORE_COLUMNS)


def test_write_is_atomic_and_leaves_no_temp(tmp_path):
    path = tmp_path / "residuals.csv"
    path.write_text("old content\n")
    table = make_table()
    table.residual_us[1] = np.nan
    with pytest.raises(ValueError):
        table.write_csv(path)
    assert path.read_text() == "old content\n"      # untouched on failure
    assert os.listdir(tmp_path) == ["residuals.csv"]  # no temp file left
    make_table().write_csv(path)
    assert os.listdir(tmp_path) == ["residuals.csv"]


def test_rms_values():
    table = ResidualTable.from_columns(["1", "2"], ["desert-dish"] * 2, [1400.0] * 2,
                                       [1.0, 2.0], [3.0, -4.0], [0.0, 0.0], [0, 1])
    assert table.rms_us() == pytest.approx(np.sqrt(12.5))
    # weights 1, 1/4: (9 + 16/4) / (1.25) = 10.4
    assert table.weighted_rms_us() == pytest.approx(np.sqrt(10.4))


def test_mismatched_columns_rejected():
    with pytest.raises(ValueError, match="site"):
        ResidualTable.from_columns(["1", "2"], ["desert-dish"], [1.0, 1.0], [1.0, 1.0],
                                   [0.0, 0.0], [0.0, 0.0], [0, 1])
    with pytest.raises(ValueError, match="flag name"):
        ResidualTable.from_columns(["1"], ["desert-dish"], [1.0], [1.0], [0.0], [0.0],
                                   [0], {"site": ["x"]})


HEADER = "mjd,site,freq_mhz,err_us,residual_us,residual_phase,pulse_number,backend\n"
GOOD = "58849.5,desert-dish,1400.0,1.2,0.5,1e-6,10,wide-a\n"


@pytest.mark.parametrize("bad_row, line, field, words", [
    ("58850.x,desert-dish,1400.0,1.2,0.5,1e-6,11,wide-a\n", 3, "mjd", "decimal MJD"),
    ("5.8e4,desert-dish,1400.0,1.2,0.5,1e-6,11,wide-a\n", 3, "mjd", "decimal MJD"),
    ("58850,desert-dish,fast,1.2,0.5,1e-6,11,wide-a\n", 3, "freq_mhz", "not a number"),
    ("58850,desert-dish,-5,1.2,0.5,1e-6,11,wide-a\n", 3, "freq_mhz", "> 0"),
    ("58850,desert-dish,1400,0,0.5,1e-6,11,wide-a\n", 3, "err_us", "> 0"),
    ("58850,desert-dish,1400,1.0,nan,1e-6,11,wide-a\n", 3, "residual_us", "finite"),
    ("58850,desert-dish,1400,1.0,0.5,inf,11,wide-a\n", 3, "residual_phase", "finite"),
    ("58850,desert-dish,1400,1.0,0.5,1e-6,11.5,wide-a\n", 3, "pulse_number", "integer"),
    ("58850,,1400,1.0,0.5,1e-6,11,wide-a\n", 3, "site", "site"),
])
@pytest.mark.parametrize("padding", [0, 2500])
def test_bad_value_names_file_line_field(tmp_path, bad_row, line, field, words, padding):
    # the same message deep in a long file (read column by column until the
    # bad cell sends it to the row-by-row reader) as near the top
    path = tmp_path / "bad.csv"
    path.write_text(HEADER + GOOD * (1 + padding) + bad_row + GOOD * 10)
    line += padding
    with pytest.raises(InputError) as info:
        read_csv(path)
    err = info.value
    assert err.path == str(path) and err.line == line and err.field == field
    assert words in str(err)
    assert str(path) in str(err) and f":{line}:" in str(err)


def test_line_numbers_count_blank_lines(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text(HEADER + GOOD + "\n\n" + "58850,desert-dish,1400,1.0,oops,1e-6,11,wide-a\n")
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert info.value.line == 5 and info.value.field == "residual_us"


def test_wrong_field_count(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text(HEADER + GOOD + "58850,desert-dish,1400,1.0\n")
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert info.value.line == 3 and "4 fields, header has 8" in str(info.value)


def test_missing_column_listed(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("mjd,site,freq_mhz,err_us,residual_phase,pulse_number\n"
                    "58849.5,desert-dish,1400.0,1.2,1e-6,10\n")
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert info.value.line == 1 and info.value.field == "residual_us"
    assert "required columns" in str(info.value)


def test_duplicate_column_and_empty_and_missing_file(tmp_path):
    path = tmp_path / "dup.csv"
    path.write_text("mjd,site,site,freq_mhz,err_us,residual_us,residual_phase,pulse_number\n")
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert info.value.field == "site" and info.value.line == 1
    empty = tmp_path / "empty.csv"
    empty.write_text("\n\n")
    with pytest.raises(InputError, match="empty"):
        read_csv(empty)
    with pytest.raises(InputError) as info:
        read_csv(tmp_path / "nowhere.csv")
    assert "nowhere.csv" in str(info.value)
    latin = tmp_path / "latin.csv"
    latin.write_bytes(HEADER.encode()
                      + "58849.5,caf\xe9-dish,1400,1,0.5,1e-6,10,a\n".encode("latin-1"))
    with pytest.raises(InputError, match="not UTF-8 text") as info:
        read_csv(latin)
    assert info.value.path == str(latin)


def test_reading_does_not_modify_input(tmp_path):
    path = tmp_path / "r.csv"
    path.write_text(HEADER + GOOD)
    before = path.read_bytes()
    table = read_csv(path)
    assert path.read_bytes() == before
    assert table.flags["backend"][0] == "wide-a"


def test_comment_lines_before_the_header_are_skipped(tmp_path):
    # e.g. a note that the fit did not converge; line numbers still count them
    path = tmp_path / "r.csv"
    path.write_text("# fit did not converge: residuals of the last iteration\n"
                    "  # a second note\n" + HEADER + GOOD * 3)
    table = read_csv(path)
    assert len(table) == 3 and list(table.flags) == ["backend"]
    path.write_text("# note\n" + HEADER + GOOD + "58850,desert-dish,1400,1.0,oops,1e-6,11,x\n")
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert info.value.line == 4 and info.value.field == "residual_us"


def _by_csv_module(path):
    """The rows as the standard library's csv module and float()/int() read them
    (the independent reference for the column-by-column reader)."""
    with open(path, newline="", encoding="utf-8-sig") as handle:
        lines = [line for line in handle if not line.startswith("#")]
    rows = [row for row in csv.reader(lines) if any(cell.strip() for cell in row)]
    return [{k: v.strip() for k, v in zip(rows[0], row)} for row in rows[1:]]


@pytest.mark.parametrize("quoted", [False, True])
def test_columns_read_at_once_equal_the_csv_module(tmp_path, monkeypatch, quoted):
    # CRLF line ends, blank and blank-looking lines, blanks around cells, an
    # unknown toa_line, inf frequency, orbital phase, reasons; with quoted cells
    # the csv module splits the lines, without them numpy's reader
    reason = '"rfi, band 2"' if quoted else "rfi"
    text = ("# a note\r\n"
            "mjd,site,freq_mhz,err_us,residual_us,residual_phase,pulse_number,toa_line,"
            "orbital_phase,backend,left_out,fit_status\r\n"
            "58849.000142889802083, desert-dish ,1400.0,1.2,0.5,1e-6,10,7,0.25,wide-a,,"
            "not_converged\r\n"
            "\r\n   \r\n"
            "58851.5,lake-array,inf,0.85, -12.345678 ,-3.7e-04,+2987654321,,0.999,wide-b,"
            f"{reason},not_converged\r\n"
            "-.5,lake-array,820,3,1234.5,0.0369,-12,9,0.0,  ,,not_converged\r\n")
    path = tmp_path / "r.csv"
    path.write_bytes(text.encode())
    monkeypatch.setattr(residual_table, "_read_rows", None)   # must not be needed
    table = read_csv(path)
    rows = _by_csv_module(path)
    assert len(table) == len(rows) == 3
    assert list(table.mjd_text) == [r["mjd"] for r in rows]
    assert table.mjd.tolist() == [float(r["mjd"]) for r in rows]
    assert list(table.site) == [r["site"] for r in rows] == ["desert-dish", "lake-array",
                                                              "lake-array"]
    for name in ("freq_mhz", "err_us", "residual_us", "residual_phase", "orbital_phase"):
        assert getattr(table, name).tolist() == [float(r[name]) for r in rows]
    assert table.pulse_number.tolist() == [int(r["pulse_number"]) for r in rows]
    assert table.pulse_number.dtype == np.int64 and table.toa_line.tolist() == [7, 0, 9]
    assert list(table.flags["backend"]) == ["wide-a", "wide-b", ""]
    assert list(table.left_out) == ["", "rfi, band 2" if quoted else "rfi", ""]
    assert table.converged is False and "fit_status" not in table.flags


def test_bad_fit_status_deep_in_a_file(tmp_path):
    header = HEADER.rstrip("\n") + ",fit_status\n"
    good = GOOD.rstrip("\n") + ",not_converged\n"
    path = tmp_path / "r.csv"
    path.write_text(header + good * 3000)
    assert read_csv(path).converged is False
    path.write_text(header + good * 3000 + GOOD.rstrip("\n") + ",converged\n" + good)
    with pytest.raises(InputError) as info:
        read_csv(path)
    assert (info.value.line, info.value.field) == (3002, "fit_status")


def test_unusual_but_valid_cells_are_read_row_by_row(tmp_path):
    # Python's float() takes digit-group underscores; numpy's reader does not,
    # so such a file is read by the row-by-row reader, to the same values
    path = tmp_path / "r.csv"
    path.write_text(HEADER + GOOD + "58850,desert-dish,1_400.0,1.0,0.5,1e-6,11,wide-a\n")
    assert read_csv(path).freq_mhz.tolist() == [1400.0, 1400.0]


def test_quoted_cells_are_read_as_the_csv_module_reads_them(tmp_path, monkeypatch):
    # odd quoting on one line each (numpy's reader and the csv module agree:
    # read at once), then a quoted cell over two lines (the row reader)
    odd = ['"a"b', 'a"b', '"x""y"', '""']
    path = tmp_path / "r.csv"
    path.write_text(HEADER + "".join(GOOD.replace("wide-a", cell) for cell in odd))
    expected = [row["backend"] for row in _by_csv_module(path)]
    assert expected == ["ab", 'a"b', 'x"y', ""]
    with monkeypatch.context() as patch:
        patch.setattr(residual_table, "_read_rows", None)
        assert list(read_csv(path).flags["backend"]) == expected
    path.write_text(HEADER + GOOD + GOOD.replace("wide-a", '"two\nlines"') + GOOD)
    table = read_csv(path)
    assert list(table.flags["backend"]) == ["wide-a", "two\nlines", "wide-a"]
