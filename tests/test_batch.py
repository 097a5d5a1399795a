"""Batch reprocessing (issue 6): isolation, engines, resume, atomic outputs, overview.

End-to-end tests fit simulated invented sources (``demo-batch-NNN``, 120 TOAs
each, written by scripts/bench_batch.py) with the real single-source fit.
Expected values come from the simulation's true models, not from the batch.
"""

import argparse
import csv
import hashlib
import json
import tomllib
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from timingkit.batch.sources import Source, discover_sources, read_manifest
from timingkit.cli.batch import add_parsers as add_batch_parser
from timingkit.batch.fingerprint import inputs_sha256
from timingkit.batch.runner import run_batch
from timingkit.formats.errors import InputError

ROOT = Path(__file__).resolve().parents[1]
TESTS = Path(__file__).resolve().parent
sys.path.insert(0, str(ROOT / "scripts"))  # also seen by the spawned worker processes
import bench_batch  # noqa: E402  (simulated source trees)

# The summary columns named in issue 6, with the span, epoch, DM, orbital period and
# uncertainties that issue 14 added, in their order.
ISSUE_COLUMNS = ["source", "status", "toas", "first_mjd", "last_mjd", "span_days",
                 "reduced_chi2", "rms_us", "spin_epoch_mjd", "frequency_hz",
                 "frequency_hz_uncertainty", "frequency_derivative",
                 "frequency_derivative_uncertainty", "dm", "dm_uncertainty",
                 "orbital_period_days", "orbital_period_days_uncertainty", "period_s",
                 "period_s_uncertainty", "period_derivative", "period_derivative_uncertainty",
                 "characteristic_age_yr", "surface_dipole_field_gauss",
                 "spin_down_luminosity_erg_per_s", "glitch_candidates", "message"]
FIT_OUTPUTS = {"fitted.toml", "residuals.csv", "residuals.png", "report.json", "inputs.sha256"}
TOAS_PER_SOURCE = 120
BROKEN_INDEX = 6


def _cli(argv) -> int:
    parser = argparse.ArgumentParser(prog="timingkit")
    add_batch_parser(parser.add_subparsers())
    args = parser.parse_args(["batch", *map(str, argv)])
    return args.func(args)


