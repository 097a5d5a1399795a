"""OGIP time bins (TIMEDEL, TIMEPIXR; OGIP/93-003 and the FITS time standard,
Rots et al. 2015, A&A 574, A36): events are timed at the centres of their
bins, the shift is in the report, and wide bins are warned about."""

import json
from fractions import Fraction

import numpy as np
import pytest

from events_support import TT_KEYWORDS, ogip_events, write_inputs
from timingkit.cli.main import main
from timingkit.pipeline.event_run import load_event_inputs, time_selected

F0, F1 = Fraction("29.7123456789"), Fraction("-3.1e-10")
PLAIN_MODEL = ('name = "test-bins"\n[position]\nra = "05h12m33.4567s"\ndec = "+21d02m11.234s"\n'
               '[spin]\nepoch_mjd = "58000"\nfrequency_hz = "29.7123456789"\n'
               'frequency_derivatives = ["-3.1e-10"]\n')
# barycentric events: no delays, so the phase is the spin polynomial alone
BARY_KEYWORDS = {**TT_KEYWORDS, "TIMESYS": "TDB", "TIMEREF": "SOLARSYSTEM", "MJDREFI": 57990}
WIDTH_S = 0.0123          # TIMEDEL: 0.37 of the period, so the half-bin shift is 0.18 cycles


def _phases(tmp_path, name, seconds, keywords):
    path = ogip_events(tmp_path / f"{name}.fits", seconds, keywords)
    model_path, _ = write_inputs(tmp_path, PLAIN_MODEL)
    inputs = load_event_inputs(path, model_path)
    return time_selected(inputs)[1].phase


def _cycles(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 0.5) % 1.0 - 0.5)


def test_bin_start_stamps_are_timed_at_the_bin_centre(tmp_path):
    seconds = np.array([0.0, 1234.5678, 86399.9, 3.0e5, 2.0e6])
    start = _phases(tmp_path, "start", seconds,
                    {**BARY_KEYWORDS, "TIMEPIXR": 0.0, "TIMEDEL": WIDTH_S})
    # independent computation: phase = F0 dt + F1 dt^2 / 2 in exact rational
    # arithmetic at TIME + TIMEDEL / 2 from the spin epoch (10 days after MJDREF)
    for got, s in zip(start, seconds):
        dt = Fraction(s) + Fraction(WIDTH_S) / 2 - 10 * 86400
        exact = F0 * dt + F1 * dt * dt / 2
        assert _cycles(got, float(exact - (exact.numerator // exact.denominator))) < 1e-9
    # the same events stamped at their centres (TIMEPIXR = 0.5) and ends (1)
    centre = _phases(tmp_path, "centre", seconds + WIDTH_S / 2,
                     {**BARY_KEYWORDS, "TIMEPIXR": 0.5, "TIMEDEL": WIDTH_S})
    end = _phases(tmp_path, "end", seconds + WIDTH_S,
                  {**BARY_KEYWORDS, "TIMEPIXR": 1.0, "TIMEDEL": WIDTH_S})
    # float64 rounding of TIME + d/2 at 2e6 s: ~2e-10 s, ~7e-9 cycles
    assert np.max(_cycles(start, centre)) < 2e-8 and np.max(_cycles(start, end)) < 2e-8
    # without TIMEDEL the TIME value is the instant: 0.18 cycles away
    instant = _phases(tmp_path, "instant", seconds, {**BARY_KEYWORDS, "TIMEPIXR": 0.0})
    assert np.min(_cycles(start, instant)) > 0.15


def test_time_bins_in_days_are_converted(tmp_path):
    seconds = np.array([0.5, 1.25, 3.0])          # days
    width_d = WIDTH_S / 86400.0
    got = _phases(tmp_path, "days", seconds, {**BARY_KEYWORDS, "TIMEUNIT": "d", "TIMEPIXR": 0.0,
                                               "TIMEDEL": width_d})
    for value, s in zip(got, seconds):
        dt = (Fraction(s) + Fraction(width_d) / 2) * 86400 - 10 * 86400
        exact = F0 * dt + F1 * dt * dt / 2
        assert _cycles(value, float(exact - (exact.numerator // exact.denominator))) < 1e-9


def _run(tmp_path, keywords, name="out"):
    rng = np.random.default_rng(5)
    seconds = np.sort(rng.uniform(0.0, 20000.0, 3000))
    events = ogip_events(tmp_path / "events.fits", seconds, keywords)
    model, _ = write_inputs(tmp_path, PLAIN_MODEL)
    code = main(["events", str(events), str(model), "--harmonics", "4", "--no-plot", "-o",
                 str(tmp_path / name)])
    return code, tmp_path / name / "events_report.json"


def test_wide_bins_warn_and_the_report_states_width_and_shift(tmp_path):
    code, report_path = _run(tmp_path, {**BARY_KEYWORDS, "TIMEPIXR": 0.0, "TIMEDEL": WIDTH_S})
    assert code == 0
    report = json.loads(report_path.read_text())
    bins = report["settings"]["time_bins"]
    assert bins["bin_width_s"] == WIDTH_S
    assert bins["time_pixel_reference"] == 0.0
    assert bins["shift_to_bin_centre_s"] == pytest.approx(WIDTH_S / 2, rel=1e-15)
    assert bins["bin_width_fraction_of_period"] == pytest.approx(WIDTH_S * 29.7123456789)
    # the amplitude of the fundamental kept by a box of width w: sin(pi w f)/(pi w f)
    x = np.pi * WIDTH_S * 29.7123456789
    assert bins["amplitude_kept_fundamental"] == pytest.approx(np.sin(x) / x)
    assert any("time bins (TIMEDEL = 0.0123 s)" in w for w in report["warnings"])
    # barycentric events: BARY_TIME is the bin's centre itself, TIME + TIMEDEL / 2
    from astropy.io import fits
    with fits.open(report_path.parent / "phases.fits") as hdus:
        rows = hdus["EVENTS"].data
        assert np.max(np.abs(rows["BARY_TIME"] - (rows["TIME"] + WIDTH_S / 2))) < 1e-9
        assert "centre of each time bin" in str(hdus["EVENTS"].header["HISTORY"])


def test_narrow_bins_do_not_warn(tmp_path):
    code, report_path = _run(tmp_path, {**BARY_KEYWORDS, "TIMEDEL": 1e-5})
    assert code == 0
    report = json.loads(report_path.read_text())
    assert not any("time bins" in w for w in report["warnings"])
    assert report["settings"]["time_bins"]["shift_to_bin_centre_s"] == 0.0     # TIMEPIXR 0.5
    assert any("TIMEPIXR = 0.5" in w for w in report["warnings"])             # defaulted


@pytest.mark.parametrize("keyword, value", [("TIMEPIXR", 1.5), ("TIMEPIXR", -0.1),
                                            ("TIMEPIXR", "centre"), ("TIMEDEL", -1.0)])
def test_bad_time_bin_keywords_exit_2_naming_keyword_and_hdu(tmp_path, capsys, keyword, value):
    keywords = {**BARY_KEYWORDS, "TIMEPIXR": 0.0, "TIMEDEL": WIDTH_S, keyword: value}
    code, report_path = _run(tmp_path, keywords)
    assert code == 2
    err = capsys.readouterr().err
    assert keyword in err and "EVENTS (HDU 1)" in err and "Traceback" not in err
    assert not report_path.parent.exists()
