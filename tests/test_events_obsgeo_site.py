"""An OGIP event list with OBSGEO-X/Y/Z and no --site: matched to the site that
OBSERVAT (or TELESCOP) names when the positions agree within 100 m (its name
and clock table used), kept at OBSGEO with a warning when they do not; and
simulate-events --profile as a comma list that never takes MODEL."""

import json

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation
from astropy.io import fits

from events_support import SITE_FILE, write_inputs
from events_support import ogip_events
from timingkit.cli.main import main

CLOCK_OFFSET_US = 1000.0
CLOCK_TABLE = f"""# converts: dune-array maser -> UTC
# site: dune-array
mjd offset_us
57990.0 {CLOCK_OFFSET_US}
58010.0 {CLOCK_OFFSET_US}
"""
UTC_KEYWORDS = {"MJDREFI": 58000, "MJDREFF": 0.0, "TIMESYS": "UTC", "TIMEREF": "LOCAL",
                "TIMEUNIT": "s", "TIMEZERO": 0.0, "CLOCKAPP": True}


def _site_itrf_m():
    # the invented site of events_support.SITE_FILE (12.5 E, 24.0 N, 600 m) on
    # WGS84, from astropy's EarthLocation, not from timingkit's site reader
    loc = EarthLocation.from_geodetic(12.5 * u.deg, 24.0 * u.deg, 600.0 * u.m)
    return np.array([loc.x.to_value(u.m), loc.y.to_value(u.m), loc.z.to_value(u.m)])


def _east_unit():
    lon = np.radians(12.5)
    return np.array([-np.sin(lon), np.cos(lon), 0.0])


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("obsgeo")
    sites_text = SITE_FILE + 'other_names = ["dune"]\n'
    model, _ = write_inputs(folder, settings='clock = ["clock.txt"]\n')
    (folder / "sites.toml").write_text(sites_text)
    (folder / "clock.txt").write_text(CLOCK_TABLE)
    return folder, model


def _run(folder, model, name, east_offset_m, names: dict):
    xyz = _site_itrf_m() + east_offset_m * _east_unit()
    keywords = {**UTC_KEYWORDS, "OBSGEO-X": xyz[0], "OBSGEO-Y": xyz[1], "OBSGEO-Z": xyz[2],
                **names}
    events = ogip_events(folder / f"{name}.fits", np.linspace(10.0, 40000.0, 400), keywords,
                         gti=[[0.0, 40010.0]])
    out = folder / name
    assert main(["events", str(events), str(model), "--no-plot", "-o", str(out)]) == 0
    report = json.loads((out / "events_report.json").read_text())
    with fits.open(out / "phases.fits") as hdus:
        bary = np.array(hdus["EVENTS"].data["BARY_TIME"], dtype=float)
    return report, bary


def test_named_site_within_tolerance_is_used_with_its_clock(inputs, capsys):
    folder, model = inputs
    # OBSERVAT gives the site's other name, in upper case; OBSGEO 30 m east of it
    report, bary = _run(folder, model, "near", 30.0, {"OBSERVAT": "DUNE"})
    observer = report["settings"]["observer"]
    assert observer["site"] == "dune-array" and observer["observer"] == "site dune-array"
    check = observer["obsgeo_check"]
    assert check["named_by"] == "OBSERVAT = 'DUNE'" and check["site"] == "dune-array"
    assert check["distance_m"] == pytest.approx(30.0, abs=0.01)
    assert check["tolerance_m"] == 100.0 and check["used"].startswith("site dune-array")
    assert "named by OBSERVAT" in observer["note"]
    assert "clock.txt" in report["settings"]["clock"]
    assert not any("OBSGEO" in w for w in report["warnings"])
    assert "observer site dune-array" in capsys.readouterr().out
    # without a name the same file is timed at OBSGEO without the clock table: the
    # barycentric times differ by the table's offset (UTC = site clock + offset,
    # README "Clock-correction table"), less the 30 m of position (< 0.1 µs)
    plain, bary_plain = _run(folder, model, "plain", 30.0, {})
    assert plain["settings"]["observer"]["site"] == "obsgeo"
    assert np.allclose((bary - bary_plain) * 1e6, CLOCK_OFFSET_US, atol=0.2)


def test_telescop_names_the_site_when_observat_is_unknown(inputs):
    folder, model = inputs
    report, _ = _run(folder, model, "telescop", 0.0,
                     {"OBSERVAT": "SOME-ARRAY", "TELESCOP": "dune-array"})
    check = report["settings"]["observer"]["obsgeo_check"]
    assert report["settings"]["observer"]["site"] == "dune-array"
    assert check["named_by"] == "TELESCOP = 'dune-array'"
    assert check["distance_m"] < 0.01


