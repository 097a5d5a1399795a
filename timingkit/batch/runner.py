"""Reprocess many sources: one fit per source, on a process pool or a Dask cluster.

Input is a directory of source folders or a TOML manifest (see
:func:`discover_sources`). Each source is fitted by the single-source function
(default :func:`timingkit.pipeline.fit_run.fit_files`) inside its own ``try``; a failure
becomes a ``failed`` row with a one-line reason and an ``error.txt``. Every
source writes into ``OUTDIR/.tmp-NAME-xxxxxxxx`` and the folder is renamed to
``OUTDIR/NAME`` only when complete, so an interrupted batch never leaves a
half-written report. ``inputs.sha256`` in each folder records a content hash of
the inputs and settings, ``outputs.sha256`` the hash of every output; ``resume=True``
keeps sources whose input hash is unchanged and whose outputs are intact. OUTDIR is
locked for the run (timingkit.outputs.folder_lock); clean-up removes only marked work
folders (timingkit.outputs.output_set); workers end with the batch
(timingkit.batch.worker_guard).

Engines: a ``concurrent.futures`` process pool (default, one process per core),
``cluster="local"`` (a Dask ``LocalCluster``) or ``cluster="tcp://HOST:PORT"``
(a running Dask scheduler; workers must see OUTDIR and the inputs at the same
paths). Every engine calls the same function on the same inputs with one
numerical thread per worker, so the numbers are identical.

After the fits: ``summary.csv``, ``summary.json``, ``ppdot.png`` and a
self-contained ``overview.html`` in OUTDIR.
"""

from __future__ import annotations

import os
import shutil
import socket
import sys
import time
import traceback
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

from timingkit.physics.spin import ASSUMPTIONS as DERIVED_ASSUMPTIONS
from timingkit.formats.errors import FitError, InputError
from timingkit.batch.outcomes import STATUS_FAILED, STATUS_OK, BatchResult, SourceOutcome, one_line
from timingkit.batch.fingerprint import HASH_FILE, software_fingerprint, function_name, inputs_sha256
from timingkit.batch.summary import REPORT_FILE, read_report, summary_row, write_summaries
from timingkit.batch.sources import TOP_LEVEL_OUTPUTS, Source, discover_sources
from timingkit.batch.worker_guard import (outputs_intact, parent_is_gone,
                                          record_outputs, stop_pool, terminate_on_signals,
                                          watch_parent)
from timingkit.outputs.folder_lock import lock_output_folder
from timingkit.outputs.output_set import (flush_to_disk, is_own_folder, new_work_folder,
                                          remove_own_leftovers, swap_into_place)


ERROR_FILE = "error.txt"
TRACEBACK_FILE = "traceback.txt"    # an internal error's details: for debugging, not sharing




WORKER_DIED_REASON = ("the worker process died while fitting this source (crash, out of memory "
                      "or killed); fit it alone to see why")


CLUSTER_INSTALL_HINT = "install the cluster extra: pip install 'timingkit[cluster]'"
LOCAL_CLUSTER_START_S = 120     # how long a local Dask cluster may take to start its workers


@dataclass(frozen=True)
class _Job:
    source: Source
    outdir: str
    digest: str
    fit_function: Callable
    batch_pid: int | None = None     # the batch's main process (None on a remote Dask cluster)


def _new_work_folder(outdir: str, name: str) -> Path:
    return new_work_folder(outdir, name, purpose="batch source folder")


def _remove_leftovers(outdir: Path) -> set[str]:
    """Remove the marked work folders of earlier interrupted work (never a user's
    files); return the names of the sources whose work folders were found."""
    return remove_own_leftovers(outdir, TOP_LEVEL_OUTPUTS)


def internal_reason(what: str, exc: BaseException, name: str) -> str:
    """The shared reason of an unexpected failure: the exception's class and where its
    details are, never its text (which may quote input)."""
    return one_line(f"{what} ({type(exc).__name__}); the details are in "
                    f"{name}/{TRACEBACK_FILE}")


