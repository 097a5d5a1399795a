"""TOAs from folded profiles: the phase-gradient fit calibrated by simulation
(pulls ~ N(0,1), uncertainties at the Cramér-Rao bound), checked against a
general-purpose optimiser; the profile and template files; auto templates; and
the whole loop predictor -> folded profiles -> TOAs -> fit."""

import os
import shutil

import numpy as np
import pytest
import scipy.optimize
import scipy.stats

from timingkit.cli.main import main
from timingkit.fit import fit
from timingkit.formats.errors import InputError
from timingkit.formats.profile_file import (ProfileSet, read_profile_file, read_template_file,
                                            write_profile_file)
from timingkit.geometry.observations import prepare_observations
from timingkit.model import TimingModel
from timingkit.predict import PhaseContext
from timingkit.profiles.phase_gradient import cramer_rao_shift_cycles, fit_shifts, shift_profiles
from timingkit.profiles.simulate import ProfileSimulation, simulate_profiles
from timingkit.profiles.templates import auto_template, builtin_template
from timingkit.profiles.toas import gather_profiles, time_profiles

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")
BINS = 256


def _noisy(template, shifts, snr, rng):
    """b x template shifted by ``shifts`` + baseline + N(0, 1) per bin, S/N = snr
    (matched filter: b sqrt(sum (T - mean)^2) / sigma)."""
    b = snr / np.sqrt(np.sum((template - template.mean()) ** 2))
    clean = shift_profiles(np.broadcast_to(template, (len(shifts), len(template))), shifts)
    return 3.0 + b * clean + rng.normal(0, 1, clean.shape), b


@pytest.mark.parametrize("snr", [15.0, 40.0, 300.0])
def test_shift_pulls_and_cramer_rao(snr):
    # Taylor 1992 (Phil. Trans. R. Soc. A 341, 117): the phase-gradient shift is
    # the least-squares (maximum-likelihood, white noise) estimate; its error
    # should be the Cramér-Rao bound for the template (Kay 1993, Fundamentals of
    # Statistical Signal Processing I, ch. 3, from memory).
    rng = np.random.default_rng(int(snr))
    template = builtin_template(BINS).profile
    truth = rng.uniform(-0.5, 0.5, 2000)
    profiles, b = _noisy(template, truth, snr, rng)
    result = fit_shifts(profiles, template)
    error = result.shift_cycles - truth
    error -= np.round(error)
    pulls = error / result.shift_err_cycles
    assert abs(pulls.mean()) < 0.08
    assert 0.94 < pulls.std() < 1.06
    assert scipy.stats.kstest(pulls, "norm").pvalue > 1e-3
    bound = cramer_rao_shift_cycles(template, b, 1.0)
    assert 0.9 < np.median(result.shift_err_cycles) / bound < 1.1
    assert 0.9 < error.std() / bound < 1.1
    assert 0.95 < np.mean(result.snr) / snr < 1.05
    assert 0.97 < np.mean(result.noise_sigma) < 1.03


def test_shift_agrees_with_a_general_optimiser():
    # scipy.optimize.minimize_scalar on the same least-squares problem in the
    # time domain (template turned by a Fourier shift, amplitude and baseline
    # solved linearly at each trial shift)
    rng = np.random.default_rng(7)
    template = builtin_template(BINS).profile
    truth = np.array([0.123, -0.377, 0.49])
    profiles, _ = _noisy(template, truth, 30.0, rng)
    result = fit_shifts(profiles, template)
    for row, guess, tau in zip(profiles, result.shift_cycles, truth):
        def chi2(shift):
            model = shift_profiles(template, shift)
            design = np.column_stack([np.ones(BINS), model])
            coef, *_ = np.linalg.lstsq(design, row, rcond=None)
            return np.sum((row - design @ coef) ** 2)
        best = scipy.optimize.minimize_scalar(chi2, bracket=(guess - 0.01, guess + 0.01),
                                              tol=1e-12)
        assert abs(best.x - guess) < 1e-6
        assert abs(guess - tau) < 0.01


