"""``timingkit glitches TOAS MODEL -o OUTDIR``: files, keys, exit codes
(invented source "demo-young", TOAs at the barycentre)."""

import json
import os
import tomllib

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.pipeline.glitch_run import glitch_files
from timingkit.model import TimingModel
from timingkit.model.glitch import model_glitches
from timingkit.model.simulate import simulate_toas
from timingkit.formats.toa_writer import write_toa_table
from timingkit.outputs.residual_table import read_csv as read_residual_csv
from conftest import glitch_text, young_pulsar_text

REQUIRED = {"epoch_mjd", "epoch_min_mjd", "epoch_max_mjd", "frequency_step_hz",
            "frequency_step_uncertainty_hz", "frequency_derivative_step",
            "frequency_derivative_step_uncertainty", "fractional_size", "false_alarm_probability"}

START = young_pulsar_text(10.0, -1e-11)

EPOCH, STEP = 58400.3, 1e-6
GLITCH = glitch_text(EPOCH, STEP, -1e-14)


@pytest.fixture(scope="module")
def files(tmp_path_factory, sites, ephemeris):
    folder = tmp_path_factory.mktemp("glitch-cli")
    truth = TimingModel.from_text(START + GLITCH)
    for name, model in (("glitch", truth), ("quiet", TimingModel.from_text(START))):
        toas = simulate_toas(model, 58000, 58730, 104, 50.0, sites, ephemeris,
                             site_names=["ssb"], freqs_mhz=[1400.0], seed=21)
        write_toa_table(toas, str(folder / f"{name}.toas"))
    (folder / "start.toml").write_text(START)
    return folder


def test_outputs_of_a_glitch_run(files, tmp_path, capsys):
    out = tmp_path / "out"
    toas_before = (files / "glitch.toas").read_bytes()
    code = main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(out)])
    assert code == 0
    assert (files / "glitch.toas").read_bytes() == toas_before      # inputs untouched
    printed = capsys.readouterr().out
    assert "1 glitch candidate" in printed
    data = json.loads((out / "glitches.json").read_text())
    (c,) = data["candidates"]
    assert REQUIRED <= set(c)
    assert c["epoch_min_mjd"] <= EPOCH <= c["epoch_max_mjd"]
    assert c["epoch_min_mjd"] <= c["epoch_mjd"] <= c["epoch_max_mjd"]
    assert abs(c["frequency_step_hz"] - STEP) <= 3 * c["frequency_step_uncertainty_hz"]
    assert c["fractional_size"] == pytest.approx(STEP / 10.0, rel=1e-3)
    # beyond every one of the 1000 noise simulations: the bound, flagged as such
    assert c["false_alarm_probability"] == pytest.approx(1 / 1001)
    assert c["false_alarm_probability_upper_limit"] is True
    assert "upper limit" in c["false_alarm_probability_method"]
    assert "false-alarm probability < 0.001" in printed
    # no decay was injected: one was tried, none is significant, and that is said
    assert c["decaying_terms"] == [] and c["decaying_term_tried"] is True
    assert "no significant decaying step (tried on time-scales 10, 30, 100, 300 days)" in printed
    # the fitted model carries the glitch and reads back
    fitted = TimingModel.from_file(str(out / "fitted.toml"))
    (g,) = model_glitches(fitted)
    assert float(g.epoch) == pytest.approx(c["epoch_mjd"], abs=1e-9)
    assert g.frequency_step.value == pytest.approx(c["frequency_step_hz"], rel=1e-12)
    assert "glitch.0.frequency_step_hz" in fitted.free_names
    with open(out / "fitted.toml", "rb") as fh:
        assert tomllib.load(fh)["glitch"][0]["uncertainty"]["frequency_step_hz"] > 0
    report = json.loads((out / "report.json").read_text())
    assert report["glitch_candidates"] == 1
    assert report["reduced_chi2"] < 1.6
    assert "glitch.0.frequency_step_hz" in report["parameters"]
    for name in ("glitch_search.png", "residuals.csv", "residuals.png"):
        assert (out / name).stat().st_size > 1000, name
    assert (out / "glitch_search.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [n for n in os.listdir(out) if n.startswith(".tmp")]


def test_glitch_free_run_reports_none(files, tmp_path):
    out = tmp_path / "quiet"
    assert main(["glitches", str(files / "quiet.toas"), str(files / "start.toml"),
                 "-o", str(out), "--no-plot", "--window-days", "70"]) == 0
    assert json.loads((out / "glitches.json").read_text())["candidates"] == []
    assert json.loads((out / "report.json").read_text())["glitch_candidates"] == 0
    assert not (out / "glitch_search.png").exists()
    fitted = TimingModel.from_file(str(out / "fitted.toml"))
    assert model_glitches(fitted) == []


def test_known_epochs_and_significance_options(files, tmp_path):
    out = tmp_path / "known"
    assert main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"), "-o",
                 str(out), "--no-plot", "--known-epochs", "58400.0", "--window-toas", "8",
                 "--min-significance", "5"]) == 0
    data = json.loads((out / "glitches.json").read_text())
    (c,) = data["candidates"]
    assert c["known_epoch"] is True
    assert c["epoch_min_mjd"] <= EPOCH <= c["epoch_max_mjd"]
    assert data["settings"]["window_toas"] == 8
    assert data["settings"]["min_significance_sigma"] == 5.0