def _reason(exc: BaseException, name: str) -> tuple[str, bool]:
    """One-line reason for a failure of source ``name``, and whether it is a timingkit
    bug. The reason of bad input names file, line and field but quotes none of the
    file's contents; that of a bug names the exception's class only (summaries are
    meant for sharing)."""
    if isinstance(exc, InputError):
        return one_line(exc.public_message or type(exc).__name__), False
    if isinstance(exc, FitError):
        return one_line(str(exc) or type(exc).__name__), False
    return internal_reason("internal error, please report it", exc, name), True


def install_failure(outdir: str, source: Source, reason: str, details: str = "") -> None:
    """Replace ``OUTDIR/NAME`` by a folder holding ``error.txt`` (the reason) and, when
    there are ``details`` (a traceback), ``traceback.txt``."""
    tmp = _new_work_folder(outdir, source.name)
    text = (f"{reason}\n\nsource: {source.name}\ntoas: {source.toas_path or '-'}\n"
            f"model: {source.model_path or '-'}\n")
    (tmp / ERROR_FILE).write_text(text, encoding="utf-8")
    if details:
        (tmp / TRACEBACK_FILE).write_text(details.rstrip() + "\n", encoding="utf-8")
    swap_into_place(tmp, Path(outdir) / source.name)


def process_source(job: _Job) -> dict:
    """Fit one source into a temporary folder and rename it into place (runs in a worker).

    Never raises for a failing fit: returns ``{"name", "status", "message",
    "elapsed_s", "worker"}``. Interrupts (KeyboardInterrupt, SystemExit) remove
    the temporary folder and propagate.
    """
    os.environ.setdefault("MPLBACKEND", "Agg")
    watch_parent(job.batch_pid)      # the pool's initializer or the cluster did it; once
    start = time.perf_counter()
    source = job.source
    tmp = _new_work_folder(job.outdir, source.name)
    status, message = STATUS_OK, ""
    # exclusion lists only when given, so fit functions without that keyword still work
    extra = {"exclude_paths": source.exclude_paths} if source.exclude_paths else {}
    try:
        job.fit_function(
            source.toas_path, source.model_path, str(tmp), free=source.free, fix=source.fix,
            sites_paths=source.sites_paths, ephemeris=source.ephemeris,
            clock_paths=source.clock_paths, make_plots=source.make_plots, progress=False,
            **extra)
        if not (tmp / REPORT_FILE).is_file():
            raise RuntimeError(f"the fit returned without writing {REPORT_FILE}")
        (tmp / HASH_FILE).write_text(job.digest + "\n", encoding="utf-8")
        record_outputs(tmp)
        flush_to_disk(tmp)
        if parent_is_gone(job.batch_pid):      # the batch has ended: write nothing more
            shutil.rmtree(tmp, ignore_errors=True)
            os._exit(1)
        swap_into_place(tmp, Path(job.outdir) / source.name)
    except Exception as exc:
        status = STATUS_FAILED
        message, internal = _reason(exc, source.name)
        shutil.rmtree(tmp, ignore_errors=True)
        if parent_is_gone(job.batch_pid):
            os._exit(1)
        install_failure(job.outdir, source, message, traceback.format_exc() if internal else "")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return {"name": source.name, "status": status, "message": message,
            "elapsed_s": time.perf_counter() - start,
            "worker": f"{socket.gethostname()}:{os.getpid()}"}


@contextmanager
def _one_numerical_thread():
    """One BLAS/OpenMP thread per worker process (common practice: avoids
    oversubscribing the cores and keeps sums in the same order on every engine).
    Set while workers are started, restored after; values the user set are kept."""
    names = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "MPLBACKEND")
    saved = {n: os.environ.get(n) for n in names}
    for n in names:
        os.environ.setdefault(n, "Agg" if n == "MPLBACKEND" else "1")
    try:
        yield
    finally:
        for n, value in saved.items():
            if value is None:
                os.environ.pop(n, None)
            else:
                os.environ[n] = value


