"""Output locks of the single-source commands (issue 15): a second run on a locked
output exits 2 naming the holder, --wait queues behind it, a lock left by a killed
run is taken over with a note, and the lock is released on errors and signals; the
same for the portable fallback (an O_EXCL lock file), forced on this machine."""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.outputs import folder_lock
from timingkit.outputs.folder_lock import (EXCLUSIVE_FILE, SCHEME_VARIABLE, SYSTEM_LOCK,
                                           lock_output, lock_path)
from timingkit.outputs.output_set import output_set

SAMPLE = Path(__file__).resolve().parent.parent / "timingkit" / "sample_data"
TOAS, MODEL = str(SAMPLE / "demo-slow.toas"), str(SAMPLE / "demo-slow.toml")
SCHEMES = [SYSTEM_LOCK, EXCLUSIVE_FILE]


@pytest.fixture(params=SCHEMES)
def scheme(request, monkeypatch):
    """Every test below runs with the flock lock and with the forced fallback."""
    monkeypatch.setenv(SCHEME_VARIABLE, request.param)
    return request.param


def _fit(outdir, *extra) -> int:
    return main(["fit", TOAS, MODEL, "-o", str(outdir), "--no-plot", *extra])


def _hold(target, seconds, started: threading.Event):
    with lock_output(target):
        started.set()
        time.sleep(seconds)


def _refused_while_locked_then_waits(command: list, out: Path, capsys) -> None:
    """``command`` writing ``out`` exits 2 while another run holds the lock, and with
    --wait succeeds once the holder has finished."""
    with lock_output(out):
        assert main(command) == 2
    assert "in use by" in capsys.readouterr().err and not out.exists()
    started = threading.Event()
    holder = threading.Thread(target=_hold, args=(out, 0.5, started))
    holder.start()
    started.wait(10)
    assert main([*command, "--wait"]) == 0
    holder.join()
    assert out.exists() and not lock_path(out).exists()


