"""Tests of the TOA table reader/writer (timingkit/formats/toa_table.py, DESIGN.md §4).

Exactness is checked against Python's own ``decimal``/``fractions`` modules
(an independent general-purpose exact-arithmetic library): the fraction of
day must be the correctly rounded double of the exact decimal fraction.
All TOA data here are invented (invented sites such as 'desert-dish').
"""

from __future__ import annotations

import os
import tempfile
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from timingkit.formats import mjd_text, toa_reader
from timingkit.formats.errors import InputError
from timingkit.numerics.timearray import SplitTime
from timingkit.formats.toa_table import ToaTable
from timingkit.formats.toa_writer import write_toa_table
from timingkit.formats.mjd_text import parse_mjd_strings
from timingkit.formats.toa_reader import read_toa_table

FAST = settings(max_examples=60, deadline=None,
                suppress_health_check=[HealthCheck.too_slow])

HEADER = "mjd err_us freq_mhz site backend\n"
GOOD_ROW = "58849.000142889802083 1.20 1400.0 desert-dish wide-a\n"


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------

def _write(tmp_path: Path, text, name="toas.txt") -> Path:
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def _expected_parts(text: str) -> tuple[int, float]:
    """Independent reference: exact value from decimal/fractions, then the
    correctly rounded fraction (Fraction.__float__ rounds correctly); a
    fraction that rounds to 1.0 carries into the day."""
    exact = Fraction(Decimal(text))
    day = exact.numerator // exact.denominator
    frac = float(exact - day)
    if frac == 1.0:
        return day + 1, 0.0
    return day, frac


def _ulp(x: float) -> float:
    return float(np.spacing(np.float64(x)))


def _sig_digits(whole: str, frac: str) -> int:
    return len((whole + frac).strip("0"))


@st.composite
def mjd_texts(draw):
    """Legal mjd strings: <= 7 integer digits, <= 40 digits in all (any number of them
    significant: those beyond what the two parts hold are rounded)."""
    kind = draw(st.sampled_from(["typical", "small", "any"]))
    if kind == "typical":
        whole = str(draw(st.integers(40000, 69999)))
    elif kind == "small":
        whole = "0" * draw(st.integers(1, 3))
    else:
        whole = str(draw(st.integers(0, 9_999_999)))
    nfrac = draw(st.integers(0, mjd_text.MAX_DIGITS - len(whole)))
    frac = draw(st.text(alphabet="0123456789", min_size=nfrac, max_size=nfrac))
    # favour hard cases: long runs of 9s (carry) and 0s
    if draw(st.booleans()) and nfrac:
        fill = draw(st.sampled_from("09"))
        cut = draw(st.integers(0, nfrac))
        frac = fill * cut + frac[cut:]
    dot = "." if (frac or draw(st.booleans())) else ""
    return whole + dot + frac


def _random_toas(draw_data, n):
    """A random legal ToaTable made from drawn values (invented data)."""
    texts = draw_data(st.lists(mjd_texts(), min_size=n, max_size=n))
    err = draw_data(st.lists(st.floats(min_value=1e-6, max_value=1e6, allow_nan=False),
                             min_size=n, max_size=n))
    freq = draw_data(st.lists(st.one_of(st.just(float("inf")),
                                        st.floats(min_value=1.0, max_value=1e5)),
                              min_size=n, max_size=n))
    word = st.text(alphabet="abcdefghijklmnopqrstuvwxyz-_.0123456789é", min_size=1,
                   max_size=12)
    site = draw_data(st.lists(st.sampled_from(["desert-dish", "ridge-array", "dd"]),
                              min_size=n, max_size=n))
    flags = {}
    for name in draw_data(st.lists(st.sampled_from(["backend", "group", "note"]),
                                   unique=True, max_size=2)):
        flags[name] = draw_data(st.lists(word, min_size=n, max_size=n))
    pulse = None
    if draw_data(st.booleans()):
        pulse = draw_data(st.lists(st.integers(-10 ** 15, 10 ** 15), min_size=n, max_size=n))
    day, frac = parse_mjd_strings(texts)
    return ToaTable(mjd_text=np.array(texts), mjd_day=day, mjd_frac=frac, err_us=err,
                freq_mhz=freq, site=site, pulse=pulse, flags=flags)


