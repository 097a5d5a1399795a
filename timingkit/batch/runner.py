"""Reprocess many sources: one fit per source, on a process pool or a Dask cluster.

Input is a directory of source folders or a TOML manifest (see
:func:`discover_sources`). Each source is fitted by the single-source function
(default :func:`timingkit.pipeline.fit_run.fit_files`) inside its own ``try``; a failure
becomes a ``failed`` row with a one-line reason and an ``error.txt``. Every
source writes into ``OUTDIR/.tmp-NAME-xxxxxxxx`` and the folder is renamed to
``OUTDIR/NAME`` only when complete, so an interrupted batch never leaves a
half-written report. ``inputs.sha256`` in each folder records a content hash of
the inputs and settings; ``resume=True`` keeps sources whose hash is unchanged.

Engines: a ``concurrent.futures`` process pool (default, one process per core),
``cluster="local"`` (a Dask ``LocalCluster``) or ``cluster="tcp://HOST:PORT"``
(a running Dask scheduler; workers must see OUTDIR and the inputs at the same
paths). Every engine calls the same function on the same inputs with one
numerical thread per worker, so the numbers are identical.

After the fits: ``summary.csv``, ``summary.json``, ``ppdot.png`` and a
self-contained ``overview.html`` in OUTDIR.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import re
import shutil
import socket
import sys
import time
import tomllib
import traceback
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any, Callable, Sequence

from timingkit.physics.spin import ASSUMPTIONS as DERIVED_ASSUMPTIONS
from timingkit.formats.errors import FitError, InputError
from timingkit.outputs.residual_table import atomic_output

SUMMARY_COLUMNS = (
    "source", "status", "toas", "reduced_chi2", "rms_us", "frequency_hz",
    "frequency_derivative", "period_s", "period_derivative", "characteristic_age_yr",
    "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s", "glitch_candidates",
    "message",
)
DERIVED_COLUMNS = ("period_s", "period_derivative", "characteristic_age_yr",
                   "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s")
STATUS_OK, STATUS_FAILED = "ok", "failed"

# A source folder holds exactly one TOA table: a file named ``toas.txt`` or ending ``.toas``.
TOA_TABLE_SUFFIX = ".toas"
TOA_TABLE_NAME = "toas.txt"
HASH_FILE = "inputs.sha256"
ERROR_FILE = "error.txt"
REPORT_FILE = "report.json"
RESIDUAL_PLOT_FILE = "residuals.png"
GLITCH_FILE = "glitches.json"
TOP_LEVEL_OUTPUTS = ("summary.csv", "summary.json", "ppdot.png", "overview.html")

MANIFEST_DEFAULT_KEYS = ("ephemeris", "sites", "clock", "free", "fix", "make_plots")
MANIFEST_SOURCE_KEYS = ("name", "toas", "model") + MANIFEST_DEFAULT_KEYS
_SAFE_NAME = re.compile(r"^[A-Za-z0-9_+][A-Za-z0-9._+-]*$")
_MAX_REASON_CHARS = 300

WORKER_DIED_REASON = ("the worker process died while fitting this source (crash, out of memory "
                      "or killed); fit it alone to see why")
DEFAULT_FIT_FUNCTION = "timingkit.pipeline.fit_run.fit_files"
CLUSTER_INSTALL_HINT = "install the cluster extra: pip install 'timingkit[cluster]'"

# --------------------------------------------------------------------------- sources

@dataclass(frozen=True)
class Source:
    """One source to fit. Paths are absolute; ``problem`` marks a source that
    cannot be run at all (e.g. a folder with two TOA tables): it is reported as
    failed without being fitted."""
    name: str
    toas_path: str
    model_path: str
    free: tuple[str, ...] = ()
    fix: tuple[str, ...] = ()
    sites_paths: tuple[str, ...] = ()
    ephemeris: str | None = None
    clock_paths: tuple[str, ...] = ()
    make_plots: bool = True
    problem: str | None = None


def discover_sources(path, outdir=None) -> list[Source]:
    """Sources from a manifest file or from a directory of source folders.

    Directory: every non-hidden subfolder holding one TOA table (``toas.txt`` or
    ``*.toas``) and one model (``*.toml`` that is not a site file, i.e. not a
    file whose only top-level table is ``[site]``) is a source named after the
    folder, sorted by name. A folder with no TOA table and no TOML file is
    ignored; one with a missing or ambiguous file becomes a failed source.
    ``outdir`` (if inside ``path``) is skipped. Manifest: see :func:`read_manifest`.
    """
    path = Path(path).expanduser()
    if path.is_file():
        return read_manifest(path)
    if not path.is_dir():
        raise InputError("no such manifest file or source directory", path=str(path))
    skip = Path(outdir).expanduser().resolve() if outdir is not None else None
    sources = []
    for folder in sorted(p for p in path.iterdir() if p.is_dir()):
        if folder.name.startswith(".") or folder.resolve() == skip:
            continue
        source = _source_from_folder(folder)
        if source is not None:
            sources.append(source)
    if not sources:
        raise InputError(f"no source folders found (each needs one TOA table, '{TOA_TABLE_NAME}' "
                         f"or '*{TOA_TABLE_SUFFIX}', and one '*.toml' model)", path=str(path))
    return sources


def _is_site_file(path: Path) -> bool:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False  # let the fit report an unreadable model
    return set(data) == {"site"}


def _source_from_folder(folder: Path) -> Source | None:
    files = sorted(p for p in folder.iterdir() if p.is_file() and not p.name.startswith("."))
    toas = [p for p in files if p.name == TOA_TABLE_NAME or p.suffix == TOA_TABLE_SUFFIX]
    tomls = [p for p in files if p.suffix == ".toml"]
    if not toas and not tomls:
        return None
    models = [p for p in tomls if not _is_site_file(p)]
    problem = None
    if len(toas) != 1:
        problem = (f"found {len(toas)} TOA tables in {folder} "
                   f"({', '.join(p.name for p in toas) or 'none'}); expected exactly one, "
                   f"named '{TOA_TABLE_NAME}' or ending in '{TOA_TABLE_SUFFIX}'")
    elif len(models) != 1:
        problem = (f"found {len(models)} model files in {folder} "
                   f"({', '.join(p.name for p in models) or 'none'}); expected exactly one "
                   "'*.toml' model besides site files")
    return Source(name=folder.name,
                  toas_path=str(toas[0].resolve()) if len(toas) == 1 else "",
                  model_path=str(models[0].resolve()) if len(models) == 1 else "",
                  problem=problem)


def read_manifest(path) -> list[Source]:
    """Sources from a TOML manifest; paths are relative to the manifest's folder.

    ``[defaults]`` may set ``ephemeris`` (path or ``"builtin"``), ``sites`` and
    ``clock`` (a path or a list of paths, used besides those the model names),
    ``free``/``fix`` (parameter names to free or hold fixed besides the model's
    own ``[fit]`` list) and ``make_plots`` (bool). Each ``[[source]]`` needs ``name``,
    ``toas`` and ``model`` and may override any default (the value replaces it).
    Raises InputError naming the file and field for anything malformed.
    """
    path = Path(path).expanduser()
    where = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the manifest ({exc})", path=where) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line = getattr(exc, "lineno", None) or _line_from_toml_message(str(exc))
        raise InputError(f"not valid TOML ({exc})", path=where, line=line) from None
    unknown = sorted(set(data) - {"defaults", "source"})
    if unknown:
        raise InputError(f"unknown top-level key(s) {', '.join(unknown)}; legal: [defaults], "
                         "[[source]]", path=where, field=unknown[0])
    defaults = data.get("defaults", {})
    if not isinstance(defaults, dict):
        raise InputError("must be a table", path=where, field="defaults")
    _check_keys(defaults, MANIFEST_DEFAULT_KEYS, where, "defaults")
    entries = data.get("source")
    if not isinstance(entries, list) or not entries or not all(isinstance(e, dict) for e in entries):
        raise InputError("the manifest lists no sources; add [[source]] tables with name, toas "
                         "and model", path=where, field="source")
    base = path.resolve().parent
    sources, seen = [], set()
    for index, entry in enumerate(entries, 1):
        label = f"source[{index}]"
        _check_keys(entry, MANIFEST_SOURCE_KEYS, where, label)
        for key in ("name", "toas", "model"):
            if not isinstance(entry.get(key), str) or not entry[key].strip():
                raise InputError("missing or not a non-empty string", path=where,
                                 field=f"{label}.{key}")
        name = entry["name"]
        if not _SAFE_NAME.match(name) or name in TOP_LEVEL_OUTPUTS:
            raise InputError(f"source name '{name}' cannot be a folder name: use letters, digits "
                             "and . _ + - (not first: . or -), and none of "
                             f"{', '.join(TOP_LEVEL_OUTPUTS)}", path=where, field=f"{label}.name")
        if name in seen:
            raise InputError(f"source name '{name}' appears twice", path=where,
                             field=f"{label}.name")
        seen.add(name)
        merged = {**defaults, **entry}
        ephemeris = _manifest_text(merged, "ephemeris", where, label)
        sources.append(Source(
            name=name,
            toas_path=_resolve(base, entry["toas"]),
            model_path=_resolve(base, entry["model"]),
            free=tuple(_manifest_list(merged, "free", where, label)),
            fix=tuple(_manifest_list(merged, "fix", where, label)),
            sites_paths=tuple(_resolve(base, p) for p in _manifest_list(merged, "sites", where, label)),
            ephemeris=None if ephemeris in (None, "builtin") else _resolve(base, ephemeris),
            clock_paths=tuple(_resolve(base, p) for p in _manifest_list(merged, "clock", where, label)),
            make_plots=_manifest_bool(merged, "make_plots", where, label),
        ))
    return sources


def _line_from_toml_message(message: str) -> int | None:
    match = re.search(r"line (\d+)", message)
    return int(match.group(1)) if match else None


def _check_keys(table: dict, legal: Sequence[str], where: str, label: str) -> None:
    for key in table:
        if key not in legal:
            raise InputError(f"unknown key; legal keys: {', '.join(legal)}", path=where,
                             field=f"{label}.{key}")


def _manifest_text(merged: dict, key: str, where: str, label: str) -> str | None:
    value = merged.get(key)
    if value is not None and (not isinstance(value, str) or not value.strip()):
        raise InputError("must be a non-empty string", path=where, field=f"{label}.{key}")
    return value


def _manifest_list(merged: dict, key: str, where: str, label: str) -> list[str]:
    value = merged.get(key, [])
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
        raise InputError("must be a string or a list of strings", path=where,
                         field=f"{label}.{key}")
    return value


def _manifest_bool(merged: dict, key: str, where: str, label: str) -> bool:
    value = merged.get(key, True)
    if not isinstance(value, bool):
        raise InputError("must be true or false", path=where, field=f"{label}.{key}")
    return value


def _resolve(base: Path, relative: str) -> str:
    return str((base / Path(relative).expanduser()).resolve())


# --------------------------------------------------------------------------- content hash

def _software_fingerprint() -> dict[str, str]:
    """Versions whose change may change results (bundled ephemeris, IERS tables, leap seconds)."""
    from importlib import metadata

    import timingkit

    versions = {"timingkit": timingkit.__version__}
    for package in ("astropy", "astropy-iers-data", "pyerfa", "jplephem", "skyfield-data"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = "absent"
    return versions


def _file_digest(path: str) -> str:
    """sha256 of a file's contents (a marker if unreadable: the fit will say why)."""
    try:
        status = os.stat(path)
    except OSError as exc:
        return f"unreadable:{type(exc).__name__}"
    return _digest_of(path, status.st_size, status.st_mtime_ns)