def _dead_pid() -> int:
    """The pid of a process that has just ended (so no process runs under it)."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def _left_lock(target, pid: int, host: str | None = None) -> Path:
    """A lock file as a run killed with SIGKILL leaves it."""
    path = lock_path(target)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(f"pid {pid} on {host or folder_lock._host()}, started 2026-01-02 03:04:05 "
                    "UTC, command: timingkit fit a.toas a.toml\nlock 0123456789abcdef\n")
    return path


def test_a_fit_on_a_locked_folder_exits_2_naming_the_holder(tmp_path, scheme, capsys):
    outdir = tmp_path / "out"
    assert _fit(outdir) == 0
    before = {p.name: p.read_bytes() for p in outdir.iterdir()}
    capsys.readouterr()
    with lock_output(outdir):
        assert _fit(outdir) == 2
        assert main(["residuals", TOAS, MODEL, "-o", str(outdir)]) == 2
    err = capsys.readouterr().err
    assert f"in use by pid {os.getpid()} on {folder_lock._host()}" in err
    assert "--wait" in err and str(outdir) in err and "Traceback" not in err
    assert {p.name: p.read_bytes() for p in outdir.iterdir()} == before    # untouched
    assert not lock_path(outdir).exists()                                 # released


def test_a_busy_folder_is_refused_before_the_fit_not_after_it(tmp_path, monkeypatch, capsys):
    import timingkit.pipeline.fit_run as fit_run

    def no_fit(*args, **kwargs):
        raise AssertionError("the fit ran although the output folder was busy")

    monkeypatch.setattr(fit_run, "fit", no_fit)
    with lock_output(tmp_path / "out"):
        assert _fit(tmp_path / "out") == 2
    assert "in use by" in capsys.readouterr().err


def test_wait_queues_behind_the_holder_then_succeeds(tmp_path, scheme, capsys):
    outdir, started = tmp_path / "out", threading.Event()
    holder = threading.Thread(target=_hold, args=(outdir, 1.5, started))
    holder.start()
    started.wait(10)
    begun = time.monotonic()
    assert _fit(outdir, "--wait") == 0
    waited_s = time.monotonic() - begun
    holder.join()
    assert "waiting for the output" in capsys.readouterr().err
    assert waited_s > 1.0                 # it did wait for the holder (not a speed check)
    report = json.loads((outdir / "report.json").read_text())
    assert report["toas"] > 0 and (outdir / "fitted.toml").is_file()
    assert not lock_path(outdir).exists()


def test_a_lock_left_by_a_killed_run_is_taken_over_with_a_note(tmp_path, scheme, capsys):
    outdir = tmp_path / "out"
    pid = _dead_pid()
    _left_lock(outdir, pid)
    assert _fit(outdir) == 0
    err = capsys.readouterr().err
    assert f"took over the lock of {outdir} left by pid {pid}" in err
    assert "no longer running" in err
    assert (outdir / "report.json").is_file() and not lock_path(outdir).exists()


def test_a_lock_of_a_live_process_is_not_taken_over(tmp_path, scheme):
    """The fallback honours a file naming a running process (here: this test's parent)."""
    outdir = tmp_path / "out"
    path = _left_lock(outdir, os.getppid())
    if scheme == EXCLUSIVE_FILE:
        with pytest.raises(InputError) as caught:
            with lock_output(outdir):
                pass
        assert f"pid {os.getppid()}" in str(caught.value)
        assert f"if that run has ended, remove {path}" in str(caught.value)
        assert path.exists()
    else:      # the kernel's lock is the truth: nobody holds it, the file is a leftover
        with lock_output(outdir):
            assert f"pid {os.getpid()} " in path.read_text()


def test_the_fallback_names_a_holder_on_another_host_and_the_file_to_remove(tmp_path,
                                                                              monkeypatch):
    monkeypatch.setenv(SCHEME_VARIABLE, EXCLUSIVE_FILE)
    outdir = tmp_path / "out"
    path = _left_lock(outdir, _dead_pid(), host="invented-node-7")   # pid not checkable there
    with pytest.raises(InputError) as caught:
        with lock_output(outdir):
            pass
    message = str(caught.value)
    assert "on invented-node-7" in message and str(path) in message
    assert caught.value.field == "outdir"


def test_the_lock_is_released_when_the_block_fails(tmp_path, scheme):
    outdir = tmp_path / "out"
    with pytest.raises(RuntimeError):
        with output_set(outdir) as work:
            (work / "half.txt").write_text("half")
            raise RuntimeError("a failure while writing")
    assert not outdir.exists() and not lock_path(outdir).exists()
    assert [p.name for p in tmp_path.iterdir()] == []          # no work folder, no lock
    with lock_output(outdir):                                     # free again
        pass


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_the_lock_is_released_when_the_holder_is_stopped_by_a_signal(tmp_path, scheme, signum):
    outdir = tmp_path / "out"
    code = ("import sys, time\n"
            "from timingkit.outputs.folder_lock import lock_output\n"
            "with lock_output(sys.argv[1]):\n"
            "    print('held', flush=True)\n"
            "    time.sleep(60)\n")
    child = subprocess.Popen([sys.executable, "-c", code, str(outdir)], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    assert child.stdout.readline().strip() == "held"
    assert lock_path(outdir).exists()
    with pytest.raises(InputError):                 # held by the child
        with lock_output(outdir):
            pass
    child.send_signal(signum)
    child.wait(30)
    assert not lock_path(outdir).exists()           # removed on the way out
    with lock_output(outdir):
        pass


def test_runs_queued_on_one_lock_never_overlap(tmp_path, scheme):
    """Three processes add 1 to a counter 15 times each, read-sleep-write under the lock
    with waiting: a lock that let two in at once (say, one holding a removed file) loses
    updates."""
    counter = tmp_path / "counter.txt"
    counter.write_text("0")
    code = ("import sys, time\n"
            "from pathlib import Path\n"
            "from timingkit.outputs.folder_lock import lock_output\n"
            "counter = Path(sys.argv[1])\n"
            "for _ in range(15):\n"
            "    with lock_output(sys.argv[2], wait=True, poll_s=0.002):\n"
            "        value = int(counter.read_text())\n"
            "        time.sleep(0.002)\n"
            "        counter.write_text(str(value + 1))\n")
    children = [subprocess.Popen([sys.executable, "-c", code, str(counter), str(tmp_path / "o")],
                                 stderr=subprocess.PIPE, text=True) for _ in range(3)]
    for child in children:
        assert child.wait(120) == 0, child.stderr.read()
    assert int(counter.read_text()) == 45
    assert not lock_path(tmp_path / "o").exists()


def test_a_batch_and_a_fit_on_one_folder_exclude_each_other(tmp_path, scheme, capsys):
    from test_batch_faults import _sources, quick_fit
    from timingkit.batch.runner import run_batch
    sources, outdir = _sources(tmp_path / "sources", 1), tmp_path / "out"
    started, release = threading.Event(), threading.Event()

    def fit_writing():                          # a single-source command mid-write
        with output_set(outdir) as work:
            (work / "report.json").write_text("{}")
            started.set()
            release.wait(10)

    writer = threading.Thread(target=fit_writing)
    writer.start()
    started.wait(10)
    try:
        with pytest.raises(InputError) as caught:
            run_batch(sources, outdir, workers=1, progress=False, fit_function=quick_fit)
        assert f"in use by pid {os.getpid()}" in str(caught.value)
    finally:
        release.set()
        writer.join()
    assert not (outdir / "summary.csv").exists()
    batch_dir, started = tmp_path / "batch", threading.Event()
    holder = threading.Thread(target=_hold, args=(batch_dir, 0.5, started))
    holder.start()                             # the batch's own call on its folder
    started.wait(10)
    assert _fit(batch_dir) == 2
    holder.join()
    assert "in use by" in capsys.readouterr().err


def test_file_outputs_are_locked_too(tmp_path, scheme, capsys):
    """predict -o FILE (like event-toas and profile-toas) locks the file it writes."""
    out = tmp_path / "pred.json"
    command = ["predict", MODEL, "--site", "desert-dish", "--start", "60000.9", "--end",
               "60001.0", "--freq-mhz", "1400", "-o", str(out)]
    with lock_output(out):
        assert main(command) == 2
    assert "in use by" in capsys.readouterr().err and not out.exists()
    assert main(command) == 0 and out.is_file()


@pytest.mark.parametrize("command, written", [("explore", "explorer.html"),
                                               ("plot", "residuals.png")])
def test_explore_and_plot_lock_the_folder_they_read_and_write(tmp_path, scheme, capsys,
                                                              command, written):
    outdir = tmp_path / "out"
    assert _fit(outdir) == 0
    with lock_output(outdir):
        assert main([command, str(outdir)]) == 2
    assert "in use by" in capsys.readouterr().err
    assert not (outdir / written).exists()
    assert main([command, str(outdir), "--wait"]) == 0 and (outdir / written).is_file()


def test_a_file_system_without_flock_falls_back_to_the_exclusive_file(tmp_path, monkeypatch):
    fcntl = pytest.importorskip("fcntl")
    monkeypatch.delenv(SCHEME_VARIABLE, raising=False)

    def refuse(descriptor, operation):
        raise OSError(errno.ENOLCK, "No locks available")

    monkeypatch.setattr(fcntl, "flock", refuse)
    outdir = tmp_path / "out"
    with lock_output(outdir):
        text = lock_path(outdir).read_text()
        assert text.startswith(f"pid {os.getpid()} on ") and "\nlock " in text
        with pytest.raises(InputError):
            with lock_output(outdir, scheme=EXCLUSIVE_FILE):
                pass
    assert not lock_path(outdir).exists()


def test_an_unknown_lock_scheme_is_an_input_error(tmp_path, monkeypatch):
    monkeypatch.setenv(SCHEME_VARIABLE, "x" * 5000)
    with pytest.raises(InputError) as caught:
        with lock_output(tmp_path / "out"):
            pass
    assert caught.value.field == SCHEME_VARIABLE and "x" * 100 not in str(caught.value)


def test_the_lock_names_agree_for_every_spelling_and_stay_short(tmp_path):
    (tmp_path / "a").mkdir()
    link = tmp_path / "link"
    link.symlink_to(tmp_path / "a")
    assert lock_path(tmp_path / "a" / "out") == lock_path(link / "out")
    assert lock_path(tmp_path / "a" / "out") == lock_path(str(tmp_path / "a" / "out") + "/")
    assert lock_path(tmp_path / "a" / "x" / ".." / "out") == lock_path(tmp_path / "a" / "out")
    long_one, other = lock_path(tmp_path / ("n" * 250)), lock_path(tmp_path / ("n" * 249 + "m"))
    assert len(long_one.name) <= folder_lock.MAX_NAME_CHARS + len(folder_lock.LOCK_PREFIX)
    assert long_one != other


@pytest.fixture(scope="module")
def made_inputs(tmp_path_factory):
    """Simulated profiles and photon events (invented site and source) for the commands
    that read them."""
    from events_support import write_inputs
    folder = tmp_path_factory.mktemp("inputs")
    assert main(["simulate-profiles", MODEL, "--site", "desert-dish", "--start", "60000",
                 "--end", "60010", "--count", "2", "--bins", "64", "--seed", "3", "-o",
                 str(folder / "profiles")]) == 0
    model, _ = write_inputs(folder)
    assert main(["simulate-events", str(model), "--start", "58000", "--end", "58000.2",
                 "--rate-per-s", "0.4", "--pulsed-fraction", "0.3", "--profile",
                 "gauss:0.25:0.08", "--site", "dune-array", "--seed", "9", "-o",
                 str(folder / "events.fits")]) == 0
    return folder, model


@pytest.mark.parametrize("command", ["simulate-profiles", "profile-toas", "events",
                                     "event-toas"])
def test_the_other_commands_refuse_a_locked_output_and_wait_with_wait(made_inputs, tmp_path,
                                                                      capsys, command):
    folder, model = made_inputs
    out = tmp_path / "out"
    profiles = sorted(str(p) for p in (folder / "profiles").glob("obs-*.npz"))
    arguments = {
        "simulate-profiles": [MODEL, "--site", "desert-dish", "--start", "60000", "--end",
                              "60010", "--count", "2", "--bins", "64", "--seed", "4"],
        "profile-toas": [*profiles, "--template", str(folder / "profiles" / "template.npz")],
        "events": [str(folder / "events.fits"), str(model), "--no-plot", "--harmonics", "2"],
        "event-toas": [str(folder / "events.fits"), str(model), "--template", "auto",
                       "--span-days", "0.1", "--min-events", "5"],
    }[command]
    _refused_while_locked_then_waits([command, *arguments, "-o", str(out)], out, capsys)


def test_a_failed_run_leaves_no_folder_it_made_for_its_output(tmp_path, scheme):
    """The lock makes the output's missing parent folders; a run that fails removes
    those it made (when empty) and never a folder that was there before."""
    existing = tmp_path / "existing"
    existing.mkdir()
    out = existing / "new" / "deeper" / "out"
    with pytest.raises(RuntimeError):
        with lock_output(out):
            assert out.parent.is_dir()
            raise RuntimeError("a failure after the lock was taken")
    assert [p.name for p in tmp_path.iterdir()] == ["existing"]
    assert list(existing.iterdir()) == []
    with lock_output(out):                                  # a run that writes keeps them
        out.write_text("written")
    assert out.read_text() == "written" and not lock_path(out).exists()


@pytest.mark.parametrize("command", [
    ["predict", MODEL, "--site", "nowhere-site", "--start", "60000.9", "--end", "60001.0",
     "--freq-mhz", "1400", "-o"],
    ["profile-toas", "missing.npz", "--template", "auto", "-o"],
    ["event-toas", "missing.fits", MODEL, "--template", "auto", "--span-days", "1", "-o"],
    ["events", "missing.fits", MODEL, "-o"],
])
def test_a_command_that_fails_leaves_no_empty_output_folders(tmp_path, monkeypatch, capsys,
                                                             command):
    monkeypatch.chdir(tmp_path)
    assert main([*command, str(tmp_path / "new" / "sub" / "out")]) == 2
    assert "error" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("command", ["simulate", "convert", "barycentre", "simulate-events"])
def test_the_remaining_file_commands_lock_their_file_and_wait_with_wait(made_inputs, tmp_path,
                                                                        capsys, command):
    """simulate, convert, barycentre -o and simulate-events hold their file's lock too."""
    _, model = made_inputs
    out = tmp_path / "out.file"
    arguments = {
        "simulate": [MODEL, "--start", "60000", "--end", "60010", "--count", "3",
                     "--error-us", "1", "--site", "desert-dish", "--seed", "1"],
        "convert": [MODEL, "--frame", "ecliptic"],
        "barycentre": [TOAS, MODEL],
        "simulate-events": [str(model), "--start", "58000", "--end", "58000.01",
                            "--rate-per-s", "0.4", "--pulsed-fraction", "0.3", "--site",
                            "dune-array", "--seed", "9"],
    }[command]
    _refused_while_locked_then_waits([command, *arguments, "-o", str(out)], out, capsys)
    assert out.is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.file"]
