"""A lock on an output (a folder or a file): one timingkit run writes it at a time.

The lock of ``PARENT/NAME`` is the file ``PARENT/.timingkit-lock-NAME``, beside
the output rather than in it, because commands replace their output folder as a
whole (outputs.output_set) and a lock inside would be moved away with it (and,
on Windows, an open file would stop the folder being renamed at all). Every
command that writes ``NAME`` (``batch`` and the single-source commands alike)
takes the same file, so they exclude each other. While held, the file names its
holder (process, host, start time, command); it is removed on release.

Two ways of holding it:

- ``system-lock`` (wherever ``fcntl`` exists): ``fcntl.flock`` on the file. The
  kernel drops the lock however its holder ends, SIGKILL included.
- ``exclusive-file`` (Windows, file systems that refuse flock, or forced with the
  environment variable ``TIMINGKIT_OUTPUT_LOCK=exclusive-file``): the lock file is
  created with ``O_CREAT | O_EXCL``, so only one run can create it, and removed on
  release. A file left by a run that was killed is taken over (with a note) when
  the process it names no longer runs on this host; one naming another host is
  honoured, and the message says which file to remove if that run is gone.

A lock file left behind (a killed holder) is taken over with a note on stderr in
both ways. SIGTERM and SIGHUP raise KeyboardInterrupt while the lock is held
(outputs.stop_signals), so it is released on those too.
"""

from __future__ import annotations

import contextlib
import contextvars
import errno
import hashlib
import os
import re
import socket
import sys
import time
from pathlib import Path

from timingkit.formats.atomic_file import writing_error
from timingkit.formats.errors import InputError, excerpt
from timingkit.outputs.stop_signals import terminate_on_signals

LOCK_PREFIX = ".timingkit-lock-"
SYSTEM_LOCK, EXCLUSIVE_FILE = "system-lock", "exclusive-file"
SCHEME_VARIABLE = "TIMINGKIT_OUTPUT_LOCK"
UNREADABLE_STALE_S = 60.0    # an empty or unreadable exclusive lock file this old is left over
MAX_NAME_CHARS = 200         # longer output names are shortened (with a hash) in the lock name

# Whether a busy lock is waited for when the caller does not say (the CLI's --wait).
_WAIT_BY_DEFAULT = contextvars.ContextVar("timingkit_wait_for_output_locks", default=False)

_HOLDER = re.compile(r"^pid (?P<pid>\d{1,10}) on (?P<host>[A-Za-z0-9._-]{1,255}), started "
                     r"(?P<started>\d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC), command: (?P<command>.*)$")


@contextlib.contextmanager
def waiting_for_output_locks(enabled: bool = True):
    """For the block, a busy output lock is waited for unless the caller says otherwise."""
    token = _WAIT_BY_DEFAULT.set(bool(enabled))
    try:
        yield
    finally:
        _WAIT_BY_DEFAULT.reset(token)


def lock_path(target) -> Path:
    """The lock file of the output ``target`` (folder or file): ``.timingkit-lock-NAME``
    in its parent folder (the parent's real path, so every spelling of it agrees)."""
    target = Path(os.path.abspath(os.path.expanduser(os.fspath(target))))
    name = target.name or "root"
    if len(name) > MAX_NAME_CHARS:
        name = name[:MAX_NAME_CHARS - 17] + "-" + hashlib.sha256(name.encode()).hexdigest()[:16]
    return target.parent.resolve() / f"{LOCK_PREFIX}{name}"


def process_running(pid: int) -> bool:
    """Whether process ``pid`` runs on this host (a process we may not signal counts)."""
    if pid <= 0:
        return False
    if os.name == "nt":      # os.kill(pid, 0) would end the process there
        return _windows_process_running(pid)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    return True


def _windows_process_running(pid: int) -> bool:   # pragma: no cover (Windows only)
    import ctypes
    kernel32 = ctypes.windll.kernel32
    handle = kernel32.OpenProcess(0x1000, False, pid)    # PROCESS_QUERY_LIMITED_INFORMATION
    if not handle:
        return kernel32.GetLastError() == 5              # access denied: it exists
    try:
        code = ctypes.c_ulong()
        if not kernel32.GetExitCodeProcess(handle, ctypes.byref(code)):
            return True
        return code.value == 259                         # STILL_ACTIVE
    finally:
        kernel32.CloseHandle(handle)


def _host() -> str:
    """This host's name as lock files write it (characters outside A-Z a-z 0-9 . _ -
    become _)."""
    return re.sub(r"[^A-Za-z0-9._-]", "_", socket.gethostname())[:255] or "unnamed-host"


def _holder_text(token: str) -> str:
    command = " ".join(os.path.basename(a) if i == 0 else a for i, a in enumerate(sys.argv))
    command = "".join(c if c.isprintable() else "?" for c in command)[:200]
    started = time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime())
    return (f"pid {os.getpid()} on {_host()}, started {started}, "
            f"command: {command}\nlock {token}\n")


