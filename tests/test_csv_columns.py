"""Whole-column CSV formatting (timingkit.formats.csv_columns) against Python's own
formatting, value by value."""

import numpy as np
import pytest

from timingkit.formats import csv_columns
from timingkit.numerics.timearray import SplitTime


@pytest.mark.parametrize("decimals", [0, 2, 12, 15])
def test_fixed_point_is_pythons_percent_f(decimals):
    rng = np.random.default_rng(decimals)
    values = np.concatenate([
        rng.normal(0.0, 400.0, 20000), rng.normal(0.0, 1e-5, 20000),
        rng.uniform(-1, 1, 2000) * 10.0 ** rng.integers(-20, 3, 2000),
        [0.0, -0.0, -1e-20, 0.125, 0.375, 2.5, -2.5, 1e-15, 0.5e-15, 999.9999999999995],
        (rng.integers(-10**6, 10**6, 5000) + 0.5) / 10.0 ** decimals,        # near ties
        rng.uniform(4.0, 4000.0, 5000)])                     # |v| 10^d beyond 2^52 at d = 15
    values = values[np.abs(values) * 10.0 ** decimals < 2.0 ** 62]
    got = csv_columns.as_strings(csv_columns.fixed_point(values, decimals))
    expected = [f"%.{decimals}f" % v for v in values.tolist()]   # source: Python's % format
    assert got == expected


def test_fixed_point_falls_back_for_huge_and_non_finite_values():
    values = np.array([1e30, -np.inf, np.nan, 1.5])
    assert csv_columns.as_strings(csv_columns.fixed_point(values, 3)) == \
        ["%.3f" % v for v in values.tolist()]


def test_split_mjd_matches_mjd_strings_and_carries():
    rng = np.random.default_rng(1)
    day = np.floor(rng.uniform(40000, 70000, 5000))
    frac = np.r_[rng.uniform(0, 1, 4997), 1.0 - 1e-17, 0.0, 0.9999999999999999]
    t = SplitTime(day, frac, "tdb")
    assert csv_columns.as_strings(csv_columns.split_mjd(day, frac, 15)) == t.mjd_strings(15)


def test_text_repr_and_whole_file():
    sites = np.array(["desert-dish", "lake-array", "höhe-west"])[np.arange(7) % 3]
    freqs = np.array([820.0, 1400.0, np.inf, 0.1 + 0.2, 1400.0, 820.0, 2300.5])
    body = csv_columns.csv_bytes(["site", "freq_mhz", "delay_s"],
                                 [csv_columns.text(sites), csv_columns.shortest_repr(freqs),
                                  csv_columns.fixed_point(np.linspace(-1, 1, 7), 3)])
    lines = body.decode("utf-8").split("\n")
    assert lines[0] == "site,freq_mhz,delay_s" and lines[-1] == ""
    assert lines[1:-1] == [f"{s},{f!r},{d:.3f}" for s, f, d in
                           zip(sites.tolist(), freqs.tolist(), np.linspace(-1, 1, 7).tolist())]


def test_blocks_of_rows_join_seamlessly(monkeypatch):
    monkeypatch.setattr(csv_columns, "_ROWS_PER_BLOCK", 7)
    values = np.arange(30) * 0.5
    body = csv_columns.csv_bytes(["x"], [csv_columns.fixed_point(values, 1)]).decode()
    assert body.split("\n")[1:-1] == [f"{v:.1f}" for v in values]
