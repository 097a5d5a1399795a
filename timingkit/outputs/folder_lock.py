"""A lock on an output folder: one timingkit run writes into it at a time.

``OUTDIR/.timingkit-lock`` is locked with ``fcntl.flock`` (the kernel drops the
lock when its holder ends in any way, so a killed run never leaves a stale
lock) and, while held, names the holder (host, process, start time, command).
A second run is refused with an InputError naming the holder, or waits when
asked. The file itself stays (removing it would let two runs lock two files).
"""

from __future__ import annotations

import contextlib
import os
import socket
import sys
import time
from pathlib import Path

from timingkit.formats.errors import InputError

LOCK_FILE = ".timingkit-lock"


def _holder_text() -> str:
    command = " ".join(os.path.basename(a) if i == 0 else a for i, a in enumerate(sys.argv))
    return (f"pid {os.getpid()} on {socket.gethostname()}, started "
            f"{time.strftime('%Y-%m-%d %H:%M:%S %Z')}, command: {command[:200]}\n")


@contextlib.contextmanager
def lock_output_folder(folder, wait: bool = False, poll_s: float = 0.5):
    """Hold the lock of ``folder`` (created if needed) for the block.
    ``wait``: wait for another holder to finish instead of refusing."""
    import fcntl

    folder = Path(folder)
    path = folder / LOCK_FILE
    try:
        descriptor = os.open(path, os.O_RDWR | os.O_CREAT, 0o666)
    except OSError as exc:
        raise InputError(f"cannot create the lock file of the output folder ({exc.strerror})",
                         path=str(folder), field="outdir") from None
    try:
        announced = False
        while True:
            try:
                fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                holder = os.pread(descriptor, 500, 0).decode("utf-8", "replace").strip()
                holder = holder or "another timingkit run"
                if not wait:
                    raise InputError(f"the output folder is in use by {holder}; wait for it to "
                                     "finish, or run with --wait to queue behind it",
                                     path=str(folder), field="outdir") from None
                if not announced:
                    print(f"timingkit: waiting for the output folder {folder}, in use by {holder}",
                          file=sys.stderr, flush=True)
                    announced = True
                time.sleep(poll_s)
        os.ftruncate(descriptor, 0)
        os.pwrite(descriptor, _holder_text().encode("utf-8"), 0)
        try:
            yield path
        finally:
            with contextlib.suppress(OSError):
                os.ftruncate(descriptor, 0)
    finally:
        os.close(descriptor)     # releases the lock
