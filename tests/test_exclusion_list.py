"""The exclusion list (formats.exclusion_list) and the selection rules
(formats.toa_selection): parsing, errors for people, matching by line and
exact MJD with the documented fallbacks and warnings."""

import numpy as np
import pytest

from timingkit.formats.errors import InputError
from timingkit.formats.exclusion_list import (
    ExclusionRow,
    format_exclusion_list,
    match_rows,
    read_exclusion_list,
)
from timingkit.formats.toa_reader import read_toa_table
from timingkit.formats.toa_selection import check_select_rules, keep_mask, parse_rule
from timingkit.pipeline.left_out import choose_toas

TABLE = """# invented TOAs
mjd                     err_us  freq_mhz  site         backend
58849.000142889802083   1.2     1400.0    desert-dish  wide-a
58849.000142889802084   1.2     820.0     desert-dish  wide-b
58850.5                 6.0     1400.0    lake-array   wide-a
58851.25                0.8     1400.0    lake-array   wide-b
58900                   2.0     inf       desert-dish  wide-a
"""


@pytest.fixture()
def toas(tmp_path):
    path = tmp_path / "t.toas"
    path.write_text(TABLE)
    return read_toa_table(str(path))


def _list(tmp_path, text, name="x.txt"):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def test_reads_rows_rules_and_free_text(tmp_path):
    path = _list(tmp_path, "# TOAs left out of the fit\n"
                           "line  mjd                    site         note   reason\n"
                           "3     58849.000142889802083  desert-dish  a      radio interference, strong\n"
                           "-     58851.25               lake-array   b\n"
                           "# rules\n"
                           "err_us > 5   too noisy\n"
                           "backend=wide-b,wide-c\n")
    got = read_exclusion_list(path)
    assert [(r.toa_line, r.mjd_text, r.site, r.reason) for r in got.rows] == [
        (3, "58849.000142889802083", "desert-dish", "radio interference, strong"),
        (None, "58851.25", "lake-array", "")]
    assert got.rows[0].other == {"note": "a"} and got.rows[0].list_line == 3
    assert [(r.text, r.reason) for r in got.rules] == [("err_us>5", "too noisy"),
                                                       ("backend=wide-b,wide-c", "")]
    assert got.rules[1].why == "backend=wide-b,wide-c"   # a rule without a reason names itself


@pytest.mark.parametrize("text, where, words", [
    ("line reason\n3 x\n", (1, None), "must include 'mjd'"),
    ("line mjd mjd\n", (1, "mjd"), "named twice"),
    ("line mjd reason\n3\n", (2, "mjd"), "1 fields"),
    ("line mjd\nthree 58849.5\n", (2, "line"), "line number"),
    ("line mjd\n0 58849.5\n", (2, "line"), "line number"),
    ("line mjd\n3 58849.5e0\n", (2, "mjd"), "scientific notation"),
    ("mjd freq_mhz\n58849.5 high\n", (2, "freq_mhz"), "not a frequency"),
    ("# rules\nerr_us\n", (2, None), "is not a rule"),
    ("# rules\nsite>3\n", (2, None), "is text"),
    ("# rules\nmjd=..\n", (2, None), "at least one end"),
    ("# rules\nerr_us=1,,2\n", (2, None), "empty item"),
    ("# rules\nerr_us<x\n", (2, None), "not a number"),
])
def test_bad_lists_name_file_line_and_field(tmp_path, text, where, words):
    line, field = where
    path = _list(tmp_path, text)
    with pytest.raises(InputError) as info:
        read_exclusion_list(path)
    assert info.value.path == path and info.value.line == line and info.value.field == field
    assert words in info.value.message


def test_missing_and_binary_files_are_input_errors(tmp_path):
    with pytest.raises(InputError, match="exclusion list not found"):
        read_exclusion_list(tmp_path / "none.txt")
    (tmp_path / "bin.txt").write_bytes(b"line mjd\x00\n")
    with pytest.raises(InputError, match="binary"):
        read_exclusion_list(tmp_path / "bin.txt")


def test_rows_match_line_and_exact_mjd(toas, tmp_path):
    # line 4 holds ...084; the MJD differs from line 3's in the 21st digit only,
    # which still parses to another float64 fraction: no mix-up between them
    path = _list(tmp_path, "line mjd reason\n4 58849.000142889802084 a\n3 58849.000142889802083 b\n")
    matched, warnings = match_rows(read_exclusion_list(path), toas)
    assert [m.tolist() for m in matched] == [[1], [0]] and warnings == []