def test_files_round_trip_and_errors(tmp_path):
    rng = np.random.default_rng(1)
    ps = ProfileSet(site="desert-dish", centre_freq_mhz=1400.0, dedispersion_dm=10.0,
                    channel_freq_mhz=[1350.0, 1450.0], reference_mjd=["60000.5", "60000.51"],
                    folding_frequency_hz=[100.0, 100.0], data=rng.normal(size=(2, 2, 64)))
    path = tmp_path / "obs.npz"
    write_profile_file(ps, str(path))
    back = read_profile_file(str(path))
    assert np.array_equal(back.data, ps.data) and back.site == "desert-dish"
    assert back.reference_day[1] == 60000.0 and back.reference_frac[1] == 0.51
    with np.load(path) as npz:
        arrays = dict(npz)
    arrays["reference_mjd"] = np.array(["60000.5"])
    np.savez(tmp_path / "bad.npz", **arrays)
    with pytest.raises(InputError, match="bad.npz: field 'reference_mjd': has 1 entries"):
        read_profile_file(str(tmp_path / "bad.npz"))
    (tmp_path / "text.npz").write_text("not a zip")
    with pytest.raises(InputError, match="not a profile file"):
        read_profile_file(str(tmp_path / "text.npz"))
    with pytest.raises(InputError, match="not a template file"):
        read_template_file(str(path))
    # channels that were not dedispersed cannot be added together
    ps.dedispersion_dm = 0.0
    write_profile_file(ps, str(path))
    with pytest.raises(InputError, match="--per-channel"):
        gather_profiles([read_profile_file(str(path))])
    assert len(gather_profiles([read_profile_file(str(path))], per_channel=True).label) == 2


def test_auto_template_is_noise_free_and_gives_calibrated_toas():
    rng = np.random.default_rng(3)
    true = builtin_template(BINS).profile
    truth = rng.uniform(-0.5, 0.5, 300)
    profiles, _ = _noisy(true, truth, 40.0, rng)
    made = auto_template(list(profiles), BINS)
    assert 2 <= len(made.components) <= 6
    assert made.components[0, 0] < 0.01 or made.components[0, 0] > 0.99   # peak at phase 0
    # the same shape as the template the data came from, up to a turn
    turn = fit_shifts(made.profile, true).shift_cycles[0]
    aligned = shift_profiles(true, turn)
    assert np.corrcoef(aligned, made.profile)[0, 1] > 0.995
    result = fit_shifts(profiles, made.profile)
    error = result.shift_cycles - truth - turn
    error -= np.round(error)
    pulls = (error - np.mean(error)) / result.shift_err_cycles
    assert 0.9 < pulls.std() < 1.12


LOOP_MODEL = """name = "invented-loop"
[position]
ra = "07h08m09.1011s"
dec = "+33d44m55.66s"
epoch_mjd = "60000"
[spin]
epoch_mjd = "60000"
frequency_hz = "173.456789012345678"
frequency_derivatives = ["-4.4e-16"]
[dispersion]
dm = 21.7
"""


def test_the_whole_loop_recovers_the_true_model(sites, ephemeris):
    # true model -> folding predictors from a slightly wrong model -> simulated
    # profiles -> profile TOAs -> fit from the wrong model: the fit lands on the
    # true model within its uncertainties, and the TOAs' residuals against the
    # true model are white with the stated errors.
    true = TimingModel.from_text(LOOP_MODEL)
    wrong = true.copy()
    wrong.parameter("spin.frequency_hz").add(2e-9)
    wrong.parameter("dispersion.dm").add(0.02)
    context = PhaseContext(sites, ephemeris)
    sim = ProfileSimulation(site="lake-array", start_mjd=60000, end_mjd=60120, count=36,
                            centre_freqs_mhz=(700.0, 1400.0, 2300.0), channels=2,
                            bandwidth_mhz=200.0, subints=2, bins=BINS, snr=60.0, seed=11)
    sets = simulate_profiles(true, wrong, sim, context, builtin_template(BINS))
    timed = gather_profiles(sets, per_channel=True)
    result = time_profiles(timed, builtin_template(BINS).profile)
    toas = result.toas
    assert len(toas) == 72 and not result.skipped
    obs = prepare_observations(toas, sites, ephemeris)
    from timingkit.fit import compute_residuals
    res = compute_residuals(true, obs)
    assert 0.6 < res.chi_square() / len(toas) < 1.5
    names = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm"]
    fitted = fit(wrong, obs, free=names)
    assert 0.6 < fitted.reduced_chi2 < 1.5
    for name in names:
        p, q, w = fitted.model.parameter(name), true.parameter(name), wrong.parameter(name)
        diff = (p.value - q.value) + (p.value_lo - q.value_lo)
        assert abs(diff) < 4 * p.uncertainty, (name, diff, p.uncertainty)
        if name != "spin.frequency_derivatives.0":
            start = (w.value - q.value) + (w.value_lo - q.value_lo)
            assert abs(start) > 20 * p.uncertainty        # the folding model was far off


