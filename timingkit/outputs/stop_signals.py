"""Stopping signals turned into KeyboardInterrupt, so that clean-up code runs.

Python ends on SIGTERM and SIGHUP without running ``finally`` blocks; inside
:func:`terminate_on_signals` they raise KeyboardInterrupt like SIGINT does, so a
lock is released, a work folder removed and a process pool shut down however a
run is stopped (SIGKILL excepted: nothing runs then).
"""

from __future__ import annotations

import contextlib
import signal
import threading


@contextlib.contextmanager
def terminate_on_signals():
    """SIGTERM and SIGHUP raise KeyboardInterrupt in the main thread for the block
    (handlers restored after); elsewhere (not the main thread) it does nothing."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def interrupt(signum, frame):
        raise KeyboardInterrupt(f"stopped by signal {signal.Signals(signum).name}")

    names = [n for n in ("SIGTERM", "SIGHUP") if hasattr(signal, n)]
    saved = {n: signal.signal(getattr(signal, n), interrupt) for n in names}
    try:
        yield
    finally:
        for n, handler in saved.items():
            signal.signal(getattr(signal, n), handler)
