"""The command line end to end on the sample data, and every bad-input case:
one clear message naming file, line and field, exit status 2, no traceback,
nothing written, the input untouched."""

import csv
import hashlib
import json
import os
import shutil
import subprocess
import sys

import pytest

from timingkit.cli.main import main
from timingkit.model import TimingModel

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")
SOURCES = ("demo-msp", "demo-young", "demo-slow")


@pytest.fixture()
def data(tmp_path):
    """A private copy of the sample data (so tests can break files)."""
    dst = tmp_path / "data"
    shutil.copytree(SAMPLE, dst)
    return dst


def _digest(folder) -> dict:
    return {p: hashlib.sha256(open(os.path.join(folder, p), "rb").read()).hexdigest()
            for p in sorted(os.listdir(folder))}


def test_demo_runs_end_to_end_and_recovers_the_true_models(tmp_path):
    out = tmp_path / "demo"
    res = subprocess.run([sys.executable, "-m", "timingkit", "demo", "-o", str(out)],
                         capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    assert "demo done" in res.stdout
    # the profile loop: profiles, template and TOAs written, the fit back on the truth
    loop = out / "profile-loop"
    assert (loop / "template.npz").exists() and len(list(loop.glob("obs-*.npz"))) == 24
    assert len((loop / "profile.toas").read_text().splitlines()) == 2 + 24
    after = [float(line.split()[-3]) for line in res.stdout.splitlines()
             if "sigma from the truth before" in line]
    assert len(after) == 2 and all(abs(a) < 4 for a in after)
    # the event loop: events folded and timed, the fit back on the truth
    events = out / "event-loop"
    assert (events / "folded" / "events_report.json").exists()
    assert len((events / "events.toas").read_text().splitlines()) == 2 + 20
    line = [l for l in res.stdout.splitlines() if l.startswith("event loop")][0]
    assert abs(float(line.split("spin.frequency_hz ")[1].split()[0])) < 4
    # each loop was written as one set: marked, no work folder left, and what the fold
    # recorded names the folder the files are in, not the work folder they were made in
    assert (loop / ".timingkit-output").is_file() and (events / ".timingkit-output").is_file()
    assert not [n for n in os.listdir(out) if n.startswith((".tmp-", ".old-"))]
    folded = json.loads((events / "folded" / "events_report.json").read_text())
    assert folded["events_file"] == str(events / "events.fits")
    assert folded["settings"]["observer"]["orbit_file"] == str(events / "orbit.txt")
    from astropy.io import fits
    with fits.open(events / "folded" / "phases.fits") as hdus:
        history = "".join(str(h) for hdu in hdus for h in hdu.header.get("HISTORY", []))
    assert f"orbit {events / 'orbit.txt'})" in history and ".tmp-" not in history
    for name in SOURCES:
        folder = out / name
        for f in ("fitted.toml", "residuals.csv", "residuals.png", "report.json"):
            assert (folder / f).stat().st_size > 0, (name, f)
        report = json.loads((folder / "report.json").read_text())
        for key in ("source", "toas", "free_parameters", "chi2", "dof", "reduced_chi2",
                    "rms_us", "weighted_rms_us", "parameters", "derived", "settings",
                    "warnings"):
            assert key in report, key
        assert report["settings"]["clock_corrections"] == "none applied"
        assert any("clock" in w for w in report["warnings"])
        assert 0.6 < report["reduced_chi2"] < 1.5
        # the fit lands on the model the data were simulated from (within 4 sigma)
        truth = TimingModel.from_file(os.path.join(SAMPLE, f"{name}.true.toml"))
        fitted = TimingModel.from_file(str(folder / "fitted.toml"))
        for pname in fitted.free_names:
            p, q = fitted.parameter(pname), truth.parameter(pname)
            diff = (p.value - q.value) + (p.value_lo - q.value_lo)
            assert abs(diff) < 4 * p.uncertainty, (name, pname, diff, p.uncertainty)
        for key in ("period_s", "period_derivative", "characteristic_age_yr",
                    "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s"):
            assert report["derived"][key]["value"] > 0


def test_demo_loops_are_written_as_one_set(tmp_path):
    from timingkit.cli.demo import run_demo, write_loop
    from timingkit.formats.errors import InputError
    final = tmp_path / "demo" / "profile-loop"

    def failing(data, outdir, shown=None):
        (tmp_path / "demo" / "seen").write_text(outdir)
        open(os.path.join(outdir, "obs-01.npz"), "wb").close()
        raise RuntimeError("disk full (simulated)")

    def writing(data, outdir, shown=None):
        open(os.path.join(outdir, "template.npz"), "wb").close()

    (tmp_path / "demo").mkdir()
    with pytest.raises(RuntimeError):             # a failure leaves nothing half-written
        write_loop(failing, SAMPLE, str(final))
    assert not final.exists()
    assert (tmp_path / "demo" / "seen").read_text() != str(final)   # written elsewhere first
    assert sorted(os.listdir(tmp_path / "demo")) == ["seen"]
    write_loop(writing, SAMPLE, str(final))
    (final / "stale.npz").write_bytes(b"x")
    write_loop(writing, SAMPLE, str(final))       # a rerun replaces the whole set
    assert sorted(os.listdir(final)) == [".timingkit-output", "template.npz"]
    with pytest.raises(RuntimeError):             # ... and a failed rerun keeps the old one
        write_loop(failing, SAMPLE, str(final))
    assert sorted(os.listdir(final)) == [".timingkit-output", "template.npz"]
    # a folder of the user's own is never written over, and is refused before the fits
    own = tmp_path / "mine"
    (own / "event-loop").mkdir(parents=True)
    (own / "event-loop" / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="files timingkit did not write"):
        run_demo(str(own))
    assert sorted(os.listdir(own)) == ["event-loop"]
    assert os.listdir(own / "event-loop") == ["notes.txt"]


def test_fit_residuals_plot_derive_barycentre_simulate(data, tmp_path, capsys):
    toas, model = str(data / "demo-msp.toas"), str(data / "demo-msp.toml")
    before = _digest(data)
    out = tmp_path / "fit"
    assert main(["fit", toas, model, "-o", str(out), "--fix", "dispersion.dm"]) == 0
    text = capsys.readouterr().out
    assert "reduced" in text and "spin.frequency_hz" in text and "assumptions" in text
    report = json.loads((out / "report.json").read_text())
    assert report["parameters"]["dispersion.dm"]["free"] is False
    assert report["free_parameters"] == 2
    with open(out / "residuals.csv") as fh:
        header = next(csv.reader(fh))
    assert header[:7] == ["mjd", "site", "freq_mhz", "err_us", "residual_us", "residual_phase",
                          "pulse_number"] and "backend" in header
    assert main(["plot", str(out), "--color-by", "backend", "-o", str(tmp_path / "p.pdf")]) == 0
    assert (tmp_path / "p.pdf").read_bytes()[:4] == b"%PDF"
    assert main(["residuals", toas, model, "-o", str(tmp_path / "res")]) == 0
    capsys.readouterr()
    assert main(["derive", str(out / "fitted.toml"), "--json"]) == 0
    derived = json.loads(capsys.readouterr().out)
    assert "characteristic_age_yr" in derived["derived"]
    csv_path = tmp_path / "bary.csv"
    assert main(["barycentre", toas, model, "-o", str(csv_path)]) == 0
    with open(csv_path) as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == ["mjd", "site", "freq_mhz", "tdb_mjd", "roemer_s",
                                    "shapiro_s", "dispersion_s", "binary_s", "barycentric_mjd"]
    assert len(rows) == 360
    assert all(abs(float(r["roemer_s"])) < 510 for r in rows)
    # the other spelling is an alias of the command (only of the command)
    assert main(["barycenter", toas, model, "-o", str(tmp_path / "bary2.csv")]) == 0
    assert (tmp_path / "bary2.csv").read_text() == csv_path.read_text()
    sim = tmp_path / "sim.toas"
    assert main(["simulate", model, "--start", "59000", "--end", "59100", "--count", "20",
                 "--error-us", "1", "--site", "desert-dish", "--freq-mhz", "1400", "--seed", "3",
                 "-o", str(sim)]) == 0
    first = sim.read_text()
    assert main(["simulate", model, "--start", "59000", "--end", "59100", "--count", "20",
                 "--error-us", "1", "--site", "desert-dish", "--freq-mhz", "1400", "--seed", "3",
                 "-o", str(sim)]) == 0
    assert sim.read_text() == first            # deterministic with --seed
    assert _digest(data) == before             # inputs never modified


def test_derive_json(data, capsys):
    assert main(["derive", str(data / "demo-young.true.toml"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["derived"]["braking_index"]["value"] == pytest.approx(
        18.473162904173582641 * 6.2e-23 / 2.2068e-11 ** 2, rel=1e-9)
    assert "dipole" in out["assumptions"]


TOAS_HEADER = "mjd err_us freq_mhz site\n"
GOOD_ROW = "59000.123456789 1.0 1400.0 desert-dish\n"


def _toas(tmp_path, text, name="bad.toas"):
    p = tmp_path / name
    p.write_bytes(text if isinstance(text, bytes) else text.encode())
    return str(p)


BAD_TOAS = {
    "missing column": (TOAS_HEADER.replace(" site", "") + "59000.1 1.0 1400.0\n", "site", None),
    "misnamed column": (TOAS_HEADER.replace("err_us", "error") + GOOD_ROW, "err_us", None),
    "non-numeric error": (TOAS_HEADER + GOOD_ROW + "59001.5 abc 1400.0 desert-dish\n", "err_us", 3),
    "non-finite error": (TOAS_HEADER + GOOD_ROW + "59001.5 nan 1400.0 desert-dish\n", "err_us", 3),
    "non-positive error": (TOAS_HEADER + GOOD_ROW + "59001.5 -1 1400.0 desert-dish\n", "err_us", 3),
    "malformed mjd": (TOAS_HEADER + GOOD_ROW + "59001.5.3 1.0 1400.0 desert-dish\n", "mjd", 3),
    "unknown site": (TOAS_HEADER + GOOD_ROW + "59001.5 1.0 1400.0 moon-base\n", "site", None),
    "empty file": ("", None, None),
    "binary file": (b"\x00\x01\x02\xff" * 50, None, None),
    "outside the ephemeris": (TOAS_HEADER + GOOD_ROW + "80000.5 1.0 1400.0 desert-dish\n" * 3,
                              "mjd", 3),
}


@pytest.mark.parametrize("case", sorted(BAD_TOAS))
def test_bad_toa_tables(case, data, tmp_path, capsys):
    text, field, line = BAD_TOAS[case]
    path = _toas(tmp_path, text)
    before = open(path, "rb").read()
    out = tmp_path / "out"
    code = main(["fit", path, str(data / "demo-msp.toml"), "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2, case
    assert err.startswith("timingkit: error: ") and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
    assert "bad.toas" in err
    if field:
        assert field in err
    if line:
        assert f":{line}:" in err
    assert not out.exists()                        # nothing written
    assert open(path, "rb").read() == before       # input untouched


BAD_MODELS = {
    "broken toml": ('name = "x"\n[spin\n', "bad.toml:2:"),
    "missing key": ('[position]\nra = "1h"\ndec = "2d"\n[spin]\nepoch_mjd = "59000"\n',
                    "spin.frequency_hz"),
    "unknown key": ('[position]\nra = "1h"\ndec = "2d"\nshape = 1\n[spin]\nepoch_mjd = "59000"\n'
                    'frequency_hz = "1"\n', "position.shape"),
}


@pytest.mark.parametrize("case", sorted(BAD_MODELS))
def test_bad_model_files(case, data, tmp_path, capsys):
    text, needle = BAD_MODELS[case]
    model = tmp_path / "bad.toml"
    model.write_text(text)
    out = tmp_path / "out"
    code = main(["fit", str(data / "demo-msp.toas"), str(model), "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and "bad.toml" in err and needle in err and "Traceback" not in err
    assert not out.exists()


def test_unfittable_requests(data, tmp_path, capsys):
    toas, model = str(data / "demo-msp.toas"), data / "demo-msp.toml"
    text = model.read_text()
    # a starting model far too far off to number the pulses
    far = data / "far.toml"
    far.write_text(text.replace('frequency_hz = "401.735120468728"',
                                'frequency_hz = "401.735130468728"'))
    assert main(["fit", toas, str(far), "-o", str(tmp_path / "o1")]) == 2
    err = capsys.readouterr().err
    assert "cannot number the pulses" in err and "shorter span" in err
    # no free parameters
    none = data / "none.toml"
    none.write_text(text.replace('free = ["spin.frequency_hz", "spin.frequency_derivatives.0", '
                                 '"dispersion.dm"]', "free = []"))
    assert main(["fit", toas, str(none), "-o", str(tmp_path / "o2")]) == 2
    assert "no free parameters" in capsys.readouterr().err
    # fewer TOAs than free parameters
    few = _toas(tmp_path, TOAS_HEADER + GOOD_ROW + GOOD_ROW.replace("1400.0", "800.0"), "few.toas")
    assert main(["fit", few, str(model), "-o", str(tmp_path / "o3")]) == 2
    assert "TOAs" in capsys.readouterr().err
    assert not (tmp_path / "o1").exists() and not (tmp_path / "o2").exists()


def test_debug_shows_the_traceback(data, tmp_path):
    bad = _toas(tmp_path, "")
    with pytest.raises(Exception):
        main(["--debug", "fit", bad, str(data / "demo-msp.toml"), "-o", str(tmp_path / "o")])


def test_every_command_name_is_in_the_start_up_table():
    # main() loads only the group of the command given; the table must name every
    # command (aliases too) of the full parser, and nothing else.
    from timingkit.cli.main import COMMAND_GROUP_OF, build_parser
    parser = build_parser()
    [sub] = [a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction"]
    assert set(sub.choices) == set(COMMAND_GROUP_OF)
    for name, group in COMMAND_GROUP_OF.items():
        alone = build_parser([group])
        [sub] = [a for a in alone._actions if a.__class__.__name__ == "_SubParsersAction"]
        assert name in sub.choices


def test_barycentre_start_up_loads_only_what_it_needs(data, tmp_path):
    # `timingkit barycentre` must not import the fitter, the glitch search, the batch
    # runner, the figures, scipy, or astropy's time and IERS machinery (each costs
    # tenths of a second at start-up) once its caches are warm: the first run fills
    # them (parsing astropy's bundled IERS table), the second must stay light.
    code = ("import sys; from timingkit.cli.main import main; "
            f"status = main(['barycentre', {str(data / 'demo-msp.toas')!r}, "
            f"{str(data / 'demo-msp.toml')!r}, '-o', {str(tmp_path / 'b.csv')!r}]); "
            "heavy = sorted(m for m in sys.modules if m.split('.')[0] in ('scipy', 'matplotlib') "
            "or m.startswith(('timingkit.fit', 'timingkit.glitch', 'timingkit.batch', "
            "'timingkit.outputs', 'timingkit.physics', 'astropy.time', 'astropy.utils.iers', "
            "'astropy.units', 'astropy.table')) and m not in LIGHT); print(status, heavy)")
    # the output lock of -o (standard library only, ~15 ms to import) is allowed
    code = ("LIGHT = {'timingkit.outputs', 'timingkit.outputs.folder_lock', "
            "'timingkit.outputs.stop_signals'}; " + code)
    env = dict(os.environ, TIMINGKIT_CACHE_DIR=str(tmp_path / "cache"))
    for run in ("cold", "warm"):
        res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                             timeout=300, env=env)
        assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1] == "0 []"
    assert (tmp_path / "b.csv").read_text().startswith("mjd,site,freq_mhz,tdb_mjd")