@lru_cache(maxsize=4096)
def _digest_of(path: str, size: int, mtime_ns: int) -> str:
    # cached by (path, size, mtime): a shared ephemeris or site file is read once,
    # not once per source
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        return f"unreadable:{type(exc).__name__}"
    return digest.hexdigest()


def _model_referenced_files(model_path: str) -> list[str]:
    """Site, clock and ephemeris files named in the model's ``[settings]`` (relative to it)."""
    try:
        data = tomllib.loads(Path(model_path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return []
    settings = data.get("settings")
    if not isinstance(settings, dict):
        return []
    base = Path(model_path).parent
    found = []
    for key in ("sites", "clock", "ephemeris"):
        value = settings.get(key)
        values = [value] if isinstance(value, str) else value if isinstance(value, list) else []
        found += [_resolve(base, v) for v in values if isinstance(v, str) and v != "builtin"]
    return found


def function_name(function: Callable | None) -> str:
    """Dotted name of a per-source function (None: the default fit)."""
    if function is None:
        return DEFAULT_FIT_FUNCTION
    return f"{getattr(function, '__module__', '?')}.{getattr(function, '__qualname__', '?')}"


def inputs_sha256(source: Source, software: dict[str, str] | None = None,
                  fit_function: str = DEFAULT_FIT_FUNCTION) -> str:
    """sha256 over the contents of every input file of ``source`` (TOA table, model,
    site/clock/ephemeris files given to the batch or named in the model), the
    settings (free, fix, make_plots), the per-source function (by name) and the
    software versions. Paths are not hashed, so moving a data tree does not
    force a refit."""
    files = [("toas", source.toas_path), ("model", source.model_path)]
    files += [("sites", p) for p in source.sites_paths]
    files += [("clock", p) for p in source.clock_paths]
    if source.ephemeris:
        files.append(("ephemeris", source.ephemeris))
    files += [("model-settings", p) for p in _model_referenced_files(source.model_path)]
    record = {
        "name": source.name,
        "files": [[role, _file_digest(p)] for role, p in files],
        "free": list(source.free), "fix": list(source.fix), "make_plots": source.make_plots,
        "function": fit_function,
        "software": software if software is not None else _software_fingerprint(),
    }
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode()).hexdigest()


# --------------------------------------------------------------------------- one source (worker side)

@dataclass(frozen=True)
class _Job:
    source: Source
    outdir: str
    digest: str
    fit_function: Callable


def _new_work_folder(outdir: str, name: str) -> Path:
    """Create ``OUTDIR/.tmp-NAME-xxxxxxxx`` with the usual permissions (0o777 minus umask)."""
    while True:
        path = Path(outdir) / f".tmp-{name}-{os.urandom(4).hex()}"
        try:
            path.mkdir(mode=0o777)
            return path
        except FileExistsError:
            continue


def _one_line(text: str) -> str:
    line = " ".join(str(text).split())
    return line if len(line) <= _MAX_REASON_CHARS else line[:_MAX_REASON_CHARS - 3] + "..."


def _reason(exc: BaseException) -> tuple[str, bool]:
    """One-line reason for a failure, and whether it is a timingkit bug."""
    if isinstance(exc, (InputError, FitError)):
        return _one_line(str(exc) or type(exc).__name__), False
    return _one_line(f"internal error ({type(exc).__name__}): {exc}"), True


def _flush_to_disk(folder: Path) -> None:
    """fsync every file in ``folder`` so that a folder renamed into place after a
    crash of the machine holds complete files, not empty ones (best effort)."""
    for path in folder.iterdir():
        try:
            descriptor = os.open(path, os.O_RDONLY)
        except OSError:
            continue
        try:
            os.fsync(descriptor)
        except OSError:
            pass  # not supported here (e.g. read-only handles on some systems)
        finally:
            os.close(descriptor)


def _swap_into_place(tmp: Path, final: Path) -> None:
    """Rename the finished folder ``tmp`` to ``final``; an older ``final`` is moved aside
    first and removed after, so ``final`` is at every moment absent or complete."""
    old = None
    if final.exists() or final.is_symlink():
        old = final.with_name(f".old-{final.name}-{os.urandom(4).hex()}")
        os.replace(final, old)
    os.replace(tmp, final)
    if old is not None:
        if old.is_dir() and not old.is_symlink():
            shutil.rmtree(old, ignore_errors=True)
        else:
            old.unlink(missing_ok=True)


def install_failure(outdir: str, source: Source, reason: str, details: str = "") -> None:
    """Replace ``OUTDIR/NAME`` by a folder holding only ``error.txt``."""
    tmp = _new_work_folder(outdir, source.name)
    text = (f"{reason}\n\nsource: {source.name}\ntoas: {source.toas_path or '-'}\n"
            f"model: {source.model_path or '-'}\n")
    if details:
        text += "\n" + details.rstrip() + "\n"
    (tmp / ERROR_FILE).write_text(text, encoding="utf-8")
    _swap_into_place(tmp, Path(outdir) / source.name)


def process_source(job: _Job) -> dict:
    """Fit one source into a temporary folder and rename it into place (runs in a worker).

    Never raises for a failing fit: returns ``{"name", "status", "message",
    "elapsed_s", "worker"}``. Interrupts (KeyboardInterrupt, SystemExit) remove
    the temporary folder and propagate.
    """
    os.environ.setdefault("MPLBACKEND", "Agg")
    start = time.perf_counter()
    source = job.source
    tmp = _new_work_folder(job.outdir, source.name)
    status, message = STATUS_OK, ""
    try:
        job.fit_function(
            source.toas_path, source.model_path, str(tmp), free=source.free, fix=source.fix,
            sites_paths=source.sites_paths, ephemeris=source.ephemeris,
            clock_paths=source.clock_paths, make_plots=source.make_plots, progress=False)
        if not (tmp / REPORT_FILE).is_file():
            raise RuntimeError(f"the fit returned without writing {REPORT_FILE}")
        (tmp / HASH_FILE).write_text(job.digest + "\n", encoding="utf-8")
        _flush_to_disk(tmp)
        _swap_into_place(tmp, Path(job.outdir) / source.name)
    except Exception as exc:
        status = STATUS_FAILED
        message, internal = _reason(exc)
        shutil.rmtree(tmp, ignore_errors=True)
        install_failure(job.outdir, source, message, traceback.format_exc() if internal else "")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return {"name": source.name, "status": status, "message": message,
            "elapsed_s": time.perf_counter() - start,
            "worker": f"{socket.gethostname()}:{os.getpid()}"}


# --------------------------------------------------------------------------- engines

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


def _tmp_folder_source_name(entry: str) -> str | None:
    """Source name of a ``.tmp-NAME-xxxxxxxx`` folder (the hex suffix contains no '-')."""
    if not entry.startswith(".tmp-") or "-" not in entry[5:]:
        return None
    return entry[5:].rsplit("-", 1)[0]


def _remove_leftovers(outdir: Path) -> set[str]:
    """Remove temporary folders and files of earlier interrupted work; return the
    names of the sources whose temporary folders were found."""
    names = set()
    for entry in outdir.iterdir():
        if entry.name.startswith((".tmp-", ".old-")) or (entry.name.startswith(".")
                                                         and entry.name.endswith(".tmp")):
            name = _tmp_folder_source_name(entry.name)
            if name is not None and entry.is_dir():
                names.add(name)
            if entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry, ignore_errors=True)
            else:
                entry.unlink(missing_ok=True)
    return names


