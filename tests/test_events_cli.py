"""The event commands end to end: simulate-events, events and event-toas on an
invented site, the geocentre and a spacecraft; outputs, warnings and errors."""

import hashlib
import json

import numpy as np
import pytest
from astropy.io import fits

from events_support import TT_KEYWORDS, ogip_events, write_inputs, write_orbit
from timingkit.cli.main import main


def _sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def site_events(tmp_path_factory):
    folder = tmp_path_factory.mktemp("site")
    model, _ = write_inputs(folder)
    events = folder / "events.fits"
    assert main(["simulate-events", str(model), "--start", "58000", "--end", "58000.5",
                 "--rate-per-s", "0.4", "--pulsed-fraction", "0.3", "--profile",
                 "gauss:0.25:0.08", "--site", "dune-array", "--seed", "9", "-o",
                 str(events)]) == 0
    return folder, model, events


def test_simulated_site_list_is_ogip(site_events):
    _, _, events = site_events
    with fits.open(events) as hdus:
        header = hdus["EVENTS"].header
        assert header["TIMESYS"] == "UTC" and header["TIMEREF"] == "LOCAL"
        assert header["OBSERVAT"] == "dune-array" and "OBSGEO-X" in header
        assert hdus["GTI"].data["START"][0] == pytest.approx(0.0)
        assert hdus["EVENTS"].columns["ENERGY"].unit == "keV"


def test_events_command_outputs(site_events, tmp_path, capsys):
    folder, model, events = site_events
    before = _sha(events)
    out = tmp_path / "out"
    # the site comes from the file's OBSGEO keywords; --site names it instead
    assert main(["events", str(events), str(model), "--site", "dune-array", "--harmonics", "4",
                 "--bins", "20", "-o", str(out)]) == 0
    assert _sha(events) == before                       # the input is never changed
    report = json.loads((out / "events_report.json").read_text())
    assert report["events"] > 5000 and len(report["z2"]) == 4
    assert report["profile"]["bins"] == 20 and sum(report["profile"]["counts"]) == report["events"]
    pf = report["pulsed_fraction"]
    assert abs(pf["value"] - 0.3) < 4 * pf["uncertainty"]
    peak = report["peak_phase"]
    assert abs(peak["value"] - 0.25) < 4 * peak["uncertainty"]
    assert report["h_test"]["false_alarm_probability"] == 1e-5
    assert report["h_test"]["false_alarm_probability_upper_limit"] is True
    assert report["settings"]["observer"]["site"] == "dune-array"
    assert "no observatory clock corrections" in report["settings"]["clock"]
    with fits.open(out / "phases.fits") as hdus, fits.open(events) as original:
        table = hdus["EVENTS"].data
        assert table.columns.names == ["TIME", "ENERGY", "PHASE", "BARY_TIME"]
        assert np.array_equal(table["TIME"], original["EVENTS"].data["TIME"])
        assert np.all((table["PHASE"] >= 0) & (table["PHASE"] < 1))
        assert np.all(np.abs(table["BARY_TIME"] - table["TIME"]) < 600)
        assert "GTI" in hdus
    assert (out / "profile.png").stat().st_size > 10_000
    assert "H-test" in capsys.readouterr().out


def test_energy_range_and_obsgeo_site(site_events, tmp_path):
    _, model, events = site_events
    out = tmp_path / "out"
    assert main(["events", str(events), str(model), "--energy-range", "2", "5", "--no-plot",
                 "-o", str(out)]) == 0
    report = json.loads((out / "events_report.json").read_text())
    with fits.open(events) as hdus:
        energy = hdus["EVENTS"].data["ENERGY"]
        assert report["events"] == int(np.sum((energy >= 2) & (energy < 5)))
    assert report["settings"]["observer"]["kind"] == "earth"         # from OBSGEO-X/Y/Z
    with fits.open(out / "phases.fits") as hdus:
        assert len(hdus["EVENTS"].data) == report["events"]


def test_spacecraft_list_without_orbit_warns(tmp_path, capsys):
    model, _ = write_inputs(tmp_path)
    orbit = write_orbit(tmp_path / "orbit.txt", 57999.9, 58000.4, 60.0)
    events = tmp_path / "events.fits"
    assert main(["simulate-events", str(model), "--start", "58000", "--end", "58000.3",
                 "--rate-per-s", "0.3", "--pulsed-fraction", "0.3", "--orbit", str(orbit),
                 "--seed", "1", "-o", str(events)]) == 0
    assert main(["events", str(events), str(model), "--no-plot", "-o",
                 str(tmp_path / "geo")]) == 0
    assert "~23 ms" in capsys.readouterr().out
    report = json.loads((tmp_path / "geo" / "events_report.json").read_text())
    assert any("~23 ms" in w for w in report["warnings"])
    assert main(["events", str(events), str(model), "--orbit", str(orbit), "--no-plot", "-o",
                 str(tmp_path / "sc")]) == 0
    with_orbit = json.loads((tmp_path / "sc" / "events_report.json").read_text())
    assert with_orbit["h_test"]["value"] > report["h_test"]["value"]
    assert with_orbit["settings"]["observer"]["interpolation"] == "cubic Hermite"
    # events beyond the orbit table: exit 2, the orbit file named
    short = write_orbit(tmp_path / "short.txt", 57999.9, 58000.1, 60.0)
    assert main(["events", str(events), str(model), "--orbit", str(short), "-o",
                 str(tmp_path / "bad")]) == 2
    assert "outside the orbit table" in capsys.readouterr().err
    assert not (tmp_path / "bad").exists()