def _pool_pass(jobs: list[_Job], workers: int, done: Callable[[dict], None]) -> list[_Job]:
    """Run ``jobs`` on a fresh process pool; return those left unfinished by a dead worker."""
    import multiprocessing

    unfinished = []
    # spawn: clean workers on every platform (no forked threads or locks); each worker
    # imports timingkit and opens the ephemeris once, then serves many sources. Each
    # worker watches this process and ends when it is gone (watch_parent).
    context = multiprocessing.get_context("spawn")
    with _one_numerical_thread():
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=context,
                                   initializer=watch_parent, initargs=(os.getpid(),))
    try:
        futures = {pool.submit(process_source, job): job for job in jobs}
        for future in as_completed(futures):
            try:
                done(future.result())
            except BrokenProcessPool:
                unfinished.append(futures[future])
            except Exception as exc:  # the job could not be sent, or the worker's own I/O failed
                _record_failure(futures[future], done, "internal error in the batch worker",
                                exc)
    except BaseException:
        stop_pool(pool)          # interrupted: no worker outlives the batch
        raise
    pool.shutdown(wait=True)
    return unfinished


def _record_failure(job: _Job, done: Callable[[dict], None], reason: str,
                    exc: BaseException | None = None) -> None:
    """A source whose worker could not report: write its error.txt here and count it.
    With ``exc``, the reason names its class and traceback.txt holds its details."""
    details = ""
    if exc is not None:
        details = "".join(traceback.format_exception(exc))
        reason = internal_reason(reason, exc, job.source.name)
    try:
        install_failure(job.outdir, job.source, reason, details)
    except OSError:
        pass  # the row in the summary still says why
    done({"name": job.source.name, "status": STATUS_FAILED, "message": reason,
          "elapsed_s": float("nan"), "worker": "died"})


def _run_on_pool(jobs: list[_Job], workers: int, outdir: Path, done: Callable[[dict], None]) -> None:
    """Process pool with recovery: if a worker dies (crash, out of memory, kill), the
    sources that were in flight (those with a temporary folder) become suspects;
    the other sources simply run again. Suspects then run one at a time in a
    one-worker pool, where the source in flight at a crash is the culprit: it is
    reported failed and the remaining suspects go on in a fresh pool."""
    shared, suspects = list(jobs), []
    while shared:
        left = _pool_pass(shared, workers, done)
        in_flight = _remove_leftovers(outdir)
        blamed = [j for j in left if j.source.name in in_flight] or left
        suspects += blamed
        shared = [j for j in left if j not in blamed]
    while suspects:
        left = _pool_pass(suspects, 1, done)
        in_flight = _remove_leftovers(outdir)
        # one worker runs the jobs in order: the culprit is the first unfinished one
        culprit = next((j for j in left if j.source.name in in_flight), left[0] if left else None)
        if culprit is not None:
            _record_failure(culprit, done, WORKER_DIED_REASON)
        suspects = [j for j in left if j is not culprit]


def _require_dask():
    try:
        import dask.distributed as distributed
    except ImportError:
        raise InputError(f"a Dask cluster needs Dask, which is not installed; {CLUSTER_INSTALL_HINT}",
                         field="cluster") from None
    return distributed


def _dask_client(cluster: str, workers: int):
    distributed = _require_dask()
    if cluster == "local":
        import logging

        with _one_numerical_thread():
            local = distributed.LocalCluster(n_workers=workers, threads_per_worker=1,
                                             processes=True, dashboard_address=None,
                                             silence_logs=logging.ERROR)
        client = distributed.Client(local)
        try:   # every worker, idle ones too, ends when this process is gone (even by SIGKILL)
            client.wait_for_workers(workers, timeout=LOCAL_CLUSTER_START_S)
            client.run(watch_parent, os.getpid())
        except BaseException as exc:
            client.close()
            local.close()
            if isinstance(exc, TimeoutError):
                raise InputError(f"the local Dask cluster did not start its {workers} workers "
                                 f"within {LOCAL_CLUSTER_START_S} s; try fewer (--workers) or "
                                 "the process pool (no --cluster)", field="cluster") from None
            raise
        return client, local
    try:
        return distributed.Client(cluster, timeout="15s"), None
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {cluster} ({exc})",
                         field="cluster") from None