def test_named_site_too_far_keeps_obsgeo_and_warns(inputs, capsys):
    folder, model = inputs
    report, _ = _run(folder, model, "far", 5000.0, {"OBSERVAT": "dune"})
    observer = report["settings"]["observer"]
    assert observer["site"] == "obsgeo"
    assert observer["obsgeo_check"]["distance_m"] == pytest.approx(5000.0, abs=0.01)
    assert observer["obsgeo_check"]["used"].startswith("the OBSGEO-X/Y/Z position")
    assert report["settings"]["clock"] == "no observatory clock corrections applied"
    (warning,) = [w for w in report["warnings"] if "OBSGEO" in w]
    assert "OBSERVAT = 'dune'" in warning and "site dune-array" in warning
    assert "5.000 km" in warning and "--site dune-array" in warning
    # the generic advice (a clock table in settings.clock) cannot be followed for
    # the OBSGEO position: the warning says how a clock table can apply instead
    (clock,) = [w for w in report["warnings"] if "no clock corrections" in w]
    assert "settings.clock" not in clock and "--site NAME" in clock
    assert "5.000 km" in capsys.readouterr().out


def test_no_observatory_name_keeps_obsgeo_quietly(inputs):
    folder, model = inputs
    report, _ = _run(folder, model, "anonymous", 0.0, {})
    observer = report["settings"]["observer"]
    assert observer["site"] == "obsgeo" and observer["kind"] == "earth"
    assert observer["obsgeo_check"]["named_by"] is None
    assert observer["obsgeo_check"]["obsgeo_itrf_m"] == pytest.approx(list(_site_itrf_m()))
    assert not any("OBSGEO" in w or "OBSERVAT" in w for w in report["warnings"])


def test_named_site_without_obsgeo_is_used_not_the_geocentre(inputs):
    # a locally timed list naming a known site but giving no OBSGEO: timed at the
    # site (position and clock table), as with --site, not at the geocentre with
    # the low-orbit warning
    folder, model = inputs
    keywords = {**UTC_KEYWORDS, "OBSERVAT": "Dune"}
    events = ogip_events(folder / "named.fits", np.linspace(10.0, 40000.0, 400), keywords,
                         gti=[[0.0, 40010.0]])
    outs = {}
    for label, extra in (("named-out", []), ("given-out", ["--site", "dune-array"])):
        out = folder / label
        assert main(["events", str(events), str(model), *extra, "--no-plot", "-o",
                     str(out)]) == 0
        with fits.open(out / "phases.fits") as hdus:
            outs[label] = (json.loads((out / "events_report.json").read_text()),
                           np.array(hdus["EVENTS"].data["PHASE"], dtype=float))
    report, phase = outs["named-out"]
    observer = report["settings"]["observer"]
    assert observer["site"] == "dune-array" and "OBSERVAT = 'Dune'" in observer["note"]
    assert "clock.txt" in report["settings"]["clock"]
    assert not any("geocentre" in w for w in report["warnings"])
    assert np.array_equal(phase, outs["given-out"][1])


def test_simulate_events_profile_comma_list_before_model(inputs, tmp_path):
    folder, model = inputs
    out = tmp_path / "two.fits"
    # --profile right before MODEL: a comma list (and repeatable), so MODEL stays
    # the positional argument
    assert main(["simulate-events", "--profile", "gauss:0.1:0.05,gauss:0.6:0.1", "--profile",
                 "gauss:0.35:0.05:0.5", str(model), "--start", "58000", "--end", "58000.2",
                 "--rate-per-s", "0.5", "--pulsed-fraction", "1", "--site", "dune-array",
                 "--seed", "4", "-o", str(out)]) == 0
    with fits.open(out) as hdus:
        history = "".join(str(h) for h in hdus["EVENTS"].header["HISTORY"]).replace(" ", "")
    assert "gauss:0.1:0.05:1,gauss:0.6:0.1:1,gauss:0.35:0.05:0.5,seed4" in history
    folded = tmp_path / "fold"
    assert main(["events", str(out), str(model), "--bins", "20", "--no-plot", "-o",
                 str(folded)]) == 0
    counts = np.array(json.loads((folded / "events_report.json").read_text())
                      ["profile"]["counts"])
    # all three components were drawn: counts peak in the bins of phases 0.1,
    # 0.35 and 0.6, and the bin at 0.85 (no component) is nearly empty
    assert min(counts[2], counts[7], counts[12]) > 5 * counts[17]