def _assert_same_table(a: ToaTable, b: ToaTable) -> None:
    assert len(a) == len(b)
    assert list(a.mjd_text) == list(b.mjd_text)
    np.testing.assert_array_equal(a.mjd_day, b.mjd_day)
    np.testing.assert_array_equal(a.mjd_frac, b.mjd_frac)
    np.testing.assert_array_equal(a.err_us, b.err_us)       # bit-exact floats
    np.testing.assert_array_equal(a.freq_mhz, b.freq_mhz)
    assert list(a.site) == list(b.site)
    if a.pulse is None:
        assert b.pulse is None
    else:
        np.testing.assert_array_equal(a.pulse, b.pulse)
    assert list(a.flags) == list(b.flags)
    for name in a.flags:
        assert list(a.flags[name]) == list(b.flags[name])


# ---------------------------------------------------------------------------
# exact MJD parsing
# ---------------------------------------------------------------------------

@FAST
@given(st.lists(mjd_texts(), min_size=1, max_size=40))
def test_mjd_parse_is_correctly_rounded_against_fractions(texts):
    day, frac = parse_mjd_strings(texts)
    for text, d, f in zip(texts, day, frac):
        exp_day, exp_frac = _expected_parts(text)
        assert d == exp_day, text
        assert f == exp_frac, (text, f, exp_frac)          # correctly rounded, bit for bit
        assert 0.0 <= f < 1.0
        # and so the pair is within half an ulp of the fraction of the exact value
        err = abs(Fraction(float(d)) + Fraction(float(f)) - Fraction(Decimal(text)))
        assert err <= Fraction(_ulp(f)) / 2 or (f == 0.0 and err <= Fraction(1, 2 ** 54))


def test_mjd_parse_known_values():
    # exact decimal values worked by hand (from the definition of decimal notation)
    day, frac = parse_mjd_strings(["58849.5", "58849", "58849.", "0.25", "0000058849.75"[3:],
                                   "58849.999999999999999"])
    np.testing.assert_array_equal(day, [58849, 58849, 58849, 0, 58849, 58849])
    np.testing.assert_array_equal(frac[:5], [0.5, 0.0, 0.0, 0.25, 0.75])
    assert frac[5] == float(Fraction(999999999999999, 10 ** 15))
    # 0.1 day is not a double; the result is the nearest one, not e.g. 58849.1 - 58849
    _, frac = parse_mjd_strings(["58849.1"])
    assert frac[0] == 0.1
    assert 58849.1 - 58849 != 0.1          # what parsing through a float would give


def test_fraction_rounding_up_to_one_carries_the_day():
    # 1 - 1e-17 lies above the midpoint 1 - 2**-54 of 1 and the double below it
    texts = ["0.99999999999999999", "5.99999999999999999", "58849.999999999999999"]
    assert all(Fraction(Decimal(t)) % 1 < 1 for t in texts)
    day, frac = parse_mjd_strings(texts)
    assert (day[0], frac[0]) == (1.0, 0.0)
    assert (day[1], frac[1]) == (6.0, 0.0)
    assert day[2] == 58849.0 and frac[2] == float(1 - Fraction(1, 10 ** 15)) < 1.0


@st.composite
def near_midpoints(draw):
    """30-digit decimal fractions within a few 1e-30 of a midpoint between
    two adjacent doubles: the hardest cases for correct rounding."""
    x = draw(st.floats(min_value=1e-6, max_value=1.0, exclude_max=True))
    above = draw(st.booleans())
    neighbour = float(np.nextafter(x, 2.0 if above else 0.0))
    mid = (Fraction(x) + Fraction(neighbour)) / 2
    n = mid * 10 ** 30
    units = int(n) + draw(st.integers(-3, 3))
    assume(0 <= units < 10 ** 30)
    return units