@pytest.mark.parametrize("extra, words", [
    (["--known-epochs", "57000"], "--known-epochs"),
    (["--window-toas", "3"], "--window-toas"),
    (["--min-significance", "-1"], "--min-significance"),
])
def test_bad_options_exit_2_with_one_message(files, tmp_path, capsys, extra, words):
    code = main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(tmp_path / "bad"), "--no-plot", *extra])
    assert code == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err
    assert not (tmp_path / "bad" / "report.json").exists()


def test_window_options_are_exclusive(files, tmp_path):
    with pytest.raises(SystemExit) as info:
        main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
              "--window-toas", "8", "--window-days", "50"])
    assert info.value.code == 2


def test_missing_model_file_exit_2(files, tmp_path, capsys):
    code = main(["glitches", str(files / "glitch.toas"), str(tmp_path / "none.toml"),
                 "-o", str(tmp_path / "x")])
    assert code == 2
    assert "none.toml" in capsys.readouterr().err


def test_glitch_files_takes_the_batch_fit_function_arguments(files, tmp_path):
    # the batch runner calls fit functions as f(toas, model, outdir, free=, fix=,
    # sites_paths=, ephemeris=, clock_paths=, make_plots=, progress=)
    report = glitch_files(str(files / "glitch.toas"), str(files / "start.toml"),
                          str(tmp_path / "b"), free=(), fix=(), sites_paths=(), ephemeris=None,
                          clock_paths=(), make_plots=False, progress=False)
    assert report["glitch_candidates"] == 1
    assert np.isfinite(report["chi2"])
    saved = json.loads((tmp_path / "b" / "report.json").read_text())
    assert saved["glitch_candidates"] == 1


def test_a_search_whose_final_fit_did_not_converge_marks_every_output(files, tmp_path,
                                                                      monkeypatch, capsys):
    # the search's final fit is marked as not converged (as when it stops at its
    # iteration limit): the command exits 4 and every output says so
    from timingkit.pipeline import glitch_run
    real = glitch_run.search_glitches

    def unconverged(*args, **kwargs):
        result = real(*args, **kwargs)
        result.fit.converged = False
        return result

    monkeypatch.setattr(glitch_run, "search_glitches", unconverged)
    out = tmp_path / "unconverged"
    assert main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(out), "--no-plot"]) == 4
    assert "NOT CONVERGED" in capsys.readouterr().out
    data = json.loads((out / "glitches.json").read_text())
    assert data["converged"] is False
    assert data["warnings"][0].startswith("NOT CONVERGED")
    assert json.loads((out / "report.json").read_text())["converged"] is False
    assert (out / "fitted.toml").read_text().startswith("# NOT CONVERGED")
    assert read_residual_csv(out / "residuals.csv").converged is False
    # a converged search says so too
    ok = tmp_path / "converged"
    monkeypatch.setattr(glitch_run, "search_glitches", real)
    assert main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(ok), "--no-plot"]) == 0
    assert json.loads((ok / "glitches.json").read_text())["converged"] is True
    assert read_residual_csv(ok / "residuals.csv").converged is True