def _simulated_profiles(tmp_path, end_mjd: str, count: int, options: list[str]):
    """simulate-profiles of the sample slow source (a copy of the sample folder)
    at desert-dish from MJD 60000; returns the copy, the output folder and the
    profile files."""
    data = tmp_path / "data"
    shutil.copytree(SAMPLE, data)
    sim = tmp_path / "sim"
    assert main(["simulate-profiles", str(data / "demo-slow.toml"), "--site", "desert-dish",
                 "--start", "60000", "--end", end_mjd, "--count", str(count), "--bins", "128",
                 *options, "-o", str(sim)]) == 0
    return data, sim, sorted(str(p) for p in sim.glob("obs-*.npz"))


def test_profile_commands(tmp_path, capsys):
    data, sim, files = _simulated_profiles(tmp_path, "60010", 5, [
        "--freq-mhz", "350,1400", "--channels", "3", "--snr", "50", "--seed", "2"])
    assert len(files) == 5 and (sim / "template.npz").exists()
    out = tmp_path / "prof.toas"
    assert main(["profile-toas", *files, "--template", "auto", "-o", str(out)]) == 0
    assert "5 TOAs" in capsys.readouterr().out
    assert (tmp_path / "prof.template.npz").exists()
    text = out.read_text()
    assert "profile" in text.splitlines()[1] and "obs-1.npz" in text
    per = tmp_path / "per.toas"
    assert main(["profile-toas", *files, "--template", str(sim / "template.npz"),
                 "--per-channel", "-o", str(per)]) == 0
    assert len(per.read_text().splitlines()) == 2 + 15
    assert main(["profile-toas", files[0], "--template", files[1], "-o",
                 str(tmp_path / "x.toas")]) == 2
    assert "not a template file" in capsys.readouterr().err
    assert not (tmp_path / "x.toas").exists()
    assert main(["profile-toas", files[0], "--template", str(sim / "template.npz"),
                 "--min-snr", "1000", "-o", str(tmp_path / "x.toas")]) == 2
    assert "no profile reaches" in capsys.readouterr().err
    assert main(["simulate-profiles", str(data / "demo-slow.toml"), "--site", "desert-dish",
                 "--start", "60000", "--end", "60010", "--count", "2", "--freq-mhz", "350",
                 "--bandwidth-mhz", "800", "-o", str(tmp_path / "bad")]) == 2
    assert "bandwidth" in capsys.readouterr().err and not (tmp_path / "bad").exists()