def _read_csv(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _tree_digest(root: Path) -> dict[str, str]:
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def _hidden_leftovers(outdir: Path) -> list[Path]:
    """Hidden entries of OUTDIR (its lock file is beside it, not in it)."""
    return [p for p in outdir.iterdir() if p.name.startswith(".")]


def _assert_no_partial_folders(outdir: Path) -> None:
    """Every visible source folder is either a complete fit or a bare error.txt."""
    for folder in outdir.iterdir():
        if folder.is_dir() and not folder.name.startswith("."):
            names = {p.name for p in folder.iterdir() if not p.name.startswith(".")}
            assert names == {"error.txt"} or FIT_OUTPUTS <= names, (folder, names)
            if "report.json" in names:
                json.loads((folder / "report.json").read_text())


# Fit functions used by the failure tests: the real fit, except for one source.
# Module-level so the spawned worker processes can import them.

def fit_or_die(toas_path, model_path, outdir, **options):
    """Kill the worker process (no exception, no cleanup) for demo-batch-001."""
    if "demo-batch-001" in str(toas_path):
        os._exit(9)
    from timingkit.pipeline.fit_run import fit_files

    return fit_files(toas_path, model_path, outdir, **options)


def fit_or_stall(toas_path, model_path, outdir, **options):
    """For demo-batch-002 while $TIMINGKIT_TEST_STALL is set: write half a report,
    signal the test through that file, and hang until killed."""
    sentinel = os.environ.get("TIMINGKIT_TEST_STALL")
    if sentinel and "demo-batch-002" in str(toas_path):
        Path(outdir, "report.json").write_text('{"source": "demo-batch-002", "toas": ')
        Path(outdir, "fitted.toml").write_text("name = ")
        Path(sentinel).write_text("stalled\n")
        time.sleep(300)
    from timingkit.pipeline.fit_run import fit_files

    return fit_files(toas_path, model_path, outdir, **options)


@pytest.fixture(scope="module")
def ten_sources(tmp_path_factory):
    root = tmp_path_factory.mktemp("ten") / "sources"
    bench_batch.write_simulated_sources(root, 10, TOAS_PER_SOURCE, broken=(BROKEN_INDEX,))
    (root / "notes").mkdir()  # neither TOA table nor model: ignored
    (root / "notes" / "readme.txt").write_text("observing notes\n")
    return root


@pytest.fixture(scope="module")
def pool_run(ten_sources, tmp_path_factory):
    outdir = tmp_path_factory.mktemp("pool") / "out"
    before = _tree_digest(ten_sources)
    status = _cli([ten_sources, "-o", outdir, "--workers", 2])
    assert _tree_digest(ten_sources) == before  # inputs never modified
    return status, outdir


@pytest.fixture()
def three_sources(ten_sources, tmp_path):
    root = tmp_path / "sources"
    for i in range(3):
        shutil.copytree(ten_sources / f"demo-batch-{i:03d}", root / f"demo-batch-{i:03d}")
    return root


def test_nine_succeed_and_the_broken_one_is_reported(pool_run, ten_sources):
    status, outdir = pool_run
    assert status == 3
    with open(outdir / "summary.csv", newline="") as fh:
        assert next(csv.reader(fh)) == ISSUE_COLUMNS
    rows = _read_csv(outdir / "summary.csv")
    assert [r["source"] for r in rows] == [f"demo-batch-{i:03d}" for i in range(10)]
    broken = rows[BROKEN_INDEX]
    assert broken["status"] == "failed"
    # the one-line reason names the file and the column at fault
    assert "demo-batch-006" in broken["message"] and "obs.toas" in broken["message"]
    assert "mjd" in broken["message"] and "\n" not in broken["message"]
    assert all(broken[c] == "" for c in ISSUE_COLUMNS[2:-1])
    assert {p.name for p in (outdir / "demo-batch-006").iterdir()
            if not p.name.startswith(".")} == {"error.txt"}
    assert (outdir / "demo-batch-006" / "error.txt").read_text().startswith(broken["message"])
    _assert_no_partial_folders(outdir)
    assert not _hidden_leftovers(outdir)  # no leftovers
    assert not (outdir / "notes").exists()

    for i, row in enumerate(rows):
        if i == BROKEN_INDEX:
            continue
        assert row["status"] == "ok" and int(row["toas"]) == TOAS_PER_SOURCE
        truth = bench_batch.simulated_spin(i)
        report = json.loads((outdir / row["source"] / "report.json").read_text())
        # the summary carries the report's values unchanged ...
        assert row["frequency_hz"] == str(report["parameters"]["spin.frequency_hz"]["value"])
        assert float(row["period_s"]) == report["derived"]["period_s"]["value"]
        # ... and they are the simulated truth: P = 1/f, Pdot = -frequency_derivative/f^2 (Lorimer &
        # Kramer 2005, Handbook of Pulsar Astronomy, sec. 1.2), 5 µs TOAs over 400 d
        f_sigma = report["parameters"]["spin.frequency_hz"]["uncertainty"]
        assert abs(float(row["frequency_hz"]) - truth["frequency_hz"]) < 5 * f_sigma
        assert float(row["period_s"]) == pytest.approx(1.0 / float(row["frequency_hz"]), rel=1e-12)
        pdot_true = -truth["frequency_derivative"] / truth["frequency_hz"] ** 2
        pdot_sigma = report["derived"]["period_derivative"]["uncertainty"]
        assert abs(float(row["period_derivative"]) - pdot_true) < 5 * pdot_sigma
        assert 0.5 < float(row["reduced_chi2"]) < 1.6 and float(row["rms_us"]) < 10
        assert float(row["characteristic_age_yr"]) > 0
        # uncertainties, DM, epoch and span travel too (DM and epoch as exact decimals)
        assert float(row["frequency_hz_uncertainty"]) == f_sigma
        assert float(row["period_derivative_uncertainty"]) == pdot_sigma
        assert row["dm"] == str(report["parameters"]["dispersion.dm"]["value"])
        fitted = tomllib.loads((outdir / row["source"] / "fitted.toml").read_text())
        assert row["spin_epoch_mjd"] == str(fitted["spin"]["epoch_mjd"])
        first, last = report["span_mjd"]
        assert (float(row["first_mjd"]), float(row["last_mjd"])) == (first, last)
        assert float(row["span_days"]) == pytest.approx(last - first, rel=1e-12)
        assert row["orbital_period_days"] == ""          # no binaries in this batch


def test_summary_json_matches_csv_and_states_cautions(pool_run):
    _, outdir = pool_run
    document = json.loads((outdir / "summary.json").read_text())
    assert document["columns"] == ISSUE_COLUMNS
    assert document["counts"] == {"sources": 10, "ok": 9, "failed": 1, "not_converged": 0,
                                  "reused": 0}
    csv_rows = _read_csv(outdir / "summary.csv")
    for from_json, from_csv in zip(document["sources"], csv_rows):
        assert from_json["source"] == from_csv["source"]
        if from_json["status"] == "ok":
            assert repr(from_json["rms_us"]) == from_csv["rms_us"]
    assert any("dipole" in c for c in document["cautions"])
    assert document["engine"] == "process pool (2 workers)"
    # each source's own warnings and cautions travel from its report to the summary
    # and the overview (the assumptions common to all are stated once, above)
    report = json.loads((outdir / "demo-batch-000" / "report.json").read_text())
    notes = document["source_notes"]["demo-batch-000"]
    assert notes["warnings"] == report["warnings"] and notes["warnings"]
    assert set(notes["cautions"]) == set(report["cautions"]) - set(document["cautions"])
    page = (outdir / "overview.html").read_text()
    assert page.count(document["cautions"][0].split(";")[0]) == 1
    assert all(w.split(":")[0] in page for w in notes["warnings"])


def test_pool_and_local_dask_cluster_give_identical_summaries(pool_run, ten_sources, tmp_path):
    _, pool_out = pool_run
    result = run_batch(ten_sources, tmp_path / "dask", workers=2, cluster="local", progress=False)
    assert result.engine == "dask local cluster (2 workers)"
    assert result.exit_status == 3
    assert (tmp_path / "dask" / "summary.csv").read_bytes() == (pool_out / "summary.csv").read_bytes()
    pool_doc = json.loads((pool_out / "summary.json").read_text())
    dask_doc = json.loads((tmp_path / "dask" / "summary.json").read_text())
    assert dask_doc["sources"] == pool_doc["sources"]
    for name in ("demo-batch-000", "demo-batch-009"):  # the per-source files too
        for output in ("residuals.csv", "fitted.toml"):
            assert ((tmp_path / "dask" / name / output).read_bytes()
                    == (pool_out / name / output).read_bytes())


def test_overview_renders_in_headless_chromium(pool_run, tmp_path):
    from test_overview_html import CHROMIUM, chromium_probe

    if CHROMIUM is None:
        pytest.skip("no chromium binary on PATH (Debian package 'chromium'; .ci/run installs it)")
    _, outdir = pool_run
    probe = chromium_probe(outdir / "overview.html", tmp_path, sort_column="rms_us")
    assert probe["rows"] == [f"demo-batch-{i:03d}" for i in range(10)]
    # the P-Pdot diagram and every figure of the nine fitted sources (residuals, by day
    # of year, by observing frequency), every one decoded
    assert probe["images"] == 1 + 9 * 3 and probe["decoded"] == 1 + 9 * 3
    rms = {r["source"]: float(r["rms_us"]) for r in _read_csv(outdir / "summary.csv")
           if r["rms_us"]}
    assert probe["ascending"][:9] == sorted(rms, key=rms.get)
    assert probe["ascending"][9] == "demo-batch-006"  # the failed source (no rms) sorts last


def test_resume_refits_only_the_changed_source(three_sources, tmp_path):
    outdir = tmp_path / "out"
    first = run_batch(three_sources, outdir, workers=1, progress=False)
    assert first.exit_status == 0 and sorted(first.refitted) == sorted(first.succeeded)
    reports = {n: (outdir / n / "report.json") for n in first.succeeded}
    stamps = {n: p.stat().st_mtime_ns for n, p in reports.items()}

    unchanged = run_batch(three_sources, outdir, workers=1, resume=True, progress=False)
    assert unchanged.refitted == [] and all(o.reused for o in unchanged.outcomes)
    assert {n: p.stat().st_mtime_ns for n, p in reports.items()} == stamps

    table = three_sources / "demo-batch-001" / "obs.toas"
    lines = table.read_text().splitlines(keepends=True)
    table.write_text("".join(lines[:-20]))  # 20 TOAs fewer
    again = run_batch(three_sources, outdir, workers=1, resume=True, progress=False)
    assert again.refitted == ["demo-batch-001"]
    assert [o.reused for o in again.outcomes] == [True, False, True]
    for name in ("demo-batch-000", "demo-batch-002"):
        assert reports[name].stat().st_mtime_ns == stamps[name]
    rows = {r["source"]: r for r in _read_csv(outdir / "summary.csv")}
    assert rows["demo-batch-001"]["toas"] == str(TOAS_PER_SOURCE - 20)
    assert rows["demo-batch-000"]["toas"] == str(TOAS_PER_SOURCE)
    assert rows["demo-batch-000"]["message"].startswith("reused")


def test_manifest_defaults_overrides_and_settings_in_the_hash(three_sources, tmp_path):
    manifest = tmp_path / "manifest.toml"
    spec = """[defaults]
fix = {fix}
make_plots = false

[[source]]
name = "alpha"
toas = "sources/demo-batch-000/obs.toas"
model = "sources/demo-batch-000/model.toml"

[[source]]
name = "beta"
toas = "sources/demo-batch-001/obs.toas"
model = "sources/demo-batch-001/model.toml"
fix = []
make_plots = true
"""
    manifest.write_text(spec.format(fix='["spin.frequency_derivatives.0"]'))
    outdir = tmp_path / "out"
    assert _cli([manifest, "-o", outdir, "--workers", 1]) == 0
    alpha = json.loads((outdir / "alpha" / "report.json").read_text())["parameters"]
    beta = json.loads((outdir / "beta" / "report.json").read_text())["parameters"]
    # the manifest's default 'fix' holds a parameter the model's [fit] list frees ...
    assert not alpha["spin.frequency_derivatives.0"]["free"] and alpha["spin.frequency_hz"]["free"]
    # ... and beta's own (empty) list overrides the default
    assert beta["spin.frequency_derivatives.0"]["free"]
    assert not (outdir / "alpha" / "residuals.png").exists()
    assert (outdir / "beta" / "residuals.png").exists()

    # a changed default changes alpha's settings only: only alpha is refitted
    manifest.write_text(spec.format(fix='["spin.frequency_derivatives.0", "dispersion.dm"]'))
    result = run_batch(manifest, outdir, workers=1, resume=True, progress=False)
    assert result.refitted == ["alpha"]
    alpha = json.loads((outdir / "alpha" / "report.json").read_text())["parameters"]
    assert not alpha["dispersion.dm"]["free"]


def test_glitch_option_fills_glitch_candidates_and_changes_the_hash(ten_sources, tmp_path):
    root = tmp_path / "sources"
    shutil.copytree(ten_sources / "demo-batch-003", root / "demo-batch-003")
    outdir = tmp_path / "out"
    assert _cli([root, "-o", outdir, "--workers", 1]) == 0
    assert _read_csv(outdir / "summary.csv")[0]["glitch_candidates"] == ""  # no search ran
    assert _cli([root, "-o", outdir, "--workers", 1, "--resume", "--glitches"]) == 0
    row = _read_csv(outdir / "summary.csv")[0]
    assert not row["message"].startswith("reused")  # another function: refitted
    found = json.loads((outdir / "demo-batch-003" / "glitches.json").read_text())
    # the simulation has no glitch; the count is the report's, and glitches.json agrees
    report = json.loads((outdir / "demo-batch-003" / "report.json").read_text())
    assert row["glitch_candidates"] == str(report["glitch_candidates"]) == "0"
    assert len(found["candidates"]) == 0


def test_worker_killed_mid_source_is_isolated(three_sources, tmp_path):
    outdir = tmp_path / "out"
    result = run_batch(three_sources, outdir, workers=2, progress=False, fit_function=fit_or_die)
    assert result.failed == ["demo-batch-001"]
    assert result.succeeded == ["demo-batch-000", "demo-batch-002"]
    assert "worker process died" in result.rows[1]["message"]
    _assert_no_partial_folders(outdir)
    assert not _hidden_leftovers(outdir)


def test_interrupted_run_leaves_no_partial_report_and_rerun_completes(three_sources, tmp_path):
    outdir, sentinel = tmp_path / "out", tmp_path / "stalled"
    program = ("import sys; from timingkit.batch.runner import run_batch; from test_batch import "
               f"fit_or_stall; run_batch({str(three_sources)!r}, {str(outdir)!r}, workers=1, "
               "progress=False, fit_function=fit_or_stall)")
    env = dict(os.environ, TIMINGKIT_TEST_STALL=str(sentinel),
               PYTHONPATH=os.pathsep.join([str(TESTS), str(ROOT), os.environ.get("PYTHONPATH", "")]))
    child = subprocess.Popen([sys.executable, "-c", program], env=env, start_new_session=True,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while not sentinel.exists():
            assert child.poll() is None, child.communicate()[1].decode()[-2000:]
            assert time.monotonic() < deadline, "the stalling source was never reached"
            time.sleep(0.05)
    finally:
        os.killpg(child.pid, signal.SIGKILL)  # the batch and its worker, mid-source
        child.wait()
    # the two sources done before the kill are complete; the third left nothing
    # visible (its half-written report sits in a hidden temporary folder)
    assert not (outdir / "demo-batch-002").exists()
    assert (outdir / "demo-batch-000" / "report.json").exists()
    assert (outdir / "demo-batch-001" / "report.json").exists()
    assert [p.name for p in outdir.iterdir() if p.name.startswith(".tmp-demo-batch-002-")]
    assert not (outdir / "summary.csv").exists()
    _assert_no_partial_folders(outdir)

    # same function, no longer stalling ($TIMINGKIT_TEST_STALL is unset here)
    rerun = run_batch(three_sources, outdir, workers=1, resume=True, progress=False,
                      fit_function=fit_or_stall)
    assert rerun.exit_status == 0 and rerun.refitted == ["demo-batch-002"]
    _assert_no_partial_folders(outdir)
    assert not _hidden_leftovers(outdir)
    assert len(_read_csv(outdir / "summary.csv")) == 3


# --------------------------------------------------------------------------- no fitting needed

def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


@pytest.mark.parametrize("text, field", [
    ('[[source]]\nname = "a"\ntoas = "a.toas"\n', "source[1].model"),
    ('[[source]]\nname = "a"\ntoas = "a.toas"\nmodel = "a.toml"\nfree_params = []\n',
     "source[1].free_params"),
    ('[defaults]\ncolour = "red"\n[[source]]\nname = "a"\ntoas = "a.toas"\nmodel = "a.toml"\n',
     "defaults.colour"),
    ('[[source]]\nname = "a"\ntoas = "a.toas"\nmodel = "a.toml"\n'
     '[[source]]\nname = "a"\ntoas = "b.toas"\nmodel = "b.toml"\n', "source[2].name"),
    ('[[source]]\nname = "../up"\ntoas = "a.toas"\nmodel = "a.toml"\n', "source[1].name"),
    ('[[source]]\nname = "a"\ntoas = "a.toas"\nmodel = "a.toml"\nfree = "spin.frequency_hz"\n'
     'make_plots = "yes"\n', "source[1].make_plots"),
    ('[defaults]\nfree = []\n', "source"),
])
def test_bad_manifest_is_an_input_error_naming_the_field(tmp_path, capsys, text, field):
    manifest = _write(tmp_path / "manifest.toml", text)
    with pytest.raises(InputError) as caught:
        read_manifest(manifest)
    assert caught.value.field == field and caught.value.path == str(manifest)
    assert _cli([manifest, "-o", tmp_path / "out"]) == 2
    assert f"field '{field}'" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_manifest_syntax_error_names_the_line(tmp_path):
    manifest = _write(tmp_path / "m.toml", '[[source]]\nname = "a"\ntoas = \n')
    with pytest.raises(InputError) as caught:
        read_manifest(manifest)
    assert caught.value.line == 3


def test_manifest_paths_are_relative_to_the_manifest(tmp_path):
    manifest = _write(tmp_path / "deep" / "m.toml", """
[defaults]
sites = "shared/sites.toml"
clock = ["shared/a.clock", "shared/b.clock"]
ephemeris = "builtin"
[[source]]
name = "demo-one"
toas = "one/obs.toas"
model = "../models/one.toml"
[[source]]
name = "demo-two"
toas = "two.toas"
model = "two.toml"
ephemeris = "eph/other.bsp"
sites = []
""")
    one, two = read_manifest(manifest)
    base = (tmp_path / "deep").resolve()
    assert one.toas_path == str(base / "one" / "obs.toas")
    assert one.model_path == str((tmp_path / "models" / "one.toml").resolve())
    assert one.sites_paths == (str(base / "shared" / "sites.toml"),)
    assert one.clock_paths == (str(base / "shared" / "a.clock"), str(base / "shared" / "b.clock"))
    assert one.ephemeris is None and one.free == () and one.make_plots is True
    assert two.ephemeris == str(base / "eph" / "other.bsp") and two.sites_paths == ()


def test_directory_discovery_rules(tmp_path):
    root = tmp_path / "tree"
    _write(root / "demo-b" / "toas.txt", "x")
    _write(root / "demo-b" / "model.toml", 'name = "demo-b"\n')
    _write(root / "demo-b" / "sites.toml", "[site.desert-dish]\nheight_m = 1.0\n")  # a site file
    _write(root / "demo-a" / "one.toas", "x")
    _write(root / "demo-a" / "two.toas", "x")
    _write(root / "demo-a" / "m.toml", "")
    _write(root / "demo-c" / "obs.toas", "x")  # no model
    _write(root / ".hidden" / "obs.toas", "x")
    _write(root / "docs" / "notes.md", "x")
    _write(root / "out" / "demo-x" / "obs.toas", "x")
    sources = discover_sources(root, outdir=root / "out")
    assert [s.name for s in sources] == ["demo-a", "demo-b", "demo-c"]
    a, b, c = sources
    assert b.problem is None and b.toas_path == str((root / "demo-b" / "toas.txt").resolve())
    assert b.model_path == str((root / "demo-b" / "model.toml").resolve())
    assert "2 TOA tables" in a.problem and "one.toas, two.toas" in a.problem
    assert "0 model files" in c.problem
    with pytest.raises(InputError):
        discover_sources(root / "docs")


def test_output_folder_that_would_replace_inputs_is_refused(tmp_path):
    root = tmp_path / "tree"
    toas = _write(root / "demo-a" / "obs.toas", "mjd err_us freq_mhz site\n")
    _write(root / "demo-a" / "model.toml", 'name = "demo-a"\n')
    with pytest.raises(InputError, match="would replace the inputs of source 'demo-a'"):
        run_batch(root, root, workers=1, progress=False)  # -o pointing at the sources
    assert toas.read_text() == "mjd err_us freq_mhz site\n"
    assert sorted(p.name for p in root.iterdir()) == ["demo-a"]


def test_problem_sources_fail_without_running_anything(tmp_path):
    sources = [Source("demo-bad", "", "", problem="found 2 TOA tables in x")]
    result = run_batch(sources, tmp_path / "out", workers=1, progress=False)
    assert result.failed == ["demo-bad"] and result.engine == "none (nothing to fit)"
    assert (tmp_path / "out" / "demo-bad" / "error.txt").read_text().startswith("found 2 TOA")


def test_content_hash_follows_contents_settings_and_referenced_files(tmp_path):
    folder = tmp_path / "a" / "demo-h"
    _write(folder / "obs.toas", "mjd err_us freq_mhz site\n")
    _write(folder / "model.toml", 'name = "demo-h"\n[settings]\nsites = "sites.toml"\n')
    _write(folder / "sites.toml", "[site.desert-dish]\nheight_m = 1.0\n")
    source = discover_sources(tmp_path / "a")[0]
    reference = inputs_sha256(source)
    assert inputs_sha256(source) == reference
    moved = tmp_path / "b"
    shutil.copytree(tmp_path / "a", moved)
    assert inputs_sha256(discover_sources(moved)[0]) == reference  # paths are not hashed
    assert inputs_sha256(Source(**{**source.__dict__, "free": ("dispersion.dm",)})) != reference
    assert inputs_sha256(Source(**{**source.__dict__, "make_plots": False})) != reference
    assert inputs_sha256(source, fit_function="timingkit.pipeline.glitch_run.glitch_files") != reference
    (folder / "sites.toml").write_text("[site.desert-dish]\nheight_m = 2.0\n")
    assert inputs_sha256(source) != reference  # a file named in the model's settings


def test_cluster_without_dask_says_how_to_install(tmp_path, monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import now fails
    source = Source("demo-one", str(tmp_path / "a.toas"), str(tmp_path / "a.toml"))
    with pytest.raises(InputError, match=r"pip install 'timingkit\[cluster\]'"):
        run_batch([source], tmp_path / "out", cluster="local", progress=False)
    _write(tmp_path / "tree" / "demo-one" / "obs.toas", "x")
    _write(tmp_path / "tree" / "demo-one" / "m.toml", "")
    assert _cli([tmp_path / "tree", "-o", tmp_path / "out", "--cluster", "local"]) == 2
    assert "timingkit[cluster]" in capsys.readouterr().err


@pytest.mark.parametrize("options, field", [({"cluster": "yarn"}, "cluster"),
                                            ({"workers": 0}, "workers")])
def test_bad_engine_options(tmp_path, options, field):
    source = Source("demo-one", str(tmp_path / "a.toas"), str(tmp_path / "a.toml"))
    with pytest.raises(InputError) as caught:
        run_batch([source], tmp_path / "out", progress=False, **options)
    assert caught.value.field == field


def test_leftover_folder_names_parse_back_to_source_names():
    from timingkit.outputs.output_set import work_folder_source
    assert work_folder_source(".tmp-demo-batch-002-0a1b2c3d") == "demo-batch-002"
    assert work_folder_source(".tmp-a-ffffffff") == "a"
    assert work_folder_source(".old-a-ffffffff") is None
