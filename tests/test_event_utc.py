"""FITS event lists on UTC: TIME is elapsed SI seconds from MJDREF (the FITS
time standard's relative time, Rots et al. 2015, A&A 574, A36), carried to TT
through ERFA with one constant; checked against astropy.time across the leap
second at the end of 2016 (IERS Bulletin C 52, from memory: TAI - UTC =
37 s from 2017 January 1) and against astropy's own FITS time reader."""

import warnings

import numpy as np
import pytest
from astropy.table import Table
from astropy.time import Time, TimeDelta

from events_support import TT_KEYWORDS, ogip_events, write_inputs
from timingkit.pipeline.event_run import load_event_inputs, time_selected

# MJDREF on 2016 December 31 (MJD 57753, the day ending in the leap second),
# with a fraction and a TIMEZERO so that both take part
UTC_KEYWORDS = {**TT_KEYWORDS, "TIMESYS": "UTC", "TIMEREF": "GEOCENTRIC", "MJDREFI": 57753,
                "MJDREFF": 0.25, "TIMEZERO": -100.0}
# elapsed seconds from MJDREF + TIMEZERO: 18 h to 18 h + 1 min after MJDREF on both
# sides of the leap second (at 64800 + 100 s), plus a day before and a day after
SECONDS = np.concatenate([[100.0 - 86400.0, 100.0],
                          100.0 + 64800.0 + np.arange(-30.0, 31.0, 0.5) + 0.123456789,
                          [100.0 + 2 * 86400.0]])


def _clock(tmp_path, keywords=UTC_KEYWORDS, seconds=SECONDS):
    path = ogip_events(tmp_path / "utc.fits", seconds, keywords)
    model_path, _ = write_inputs(tmp_path)
    inputs = load_event_inputs(path, model_path, site="geocentre")
    return inputs, time_selected(inputs)[0], path


def _seconds_between(tt, astro_tt):
    """(ours - astropy) in seconds, both TT (two-part sums kept apart)."""
    return ((tt.day + 2400000.5 - astro_tt.jd1) + (tt.frac - astro_tt.jd2)) * 86400.0


def test_utc_seconds_across_a_leap_second_match_astropy(tmp_path):
    inputs, clock, path = _clock(tmp_path)
    ours = clock.at(clock.seconds, clock.seconds_lo)
    assert clock.scale == "tt"
    # astropy.time: MJDREF as a UTC date plus TIMEZERO + TIME as a TimeDelta in SI
    # seconds, to TT (ERFA with astropy's leap seconds)
    ref = Time(57753, 0.25, format="mjd", scale="utc")
    expected = (ref + TimeDelta(-100.0 + SECONDS, format="sec")).tt
    assert np.max(np.abs(_seconds_between(ours, expected))) < 1e-9
    # the leap second is inside: TT - UTC (clock reading) steps from 68.184 to 69.184 s
    utc_reading = (ref + TimeDelta(-100.0 + SECONDS, format="sec")).utc
    tt_minus_utc = ((expected.jd1 - utc_reading.jd1) + (expected.jd2 - utc_reading.jd2)) * 86400
    assert tt_minus_utc[0] == pytest.approx(68.184, abs=1e-6)
    assert tt_minus_utc[-1] == pytest.approx(69.184, abs=1e-6)
    assert any("1 leap second(s) lie between" in w for w in inputs.warnings)


def test_astropy_fits_time_reader_reads_the_same_times(tmp_path):
    # astropy's own reading of the FITS time keywords of the same file
    # (Table.read(..., astropy_native=True): MJDREF + TimeDelta(TIME)); that reader
    # takes MJDREF (not MJDREFI/MJDREFF) and leaves TIMEZERO out, so the file says
    # MJDREF alone
    keywords = {k: v for k, v in UTC_KEYWORDS.items()
                if k not in ("MJDREFI", "MJDREFF", "TIMEZERO")}
    _, clock, path = _clock(tmp_path, {**keywords, "MJDREF": 57753.25})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")          # "reference position will be ignored"
        column = Table.read(path, hdu=1, astropy_native=True)["TIME"]
    assert isinstance(column, Time) and column.scale == "utc"
    ours = clock.at(clock.seconds, clock.seconds_lo)
    assert np.max(np.abs(_seconds_between(ours, column.tt))) < 1e-9