def test_simulate_profiles_writes_its_outputs_as_one_set(tmp_path, capsys, monkeypatch):
    # like every command's output folder (timingkit.outputs.output_set): complete or
    # absent, a rerun replaces the whole set, a failure half-way leaves the old set
    import errno
    import timingkit.formats.profile_file as profile_file
    data = tmp_path / "data"
    shutil.copytree(SAMPLE, data)
    sim = tmp_path / "sim"

    def simulate(count, outdir=sim):
        return main(["simulate-profiles", str(data / "demo-slow.toml"), "--site", "desert-dish",
                     "--start", "60000", "--end", "60010", "--count", str(count), "--bins", "64",
                     "--freq-mhz", "350,1400", "--seed", "3", "-o", str(outdir)])

    assert simulate(3) == 0
    assert sorted(p.name for p in sim.iterdir()) == [".timingkit-output", "obs-1.npz",
                                                     "obs-2.npz", "obs-3.npz", "template.npz"]
    assert simulate(2) == 0                               # no stale obs-3.npz of the first run
    kept = {p.name: p.read_bytes() for p in sim.iterdir()}
    assert sorted(kept) == [".timingkit-output", "obs-1.npz", "obs-2.npz", "template.npz"]
    capsys.readouterr()

    real_write = profile_file.write_profile_file
    written = []

    def disk_fills(profiles, path):
        if written:
            raise OSError(errno.ENOSPC, "No space left on device")
        written.append(path)
        real_write(profiles, path)
    monkeypatch.setattr(profile_file, "write_profile_file", disk_fills)
    assert simulate(4) == 2
    assert "no space left on the disk" in capsys.readouterr().err
    assert written and {p.name: p.read_bytes() for p in sim.iterdir()} == kept
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]    # no leftovers
    monkeypatch.setattr(profile_file, "write_profile_file", real_write)

    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("my own notes\n")
    assert simulate(2, mine) == 2                         # a folder timingkit did not write
    assert "did not write" in capsys.readouterr().err
    assert sorted(p.name for p in mine.iterdir()) == ["notes.txt"]
    assert simulate(2, data) == 2                         # the folder of the inputs
    assert "holds an input" in capsys.readouterr().err
    assert (data / "demo-slow.toml").exists() and not list(data.glob("obs-*.npz"))


def test_profile_toas_carry_the_flags_given(tmp_path, capsys):
    # --flag NAME=VALUE puts the observation's flag on every TOA, so a
    # [[time_offset]] group of the model can take them; names profile-toas sets
    # itself, or the TOA table's own columns, are refused naming the option.
    from timingkit.formats.toa_reader import read_toa_table
    _, sim, files = _simulated_profiles(tmp_path, "60004", 3, ["--snr", "60", "--seed", "4"])
    out = tmp_path / "flagged.toas"
    assert main(["profile-toas", *files, "--template", str(sim / "template.npz"),
                 "--flag", "backend=wide-b", "--flag", "receiver=low", "-o", str(out)]) == 0
    table = read_toa_table(str(out))
    assert list(table.flags["backend"]) == ["wide-b"] * 3
    assert list(table.flags["receiver"]) == ["low"] * 3
    assert set(table.flags) == {"profile", "snr", "backend", "receiver"}
    capsys.readouterr()
    for bad in ("snr=3", "mjd=1", "backend", "backend=a b", "backend=" + "x" * 5000):
        target = tmp_path / "bad.toas"
        assert main(["profile-toas", *files, "--template", str(sim / "template.npz"),
                     "--flag", bad, "-o", str(target)]) == 2
        err = capsys.readouterr().err
        assert "--flag" in err and "Traceback" not in err, (bad, err)
        assert "x" * 100 not in err                 # a long value is quoted as an excerpt
        assert not target.exists()


def test_profile_toas_never_writes_its_template_over_an_input(tmp_path, capsys):
    sim = tmp_path / "sim"
    model = os.path.join(SAMPLE, "demo-slow.toml")
    assert main(["simulate-profiles", model, "--site", "desert-dish", "--start", "60000",
                 "--end", "60001", "--count", "2", "--bins", "64", "--seed", "5", "-o",
                 str(sim)]) == 0
    files = sorted(str(p) for p in sim.glob("obs-*.npz"))
    before = {path: open(path, "rb").read() for path in files}
    out = str(tmp_path / "prof.toas")
    capsys.readouterr()
    assert main(["profile-toas", *files, "--template", "auto", "--write-template", files[0],
                 "-o", out]) == 2
    assert "is an input of this command" in capsys.readouterr().err
    assert main(["profile-toas", *files, "--template", str(sim / "template.npz"),
                 "--write-template", str(tmp_path / "t.npz"), "-o", out]) == 2
    assert "--write-template" in capsys.readouterr().err
    assert {path: open(path, "rb").read() for path in files} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sim"]
