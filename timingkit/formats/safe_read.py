"""Opening a user's input file safely: regular files only, within a size limit.

A device (``/dev/zero``), a FIFO or a socket given as an input would make a
reader grow without end or block for ever, so every reader opens its file with
:func:`open_regular` (non-blocking open, then ``fstat``: anything but a regular
file is an :class:`InputError`) and reads at most the limit for its kind:

- TOA tables: :data:`MAX_TOA_TABLE_BYTES` (1 GiB, about 20 million TOAs),
- every other text input (models, site files, clock tables, manifests):
  :data:`MAX_TEXT_INPUT_BYTES` (64 MiB).

The limits are stated in the README.
"""

from __future__ import annotations

import errno
import os
import stat

from timingkit.formats.errors import InputError

MAX_TOA_TABLE_BYTES = 1 << 30
MAX_TEXT_INPUT_BYTES = 64 << 20

_KIND_NAMES = ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
               (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
               (stat.S_ISSOCK, "a socket"))


def _what_it_is(mode: int) -> str:
    for test, name in _KIND_NAMES:
        if test(mode):
            return name
    return "not a regular file"


def _size_text(size: int) -> str:
    return f"{size / (1 << 20):.0f} MiB" if size >= 1 << 20 else f"{size} bytes"


def open_regular(path, what: str, limit: int = MAX_TEXT_INPUT_BYTES):
    """A binary file object for ``path`` once it is known to be a regular file of
    at most ``limit`` bytes; an InputError naming the file otherwise."""
    path = os.fspath(path)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
    try:
        descriptor = os.open(path, flags)
    except FileNotFoundError:
        raise InputError(f"{what} not found", path=path) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a {what}", path=path) from None
    except PermissionError:
        raise InputError(f"cannot read this {what} (permission denied)", path=path) from None
    except OSError as exc:
        if exc.errno == errno.ENXIO:          # a FIFO or socket with nobody at the other end
            raise InputError(f"not a regular file (a FIFO or socket), expected a {what}",
                             path=path) from None
        raise InputError(f"cannot read this {what}: {exc.strerror or exc}", path=path) from None
    try:
        info = os.fstat(descriptor)
        if stat.S_ISDIR(info.st_mode):
            raise InputError(f"is a directory, expected a {what}", path=path)
        if not stat.S_ISREG(info.st_mode):
            raise InputError(f"{_what_it_is(info.st_mode)}, not a regular file: expected a "
                             f"{what}", path=path)
        if info.st_size > limit:
            raise InputError(f"too large for a {what} ({_size_text(info.st_size)}; the limit is "
                             f"{_size_text(limit)})", path=path)
        if hasattr(os, "set_blocking"):
            os.set_blocking(descriptor, True)
        return os.fdopen(descriptor, "rb")
    except BaseException:
        os.close(descriptor)
        raise


def read_regular_bytes(path, what: str, limit: int = MAX_TEXT_INPUT_BYTES) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes (see :func:`open_regular`);
    a file that grows past the limit while it is read is refused too."""
    with open_regular(path, what, limit) as handle:
        try:
            raw = handle.read(limit + 1)
        except OSError as exc:
            raise InputError(f"cannot read this {what}: {exc.strerror or exc}",
                             path=os.fspath(path)) from None
    if len(raw) > limit:
        raise InputError(f"too large for a {what} (over {_size_text(limit)})", path=os.fspath(path))
    return raw


def check_regular_file(path, what: str) -> None:
    """Refuse anything but a regular file (for binary inputs read by a library,
    e.g. an ephemeris); no size limit."""
    with open_regular(path, what, limit=1 << 62):
        pass