def test_changed_table_falls_back_to_mjd_with_a_warning(toas, tmp_path):
    path = _list(tmp_path, "line  mjd       site        reason\n"
                           "9     58851.25  lake-array  moved\n"           # line 9 does not exist
                           "3     58850.5   -           no site given\n"
                           "5     58850.50  lake-array  same number written differently\n"
                           "7     58999.0   desert-dish gone\n")
    exclusions = read_exclusion_list(path)
    matched, warnings = match_rows(exclusions, toas)
    # rows 2 and 3 name lines that hold other TOAs; row 4 is right as written
    # (58850.50 is the same number as the table's 58850.5); row 5 names nothing
    assert [m.tolist() for m in matched] == [[3], [2], [2], []]
    assert len(warnings) == 2
    assert "2 row(s) no longer match" in warnings[0] and "list line 2" in warnings[0]
    assert "(line 9, mjd 58851.25) -> table line 6" in warnings[0]
    assert "(line 3, mjd 58850.5) -> table line 5" in warnings[0]
    assert "1 row(s) match no TOA" in warnings[1] and "list line 5 (line 7, mjd 58999.0)" \
        in warnings[1]


def test_site_column_matches_other_names(toas, tmp_path):
    path = _list(tmp_path, "line mjd site reason\n5 58850.5 LAKE reason\n")
    canonical = {"lake-array": "lake-array", "LAKE": "lake-array"}.get
    matched, warnings = match_rows(read_exclusion_list(path), toas,
                                   canonical_site=lambda n: canonical(n, n))
    assert [m.tolist() for m in matched] == [[2]] and warnings == []


def test_writer_output_reads_back(toas, tmp_path):
    rows = [ExclusionRow(0, 3, "58849.000142889802083", "desert-dish", 1400.0, "rfi burst"),
            ExclusionRow(0, None, "58900", "desert-dish", float("inf"), "")]
    rules = [parse_rule("mjd=58850..58851 receiver fault")]
    text = format_exclusion_list(rows, rules)
    back = read_exclusion_list(_list(tmp_path, text))
    assert [(r.toa_line, r.mjd_text, r.site, r.freq_mhz, r.reason) for r in back.rows] == [
        (3, "58849.000142889802083", "desert-dish", 1400.0, "rfi burst"),
        (None, "58900", "desert-dish", float("inf"), "-")]
    assert [(r.text, r.reason) for r in back.rules] == [("mjd=58850..58851", "receiver fault")]
    assert [m.tolist() for m in match_rows(back, toas)[0]] == [[0], [4]]


@pytest.mark.parametrize("rule, expected", [
    ("mjd=58849.000142889802084..", [1, 2, 3, 4]),            # exact: ...083 is below it
    ("mjd=..58849.000142889802083", [0]),
    ("mjd>58849.000142889802083", [1, 2, 3, 4]),
    ("mjd<58850.5", [0, 1]),
    ("mjd<=58850.5", [0, 1, 2]),
    ("mjd=58850.5,58900", [2, 4]),
    ("err_us>5", [2]),
    ("err_us>=1.2", [0, 1, 2, 4]),
    ("freq_mhz=1000..", [0, 2, 3, 4]),                        # inf is above every bound
    ("line=4..5", [1, 2]),
    ("site=lake-array", [2, 3]),
    ("backend=wide-b", [1, 3]),
    ("backend = wide-a,wide-b", [0, 1, 2, 3, 4]),
])
def test_rules_match_the_documented_toas(toas, rule, expected):
    assert np.flatnonzero(parse_rule(rule).matches(toas)).tolist() == expected


def test_select_rules_combine_or_within_a_field_and_across_fields(toas):
    rules = [parse_rule(t) for t in ("site=lake-array", "site=desert-dish", "mjd=..58850.5")]
    assert np.flatnonzero(keep_mask(rules, toas)).tolist() == [0, 1, 2]
    rules = [parse_rule("backend=wide-b"), parse_rule("err_us<1")]
    assert np.flatnonzero(keep_mask(rules, toas)).tolist() == [3]


def test_select_rule_on_a_missing_column_is_an_error(toas):
    with pytest.raises(InputError, match="no column 'receiver'"):
        check_select_rules([parse_rule("receiver=x", origin="--select")], toas)


def test_choose_toas_keeps_the_first_reason_and_warns_about_empty_rules(toas, tmp_path):
    path = _list(tmp_path, "line mjd reason\n5 58850.5 interference\n"
                           "# rules\nerr_us>5 noisy\nreceiver=x broken\n")
    chosen = choose_toas(toas, [path], select=["mjd=..58851.25"], leave_out=["backend=wide-b"])
    assert chosen.kept.tolist() == [True, False, False, False, False]
    assert chosen.reasons.tolist() == ["", "backend=wide-b", "interference", "backend=wide-b",
                                       "outside the selection mjd=..58851.25"]
    assert any("'receiver=x'" in w and "matches no TOA" in w for w in chosen.warnings)
    entry = chosen.report_entry()
    assert entry["excluded_toas"] == 4
    assert {(g["reason"], tuple(g["lines"])) for g in entry["excluded"]} == {
        ("backend=wide-b", (4, 6)), ("interference", (5,)),
        ("outside the selection mjd=..58851.25", (7,))}
    with pytest.raises(InputError, match="every one of the 5 TOAs is left out"):
        choose_toas(toas, leave_out=["mjd=0.."])
    assert choose_toas(toas) is None
