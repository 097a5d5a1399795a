"""Leaving TOAs out of a fit without touching the data: exclusion lists and
--select/--leave-out through the pipeline, the command line and the batch."""

import csv
import json
import os
import shutil

import pytest

from timingkit.batch import discover_sources, run_batch
from timingkit.cli.main import main
from timingkit.formats.errors import FitError
from timingkit.formats.toa_reader import read_toa_table
from timingkit.formats.toa_writer import write_toa_table
from timingkit.model.simulate import simulate_toas
from timingkit.model.timing_model import TimingModel
from timingkit.pipeline import fit_files, residual_files
from timingkit.outputs.plotting import plot_residuals
from timingkit.outputs.residual_table import ResidualTable
from timingkit.pipeline.glitch_run import glitch_files

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


@pytest.fixture()
def msp(tmp_path):
    """The invented millisecond pulsar of the sample data, copied; one TOA (table
    line 10) moved 50 µs late, as a bad TOA would be."""
    for name in ("demo-msp.toas", "demo-msp.toml", "sites.toml"):
        shutil.copy(os.path.join(SAMPLE, name), tmp_path / name)
    lines = (tmp_path / "demo-msp.toas").read_text().splitlines(keepends=True)
    mjd, rest = lines[9].split(None, 1)
    whole, frac = mjd.split(".")
    shifted = int(frac) + round(50e-6 / 86400 * 10 ** len(frac))
    lines[9] = f"{whole}.{shifted:0{len(frac)}d}  {rest}"
    (tmp_path / "demo-msp.toas").write_text("".join(lines))
    return tmp_path


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _without_lines(src, dst, lines):
    kept = [text for number, text in enumerate(open(src).read().splitlines(True), 1)
            if number not in lines]
    open(dst, "w").write("".join(kept))


def _same_fit(a: dict, b: dict):
    assert a["toas"] == b["toas"] and a["dof"] == b["dof"]
    assert a["chi2"] == b["chi2"]
    for name, entry in a["parameters"].items():
        assert entry["value"] == b["parameters"][name]["value"], name
        assert entry["uncertainty"] == b["parameters"][name]["uncertainty"], name


def test_fit_with_an_exclusion_list_is_the_fit_without_those_lines(msp):
    table = read_toa_table(str(msp / "demo-msp.toas"))
    text = {int(n): t for n, t in zip(table.line_numbers, table.mjd_text)}
    (msp / "bad.txt").write_text(
        "# TOAs left out of the fit\nline  mjd  reason\n"
        f"10  {text[10]}  50 µs late\n57  {text[57]}  interference\n"
        "# rules\nmjd=59500..59560  receiver fault\n")
    by_rule = [int(n) for n, t in zip(table.line_numbers, table.mjd_day + table.mjd_frac)
               if 59500 <= t <= 59560]
    assert len(by_rule) >= 5
    listed = fit_files(str(msp / "demo-msp.toas"), str(msp / "demo-msp.toml"), str(msp / "a"),
                       exclude_paths=str(msp / "bad.txt"), make_plots=False)
    _without_lines(msp / "demo-msp.toas", msp / "deleted.toas", {10, 57, *by_rule})
    deleted = fit_files(str(msp / "deleted.toas"), str(msp / "demo-msp.toml"), str(msp / "b"),
                        make_plots=False)
    _same_fit(listed, deleted)
    assert listed["toas"] == len(table) - 2 - len(by_rule)
    assert listed["excluded_toas"] == 2 + len(by_rule) and deleted["excluded_toas"] == 0
    groups = {g["reason"]: g["lines"] for g in listed["excluded"]}
    assert groups == {"50 µs late": [10], "interference": [57], "receiver fault": by_rule}
    # residuals.csv: every TOA of the table, in its order, the left-out ones marked
    rows = _rows(msp / "a" / "residuals.csv")
    assert [int(r["toa_line"]) for r in rows] == table.line_numbers.tolist()
    marked = {int(r["toa_line"]): r["left_out"] for r in rows if r["left_out"]}
    assert marked == {10: "50 µs late", 57: "interference", **{n: "receiver fault" for n in by_rule}}
    fitted = {r["mjd"]: r["residual_us"] for r in rows if not r["left_out"]}
    assert fitted == {r["mjd"]: r["residual_us"] for r in _rows(msp / "b" / "residuals.csv")}
    # a left-out TOA keeps its true residual under the fitted model: the shifted
    # one sits 50 µs late; the others scatter like the fitted TOAs (~0.8 µs errors)
    late = {int(r["toa_line"]): float(r["residual_us"]) for r in rows if r["left_out"]}
    assert abs(late.pop(10) - 50.0) < 4.0
    assert max(abs(v) for v in late.values()) < 4.0
    pre = _rows(msp / "a" / "prefit_residuals.csv")
    assert [r["left_out"] for r in pre] == [r["left_out"] for r in rows]
    # the figure draws them apart (hollow, in the legend) and counts only the fitted TOAs
    figure = plot_residuals(ResidualTable.read_csv(msp / "a" / "residuals.csv"))
    texts = [t.get_text() for t in figure.legends[0].get_texts()]    # the key, below the axes
    assert texts[-1] == "left out of the fit"
    stats = [t.get_text() for t in figure.axes[0].texts if t.get_gid() == "residual_stats"]
    assert stats[0].startswith(f"N = {listed['toas']} TOAs")


