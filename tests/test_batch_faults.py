"""The batch runner under faults (issue 15): workers end with the batch, one run per
output folder, only its own leftovers removed, no output among the inputs, resume
only of intact folders, shared outputs without file contents.

Most tests use a quick stand-in fit function (``quick_fit``: writes a small report
and sleeps when asked), so they test the runner, not the fit.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from timingkit.batch.runner import run_batch
from timingkit.batch.sources import discover_sources
from timingkit.formats.errors import InputError
from timingkit.outputs.folder_lock import lock_output_folder, lock_path

ROOT = Path(__file__).resolve().parents[1]
TESTS = Path(__file__).resolve().parent
SAMPLE = ROOT / "timingkit" / "sample_data"
SECRET = "api_key SECRET-TOKEN-123"


def quick_fit(toas_path, model_path, outdir, **options):
    """Stand-in fit: a report and a figure; records its pid and sleeps
    $TIMINGKIT_TEST_SLEEP seconds first when $TIMINGKIT_TEST_PIDS is set."""
    pids = os.environ.get("TIMINGKIT_TEST_PIDS")
    if pids:
        Path(pids, str(os.getpid())).write_text(Path(toas_path).parent.name)
        time.sleep(float(os.environ.get("TIMINGKIT_TEST_SLEEP", "0")))
    name = Path(toas_path).parent.name
    Path(outdir, "report.json").write_text(json.dumps({"source": name, "toas": 1}))
    Path(outdir, "residuals.png").write_bytes(b"not really a figure")
    return {"source": name}


def _sources(root: Path, count: int) -> Path:
    for i in range(count):
        folder = root / f"src-{i:02d}"
        folder.mkdir(parents=True)
        (folder / "toas.txt").write_text(f"mjd err_us freq_mhz site\n5800{i}.5 1 1400 ssb\n")
        (folder / "model.toml").write_text(f'name = "src-{i:02d}"\n')
    return root


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/status") as handle:
            state = next(line for line in handle if line.startswith("State:"))
    except (FileNotFoundError, StopIteration):
        return False
    return "Z" not in state.split()[1]        # a zombie has ended


def _descendants(pid: int) -> set[int]:
    """Every process below ``pid`` (Linux /proc: the children of each of its threads)."""
    found, queue = set(), [pid]
    while queue:
        parent = queue.pop()
        for children in Path(f"/proc/{parent}/task").glob("*/children"):
            try:
                kids = {int(k) for k in children.read_text().split()}
            except OSError:
                continue
            queue.extend(kids - found)
            found |= kids
    return found


def _stop_a_running_batch(tmp_path, signum, cluster=None) -> None:
    """Start a batch of slow stand-in fits in a separate process, send its main process
    ``signum`` once two sources are being fitted, then check that no worker (no process
    the batch started) outlives it and that nothing more is written."""
    sources, outdir, pids = _sources(tmp_path / "sources", 8), tmp_path / "out", tmp_path / "pids"
    pids.mkdir()
    program = ("from timingkit.batch.runner import run_batch; from test_batch_faults import "
               f"quick_fit; run_batch({str(sources)!r}, {str(outdir)!r}, workers=2, "
               f"cluster={cluster!r}, progress=False, fit_function=quick_fit)")
    env = dict(os.environ, TIMINGKIT_TEST_PIDS=str(pids), TIMINGKIT_TEST_SLEEP="3",
               PYTHONPATH=os.pathsep.join([str(TESTS), str(ROOT), os.environ.get("PYTHONPATH", "")]))
    main = subprocess.Popen([sys.executable, "-c", program], env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while len(list(pids.iterdir())) < 2:
        assert main.poll() is None, main.communicate()[1].decode()[-2000:]
        assert time.monotonic() < deadline, "the workers never started"
        time.sleep(0.05)
    workers = {int(p.name) for p in pids.iterdir()}
    started_by_batch = _descendants(main.pid) | workers
    main.send_signal(signum)           # the main process only, as a scheduler would
    main.wait(30)
    deadline = time.monotonic() + 10
    while any(_alive(pid) for pid in started_by_batch) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not [pid for pid in workers if _alive(pid)], "a worker outlived the batch"
    assert not [pid for pid in started_by_batch if _alive(pid)], "a process outlived the batch"
    started = {p.read_text() for p in pids.iterdir()}
    visible = {p.name for p in outdir.iterdir() if not p.name.startswith(".")}
    time.sleep(4)                      # longer than a source takes: nothing more appears
    assert {p.read_text() for p in pids.iterdir()} == started
    assert {p.name for p in outdir.iterdir() if not p.name.startswith(".")} == visible
    assert not visible & {p.read_text() for p in pids.iterdir()
                          if int(p.name) in workers}, "a source in flight was written"


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT, signal.SIGKILL])
def test_workers_end_with_the_batch_and_write_nothing_after_it(tmp_path, signum):
    _stop_a_running_batch(tmp_path, signum)


def test_dask_local_workers_end_when_the_batch_is_killed(tmp_path):
    pytest.importorskip("dask.distributed")
    _stop_a_running_batch(tmp_path, signal.SIGKILL, cluster="local")


def test_a_second_batch_on_a_locked_folder_is_refused_or_waits(tmp_path, capsys):
    sources, outdir = _sources(tmp_path / "sources", 2), tmp_path / "out"
    outdir.mkdir()
    with lock_output_folder(outdir):
        with pytest.raises(InputError) as caught:
            run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit)
        assert caught.value.field == "outdir" and f"pid {os.getpid()}" in str(caught.value)
        assert not (outdir / "summary.csv").exists()
        from timingkit.cli.main import main
        assert main(["batch", str(sources), "-o", str(outdir)]) == 2
        assert "in use by" in capsys.readouterr().err
    holder = threading.Thread(target=_hold_lock, args=(outdir, 1.0))
    holder.start()
    time.sleep(0.2)
    result = run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit,
                       wait=True)
    holder.join()
    assert result.exit_status == 0 and (outdir / "summary.csv").exists()
    assert not lock_path(outdir).exists()                    # released: removed


def _hold_lock(folder, seconds):
    with lock_output_folder(folder):
        time.sleep(seconds)


def test_clean_up_removes_only_folders_timingkit_marked(tmp_path):
    sources, outdir = _sources(tmp_path / "sources", 2), tmp_path / "out"
    outdir.mkdir()
    mine = {".old-drafts": "draft\n", ".tmp-scratch": "scratch\n", ".tmp-notes-0a1b2c3d": "x\n"}
    for name, text in mine.items():
        (outdir / name).mkdir()
        (outdir / name / "keep.txt").write_text(text)
    (outdir / ".vimrc.tmp").write_text("set number\n")
    (outdir / ".summary.csv.123.0a1b2c3d.tmp").write_text("half a summary")   # ours
    run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit)
    for name, text in mine.items():
        assert (outdir / name / "keep.txt").read_text() == text
    assert (outdir / ".vimrc.tmp").read_text() == "set number\n"
    assert not (outdir / ".summary.csv.123.0a1b2c3d.tmp").exists()


def test_a_user_folder_named_like_a_source_is_never_replaced(tmp_path):
    sources, outdir = _sources(tmp_path / "sources", 2), tmp_path / "out"
    (outdir / "src-01").mkdir(parents=True)
    (outdir / "src-01" / "thesis.tex").write_text("chapter 1\n")
    with pytest.raises(InputError) as caught:
        run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit)
    assert "src-01" in str(caught.value)
    assert (outdir / "src-01" / "thesis.tex").read_text() == "chapter 1\n"


@pytest.mark.parametrize("where", ["src-01", "src-01/out"])
def test_output_inside_a_source_folder_is_refused(tmp_path, where):
    sources = _sources(tmp_path / "sources", 3)
    with pytest.raises(InputError) as caught:
        run_batch(sources, sources / where, workers=1, progress=False, fit_function=quick_fit)
    assert caught.value.field == "outdir"
    assert sorted(p.name for p in (sources / "src-01").iterdir())[:2] == ["model.toml", "toas.txt"]
    assert not (sources / "src-01" / "summary.csv").exists()


def test_a_source_folder_named_like_a_batch_output_is_refused(tmp_path):
    sources = _sources(tmp_path / "sources", 1)
    shutil.copytree(sources / "src-00", sources / "summary.csv")
    with pytest.raises(InputError) as caught:
        discover_sources(sources)
    assert "summary.csv" in str(caught.value)


def test_resume_reuses_only_folders_whose_outputs_are_intact(tmp_path):
    sources, outdir = _sources(tmp_path / "sources", 4), tmp_path / "out"
    run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit)
    (outdir / "src-01" / "residuals.png").unlink()                       # deleted
    (outdir / "src-02" / "report.json").write_text('{"source": "edited"}')  # overwritten
    (outdir / "src-03" / "outputs.sha256").unlink()                      # no record
    again = run_batch(sources, outdir, workers=1, progress=False, resume=True,
                      fit_function=quick_fit)
    assert again.refitted == ["src-01", "src-02", "src-03"]
    assert [o.name for o in again.outcomes if o.reused] == ["src-00"]
    assert (outdir / "src-01" / "residuals.png").exists()


def test_shared_batch_outputs_carry_reasons_without_file_contents(tmp_path):
    secret = tmp_path / "credentials.txt"
    secret.write_text(SECRET + "\nroot:x:0:0:root:/root:/bin/bash\n")
    folder = tmp_path / "data"
    folder.mkdir()
    for name in ("demo-slow.toas", "demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, folder / name)
    model = folder / "demo-slow.toml"
    model.write_text(model.read_text() + f'clock = ["{secret}"]\n')
    manifest = tmp_path / "manifest.toml"
    manifest.write_text(f'[[source]]\nname = "clocked"\ntoas = "data/demo-slow.toas"\n'
                        f'model = "data/demo-slow.toml"\n\n[[source]]\nname = "passwords"\n'
                        f'toas = "{secret}"\nmodel = "data/demo-slow.toml"\n')
    outdir = tmp_path / "out"
    result = run_batch(manifest, outdir, workers=1, progress=False)
    assert result.failed == ["clocked", "passwords"]
    shared = [outdir / "summary.csv", outdir / "summary.json", outdir / "overview.html",
              outdir / "clocked" / "error.txt", outdir / "passwords" / "error.txt"]
    for path in shared:
        text = path.read_text()
        assert "SECRET" not in text and "root:x" not in text, path
    assert "credentials.txt:1" in (outdir / "clocked" / "error.txt").read_text()


def test_a_worker_not_started_by_the_batch_still_ends_with_it(tmp_path):
    # a Dask worker may be started through a fork server, so its parent is not the
    # batch: the watchdog then watches the batch's pid itself (here: a stand-in batch
    # process and a "worker" that pytest started beside it)
    batch = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    beats = tmp_path / "beats"
    program = ("import sys, time; from timingkit.batch.worker_guard import watch_parent; "
               f"watch_parent({batch.pid}); beats = open({str(beats)!r}, 'a')\n"
               "for _ in range(600):\n    beats.write('.'); beats.flush(); time.sleep(0.05)\n")
    worker = subprocess.Popen([sys.executable, "-c", program],
                              env=dict(os.environ, PYTHONPATH=str(ROOT)))
    deadline = time.monotonic() + 30
    while not beats.exists() or not beats.read_text():
        assert worker.poll() is None and time.monotonic() < deadline, "the worker never ran"
        time.sleep(0.05)
    time.sleep(0.6)
    assert worker.poll() is None, "the watchdog stopped a worker whose batch is alive"
    batch.kill()
    batch.wait()
    assert worker.wait(5) == 1                 # ended by its watchdog, within a few polls
    written = beats.read_text()
    time.sleep(0.3)
    assert beats.read_text() == written


def _watchdog_threads() -> list[str]:
    return [t.name for t in threading.enumerate() if t.name == "timingkit-watch-batch"]


def test_every_local_dask_worker_watches_the_batch_idle_or_not(tmp_path):
    # distributed's own workers also end with their nanny; the watchdog does not rely
    # on that: each worker of the local cluster, even one that never gets a source,
    # runs it from the start, watching this process
    pytest.importorskip("dask.distributed")
    from timingkit.batch.runner import _dask_client
    client, local = _dask_client("local", 2)
    try:
        threads = client.run(_watchdog_threads)
        parents = client.run(os.getppid)
    finally:
        client.close()
        local.close()
    assert len(threads) == 2 and all(names == ["timingkit-watch-batch"]
                                     for names in threads.values())
    assert set(parents.values()) == {os.getpid()}


def test_a_local_dask_cluster_that_does_not_start_is_a_clear_error(tmp_path, monkeypatch):
    distributed = pytest.importorskip("dask.distributed")

    def never_ready(self, n_workers, timeout=None):
        raise TimeoutError(f"only 0 of {n_workers} workers after {timeout} s")
    monkeypatch.setattr(distributed.Client, "wait_for_workers", never_ready)
    sources = _sources(tmp_path / "sources", 1)
    with pytest.raises(InputError) as caught:
        run_batch(sources, tmp_path / "out", workers=2, cluster="local", progress=False,
                  fit_function=quick_fit)
    assert caught.value.field == "cluster" and "did not start its 2 workers" in str(caught.value)
    assert not (tmp_path / "out" / "src-00").exists()
