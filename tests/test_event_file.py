"""Event-list readers: the OGIP timing keywords (OGIP memo OGIP/93-003), GTIs,
energy selection, plain-text lists, and phases.fits keeping the input rows."""

from fractions import Fraction

import numpy as np
import pytest

from events_support import TT_KEYWORDS, ogip_events
from timingkit.formats.errors import InputError
from timingkit.formats.event_list import read_event_list, select_events


def _exact_mjd(day, frac, time_s, timezero_s=0.0, unit_s=1.0):
    """MJDREF + (TIMEZERO + TIME) * unit / 86400 in exact rational arithmetic."""
    return [Fraction(day) + Fraction(frac) + (Fraction(timezero_s) + Fraction(t) * Fraction(unit_s))
            / 86400 for t in time_s]


def _as_fraction(times):
    return [Fraction(d) + Fraction(f) for d, f in zip(times.day, times.frac)]


@pytest.mark.parametrize("keywords, expect", [
    # MJDREFI + MJDREFF and TIMEZERO (OGIP/93-003 section 5)
    ({"MJDREFI": 51910, "MJDREFF": 7.428703703703703e-4, "TIMEZERO": 3.25},
     (51910, 7.428703703703703e-4, 3.25, 1.0)),
    # a single MJDREF, TIMEZERI + TIMEZERF and TIMEUNIT in days
    ({"MJDREF": 55000.5, "TIMEZERI": 2, "TIMEZERF": 0.125, "TIMEUNIT": "d"},
     (55000, 0.5, 2.125 * 86400, 86400.0)),
])
def test_time_keywords_give_the_exact_event_times(tmp_path, keywords, expect):
    time = np.array([0.0, 1.5, 12345.678901234, 8.6e6 / (86400 if "TIMEUNIT" in keywords else 1)])
    base = {"TIMESYS": "TT", "TIMEREF": "LOCAL", **keywords}
    events = read_event_list(ogip_events(tmp_path / "e.fits", time, base))
    day, frac, timezero_s, unit = expect
    exact = _exact_mjd(day, frac, time, timezero_s, unit)
    got = _as_fraction(events.times())
    # the two-part time holds 1e-16 day; the float64 TIME itself is the limit
    assert max(abs(float(g - e)) for g, e in zip(got, exact)) * 86400 < 1e-9
    assert events.scale == "tt" and events.timeref == "local"


@pytest.mark.parametrize("drop, change, keyword", [
    (["MJDREFI", "MJDREFF"], {}, "MJDREFI"),
    (["MJDREFF"], {}, "MJDREFF"),
    (["TIMESYS"], {}, "TIMESYS"),
    ([], {"TIMESYS": "GPS"}, "TIMESYS"),
    ([], {"TIMEREF": "HELIOCENTRIC"}, "TIMEREF"),
    ([], {"TIMEUNIT": "ms"}, "TIMEUNIT"),
    ([], {"MJDREFF": "soon"}, "MJDREFF"),
    ([], {"TIMEREF": "SOLARSYSTEM"}, "TIMESYS"),        # SOLARSYSTEM needs TDB
])
def test_bad_or_missing_keywords_name_keyword_and_hdu(tmp_path, drop, change, keyword):
    keys = {k: v for k, v in TT_KEYWORDS.items() if k not in drop}
    keys.update(change)
    path = ogip_events(tmp_path / "e.fits", [1.0, 2.0], keys)
    with pytest.raises(InputError) as err:
        read_event_list(path)
    assert err.value.field == keyword
    assert keyword in err.value.message and "EVENTS (HDU 1)" in err.value.message
    assert str(path) in str(err.value)


def test_defaults_of_the_memo_are_reported(tmp_path):
    keys = {"MJDREFI": 58000, "MJDREFF": 0.0, "TIMESYS": "TT"}
    events = read_event_list(ogip_events(tmp_path / "e.fits", [1.0], keys))
    assert events.timeref == "local"
    assert any("TIMEZERO = 0" in n for n in events.notes)
    assert any("TIMEREF = 'LOCAL'" in n for n in events.notes)


def test_gti_selection_and_a_gti_on_another_reference(tmp_path):
    time = np.arange(0.0, 100.0, 1.0) + 0.5
    # the GTI table counts from a reference one day earlier: its START/STOP
    # are 86400 s larger for the same instants
    gti_keys = {**TT_KEYWORDS, "MJDREFI": 57999}
    gti = np.array([[10.0, 20.0], [50.0, 60.0], [55.0, 70.0]]) + 86400.0
    path = ogip_events(tmp_path / "e.fits", time, TT_KEYWORDS, gti=gti, gti_keywords=gti_keys)
    events = read_event_list(path)
    index, facts = select_events(events)
    assert np.array_equal(time[index], time[((time >= 10) & (time < 20)) | ((time >= 50)
                                                                            & (time < 70))])
    assert facts["gti_exposure_s"] == pytest.approx(30.0)
    assert facts["gti_intervals"] == 2 and facts["outside_gti"] == 100 - 30


def test_energy_selection_uses_the_energy_or_channel_column(tmp_path):
    time = np.arange(10.0)
    energy = np.linspace(0.5, 9.5, 10).astype(np.float32)
    channel = np.arange(10, dtype=np.int32) * 100
    path = ogip_events(tmp_path / "e.fits", time, TT_KEYWORDS,
                       columns={"PI": ("J", "chan", channel), "ENERGY": ("E", "keV", energy)})
    events = read_event_list(path)
    assert events.energy_column == "ENERGY" and events.energy_unit == "keV"
    index, facts = select_events(events, (2.0, 6.0))
    assert np.array_equal(index, np.flatnonzero((energy >= 2.0) & (energy < 6.0)))
    assert facts["energy_selection"]["column"] == "ENERGY"
    index, _ = select_events(events, (200, 500), energy_column="pi")
    assert np.array_equal(index, [2, 3, 4])
    bare = read_event_list(ogip_events(tmp_path / "bare.fits", time, TT_KEYWORDS))
    with pytest.raises(InputError, match="energy or channel column"):
        select_events(bare, (1.0, 2.0))


def test_text_event_list(tmp_path):
    path = tmp_path / "events.txt"
    path.write_text("# scale: utc\n# site: dune-array\nmjd energy_kev detector\n"
                    "58849.000142889802083 2.5 a\n58849.5 3.5 b\n")
    events = read_event_list(path)
    assert events.scale == "utc" and events.site == "dune-array"
    times = events.times()
    # 20 significant digits read exactly: the fraction is the correctly rounded double
    assert times.day[0] == 58849 and times.frac[0] == float(Fraction("0.000142889802083"))
    assert np.array_equal(events.column("energy_kev"), [2.5, 3.5])
    assert list(events.column("detector")) == ["a", "b"]
    assert read_event_list(path, scale="tt", site="geocentre").scale == "tt"


@pytest.mark.parametrize("text, field, line", [
    ("mjd\n58849.1\n", "scale", None),
    ("# scale: gps\nmjd\n58849.1\n", "scale", 1),
    ("# scale: tt\nmjd\n58849.1\n5884x.2\n", "mjd", 4),
    ("# scale: tt\ntime\n58849.1\n", "mjd", 2),
])
def test_text_event_list_errors_name_line_and_field(tmp_path, text, field, line):
    path = tmp_path / "events.txt"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        read_event_list(path)
    assert err.value.field == field and err.value.line == line