def _pool_pass(jobs: list[_Job], workers: int, done: Callable[[dict], None]) -> list[_Job]:
    """Run ``jobs`` on a fresh process pool; return those left unfinished by a dead worker."""
    import multiprocessing

    unfinished = []
    # spawn: clean workers on every platform (no forked threads or locks); each worker
    # imports timingkit and opens the ephemeris once, then serves many sources.
    context = multiprocessing.get_context("spawn")
    with _one_numerical_thread(), ProcessPoolExecutor(max_workers=workers,
                                                      mp_context=context) as pool:
        futures = {pool.submit(process_source, job): job for job in jobs}
        for future in as_completed(futures):
            try:
                done(future.result())
            except BrokenProcessPool:
                unfinished.append(futures[future])
            except Exception as exc:  # the job could not be sent, or the worker's own I/O failed
                _record_failure(futures[future], _one_line(
                    f"internal error in the batch worker ({type(exc).__name__}: {exc})"), done)
    return unfinished


def _record_failure(job: _Job, reason: str, done: Callable[[dict], None]) -> None:
    """A source whose worker could not report: write its error.txt here and count it."""
    try:
        install_failure(job.outdir, job.source, reason)
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
            _record_failure(culprit, WORKER_DIED_REASON, done)
        suspects = [j for j in left if j is not culprit]


