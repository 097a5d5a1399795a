"""Bad fits do not pass unflagged: a reduced chi-square far from 1 is a loud
warning with its remedies; a fit that does not converge exits with its own
status (4) and every output says so; piped output cut short ends quietly.
Invented sample sources; the chi-square facts are of the distribution
(scipy.stats.chi2)."""

import csv
import json
import os
import shutil
import subprocess
import sys
from functools import partial

from timingkit.batch.runner import run_batch
from timingkit.batch.sources import discover_sources
from timingkit.cli.main import main
from timingkit.fit.least_squares import fit, goodness_warnings
from timingkit.formats.toa_reader import read_toa_table
from timingkit.formats.toa_writer import write_toa_table
from timingkit.outputs.residual_table import read_csv as read_residual_csv
from timingkit.pipeline.fit_run import fit_files
from timingkit.pipeline.inputs import load_inputs

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


def sample(name):
    return os.path.join(SAMPLE, f"{name}.toas"), os.path.join(SAMPLE, f"{name}.toml")


def test_goodness_warning_thresholds():
    assert goodness_warnings(1.05 * 500, 500) == []          # a fine fit
    assert goodness_warnings(3.0 * 4, 4) == []                # 3 for 4 dof: P ~ 1 %, chance
    (high,) = goodness_warnings(106.0 * 300, 300)
    assert high.startswith("poor fit") and "[[white_noise]]" in high and "[red_noise]" in high
    assert "glitch" in high and "--" not in high
    (with_red,) = goodness_warnings(106.0 * 300, 300, red_noise=True)
    assert "[red_noise] section" not in with_red
    (low,) = goodness_warnings(0.3 * 300, 300)
    assert "overestimated" in low


def test_a_poor_fit_is_flagged_loudly(tmp_path, capsys):
    # the young sample pulsar's TOAs with their uncertainties understated 20 times:
    # the reduced chi-square is about 400
    toas, model = sample("demo-young")
    table = read_toa_table(toas)
    table.err_us = table.err_us / 20.0
    toas = str(tmp_path / "understated.toas")
    write_toa_table(table, toas)
    assert main(["fit", toas, model, "--no-plot", "-o", str(tmp_path / "out")]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[1].startswith("  WARNING: poor fit: reduced chi-square")   # right under the header
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    assert report["reduced_chi2"] > 100
    assert any(w.startswith("poor fit") for w in report["warnings"])
    # the residuals of a model as given (no fit) are judged the same way
    assert main(["residuals", toas, model, "-o", str(tmp_path / "res")]) == 0
    assert "WARNING: poor fit" in capsys.readouterr().out
    # and a good fit stays quiet
    toas, model = sample("demo-msp")
    assert main(["fit", toas, model, "--no-plot", "-o", str(tmp_path / "msp")]) == 0
    assert "poor fit" not in capsys.readouterr().out


def test_overestimated_errors_are_flagged():
    inputs = load_inputs(*sample("demo-msp"))
    inputs.obs.toas.err_us *= 3.0                  # reduced chi-square ~ 1/9
    result = fit(inputs.model, inputs.obs)
    assert result.reduced_chi2 < 0.2
    assert any(w.startswith("poor fit") and "overestimated" in w for w in result.warnings)


def test_a_fit_that_does_not_converge_exits_4_and_marks_every_output(tmp_path, capsys,
                                                                   monkeypatch):
    toas, model = sample("demo-young")
    out = tmp_path / "out"
    assert main(["fit", toas, model, "--max-iterations", "1", "-o", str(out)]) == 4
    text = capsys.readouterr().out
    assert "(NOT CONVERGED)" in text.splitlines()[0]
    assert "WARNING: fit did not converge in 1 iteration (" in text
    assert "1 iterations" not in text and "1 iteration (NOT CONVERGED)" in text
    report = json.loads((out / "report.json").read_text())
    assert report["converged"] is False
    assert any(w.startswith("fit did not converge") for w in report["warnings"])
    assert (out / "fitted.toml").read_text().startswith("# NOT CONVERGED: the fit stopped "
                                                         "after 1 iteration with")
    # residuals.csv: a last column fit_status, not_converged in every row, read back
    with open(out / "residuals.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert rows and {r["fit_status"] for r in rows} == {"not_converged"}
    assert list(rows[0])[-1] == "fit_status"
    assert read_residual_csv(out / "residuals.csv").converged is False
    # `timingkit plot` of the folder keeps the mark in the figure's title
    import timingkit.outputs.plotting as plotting
    titles = []
    real_plot = plotting.plot_residuals
    monkeypatch.setattr(plotting, "plot_residuals",
                        lambda *a, **k: titles.append(k["title"]) or real_plot(*a, **k))
    assert main(["plot", str(out), "-o", str(tmp_path / "again.png")]) == 0
    assert titles == [f"{report['source']}: {report['toas']} TOAs (NOT CONVERGED)"]
    # converged: status 0 and no mark
    assert main(["fit", toas, model, "--no-plot", "-o", str(tmp_path / "ok")]) == 0
    assert "NOT CONVERGED" not in (tmp_path / "ok" / "fitted.toml").read_text()
    with open(tmp_path / "ok" / "residuals.csv") as fh:
        assert "fit_status" not in next(csv.reader(fh))
    assert read_residual_csv(tmp_path / "ok" / "residuals.csv").converged is True


def test_batch_marks_sources_that_did_not_converge(tmp_path):
    root = tmp_path / "sources"
    for name in ("demo-young", "demo-slow"):
        (root / name).mkdir(parents=True)
        for suffix in (".toas", ".toml"):
            shutil.copy(os.path.join(SAMPLE, name + suffix), root / name / (name + suffix))
        shutil.copy(os.path.join(SAMPLE, "sites.toml"), root / name / "sites.toml")
    result = run_batch(discover_sources(root), tmp_path / "out", workers=1, progress=False,
                       fit_function=partial(fit_files, max_iterations=1))
    assert sorted(result.not_converged) == ["demo-slow", "demo-young"]
    assert result.exit_status == 4
    with open(tmp_path / "out" / "summary.csv") as fh:
        rows = {r["source"]: r for r in csv.DictReader(fh)}
    assert {r["status"] for r in rows.values()} == {"not_converged"}
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["counts"]["not_converged"] == 2


def test_output_cut_short_by_a_closed_pipe_ends_quietly():
    toas, model = sample("demo-msp")
    proc = subprocess.Popen([sys.executable, "-m", "timingkit.cli.main", "barycentre", toas,
                             model], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()                       # the reader went away (like `| head`)
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=300) == 0
    assert "BrokenPipe" not in err and "error" not in err