def test_bad_keyword_exits_2_naming_keyword_and_hdu(tmp_path, capsys):
    model, _ = write_inputs(tmp_path)
    keys = {k: v for k, v in TT_KEYWORDS.items() if k != "TIMESYS"}
    events = ogip_events(tmp_path / "events.fits", np.arange(100.0), keys)
    assert main(["events", str(events), str(model), "-o", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "TIMESYS" in err and "EVENTS (HDU 1)" in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()


def test_text_list_and_event_toas(tmp_path, capsys):
    model, _ = write_inputs(tmp_path)
    rng = np.random.default_rng(2)
    # a barycentric text list (site ssb, TDB) folded with the model's own phase
    seconds = np.sort(rng.uniform(0, 2 * 86400, 6000))
    f0, f1 = 29.7123456789, -3.1e-10
    phase = f0 * seconds + 0.5 * f1 * seconds ** 2
    seconds += (((0.4 - phase) % 1) / (f0 + f1 * seconds)) * (rng.random(6000) < 0.5)
    text = tmp_path / "events.txt"
    text.write_text("mjd\n" + "\n".join(f"{58000 + s / 86400:.15f}" for s in seconds) + "\n")
    assert main(["events", str(text), str(model), "--scale", "tdb", "--site", "ssb",
                 "--no-plot", "-o", str(tmp_path / "out")]) == 0
    report = json.loads((tmp_path / "out" / "events_report.json").read_text())
    assert abs(report["peak_phase"]["value"] - 0.4) < 0.01
    toas = tmp_path / "events.toas"
    assert main(["event-toas", str(text), str(model), "--scale", "tdb", "--site", "ssb",
                 "--template", "auto", "--span-days", "0.5", "--save-template",
                 str(tmp_path / "auto.npz"), "-o", str(toas)]) == 0
    lines = [l for l in toas.read_text().splitlines() if not l.startswith("#")]
    assert lines[0].split()[:4] == ["mjd", "err_us", "freq_mhz", "site"] and len(lines) == 5
    from timingkit.formats.profile_file import read_template_file
    assert len(read_template_file(tmp_path / "auto.npz").profile) == 512
    assert main(["fit", str(toas), str(model), "--free", "spin.frequency_hz", "--no-plot", "-o",
                 str(tmp_path / "fit")]) == 0


def test_missing_clockapp_is_a_warning(tmp_path):
    model, _ = write_inputs(tmp_path)
    keys = {**TT_KEYWORDS, "TIMEREF": "GEOCENTRIC"}
    events = ogip_events(tmp_path / "events.fits", np.linspace(0.0, 3600.0, 500), keys)
    assert main(["events", str(events), str(model), "--no-plot", "-o", str(tmp_path / "o")]) == 0
    report = json.loads((tmp_path / "o" / "events_report.json").read_text())
    assert any("CLOCKAPP missing" in w for w in report["warnings"])
    assert report["settings"]["clock"].startswith("unknown")


def test_planet_list_is_honoured_and_checked(site_events, tmp_path, capsys):
    # settings.shapiro_delay_planets as a list reaches the event path as a list:
    # the report names exactly those bodies, and a name that is no planet is an
    # input error on that setting (it was an internal error when the events path
    # turned the list into 'true').
    _, _, events = site_events
    listed, _ = write_inputs(tmp_path, settings='shapiro_delay_planets = ["jupiter"]\n')
    out = tmp_path / "listed"
    assert main(["events", str(events), str(listed), "--site", "dune-array", "-o", str(out)]) == 0
    report = json.loads((out / "events_report.json").read_text())
    assert report["settings"]["shapiro_delay_bodies"] == ["sun", "jupiter"]
    capsys.readouterr()
    (tmp_path / "b").mkdir()
    bad, _ = write_inputs(tmp_path / "b", settings='shapiro_delay_planets = ["vulcan"]\n')
    assert main(["events", str(events), str(bad), "--site", "dune-array",
                 "-o", str(tmp_path / "bad")]) == 2
    err = capsys.readouterr().err
    assert "settings.shapiro_delay_planets" in err and "internal error" not in err
    assert not (tmp_path / "bad").exists()


def test_events_default_output_folder_is_named_after_the_source(site_events, tmp_path,
                                                                monkeypatch, capsys):
    """Like fit, residuals and glitches (README: OUTDIR defaults to SOURCE-COMMAND)."""
    _, model, events = site_events
    monkeypatch.chdir(tmp_path)
    assert main(["events", str(events), str(model), "--harmonics", "2", "--no-plot"]) == 0
    name = next(line for line in model.read_text().splitlines() if line.startswith("name"))
    folder = tmp_path / (name.split("=")[1].strip().strip('"') + "-events")
    assert sorted(p.name for p in tmp_path.iterdir()) == [folder.name]
    assert (folder / "events_report.json").is_file()
    assert f"wrote {folder.name}/" in capsys.readouterr().out


def test_no_event_command_writes_over_one_of_its_inputs(site_events, tmp_path, capsys):
    """Inputs are never changed: -o (or --save-template) naming the event list, the
    model or its site file is refused before any work."""
    folder, model, events = site_events
    before = {path: _sha(path) for path in (events, model, folder / "sites.toml")}
    toas = ["event-toas", str(events), str(model), "--template", "auto", "--span-days", "0.1"]
    for command in ([*toas, "-o", str(events)],
                    [*toas, "-o", str(folder / "sites.toml")],
                    [*toas, "--save-template", str(model), "-o", str(tmp_path / "t.toas")],
                    ["simulate-events", str(model), "--start", "58000", "--end", "58000.01",
                     "--rate-per-s", "0.4", "--pulsed-fraction", "0.3", "--site",
                     "dune-array", "-o", str(model)]):
        assert main(command) == 2, command
        assert "is an input of this command" in capsys.readouterr().err
    assert {path: _sha(path) for path in before} == before
    assert list(tmp_path.iterdir()) == []