def _require_dask():
    try:
        import dask.distributed as distributed
    except ImportError:
        raise InputError(f"--cluster needs Dask, which is not installed; {CLUSTER_INSTALL_HINT}",
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
        return distributed.Client(local), local
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
                reason = (WORKER_DIED_REASON + " (Dask tried it on several workers)"
                          if type(exc).__name__ == "KilledWorker" else
                          _one_line(f"the Dask cluster lost this source ({type(exc).__name__}: "
                                    f"{exc})"))
                _record_failure(job, reason, done)
        workers_seen = len(client.scheduler_info().get("workers", {}))
    finally:
        client.close()
        if local is not None:
            local.close()
    return (f"dask local cluster ({workers} workers)" if local is not None
            else f"dask scheduler {cluster} ({workers_seen} workers)")


# --------------------------------------------------------------------------- batch

@dataclass
class SourceOutcome:
    """How one source ended: status ``ok`` or ``failed``; ``reused`` when resume kept
    the previous result; ``elapsed_s`` and ``worker`` (host:pid) of the fit."""
    name: str
    status: str
    message: str
    reused: bool = False
    elapsed_s: float = float("nan")
    worker: str = ""


@dataclass
class BatchResult:
    """Outcome of :func:`run_batch`: one outcome and one summary row per source
    (input order), the engine used, wall time (s) and the summary files written."""
    outdir: Path
    outcomes: list[SourceOutcome]
    rows: list[dict]
    engine: str
    elapsed_s: float
    files: dict[str, Path] = field(default_factory=dict)

    @property
    def succeeded(self) -> list[str]:
        return [o.name for o in self.outcomes if o.status == STATUS_OK]

    @property
    def failed(self) -> list[str]:
        return [o.name for o in self.outcomes if o.status == STATUS_FAILED]

    @property
    def refitted(self) -> list[str]:
        """Sources handed to a worker in this run (not kept by resume, not unrunnable)."""
        return [o.name for o in self.outcomes if not o.reused and o.worker]

    @property
    def exit_status(self) -> int:
        """0 when every source succeeded, 3 when some failed (CLI convention)."""
        return 0 if not self.failed else 3


def _check_outputs_spare_inputs(sources: Sequence[Source], outdir: Path) -> None:
    """Refuse an OUTDIR whose per-source folders would hold (and so replace) inputs,
    e.g. ``-o`` pointing at the source directory itself."""
    for source in sources:
        final = outdir / source.name
        inputs = [source.toas_path, source.model_path, *source.sites_paths,
                  *source.clock_paths, source.ephemeris or ""]
        for path in filter(None, inputs):
            if Path(path).resolve().is_relative_to(final):
                raise InputError(f"the output folder would replace the inputs of source "
                                 f"'{source.name}' ({path}); choose another output folder",
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
    return stored == digest and (folder / REPORT_FILE).is_file() and not (folder / ERROR_FILE).exists()


def _progress_bar(total: int, progress: bool | None):
    from tqdm import tqdm

    show = sys.stderr.isatty() if progress is None else bool(progress)
    return tqdm(total=total, desc="fitting", unit="source", disable=not show, file=sys.stderr,
                dynamic_ncols=True, smoothing=0.05)


def run_batch(sources, outdir, workers: int | None = None, cluster: str | None = None,
              resume: bool = False, progress: bool | None = True,
              fit_function: Callable | None = None) -> BatchResult:
    """Fit every source and write the per-source folders and the summary files.

    ``sources``: a list of :class:`Source`, or a manifest/directory path (see
    :func:`discover_sources`). ``workers``: processes (default: the machine's
    cores); with ``cluster="local"`` the number of Dask workers; ignored for a
    remote scheduler. ``cluster``: None (process pool), ``"local"`` or a
    scheduler address such as ``"tcp://10.0.0.5:8786"``. ``resume``: keep
    sources whose :func:`inputs_sha256` matches their last successful run.
    ``progress``: True/False, or None for "only on a terminal".
    ``fit_function``: a picklable function with the signature of
    ``timingkit.pipeline.fit_run.fit_files`` (default). Raises InputError for bad
    arguments or a bad manifest; individual sources never raise.
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
    outdir.mkdir(parents=True, exist_ok=True)
    _remove_leftovers(outdir)

    software = _software_fingerprint()
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
                install_failure(str(outdir), source, _one_line(source.problem))
                done({"name": source.name, "status": STATUS_FAILED,
                      "message": _one_line(source.problem), "elapsed_s": 0.0, "worker": ""})
                continue
            digest = inputs_sha256(source, software, function_name(fit_function))
            if resume and _reusable(outdir, source, digest):
                done({"name": source.name, "status": STATUS_OK, "message": "", "elapsed_s": 0.0,
                      "worker": ""}, reused=True)
                continue
            pending.append((source, digest))
        if pending:
            function = fit_function or _default_fit_function()
            jobs = [_Job(source, str(outdir), digest, function) for source, digest in pending]
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
    reports = {o.name: _read_report(outdir / o.name, o) for o in ordered}
    rows = [summary_row(outdir / o.name, o, reports[o.name]) for o in ordered]
    result = BatchResult(outdir, ordered, rows, engine, time.perf_counter() - started)
    notes = {name: {"warnings": [str(w) for w in report.get("warnings", [])],
                    "cautions": [str(c) for c in report.get("cautions", [])
                                 if c != DERIVED_ASSUMPTIONS]}
             for name, report in reports.items() if report}
    result.files = write_summaries(result, software, notes)
    return result


# --------------------------------------------------------------------------- summary

def _value(entry: Any) -> Any:
    return entry.get("value") if isinstance(entry, dict) else None


def _glitch_candidates(report: dict, folder: Path) -> int | None:
    """Number of glitch candidates: from the report, else from ``glitches.json``;
    None (blank) when no glitch search was run."""
    value = report.get("glitch_candidates")
    if isinstance(value, list):
        return len(value)
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    try:
        found = json.loads((folder / GLITCH_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if isinstance(found, dict):
        found = found.get("candidates", found.get("glitches"))
    return len(found) if isinstance(found, list) else None


def _read_report(folder: Path, outcome: SourceOutcome) -> dict | None:
    """``folder/report.json`` of a successful source; an unreadable one turns the
    outcome into a failure."""
    if outcome.status != STATUS_OK:
        return None
    try:
        report = json.loads((folder / REPORT_FILE).read_text(encoding="utf-8"))
        if not isinstance(report, dict):
            raise ValueError("not a JSON object")
        return report
    except (OSError, ValueError) as exc:
        outcome.status = STATUS_FAILED
        outcome.message = _one_line(f"cannot read {folder / REPORT_FILE}: {exc}")
        return None


def summary_row(folder: Path, outcome: SourceOutcome, report: dict | None) -> dict:
    """One summary row (keys :data:`SUMMARY_COLUMNS`) from the source's report.
    Values keep the report's types (high-precision values stay decimal strings)."""
    row = dict.fromkeys(SUMMARY_COLUMNS)
    row.update(source=outcome.name, status=outcome.status, message=outcome.message)
    if outcome.status != STATUS_OK or report is None:
        return row
    parameters = report.get("parameters", {})
    derived = report.get("derived", {})
    row.update(
        toas=report.get("toas"), reduced_chi2=report.get("reduced_chi2"),
        rms_us=report.get("rms_us"),
        frequency_hz=_value(parameters.get("spin.frequency_hz")),
        frequency_derivative=_value(parameters.get("spin.frequency_derivatives.0")),
        glitch_candidates=_glitch_candidates(report, folder),
    )
    for key in DERIVED_COLUMNS:
        row[key] = _value(derived.get(key))
    notes = (["reused: inputs unchanged since the last successful run"] if outcome.reused else [])
    notes += [str(w) for w in report.get("warnings", [])]
    row["message"] = _one_line("; ".join(notes)) if notes else ""
    return row


def _csv_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return str(value)


def _as_float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def write_summaries(result: BatchResult, software: dict[str, str],
                    notes: dict[str, dict[str, list[str]]]) -> dict[str, Path]:
    """Write summary.csv, summary.json, ppdot.png and overview.html atomically.
    ``notes``: source -> {"warnings": [...], "cautions": [...]} from its report."""
    from timingkit.outputs.overview_page import write_overview_html
    from timingkit.outputs.plotting import plot_ppdot

    outdir = result.outdir
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(SUMMARY_COLUMNS)
    for row in result.rows:
        writer.writerow([_csv_text(row[c]) for c in SUMMARY_COLUMNS])
    files = {"summary_csv": outdir / "summary.csv", "summary_json": outdir / "summary.json",
             "ppdot_png": outdir / "ppdot.png", "overview_html": outdir / "overview.html"}
    with atomic_output(files["summary_csv"]) as handle:
        handle.write(buffer.getvalue())

    document = {
        "columns": list(SUMMARY_COLUMNS),
        "sources": result.rows,
        "counts": {"sources": len(result.rows), "ok": len(result.succeeded),
                   "failed": len(result.failed),
                   "reused": sum(o.reused for o in result.outcomes)},
        "engine": result.engine,
        "elapsed_s": round(result.elapsed_s, 3),
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "software": software,
        "cautions": [DERIVED_ASSUMPTIONS],
        "source_notes": {name: n for name, n in notes.items() if n["warnings"] or n["cautions"]},
    }
    with atomic_output(files["summary_json"]) as handle:
        handle.write(json.dumps(document, indent=1, allow_nan=False, default=str) + "\n")

    fitted = [r for r in result.rows if r["status"] == STATUS_OK]
    plot_ppdot([_as_float(r["period_s"]) for r in fitted],
               [_as_float(r["period_derivative"]) for r in fitted],
               [r["source"] for r in fitted], files["ppdot_png"],
               title=f"P-Pdot diagram of {len(fitted)} fitted source(s)")
    residual_plots = {o.name: outdir / o.name / RESIDUAL_PLOT_FILE for o in result.outcomes}
    write_overview_html(
        files["overview_html"], result.rows, SUMMARY_COLUMNS,
        ppdot_png=files["ppdot_png"], residual_plots=residual_plots,
        warnings={name: n["warnings"] for name, n in notes.items()},
        source_cautions={name: n["cautions"] for name, n in notes.items()},
        cautions=[DERIVED_ASSUMPTIONS],
        note=(f"{len(result.succeeded)} of {len(result.rows)} source(s) fitted"
              + (f" ({document['counts']['reused']} kept unchanged from the previous run)"
                 if document["counts"]["reused"] else "")
              + f", {len(result.failed)} failed; engine: {result.engine}; timingkit "
              f"{software.get('timingkit', '?')}; written {document['created_utc']}"))
    return files


# --------------------------------------------------------------------------- command line

def add_batch_parser(subparsers):
    """Add ``timingkit batch MANIFEST_OR_DIR [-o OUTDIR] [--workers N]
    [--cluster ADDRESS|local] [--resume] [--glitches]``; the handler is ``args.func``."""
    parser = subparsers.add_parser(
        "batch", help="fit many sources (process pool or Dask cluster)",
        description="Fit every source of a manifest or of a directory of source folders; "
                    "write one folder per source plus summary.csv, summary.json, ppdot.png "
                    "and overview.html. Exit 0: all fitted; 3: some failed; 2: bad input.")
    parser.add_argument("inputs", metavar="MANIFEST_OR_DIR",
                        help="TOML manifest ([defaults], [[source]] name/toas/model) or a "
                             "directory whose subfolders each hold a TOA table and a model")
    parser.add_argument("-o", "--outdir", default="batch_out",
                        help="output folder (default: %(default)s)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes (default: number of cores)")
    parser.add_argument("--cluster", default=None, metavar="ADDRESS|local",
                        help="'local' for a Dask LocalCluster, or a Dask scheduler address "
                             "tcp://HOST:PORT (needs the cluster extra)")
    parser.add_argument("--resume", action="store_true",
                        help="skip sources whose inputs and settings are unchanged since their "
                             "last successful run")
    parser.add_argument("--glitches", action="store_true",
                        help="also search every source for glitches (as 'timingkit glitches'; "
                             "fills the glitch_candidates column)")
    parser.set_defaults(func=run_batch_command)
    return parser


def run_batch_command(args) -> int:
    """Run ``timingkit batch``; print a short summary. Exit 0 / 3 / 2 (see parser)."""
    fit_function = None
    if getattr(args, "glitches", False):
        from timingkit.cli.glitches import glitch_files as fit_function
    try:
        result = run_batch(args.inputs, args.outdir, workers=args.workers, cluster=args.cluster,
                           resume=args.resume, progress=None, fit_function=fit_function)
    except InputError as exc:
        if getattr(args, "debug", False):
            raise
        print(f"timingkit batch: error: {exc}", file=sys.stderr)
        return 2
    reused = sum(o.reused for o in result.outcomes)
    print(f"{len(result.succeeded)} of {len(result.outcomes)} source(s) fitted"
          + (f" ({reused} unchanged, kept)" if reused else "")
          + f", {len(result.failed)} failed, in {result.elapsed_s:.1f} s"
          + (f" on {result.engine}" if result.refitted else ""))
    for outcome in result.outcomes:
        if outcome.status == STATUS_FAILED:
            print(f"  failed: {outcome.name}: {outcome.message}")
    print(f"summary: {result.files['summary_csv']}\noverview: {result.files['overview_html']}")
    return result.exit_status