def test_no_note_without_a_leap_second_and_tt_lists_unchanged(tmp_path):
    keywords = {**UTC_KEYWORDS, "MJDREFI": 58000, "MJDREFF": 0.0, "TIMEZERO": 0.0}
    inputs, clock, _ = _clock(tmp_path, keywords, np.array([10.0, 5000.0]))
    assert not any("leap second(s)" in w for w in inputs.warnings)
    # TAI - UTC = 37 s in 2017 (IERS Bulletin C): TT = UTC + 69.184 s
    ours = clock.at(clock.seconds)
    expected = (Time(58000, format="mjd", scale="utc") + TimeDelta([10.0, 5000.0],
                                                                   format="sec")).tt
    assert np.max(np.abs(_seconds_between(ours, expected))) < 1e-9
    assert clock.reference_frac[0] * 86400 == pytest.approx(69.184, abs=1e-9)
    tt_inputs, tt_clock, _ = _clock(tmp_path, {**TT_KEYWORDS, "TIMEREF": "GEOCENTRIC"},
                                    np.array([10.0, 5000.0]))
    assert tt_clock.reference_frac == (0.0, 0.0) and tt_clock.scale == "tt"


def test_utc_orbit_table_rows_across_the_leap_second(tmp_path):
    # an orbit table's FITS TIME on UTC is read as the events' is: elapsed seconds,
    # so its rows on TT are those astropy.time gives (MJDREF + TimeDelta, to TT)
    from astropy.io import fits

    from events_support import circular_orbit_state
    from timingkit.formats.orbit_table import read_orbit_table
    from timingkit.geometry.spacecraft import SpacecraftTrajectory
    seconds = np.arange(85000.0, 88000.0, 60.0)          # MJDREF 57753: over the leap second
    pos, vel = circular_orbit_state(seconds)
    cols = [fits.Column("TIME", "D", unit="s", array=seconds)]
    cols += [fits.Column(n, "D", unit="m", array=pos[:, i]) for i, n in enumerate("XYZ")]
    hdu = fits.BinTableHDU.from_columns(cols, name="ORBIT")
    hdu.header.update({"MJDREFI": 57753, "MJDREFF": 0.0, "TIMESYS": "UTC"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "orbit.fits")
    trajectory = SpacecraftTrajectory(read_orbit_table(tmp_path / "orbit.fits"))
    expected = (Time(57753, format="mjd", scale="utc")
                + TimeDelta(seconds[[0, -1]], format="sec")).tt
    for got, want in zip((trajectory.start_tt, trajectory.end_tt), expected):
        assert abs(_seconds_between(got, want)[0]) < 1e-9
    # the rows stay evenly spaced on TT: no one-second jump at the leap second
    assert trajectory.max_spacing_s == pytest.approx(60.0, abs=1e-6)


def test_reference_past_the_leap_second_table_is_a_caution(tmp_path):
    from timingkit.geometry import timescales
    end = timescales.leap_second_table_end_mjd()
    keywords = {**UTC_KEYWORDS, "MJDREFI": int(end) + 30, "MJDREFF": 0.0, "TIMEZERO": 0.0}
    inputs, clock, _ = _clock(tmp_path, keywords, np.array([10.0, 5000.0]))
    assert any("bundled leap-second table expires" in w for w in inputs.warnings)
    # no leap second assumed past the table: TT - UTC stays at its last value (IERS
    # Bulletin C: 37 s since 2017 January 1, none announced since, from memory)
    assert clock.reference_frac[0] * 86400 == pytest.approx(69.184, abs=1e-9)