def test_cli_select_and_leave_out_equal_deleting_lines(msp, capsys):
    table = read_toa_table(str(msp / "demo-msp.toas"))
    mjd = table.mjd_day + table.mjd_frac
    one = next(int(n) for n, t, s in zip(table.line_numbers, mjd, table.site)
               if 58800 <= t <= 59700 and s == "desert-dish")
    args = [str(msp / "demo-msp.toas"), str(msp / "demo-msp.toml"), "--no-plot"]
    assert main(["fit", *args, "-o", str(msp / "s"), "--select", "mjd=58800..59700",
                 "--leave-out", "site=lake-array", "--leave-out", f"line={one}"]) == 0
    captured = capsys.readouterr()
    assert "left out" not in captured.err
    assert "left out of the fit: " in captured.out and "site=lake-array: " in captured.out
    drop = {int(n) for n, t, s in zip(table.line_numbers, mjd, table.site)
            if not 58800 <= t <= 59700 or s == "lake-array" or n == one}
    _without_lines(msp / "demo-msp.toas", msp / "deleted.toas", drop)
    assert main(["fit", str(msp / "deleted.toas"), *args[1:], "-o", str(msp / "d")]) == 0
    selected = json.loads((msp / "s" / "report.json").read_text())
    _same_fit(selected, json.loads((msp / "d" / "report.json").read_text()))
    reasons = {g["reason"] for g in selected["excluded"]}
    assert reasons == {"outside the selection mjd=58800..59700", "site=lake-array", f"line={one}"}


def test_bad_rules_and_lists_exit_2_naming_the_option(msp, capsys):
    args = ["fit", str(msp / "demo-msp.toas"), str(msp / "demo-msp.toml"), "-o", str(msp / "o")]
    for extra, words in ((["--select", "mjd"], "'--select': 'mjd' is not a rule"),
                         (["--select", "receiver=x"], "no column 'receiver'"),
                         (["--leave-out", "mjd=0.."], "every one of the 360 TOAs is left out"),
                         (["--exclude", str(msp / "none.txt")], "exclusion list not found")):
        assert main(args + extra) == 2
        assert words in capsys.readouterr().err
    assert not (msp / "o").exists()


def test_residuals_command_reports_only_the_kept_toas(msp):
    stats = residual_files(str(msp / "demo-msp.toas"), str(msp / "demo-msp.toml"),
                           str(msp / "r"), leave_out=["line=10"], make_plots=False)
    assert stats["toas"] == 359 and stats["excluded_toas"] == 1
    rows = _rows(msp / "r" / "residuals.csv")
    assert len(rows) == 360 and [r["toa_line"] for r in rows if r["left_out"]] == ["10"]