@settings(max_examples=300, deadline=None)
@given(st.lists(near_midpoints(), min_size=1, max_size=20))
def test_fraction_to_double_near_midpoints(units_list):
    high = np.array([u // 10 ** 15 for u in units_list], dtype=np.int64)
    low = np.array([u % 10 ** 15 for u in units_list], dtype=np.int64)
    got = mjd_text.fraction_to_double(high, low)
    for u, g in zip(units_list, got):
        assert g == float(Fraction(u, 10 ** 30)), u     # int true division rounds correctly


# 30-digit fractions found by a random search (seeded) where plain double-double
# evaluation rounds the wrong way: each lies < 0.006e-30 from a midpoint between doubles.
DD_ALONE_FAILS = [590280158292629530958350869696, 929977616140014673451474891408,
                  268907844778859789203195873597, 244666375956368767341508885238]


def test_fraction_to_double_where_double_double_alone_is_not_enough():
    units = np.array(DD_ALONE_FAILS, dtype=object)
    got = mjd_text.fraction_to_double(np.array([u // 10 ** 15 for u in units], np.int64),
                                      np.array([u % 10 ** 15 for u in units], np.int64))
    for u, g in zip(DD_ALONE_FAILS, got):
        assert g == float(Fraction(u, 10 ** 30))


def test_fraction_to_double_settles_exact_ties_by_integers():
    # a 30-digit fraction just beside the midpoint of 0.5 and the next double up
    mid = Fraction(1, 2) + Fraction(2.0 ** -54)
    below = int(mid * 10 ** 30)                        # truncated: just below the midpoint
    for units, expect in [(below, 0.5), (below + 1, float(np.nextafter(0.5, 1.0)))]:
        got = mjd_text.fraction_to_double(np.array([units // 10 ** 15]),
                                          np.array([units % 10 ** 15]))
        assert got[0] == expect
        assert got[0] == float(Fraction(units, 10 ** 30))


@pytest.mark.parametrize("text, words", [
    ("5.8849e4", "scientific notation"),
    ("58849E0", "scientific notation"),
    ("-58849.5", "negative"),
    ("abc", "not a decimal"),
    ("58849.1.2", "not a decimal"),
    (".5", "not a decimal"),
    ("+58849.5", "not a decimal"),
    ("58849,5", None),   # a comma is a separator in the file; as a string it is malformed
    ("12345678.5", "too many digits before"),
    ("0." + "1" * 40, "at most 40"),
    ("58849." + "1" * 36, "at most 40"),                # 41 digits
])
def test_mjd_strings_rejected(text, words):
    with pytest.raises(InputError) as info:
        parse_mjd_strings(["58849.5", text])
    assert info.value.field == "mjd"
    assert "entry 1" in str(info.value)
    if words:
        assert words in str(info.value)


def test_printf_digits_round_to_the_nearest_two_part_value(tmp_path):
    # '%.16f' of a float MJD prints 21-22 significant digits, more than the pair
    # (whole day + float64 fraction) holds: each rounds to the nearest pair, i.e.
    # the fraction is the correctly rounded double of the exact decimal fraction
    # (Python's Fraction -> float is correctly rounded).
    rng = np.random.default_rng(11)
    values = rng.uniform(40000.0, 69999.0, 200)
    texts = ["%.16f" % v for v in values] + ["58849.0001428898020831", "58849.00014288980208312"]
    day, frac = parse_mjd_strings(texts)
    for text, d, f in zip(texts, day, frac):
        exact = Fraction(Decimal(text))
        assert d == int(exact)
        assert f == float(exact - int(exact)), text
    lines = ["mjd err_us freq_mhz site"] + [f"{t} 1.0 1400 geocentre" for t in texts[:5]]
    path = tmp_path / "printf.toas"
    path.write_text("\n".join(lines) + "\n")
    table = read_toa_table(path)
    np.testing.assert_array_equal(table.mjd_frac, frac[:5])
    assert list(table.mjd_text) == texts[:5]      # the text as written is kept


def test_trailing_zeros_do_not_count_as_significant():
    day, frac = parse_mjd_strings(["58849.1000000000000000000"])   # 6 significant, 25 written
    assert (day[0], frac[0]) == (58849.0, 0.1)


@FAST
@given(st.lists(st.text(alphabet="0123456789.-eE+ ax", min_size=1, max_size=40),
                min_size=1, max_size=30))
def test_fast_and_careful_mjd_checks_agree(tokens):
    tokens = [t.replace(" ", "") for t in tokens]          # may leave empty strings
    buf, starts, lens, _ = mjd_text.token_buffer(tokens)
    _, _, bad = mjd_text.parse_mjd_tokens(buf, starts, lens)
    for token, flagged in zip(tokens, bad):
        assert flagged == (mjd_text.mjd_problem(token) is not None), token


@FAST
@given(st.lists(st.one_of(
    st.floats(min_value=-1e30, max_value=1e30).map(repr),
    st.decimals(allow_nan=False, allow_infinity=False, places=6).map(str),
    st.text(alphabet="0123456789.-+eEinfa_", min_size=1, max_size=20)),
    min_size=1, max_size=30))
def test_number_parse_matches_python_float(tokens):
    tokens = [t for t in tokens if t] or ["1"]
    buf, starts, lens, _ = mjd_text.token_buffer(tokens)
    for name in ("err_us", "freq_mhz"):
        values, bad = toa_reader._parse_number_tokens(buf, starts, lens, name)
        for token, value, flagged in zip(tokens, values, bad):
            ref, problem = toa_reader._number_problem(token, name)
            assert flagged == (problem is not None), (name, token)
            if not flagged:
                assert value == float(token), token        # Python's float: correctly rounded


@FAST
@given(st.lists(st.one_of(st.integers(-10 ** 18 + 1, 10 ** 18 - 1).map(str),
                          st.text(alphabet="0123456789+-.x", min_size=1, max_size=22)),
                min_size=1, max_size=30))
def test_pulse_parse_matches_python_int(tokens):
    buf, starts, lens, _ = mjd_text.token_buffer(tokens)
    values, bad = toa_reader._parse_pulse_tokens(buf, starts, lens)
    for token, value, flagged in zip(tokens, values, bad):
        assert flagged == (toa_reader._pulse_problem(token) is not None), token
        if not flagged:
            assert value == int(token)


# ---------------------------------------------------------------------------
# reading good files
# ---------------------------------------------------------------------------

def test_read_design_example(tmp_path):
    path = _write(tmp_path, (
        "# Lines starting with '#' are comments. Columns split on whitespace or commas.\n"
        "# The first non-comment line names the columns; order is free.\n"
        "mjd                      err_us  freq_mhz  site          backend\n"
        "58849.000142889802083    1.20    1400.0    desert-dish   wide-a\n"
        "58851.997000000000000    0.85    820.0     desert-dish   wide-b\n"))
    t = read_toa_table(path)
    assert len(t) == 2
    assert list(t.mjd_text) == ["58849.000142889802083", "58851.997000000000000"]
    np.testing.assert_array_equal(t.mjd_day, [58849, 58851])
    assert t.mjd_frac[0] == float(Fraction(142889802083, 10 ** 15))
    assert t.mjd_frac[1] == 0.997
    np.testing.assert_array_equal(t.err_us, [1.2, 0.85])
    np.testing.assert_array_equal(t.freq_mhz, [1400.0, 820.0])
    assert list(t.site) == ["desert-dish"] * 2
    assert list(t.flags) == ["backend"] and list(t.flags["backend"]) == ["wide-a", "wide-b"]
    assert t.pulse is None
    np.testing.assert_array_equal(t.line_numbers, [4, 5])
    assert t.path == os.fspath(path)
    assert t.column_names() == ["mjd", "err_us", "freq_mhz", "site", "backend"]


def test_commas_whitespace_order_and_line_numbers(tmp_path):
    text = ("\ufeff# invented TOAs, mixed separators\r\n"
            "\r\n"
            "site,freq_mhz,\tmjd , err_us,pulse\r\n"
            "desert-dish, inf, 58849.5, 2.5, -3\r\n"
            "   # an indented comment\r\n"
            "\n"
            "ridge-array\t\t820.25\t58850.25\t1e-1\t+7,\r\n"
            "dd 1400 58851 3 12")                       # no final newline
    t = read_toa_table(_write(tmp_path, text))
    assert list(t.mjd_text) == ["58849.5", "58850.25", "58851"]
    np.testing.assert_array_equal(t.mjd_day, [58849, 58850, 58851])
    np.testing.assert_array_equal(t.mjd_frac, [0.5, 0.25, 0.0])
    np.testing.assert_array_equal(t.err_us, [2.5, 0.1, 3.0])
    np.testing.assert_array_equal(t.freq_mhz, [np.inf, 820.25, 1400.0])
    assert list(t.site) == ["desert-dish", "ridge-array", "dd"]
    np.testing.assert_array_equal(t.pulse, [-3, 7, 12])
    assert t.pulse.dtype == np.int64
    np.testing.assert_array_equal(t.line_numbers, [4, 7, 8])
    assert t.flags == {}


def test_non_ascii_flags_and_long_flag_values(tmp_path):
    long_value = "x" * 400
    t = read_toa_table(_write(tmp_path, "mjd err_us freq_mhz site note\n"
                                   f"58849.5 1 1400 désert-dish café\n"
                                   f"58849.6 1 1400 dd {long_value}\n"))
    assert list(t.site) == ["désert-dish", "dd"]
    assert list(t.flags["note"]) == ["café", long_value]


def test_many_rows_agree_with_reference(tmp_path):
    rng = np.random.default_rng(7)
    n = 3000
    texts = [f"{d}.{u:015d}" for d, u in zip(rng.integers(50000, 60000, n).tolist(),
                                            rng.integers(0, 10 ** 15, n).tolist())]
    errs = [f"{e:.4f}" for e in rng.uniform(0.01, 9, n)]
    body = "".join(f"{m} {e} 1400.0 desert-dish\n" for m, e in zip(texts, errs))
    t = read_toa_table(_write(tmp_path, "mjd err_us freq_mhz site\n" + body))
    for i in range(0, n, 97):
        assert (t.mjd_day[i], t.mjd_frac[i]) == _expected_parts(texts[i])
        assert t.err_us[i] == float(errs[i])
    np.testing.assert_array_equal(t.line_numbers, np.arange(2, n + 2))


# ---------------------------------------------------------------------------
# round trips
# ---------------------------------------------------------------------------

@FAST
@given(st.data(), st.integers(1, 25))
def test_write_read_round_trip_is_exact(data, n):
    original = _random_toas(data.draw, n)
    with tempfile.TemporaryDirectory() as tmp:
        first = os.path.join(tmp, "a.txt")
        second = os.path.join(tmp, "b.txt")
        write_toa_table(original, first)
        back = read_toa_table(first)
        _assert_same_table(original, back)
        write_toa_table(back, second)
        assert Path(first).read_bytes() == Path(second).read_bytes()
        assert sorted(os.listdir(tmp)) == ["a.txt", "b.txt"]      # no temp files left


def test_write_keeps_mjd_text_verbatim_and_extra_columns(tmp_path):
    path = _write(tmp_path, "mjd err_us freq_mhz site backend\n"
                            "58849.100000000000000 1.5 inf dd wide-a\n"
                            "58850 2 820 dd wide-b\n")
    t = read_toa_table(path)
    out = tmp_path / "out.txt"
    write_toa_table(t, out, extra_columns={"delay_us": np.array([0.125, -1.5]),
                                      "group": ["g1", "g2"]})
    again = read_toa_table(out)
    assert list(again.mjd_text) == ["58849.100000000000000", "58850"]
    assert list(again.flags) == ["backend", "delay_us", "group"]
    assert list(again.flags["delay_us"]) == ["0.125", "-1.5"]
    assert "58849.100000000000000" in out.read_text()
    with pytest.raises(InputError) as info:
        write_toa_table(t, out, extra_columns={"backend": ["a", "b"]})
    assert info.value.field == "backend"
    with pytest.raises(InputError) as info:   # read back it would be a flag named like an
        write_toa_table(t, out, extra_columns={"residual_us": [0.1, 0.2]})   # output column
    assert info.value.field == "residual_us"


def test_write_refuses_an_empty_table(tmp_path):
    t = ToaTable.from_arrays([58849], [0.5], 1.0, 1400.0, "dd").select(np.array([False]))
    with pytest.raises(InputError) as info:
        write_toa_table(t, tmp_path / "empty.txt")
    assert "no TOAs" in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_write_refuses_unwritable_values_and_leaves_no_file(tmp_path):
    t = ToaTable.from_arrays([58849, 58850], [0.5, 0.25], 1.0, 1400.0, "desert-dish",
                         flags={"backend": ["wide a", "ok"]})
    out = tmp_path / "out.txt"
    with pytest.raises(InputError) as info:
        write_toa_table(t, out)
    assert info.value.field == "backend" and "'wide a'" in str(info.value)
    assert list(tmp_path.iterdir()) == []
    # an existing file is left untouched when a write fails
    out.write_text("precious\n")
    with pytest.raises(InputError):
        write_toa_table(t, out)
    assert out.read_text() == "precious\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


# ---------------------------------------------------------------------------
# the container
# ---------------------------------------------------------------------------

def test_from_arrays_text_matches_parts_exactly():
    day = np.array([58849.0, 5.0, 0.0, 58849.0, 58849.0, 123456.0])
    frac = np.array([0.000142889802083, 0.1, 2.0 ** -40, 1 - 2.0 ** -53, 1.25, 0.3])
    t = ToaTable.from_arrays(day, frac, [1.0] * 6, 1400.0, "desert-dish")
    # 20 significant digits: 15 decimals for a 5-digit MJD, at most 16
    assert t.mjd_text[0] == "58849.000142889802083"
    assert t.mjd_text[1] == "5.1000000000000000"
    assert t.mjd_text[2].startswith("0.") and len(t.mjd_text[2]) == 18
    assert t.mjd_text[3] == "58850.000000000000000"          # rounds up: day carried
    assert t.mjd_text[4] == "58850.250000000000000"          # fraction >= 1 normalised
    assert len(t.mjd_text[5].split(".")[1]) == 14
    for i, text in enumerate(t.mjd_text):
        assert (t.mjd_day[i], t.mjd_frac[i]) == _expected_parts(str(text))
        want = Fraction(float(day[i])) + Fraction(float(frac[i]))
        got = Fraction(Decimal(str(text)))
        assert abs(got - want) <= Fraction(1, 2 * 10 ** 14 if i == 5 else 2 * 10 ** 15)
    assert t.line_numbers is None and t.path is None


@FAST
@given(st.integers(0, 99999), st.floats(min_value=0.0, max_value=1.0, exclude_max=True))
def test_from_arrays_is_self_consistent(day, frac):
    t = ToaTable.from_arrays([day], [frac], 1.0, np.inf, "ssb")
    parsed_day, parsed_frac = parse_mjd_strings(t.mjd_text)
    assert (parsed_day[0], parsed_frac[0]) == (t.mjd_day[0], t.mjd_frac[0])
    moved = (t.mjd_day[0] - day) + (t.mjd_frac[0] - frac)
    assert abs(moved) <= 5.1e-16 * (1 if day >= 10000 else 0.1) + 1.2e-16


def test_from_arrays_checks_values_and_given_text():
    with pytest.raises(InputError) as info:
        ToaTable.from_arrays([58849], [0.5], 0.0, 1400, "dd")
    assert info.value.field == "err_us"
    with pytest.raises(InputError) as info:
        ToaTable.from_arrays([58849], [0.5], 1.0, -3, "dd")
    assert info.value.field == "freq_mhz"
    with pytest.raises(InputError) as info:
        ToaTable.from_arrays([58849.5], [0.5], 1.0, 1400, "dd")
    assert info.value.field == "mjd"
    t = ToaTable.from_arrays([58849], [0.5], 1.0, 1400, "dd", mjd_text=["58849.50"],
                         pulse=[4], flags={"backend": "wide-a"})
    assert t.mjd_text[0] == "58849.50" and t.pulse[0] == 4
    assert list(t.flags["backend"]) == ["wide-a"]
    with pytest.raises(ValueError):
        ToaTable.from_arrays([58849], [0.5], 1.0, 1400, "dd", mjd_text=["58849.5000000001"])


def test_select_and_times(tmp_path):
    t = read_toa_table(_write(tmp_path, HEADER + GOOD_ROW +
                         "58850.25 0.5 820 ridge-array wide-b\n"
                         "58851.75 0.7 inf ssb wide-c\n"))
    sub = t.select(t.freq_mhz < 1000)
    assert list(sub.mjd_text) == ["58850.25"] and list(sub.flags["backend"]) == ["wide-b"]
    np.testing.assert_array_equal(sub.line_numbers, [3])
    assert sub.path == t.path
    one = t.select(2)
    assert len(one) == 1 and one.site[0] == "ssb"
    assert len(t.select(slice(0, 2))) == 2
    assert list(t.select([2, 0]).mjd_text) == ["58851.75", "58849.000142889802083"]
    with pytest.raises(IndexError):
        t.select(np.array([True, False]))
    times = t.times()
    assert isinstance(times, SplitTime) and times.scale == "utc"
    np.testing.assert_array_equal(times.day, t.mjd_day)
    np.testing.assert_array_equal(times.frac, t.mjd_frac)


def test_mismatched_lengths_rejected():
    with pytest.raises(ValueError):
        ToaTable(mjd_text=["1.5", "2.5"], mjd_day=[1, 2], mjd_frac=[0.5, 0.5], err_us=[1.0],
             freq_mhz=[1.0, 1.0], site=["a", "b"])


# ---------------------------------------------------------------------------
# bad input: one clear message naming file, line and column
# ---------------------------------------------------------------------------

def _error(tmp_path, text) -> InputError:
    path = _write(tmp_path, text)
    with pytest.raises(InputError) as info:
        read_toa_table(path)
    err = info.value
    assert err.path == os.fspath(path)
    assert str(err).startswith(os.fspath(path))
    return err


@pytest.mark.parametrize("column, value, words", [
    ("mjd", "5.8849e4", "scientific notation"),
    ("mjd", "-58849.5", "negative"),
    ("mjd", "58849.5x", "not a decimal"),
    ("mjd", "123456789.5", "too many digits before"),
    ("mjd", "58849." + "0" * 35 + "1", "at most 40"),
    ("err_us", "abc", "not a number"),
    ("err_us", "1_0", "not a number"),
    ("err_us", "nan", "finite"),
    ("err_us", "inf", "finite"),
    ("err_us", "0", "> 0"),
    ("err_us", "-1.5", "> 0"),
    ("freq_mhz", "fast", "not a number"),
    ("freq_mhz", "0", "> 0"),
    ("freq_mhz", "-1400", "> 0"),
    ("freq_mhz", "nan", "> 0"),
    ("freq_mhz", "-inf", "> 0"),
    ("pulse", "1.5", "integer"),
    ("pulse", "seven", "integer"),
    ("pulse", "1" * 19, "integer"),
])
def test_bad_field_names_line_and_column(tmp_path, column, value, words):
    good = {"mjd": "58849.5", "err_us": "1.0", "freq_mhz": "1400", "site": "dd",
            "pulse": "3"}
    names = list(good)
    rows = ["# invented", " ".join(names)]
    for i in range(40):
        rows.append(" ".join(good.values()))
    bad = dict(good, **{column: value})
    rows[25] = " ".join(bad.values())                    # line 26
    err = _error(tmp_path, "\n".join(rows) + "\n")
    assert err.line == 26 and err.field == column
    assert f":26: field '{column}':" in str(err)
    assert words in str(err)


def test_first_bad_line_in_file_order_wins(tmp_path):
    rows = ["mjd err_us freq_mhz site"] + ["58849.5 1 1400 dd"] * 5000
    rows[4000] = "58849.5 -1 1400 dd"       # err_us bad on line 4001
    rows[1234] = "58849.5 1 0 dd"           # freq_mhz bad on line 1235 (earlier)
    rows[2000] = "58849e3 1 1400 dd"        # mjd bad on line 2001
    err = _error(tmp_path, "\n".join(rows))
    assert (err.line, err.field) == (1235, "freq_mhz")
    # within one line, the first failing column in the header's order is named
    rows[1234] = "58849.5 0 0 dd"
    err = _error(tmp_path, "\n".join(rows))
    assert (err.line, err.field) == (1235, "err_us")


def test_missing_required_columns(tmp_path):
    err = _error(tmp_path, "# c\nmjd freq_mhz backend\n58849.5 1400 a\n")
    assert err.line == 2 and err.field == "err_us"
    msg = str(err)
    assert "'err_us', 'site'" in msg and "columns found: 'mjd, freq_mhz, backend'" in msg


def test_missing_header_and_uppercase_hints(tmp_path):
    err = _error(tmp_path, "58849.5 1.0 1400 dd\n58849.6 1.0 1400 dd\n")
    assert err.line == 1 and "looks like data" in str(err)
    err = _error(tmp_path, "MJD err_us freq_mhz site\n58849.5 1 1400 dd\n")
    assert "found 'MJD'" in str(err) and "lowercase" in str(err)


def test_duplicate_columns(tmp_path):
    err = _error(tmp_path, "mjd err_us freq_mhz site backend backend\n")
    assert err.line == 1 and err.field == "backend"
    assert "twice" in str(err) and "columns 5 and 6" in str(err)


def test_wrong_number_of_fields(tmp_path):
    err = _error(tmp_path, HEADER + GOOD_ROW + "58849.5 1.0 1400 dd\n" + GOOD_ROW)
    assert err.line == 3 and err.field == "backend"
    assert "4 fields" in str(err) and "5 columns" in str(err)
    err = _error(tmp_path, HEADER + GOOD_ROW * 3 + "58849.5 1.0 1400 dd a b\n")
    assert err.line == 5 and "6 fields" in str(err) and "extra: 'b'" in str(err)
    err = _error(tmp_path, HEADER + "58849.5 1.0 1400 dd a # note\n")
    assert err.line == 2 and "own line" in str(err)
    err = _error(tmp_path, HEADER + "58849.5,1.0,,dd,a\n")
    assert err.line == 2 and "empty fields" in str(err)


@pytest.mark.parametrize("text, line", [
    ("", None),
    ("   \n\n", None),
    ("# only\n# comments\n", None),
    ("# c\nmjd err_us freq_mhz site\n\n# more\n", 2),
])
def test_no_toas(tmp_path, text, line):
    err = _error(tmp_path, text)
    assert "no TOAs" in str(err)
    assert err.line == line


def test_binary_files(tmp_path):
    err = _error(tmp_path, (HEADER + GOOD_ROW).encode() + b"\x00\x01\x02binary\n")
    assert "does not look like a text TOA table" in str(err) and err.line == 3
    err = _error(tmp_path, (HEADER + GOOD_ROW + GOOD_ROW).encode() + b"\xff\xfe\x80\n")
    assert "does not look like a text TOA table" in str(err) and "UTF-8" in str(err)
    assert err.line == 4


def test_file_not_found_and_directory(tmp_path):
    missing = tmp_path / "nope.txt"
    with pytest.raises(InputError) as info:
        read_toa_table(missing)
    assert "not found" in str(info.value) and str(missing) in str(info.value)
    with pytest.raises(InputError) as info:
        read_toa_table(tmp_path)
    assert "directory" in str(info.value)


def test_reading_never_modifies_the_input(tmp_path):
    content = ("\ufeff" + HEADER + GOOD_ROW).encode("utf-8")
    path = _write(tmp_path, content)
    before = os.stat(path).st_mtime_ns
    read_toa_table(path)
    assert path.read_bytes() == content and os.stat(path).st_mtime_ns == before