def _run_on_dask(jobs: list[_Job], cluster: str, workers: int, done: Callable[[dict], None]) -> str:
    client, local = _dask_client(cluster, workers)
    try:
        futures = {client.submit(process_source, job, pure=False,
                                 key=f"timingkit-fit-{job.source.name}-{os.urandom(4).hex()}"): job
                   for job in jobs}
        for future in _require_dask().as_completed(list(futures)):
            job = futures[future]
            try:
                done(future.result())
            except Exception as exc:  # KilledWorker, lost scheduler, ...
                if type(exc).__name__ == "KilledWorker":
                    _record_failure(job, done, WORKER_DIED_REASON
                                    + " (Dask tried it on several workers)")
                else:
                    _record_failure(job, done, "the Dask cluster lost this source", exc)
        workers_seen = len(client.scheduler_info().get("workers", {}))
    finally:
        client.close()
        if local is not None:
            local.close()
    return (f"dask local cluster ({workers} workers)" if local is not None
            else f"dask scheduler {cluster} ({workers_seen} workers)")


def _check_outputs_spare_inputs(sources: Sequence[Source], outdir: Path) -> None:
    """Refuse an OUTDIR whose per-source folders would hold (and so replace) inputs,
    e.g. ``-o`` pointing at the source directory itself, or an OUTDIR that is the
    folder of a source's inputs (the summaries would land among them)."""
    for source in sources:
        final = outdir / source.name
        inputs = [source.toas_path, source.model_path, *source.sites_paths,
                  *source.clock_paths, *source.exclude_paths, source.ephemeris or ""]
        for path in filter(None, inputs):
            if Path(path).resolve().is_relative_to(final):
                raise InputError(f"the output folder would replace the inputs of source "
                                 f"'{source.name}' ({path}); choose another output folder",
                                 path=str(outdir), field="outdir")
        for path in filter(None, (source.toas_path, source.model_path)):
            if Path(path).resolve().parent == outdir:
                raise InputError(f"the output folder is the input folder of source "
                                 f"'{source.name}' ({path}); choose another output folder",
                                 path=str(outdir), field="outdir")


def _check_folders_are_own(sources: Sequence[Source], outdir: Path) -> None:
    """Refuse to replace an ``OUTDIR/NAME`` that timingkit did not write."""
    for source in sources:
        final = outdir / source.name
        if (final.exists() or final.is_symlink()) and not is_own_folder(final):
            raise InputError(f"{final} exists and holds files timingkit did not write; move it "
                             f"away or choose another output folder (source '{source.name}')",
                             path=str(outdir), field="outdir")


def _default_fit_function() -> Callable:
    from timingkit.pipeline.fit_run import fit_files

    return fit_files


def _reusable(outdir: Path, source: Source, digest: str) -> bool:
    folder = outdir / source.name
    try:
        stored = (folder / HASH_FILE).read_text(encoding="utf-8").strip()
    except OSError:
        return False
    return (stored == digest and not (folder / ERROR_FILE).exists()
            and outputs_intact(folder, required=(REPORT_FILE, HASH_FILE)))


def _progress_bar(total: int, progress: bool | None):
    from tqdm import tqdm

    show = sys.stderr.isatty() if progress is None else bool(progress)
    return tqdm(total=total, desc="fitting", unit="source", disable=not show, file=sys.stderr,
                dynamic_ncols=True, smoothing=0.05)