def test_explore_writes_the_page_with_the_candidate_marked(files, tmp_path, capsys):
    from timingkit.outputs.explorer_page import explorer_data
    out = tmp_path / "out"
    assert main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(out), "--no-plot", "--null-trials", "200", "--explore"]) == 0
    last = capsys.readouterr().out.rstrip().splitlines()[-1]     # every file written
    assert last.startswith(f"wrote {out}/: ") and "explorer.html" in last.split(": ")[1]
    (c,) = json.loads((out / "glitches.json").read_text())["candidates"]
    with open(out / "fitted.toml", "rb") as fh:
        (fitted,) = tomllib.load(fh)["glitch"]
    # the candidate became the fitted model's glitch: one mark at the model's
    # epoch, with the search's bracket, which holds the simulated epoch
    data = explorer_data(str(out))
    (mark,) = data["epochs"]
    assert mark["kind"] == "model" and mark["mjd"] == float(fitted["epoch_mjd"])
    assert (mark["low"], mark["high"]) == (c["epoch_min_mjd"], c["epoch_max_mjd"])
    assert mark["low"] <= EPOCH <= mark["high"]
    assert mark["label"] == "glitch 1 (model; search candidate 1, FAP < 0.005)"
    assert data["count"] == 104 and "pre_us" in data["columns"]
    text = (out / "explorer.html").read_text(encoding="utf-8")
    assert "search candidate 1" in text and "window.timingkitExplorer" in text


def test_prefit_residuals_are_those_of_the_model_as_given(files, tmp_path, monkeypatch):
    # the pre-fit panel and prefit_residuals.csv of a glitch run show the user's model
    # (no glitch terms), as `timingkit residuals` of that model shows it, not the last
    # fit's starting point (its model already carries the found glitch)
    import timingkit.outputs.plotting as plotting
    from timingkit.pipeline.fit_run import residual_files
    from timingkit.pipeline.glitch_run import STARTING_LABEL
    drawn = {}
    real = plotting.plot_residuals

    def spy(postfit, prefit=None, **kwargs):
        drawn.update(post=postfit, pre=prefit, label=kwargs.get("prefit_label"))
        drawn["figure"] = real(postfit, prefit=prefit, **kwargs)
        return drawn["figure"]

    monkeypatch.setattr(plotting, "plot_residuals", spy)
    out = tmp_path / "out"
    assert main(["glitches", str(files / "glitch.toas"), str(files / "start.toml"),
                 "-o", str(out), "--null-trials", "200"]) == 0
    residual_files(str(files / "glitch.toas"), str(files / "start.toml"),
                   str(tmp_path / "as-given"), make_plots=False)
    expected_us = read_residual_csv(str(tmp_path / "as-given" / "residuals.csv")).residual_us
    pre = read_residual_csv(str(out / "prefit_residuals.csv"))
    post = read_residual_csv(str(out / "residuals.csv"))
    assert len(pre) == len(post) == len(expected_us) == 104
    np.testing.assert_array_equal(pre.residual_us, expected_us)
    np.testing.assert_allclose(drawn["pre"].residual_us, pre.residual_us, atol=2e-6)
    assert drawn["label"] == STARTING_LABEL
    top = drawn["figure"].axes[0]           # the label fits beside the statistics line
    assert top.get_title(loc="left") == STARTING_LABEL
    renderer = drawn["figure"].canvas.get_renderer()
    (stats,) = [t for t in top.texts if t.get_gid() == "residual_stats"]
    assert not top._left_title.get_window_extent(renderer).overlaps(stats.get_window_extent(renderer))
    # a 1e-6 Hz step left unmodelled wraps the phase: pre-fit residuals far above the
    # post-fit ones (white noise of 50 µs), so the two panels cannot be the same
    assert pre.rms_us() > 20 * post.rms_us()
    assert post.rms_us() < 80.0
    report = json.loads((out / "report.json").read_text())
    assert report["prefit_rms_us"] == pytest.approx(pre.rms_us(), rel=1e-4)