def _parse_holder(text: str):
    """(pid, host, description) of a lock file's text; None when it is not ours."""
    found = _HOLDER.match(text.partition("\n")[0])
    if found is None:
        return None
    description = (f"pid {found['pid']} on {found['host']}, started {found['started']}, "
                   f"command: {excerpt(found['command'], 120)}")
    return int(found["pid"]), found["host"], description


def _describe(text: str) -> str:
    parsed = _parse_holder(text)
    if parsed is not None:
        return parsed[2]
    return f"another timingkit run (its lock file reads {excerpt(text)})" if text.strip() \
        else "another timingkit run"


def _left_over(text: str) -> bool:
    """Whether lock-file text names a holder that is no longer running on this host."""
    parsed = _parse_holder(text)
    return (parsed is not None and parsed[1] == _host()
            and not process_running(parsed[0]))


def _read(path: Path, limit: int = 2000) -> str | None:
    try:
        with open(path, "rb") as handle:
            return handle.read(limit).decode("utf-8", "replace")
    except OSError:
        return None


def _note_takeover(target: Path, text: str) -> None:
    parsed = _parse_holder(text)
    who = parsed[2] if parsed else "a run that left it unreadable"
    print(f"timingkit: note: took over the lock of {target} left by {who}, which is no longer "
          "running", file=sys.stderr, flush=True)


class _Busy(Exception):
    """The lock is held by someone else (``text``: what its file says)."""

    def __init__(self, text: str, lock_file: Path | None = None):
        super().__init__(text)
        self.text, self.lock_file = text, lock_file


def _same_file(path: Path, descriptor: int) -> bool:
    try:
        on_disk, held = os.stat(path), os.fstat(descriptor)
    except OSError:
        return False
    return (on_disk.st_dev, on_disk.st_ino) == (held.st_dev, held.st_ino)


class _SystemLock:
    """fcntl.flock on the lock file (released by the kernel when the holder ends)."""

    def __init__(self, path: Path, target: Path):
        self.path, self.target, self.descriptor = path, target, None

    def acquire(self) -> bool:
        """True when held; False when the file changed under us (try again)."""
        import fcntl
        try:
            descriptor, created = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL,
                                          0o666), True
        except FileExistsError:
            try:
                descriptor, created = os.open(self.path, os.O_RDWR), False
            except FileNotFoundError:
                return False                          # just removed: try again
        try:
            fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            text = os.pread(descriptor, 2000, 0).decode("utf-8", "replace")
            os.close(descriptor)
            raise _Busy(text) from None
        except OSError:
            os.close(descriptor)
            if created:                               # no flock here: leave no empty file
                with contextlib.suppress(OSError):
                    os.unlink(self.path)
            raise
        if not _same_file(self.path, descriptor):    # removed by its last holder meanwhile
            os.close(descriptor)
            return False
        previous = os.pread(descriptor, 2000, 0).decode("utf-8", "replace")
        if previous.strip():                          # its holder was killed
            _note_takeover(self.target, previous)
        os.ftruncate(descriptor, 0)
        os.pwrite(descriptor, _holder_text(os.urandom(8).hex()).encode("utf-8"), 0)
        self.descriptor = descriptor
        return True

    def release(self) -> None:
        try:
            if _same_file(self.path, self.descriptor):
                with contextlib.suppress(OSError):
                    os.unlink(self.path)      # still locked: a waiter that opened it retries
        finally:
            os.close(self.descriptor)         # releases the lock


class _ExclusiveFile:
    """The lock file created with O_EXCL (only one run can), removed on release."""

    def __init__(self, path: Path, target: Path):
        self.path, self.target, self.token = path, target, os.urandom(8).hex()

    def acquire(self) -> bool:
        try:
            descriptor = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        except FileExistsError:
            return self._take_over_if_left()
        try:
            os.write(descriptor, _holder_text(self.token).encode("utf-8"))
            with contextlib.suppress(OSError):
                os.fsync(descriptor)
        finally:
            os.close(descriptor)
        return True

    def _take_over_if_left(self) -> bool:
        """Remove a lock file whose holder is gone (and return False: try again), or
        raise _Busy."""
        text = _read(self.path)
        if text is None:
            return False                                  # just released: try again
        if not _left_over(text) and not self._unreadable_and_old(text):
            raise _Busy(text, lock_file=self.path)    # it may name a pid reused since
        aside = self.path.with_name(f"{self.path.name}.left-{self.token}")
        try:
            os.rename(self.path, aside)
        except OSError:
            return False                                  # someone else moved it first
        if _read(aside) != text:     # a new holder's file was moved: put it back if free
            with contextlib.suppress(OSError):
                os.link(aside, self.path)
        else:
            _note_takeover(self.target, text)
        with contextlib.suppress(OSError):
            os.unlink(aside)
        return False

    def _unreadable_and_old(self, text: str) -> bool:
        if _parse_holder(text) is not None:
            return False
        try:
            return time.time() - os.stat(self.path).st_mtime > UNREADABLE_STALE_S
        except OSError:
            return False

    def release(self) -> None:
        text = _read(self.path)
        if text is not None and f"\nlock {self.token}\n" in text:
            with contextlib.suppress(OSError):
                os.unlink(self.path)


