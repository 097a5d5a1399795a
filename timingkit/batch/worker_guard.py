"""Keeping a batch's workers and outputs honest under faults.

- :func:`watch_parent` (a pool initializer, and run on every worker of a local
  Dask cluster and by every fit there): a worker polls its batch's main process
  and ends itself as soon as the main process is gone (SIGKILL included), so
  nothing outlives the batch; its unfinished work folder is left, marked, for the
  next run to remove.
- :func:`terminate_on_signals` (timingkit.outputs.stop_signals): in the main process,
  SIGTERM (and SIGHUP) raise KeyboardInterrupt like SIGINT does, so the pool is shut
  down and its workers stopped (:func:`stop_pool`) on every way of stopping a batch.
- :func:`record_outputs` / :func:`outputs_intact`: ``outputs.sha256`` (the format
  of ``sha256sum``) lists every output of a source folder with its content hash;
  ``--resume`` keeps a folder only when all of them are there, unchanged.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import threading
import time
from pathlib import Path

from timingkit.outputs.output_set import MARKER
from timingkit.outputs.stop_signals import terminate_on_signals  # noqa: F401 (offered here)

OUTPUTS_HASH_FILE = "outputs.sha256"
POLL_S = 0.25                       # how often a worker looks for its batch


_FIRST_PARENT: dict[int, int] = {}     # batch pid -> this process's parent when first asked
_WATCHED: set[int] = set()             # batch pids a watchdog thread of this process watches


def _exists(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True                     # someone's process: it exists
    return True


def parent_is_gone(batch_pid: int | None) -> bool:
    """True when the batch's main process ``batch_pid`` has ended. A worker that the
    batch started itself (its parent was ``batch_pid`` when first asked) sees it by its
    parent changing (immune to a reused pid, and immediate even while the dead batch is
    a zombie); any other (e.g. started through a fork server) by the pid disappearing."""
    if batch_pid is None:
        return False
    if _FIRST_PARENT.setdefault(batch_pid, os.getppid()) == batch_pid:
        return os.getppid() != batch_pid
    return not _exists(batch_pid)


def _watch(batch_pid: int) -> None:
    while True:
        time.sleep(POLL_S)
        if parent_is_gone(batch_pid):
            os._exit(1)             # nothing more is written; the next run cleans up


def watch_parent(batch_pid: int | None) -> None:
    """End this worker when the batch's main process ``batch_pid`` is gone (a thread
    polls every POLL_S). Started once per process and batch; None: no batch to watch
    (a remote Dask cluster's workers outlive any one batch by design)."""
    if batch_pid is None or batch_pid in _WATCHED:
        return
    _WATCHED.add(batch_pid)
    parent_is_gone(batch_pid)       # records how this process tells (see there)
    threading.Thread(target=_watch, args=(batch_pid,), name="timingkit-watch-batch",
                     daemon=True).start()


def stop_pool(pool, grace_s: float = 5.0) -> None:
    """Cancel a ProcessPoolExecutor's queued jobs and end its worker processes now
    (SIGTERM, then SIGKILL after ``grace_s``), waiting until they are gone."""
    processes = list(getattr(pool, "_processes", {}).values())   # no public accessor
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        with contextlib.suppress(Exception):
            process.terminate()
    deadline = time.monotonic() + grace_s
    for process in processes:
        with contextlib.suppress(Exception):
            process.join(max(0.0, deadline - time.monotonic()))
            if process.is_alive():
                process.kill()
                process.join(1.0)


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def record_outputs(folder) -> None:
    """Write ``folder/outputs.sha256``: one ``HASH  NAME`` line per file."""
    folder = Path(folder)
    lines = [f"{_sha256(p)}  {p.name}" for p in sorted(folder.iterdir())
             if p.is_file() and p.name not in (OUTPUTS_HASH_FILE, MARKER)]
    (folder / OUTPUTS_HASH_FILE).write_text("\n".join(lines) + "\n", encoding="utf-8")


def outputs_intact(folder, required=()) -> bool:
    """Whether every file listed in ``folder/outputs.sha256`` is there with its
    recorded hash, and the ``required`` names are among them."""
    folder = Path(folder)
    try:
        lines = (folder / OUTPUTS_HASH_FILE).read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return False
    listed = {}
    for line in lines:
        digest, _, name = line.partition("  ")
        if not name or "/" in name or len(digest) != 64:
            return False
        listed[name] = digest
    if not set(required) <= set(listed):
        return False
    for name, digest in listed.items():
        path = folder / name
        try:
            if path.is_symlink() or not path.is_file() or _sha256(path) != digest:
                return False
        except OSError:
            return False
    return True