def test_batch_manifest_exclude_and_resume_hash(msp):
    (msp / "bad.txt").write_text("# rules\nline=10 late\n")
    (msp / "more.txt").write_text("# rules\nline=11..12\n")
    (msp / "manifest.toml").write_text(
        '[defaults]\nexclude = "bad.txt"\nmake_plots = false\n'
        '[[source]]\nname = "a"\ntoas = "demo-msp.toas"\nmodel = "demo-msp.toml"\n'
        '[[source]]\nname = "b"\ntoas = "demo-msp.toas"\nmodel = "demo-msp.toml"\n'
        'exclude = ["bad.txt", "more.txt"]\n')
    sources = discover_sources(msp / "manifest.toml")
    assert [len(s.exclude_paths) for s in sources] == [1, 2]
    out = msp / "out"
    result = run_batch(sources, out, workers=1, progress=False)
    assert sorted(result.succeeded) == ["a", "b"]
    counts = {n: json.loads((out / n / "report.json").read_text())["excluded_toas"] for n in "ab"}
    assert counts == {"a": 1, "b": 3}
    (msp / "more.txt").write_text("# rules\nline=11..13\n")       # only b depends on it
    result = run_batch(discover_sources(msp / "manifest.toml"), out, workers=1, resume=True,
                       progress=False)
    assert result.refitted == ["b"]
    assert json.loads((out / "b" / "report.json").read_text())["excluded_toas"] == 4


def test_glitch_search_leaves_the_listed_toas_out(msp):
    for name in ("demo-young.toas", "demo-young.toml"):
        shutil.copy(os.path.join(SAMPLE, name), msp / name)
    report = glitch_files(str(msp / "demo-young.toas"), str(msp / "demo-young.toml"),
                          str(msp / "g"), leave_out=["mjd=..58850"], make_plots=False)
    rows = _rows(msp / "g" / "residuals.csv")
    left = [r for r in rows if r["left_out"]]
    assert report["excluded_toas"] == len(left) > 0 and report["toas"] == len(rows) - len(left)
    assert all(float(r["mjd"]) <= 58850 for r in left)


def test_lost_count_points_to_the_date_a_shorter_span_and_the_glitch_search(tmp_path, sites,
                                                                            ephemeris):
    # an invented young pulsar glitches at MJD 59010 (a 3e-7 Hz step); its model
    # does not know: the count breaks within ~20 days (0.5 turn / 3e-7 Hz)
    start = TimingModel.from_file(os.path.join(SAMPLE, "demo-young.true.toml"))
    truth_text = open(os.path.join(SAMPLE, "demo-young.true.toml")).read() + (
        '\n[[glitch]]\nepoch_mjd = "59010"\nfrequency_step_hz = 3e-7\n')
    (tmp_path / "truth.toml").write_text(truth_text)
    shutil.copy(os.path.join(SAMPLE, "sites.toml"), tmp_path / "sites.toml")
    truth = TimingModel.from_file(str(tmp_path / "truth.toml"))
    toas = simulate_toas(truth, 58900, 59200, 240, 5.0, sites, ephemeris,
                         site_names=["north-ridge"], freqs_mhz=(700.0, 1400.0), seed=4)
    write_toa_table(toas, str(tmp_path / "g.toas"))
    shutil.copy(start.path, tmp_path / "start.toml")
    with pytest.raises(FitError) as info:
        fit_files(str(tmp_path / "g.toas"), str(tmp_path / "start.toml"), str(tmp_path / "o"),
                  make_plots=False)
    message = str(info.value)
    assert "`timingkit glitches`" in message and "shorter span" in message
    last = float(message.split("up to MJD ")[1].split(":")[0])
    assert 59010 < last < 59035
    # the advice works: the pulses of the span up to there are numbered (the fit
    # runs; its residuals stay well within a turn, though the glitch's kink is
    # still in them, for the glitch search to find)
    report = fit_files(str(tmp_path / "g.toas"), str(tmp_path / "start.toml"),
                       str(tmp_path / "o"), make_plots=False, select=[f"mjd=..{last}"])
    turns = report["rms_us"] * 1e-6 * float(report["parameters"]["spin.frequency_hz"]["value"])
    assert turns < 0.1 and report["excluded_toas"] > 100


def test_positions_of_the_toas_a_glitch_search_kept():
    # the glitch search may drop TOAs it cannot connect: its table is an ordered
    # subset of the kept one; two TOAs at one time are told apart by frequency
    from timingkit.formats.toa_table import ToaTable
    from timingkit.pipeline.left_out import ordered_positions
    kept = ToaTable.from_arrays([58000, 58000, 58001, 58002], [0.5, 0.5, 0.25, 0.0], 1.0,
                                [820.0, 1400.0, 1400.0, 1400.0], "desert-dish")
    assert ordered_positions(kept.select([1, 3]), kept).tolist() == [1, 3]
    assert ordered_positions(kept.select([0, 2, 3]), kept).tolist() == [0, 2, 3]
    assert ordered_positions(kept, kept).tolist() == [0, 1, 2, 3]