def run_batch(sources, outdir, workers: int | None = None, cluster: str | None = None,
              resume: bool = False, progress: bool | None = True,
              fit_function: Callable | None = None, wait: bool = False) -> BatchResult:
    """Fit every source and write the per-source folders and the summary files.

    ``sources``: a list of :class:`Source`, or a manifest/directory path (see
    :func:`discover_sources`). ``workers``: processes (default: the machine's
    cores); with ``cluster="local"`` the number of Dask workers; ignored for a
    remote scheduler. ``cluster``: None (process pool), ``"local"`` or a
    scheduler address such as ``"tcp://10.0.0.5:8786"``. ``resume``: keep
    sources whose :func:`inputs_sha256` matches their last successful run.
    ``progress``: True/False, or None for "only on a terminal".
    ``fit_function``: a picklable function with the signature of
    ``timingkit.pipeline.fit_run.fit_files`` (default). ``wait``: when another run
    holds OUTDIR's lock, wait for it instead of refusing. Raises InputError for bad
    arguments, a bad manifest or a locked OUTDIR; individual sources never raise.
    SIGTERM/SIGINT stop the workers and leave every finished source in place.
    """
    started = time.perf_counter()
    outdir = Path(outdir).expanduser().resolve()
    if isinstance(sources, (str, os.PathLike)):
        sources = discover_sources(sources, outdir=outdir)
    sources = list(sources)
    names = [s.name for s in sources]
    if len(set(names)) != len(names):
        duplicated = sorted({n for n in names if names.count(n) > 1})
        raise InputError(f"source names must be unique; repeated: {', '.join(duplicated)}")
    _check_outputs_spare_inputs(sources, outdir)
    if workers is None:
        workers = os.cpu_count() or 1
    if not isinstance(workers, int) or isinstance(workers, bool) or workers < 1:
        raise InputError(f"workers must be a whole number >= 1, got {workers!r}", field="workers")
    if cluster is not None and cluster != "local" and "://" not in cluster:
        raise InputError(f"unknown cluster '{cluster}'; use 'local' or a Dask scheduler address "
                         "such as tcp://HOST:PORT", field="cluster")
    if cluster is not None:
        _require_dask()
    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the output folder ({exc.strerror})", path=str(outdir),
                         field="outdir") from None
    with lock_output_folder(outdir, wait=wait), terminate_on_signals():
        _check_folders_are_own(sources, outdir)
        _remove_leftovers(outdir)
        return _run_locked(sources, outdir, workers, cluster, resume, progress, fit_function,
                           started)


def _run_locked(sources, outdir, workers, cluster, resume, progress, fit_function,
                started) -> BatchResult:
    software = software_fingerprint()
    outcomes: dict[str, SourceOutcome] = {}
    pending, jobs = [], []
    bar = _progress_bar(len(sources), progress)

    def done(result: dict, reused: bool = False) -> None:
        outcomes[result["name"]] = SourceOutcome(result["name"], result["status"],
                                                 result["message"], reused=reused,
                                                 elapsed_s=result["elapsed_s"],
                                                 worker=result["worker"])
        bar.update(1)
        ok = sum(o.status == STATUS_OK for o in outcomes.values())
        bar.set_postfix_str(f"ok={ok} failed={len(outcomes) - ok}")

    try:
        for source in sources:
            if source.problem:
                install_failure(str(outdir), source, one_line(source.problem))
                done({"name": source.name, "status": STATUS_FAILED,
                      "message": one_line(source.problem), "elapsed_s": 0.0, "worker": ""})
                continue
            digest = inputs_sha256(source, software, function_name(fit_function))
            if resume and _reusable(outdir, source, digest):
                done({"name": source.name, "status": STATUS_OK, "message": "", "elapsed_s": 0.0,
                      "worker": ""}, reused=True)
                continue
            pending.append((source, digest))
        if pending:
            function = fit_function or _default_fit_function()
            pid = os.getpid() if cluster in (None, "local") else None   # workers it starts
            jobs = [_Job(source, str(outdir), digest, function, pid) for source, digest in pending]
        if not jobs:
            engine = "none (nothing to fit)"
        elif cluster is None:
            workers_used = min(workers, len(jobs))
            _run_on_pool(jobs, workers_used, outdir, done)
            engine = f"process pool ({workers_used} worker{'s' if workers_used > 1 else ''})"
        else:
            engine = _run_on_dask(jobs, cluster, workers, done)
    finally:
        bar.close()
        _remove_leftovers(outdir)

    ordered = [outcomes[s.name] for s in sources]
    reports = {o.name: read_report(outdir / o.name, o) for o in ordered}
    rows = [summary_row(outdir / o.name, o, reports[o.name]) for o in ordered]
    result = BatchResult(outdir, ordered, rows, engine, time.perf_counter() - started)
    notes = {name: {"warnings": [str(w) for w in report.get("warnings", [])],
                    "cautions": [str(c) for c in report.get("cautions", [])
                                 if c != DERIVED_ASSUMPTIONS]}
             for name, report in reports.items() if report}
    result.files = write_summaries(result, software, notes)
    return result
