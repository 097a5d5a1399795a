"""Writing one output file atomically, with the user's umask; never over an input.

The data go to a temporary file beside the target, which is renamed over it
only when complete, so a reader never sees half a file. The temporary file is
created with mode 0o666 and the process umask applies, exactly as for a plain
``open(path, "w")`` (``tempfile.mkstemp`` would give 0600).
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import uuid
from pathlib import Path

from timingkit.formats.errors import InputError

# .NAME.PID.XXXXXXXX.tmp: the temporary files of atomic_output (see own_temporary_file)
_TEMPORARY_NAME = re.compile(r"^\.(?P<name>.+)\.\d+\.[0-9a-f]{8}\.tmp$")


@contextlib.contextmanager
def atomic_output(path, binary: bool = False):
    """Open a temporary file beside ``path`` for writing; rename it to ``path``
    only when the block finishes without error (else delete it). The file gets
    the usual permissions (0o666 minus the umask), like a plain open()."""
    path = Path(path)
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    try:
        if binary:
            handle = os.fdopen(descriptor, "wb")
        else:
            handle = os.fdopen(descriptor, "w", newline="", encoding="utf-8")
        with handle:
            yield handle
        os.replace(temporary, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temporary)
        raise


def atomic_write_text(path, text: str) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically (see :func:`atomic_output`)."""
    with atomic_output(path) as handle:
        handle.write(text)


def atomic_write_bytes(path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`atomic_output`)."""
    with atomic_output(path, binary=True) as handle:
        handle.write(data)


def own_temporary_file(name: str, targets) -> bool:
    """Whether ``name`` is a temporary file atomic_output made for one of ``targets``."""
    found = _TEMPORARY_NAME.match(name)
    return bool(found) and found.group("name") in set(targets)


def refuse_output_over_inputs(output, inputs) -> None:
    """An InputError when the output file ``output`` is one of ``inputs``."""
    target = Path(output).resolve()
    for path in filter(None, inputs):
        if Path(path).resolve() == target:
            raise InputError("the output file is an input of this command; writing it would "
                             "replace the input: choose another output path", path=str(output),
                             field="output")


def writing_error(exc: OSError, final) -> InputError:
    """The InputError for an output that could not be written (full disk, read-only
    folder, permissions, ...), naming ``final``."""
    reason = {errno.ENOSPC: "no space left on the disk", errno.EDQUOT: "disk quota exceeded",
              errno.EROFS: "the file system is read-only", errno.EACCES: "permission denied",
              errno.EPERM: "permission denied", errno.EFBIG: "file too large for the disk "
              "or the user's limit"}.get(exc.errno, exc.strerror or str(exc))
    return InputError(f"cannot write the output ({reason}); nothing was changed there",
                      path=str(final), field="output")