def _scheme(requested: str | None) -> str:
    scheme = requested or os.environ.get(SCHEME_VARIABLE) or ""
    if scheme not in ("", SYSTEM_LOCK, EXCLUSIVE_FILE):
        raise InputError(f"unknown output lock {excerpt(scheme)}; use {SYSTEM_LOCK} or "
                         f"{EXCLUSIVE_FILE}", field=SCHEME_VARIABLE, quoted=[scheme])
    if scheme:
        return scheme
    try:
        import fcntl  # noqa: F401
    except ImportError:      # Windows
        return EXCLUSIVE_FILE
    return SYSTEM_LOCK


_UNSUPPORTED = {errno.ENOLCK, errno.EOPNOTSUPP, errno.ENOTSUP, errno.EINVAL, errno.ENOSYS}


def _acquire(lock, target: Path, path: Path, wait: bool, poll_s: float, field: str):
    announced = False
    while True:
        try:
            if lock.acquire():
                return lock
            time.sleep(0.01)                          # the file changed meanwhile: again
            continue
        except _Busy as busy:
            holder = _describe(busy.text)
            if not wait:
                remedy = (f" (if that run has ended, remove {busy.lock_file})"
                          if busy.lock_file else "")
                raise InputError(f"this output is in use by {holder}{remedy}; wait for it to "
                                 "finish, or run with --wait to queue behind it",
                                 path=str(target), field=field) from None
            if not announced:
                print(f"timingkit: waiting for the output {target}, in use by {holder}",
                      file=sys.stderr, flush=True)
                announced = True
        except OSError as exc:
            if exc.errno == errno.ENOENT and not path.parent.exists():
                try:                                  # removed meanwhile by a failed run
                    path.parent.mkdir(parents=True, exist_ok=True)
                except OSError as again:
                    raise writing_error(again, target) from None
                continue
            if isinstance(lock, _SystemLock) and exc.errno in _UNSUPPORTED:
                lock = _ExclusiveFile(path, target)   # a file system without flock
                continue
            raise writing_error(exc, target) from None   # no lock file can be made there
        time.sleep(poll_s)


@contextlib.contextmanager
def lock_output(target, wait: bool | None = None, poll_s: float = 0.5,
                scheme: str | None = None, field: str = "outdir"):
    """Hold the lock of the output ``target`` (a folder or a file; its parent folder
    is created if needed, and removed again, with the parents made for it, when the
    block leaves it empty) for the block. ``wait``: wait for another holder instead
    of refusing (default: the CLI's --wait, see :func:`waiting_for_output_locks`).
    ``scheme``: ``system-lock`` or ``exclusive-file`` (default: the environment
    variable TIMINGKIT_OUTPUT_LOCK, else system-lock where fcntl exists).
    A busy lock is an InputError naming ``target``, ``field`` and the holder."""
    target = Path(os.path.abspath(os.path.expanduser(os.fspath(target))))
    wait = _WAIT_BY_DEFAULT.get() if wait is None else wait
    chosen = _scheme(scheme)
    try:
        made = _make_folders(target.parent)
        path = lock_path(target)
    except OSError as exc:
        raise writing_error(exc, target) from None
    kind = _SystemLock if chosen == SYSTEM_LOCK else _ExclusiveFile
    try:
        with terminate_on_signals():
            lock = _acquire(kind(path, target), target, path, wait, poll_s, field)
            try:
                yield path
            finally:
                lock.release()
    finally:
        _remove_empty_folders(made)


def _make_folders(folder: Path) -> list[Path]:
    """Create ``folder`` and its missing parents; the folders made, outermost first."""
    missing = []
    while not folder.exists() and folder.parent != folder:
        missing.append(folder)
        folder = folder.parent
    for made in reversed(missing):
        made.mkdir(exist_ok=True)
    return missing[::-1]


def _remove_empty_folders(made: list[Path]) -> None:
    """Remove the folders :func:`_make_folders` made, innermost first, while they are
    empty (a run that failed leaves no empty folders behind; one that wrote keeps them)."""
    for folder in reversed(made):
        try:
            folder.rmdir()
        except OSError:
            return


def refuse_if_locked(target, field: str = "outdir") -> None:
    """Before a command's work: an InputError when another run holds the lock of
    ``target`` now (unless busy locks are waited for), so that a busy output is
    refused at once rather than after the work."""
    if not _WAIT_BY_DEFAULT.get():
        with lock_output(target, wait=False, field=field):
            pass


lock_output_folder = lock_output     # the name the batch runner uses
