"""Output folders written as one set: complete or not there at all.

A command's outputs go into a hidden work folder ``.tmp-NAME-xxxxxxxx`` beside
the final folder; only when every file is written is it renamed to NAME (an
older NAME is moved aside first and removed after), so NAME is at every moment
absent, the old complete set or the new one: never a mixture with stale figures,
never half a set after a full disk, a read-only folder or a killed process.

Every folder made here holds a marker file, :data:`MARKER`, naming timingkit as
its writer. Clean-up (:func:`remove_own_leftovers`) and replacement touch only
marked folders (or, for folders of earlier versions, folders holding nothing but
timingkit's output files): a user's own files are never removed. The folder's
lock (timingkit.outputs.folder_lock) is held while a set is written and swapped in.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import socket
import time
from pathlib import Path

from timingkit.formats.atomic_file import (own_temporary_file, refuse_output_over_inputs,  # noqa: F401
                                          writing_error)
from timingkit.formats.errors import InputError
from timingkit.outputs.folder_lock import lock_output, refuse_if_locked

MARKER = ".timingkit-output"
WORK_PREFIX, OLD_PREFIX = ".tmp-", ".old-"

# What timingkit writes into an output folder (folders of earlier versions carry no
# marker and are recognised by holding only such files).
KNOWN_OUTPUT_SUFFIXES = (".toml", ".csv", ".json", ".png", ".pdf", ".txt", ".sha256", ".html")
KNOWN_OUTPUT_EVIDENCE = ("report.json", "error.txt", "residuals.csv")


def _marker_text(purpose: str) -> str:
    from timingkit import __version__
    return json.dumps({"written_by": f"timingkit {__version__}", "purpose": purpose,
                       "host": socket.gethostname(), "pid": os.getpid(),
                       "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())}) + "\n"


def is_own_folder(path) -> bool:
    """True for an empty folder, a folder with timingkit's marker, or a folder of an
    earlier version (only timingkit output files, among them a report or error)."""
    path = Path(path)
    if path.is_symlink() or not path.is_dir():
        return False
    if (path / MARKER).is_file():
        return True
    entries = list(path.iterdir())
    if not entries:
        return True
    return (any(e.name in KNOWN_OUTPUT_EVIDENCE for e in entries)
            and all(e.is_file() and not e.is_symlink() and e.suffix in KNOWN_OUTPUT_SUFFIXES
                    for e in entries))


def new_work_folder(parent, name: str, purpose: str = "outputs") -> Path:
    """Create the marked work folder ``PARENT/.tmp-NAME-xxxxxxxx`` (mode 0o777 minus umask)."""
    while True:
        path = Path(parent) / f"{WORK_PREFIX}{name}-{os.urandom(4).hex()}"
        try:
            path.mkdir(mode=0o777)
            break
        except FileExistsError:
            continue
    (path / MARKER).write_text(_marker_text(purpose), encoding="utf-8")
    return path


def flush_to_disk(folder: Path) -> None:
    """fsync every file in ``folder`` so that a folder renamed into place after a
    crash of the machine holds complete files, not empty ones (best effort)."""
    for path in Path(folder).iterdir():
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


def swap_into_place(work: Path, final: Path) -> None:
    """Rename the finished folder ``work`` to ``final``; an older ``final`` is moved aside
    first and removed after, so ``final`` is at every moment absent or complete."""
    work, final = Path(work), Path(final)
    old = None
    if final.exists() or final.is_symlink():
        old = final.with_name(f"{OLD_PREFIX}{final.name}-{os.urandom(4).hex()}")
        os.replace(final, old)
    os.replace(work, final)
    if old is not None:
        if old.is_dir() and not old.is_symlink():
            shutil.rmtree(old, ignore_errors=True)
        else:
            old.unlink(missing_ok=True)


def work_folder_source(entry: str) -> str | None:
    """NAME of a ``.tmp-NAME-xxxxxxxx`` folder name (the hex suffix has no '-')."""
    if not entry.startswith(WORK_PREFIX) or "-" not in entry[len(WORK_PREFIX):]:
        return None
    return entry[len(WORK_PREFIX):].rsplit("-", 1)[0]


def remove_own_leftovers(folder, top_level_outputs=()) -> set[str]:
    """Remove, in ``folder``, the marked work and set-aside folders of earlier
    interrupted runs and the temporary files of ``top_level_outputs``; nothing else.
    Returns the NAMEs of the work folders found."""
    names = set()
    for entry in Path(folder).iterdir():
        if entry.name.startswith((WORK_PREFIX, OLD_PREFIX)):
            if entry.is_symlink() or not entry.is_dir() or not (entry / MARKER).is_file():
                continue             # not ours: a user's file that merely looks alike
            name = work_folder_source(entry.name)
            if name is not None:
                names.add(name)
            shutil.rmtree(entry, ignore_errors=True)
        elif own_temporary_file(entry.name, top_level_outputs) and entry.is_file():
            entry.unlink(missing_ok=True)
    return names


def refuse_inputs_inside(folder, inputs, what: str = "output folder") -> None:
    """An InputError when an input file lies in ``folder`` (replacing the folder
    would replace the input)."""
    final = Path(folder).resolve()
    for path in filter(None, inputs):
        resolved = Path(path).resolve()
        if resolved == final or resolved.is_relative_to(final):
            raise InputError(f"the {what} holds an input of this command ({path}); writing the "
                             "outputs would replace it: choose another output folder",
                             path=str(folder), field="outdir")


def check_output_folder(folder, inputs=()) -> Path:
    """The absolute output folder, once it is known that it may be (re)written:
    it holds none of ``inputs``, and is absent, empty, or a folder timingkit wrote."""
    final = Path(folder).expanduser().absolute()
    refuse_inputs_inside(final, inputs)
    if final.exists() or final.is_symlink():
        if final.is_symlink() or not final.is_dir():
            raise InputError("the output folder exists and is not a folder", path=str(final),
                             field="outdir")
        if not is_own_folder(final):
            raise InputError("the output folder exists and holds files timingkit did not write; "
                             "choose a new folder (timingkit replaces only folders it wrote)",
                             path=str(final), field="outdir")
    return final


def check_before_writing(folder, inputs=()) -> Path:
    """:func:`check_output_folder`, and that no other run is writing the folder now
    (outputs.folder_lock): what a command checks before its work."""
    final = check_output_folder(folder, inputs)
    if not final.name.startswith(WORK_PREFIX):
        refuse_if_locked(final)
    return final


@contextlib.contextmanager
def output_set(folder, inputs=(), purpose: str = "outputs", wait: bool | None = None):
    """Write a command's outputs as one set: yields the work folder to write into,
    which becomes ``folder`` only when the block ends without error.

    Refuses (InputError) a ``folder`` that holds one of ``inputs``, that is a file,
    or that holds files timingkit did not write. A failure to write (full disk,
    read-only folder, permissions) is an InputError naming the folder; the old
    ``folder`` is then left as it was. The folder's lock (outputs.folder_lock) is
    held for the block: another run writing it is refused, or waited for with
    ``wait`` (default: the CLI's --wait). A marked work folder (``.tmp-*``, a batch
    worker's own) is private to its maker and is not locked.
    """
    check_output_folder(folder, inputs)       # refused at once, before any wait
    private = Path(folder).name.startswith(WORK_PREFIX)
    with contextlib.nullcontext() if private else lock_output(folder, wait=wait):
        final = check_output_folder(folder, inputs)   # again: another run may have written it
        try:
            final.parent.mkdir(parents=True, exist_ok=True)
            work = new_work_folder(final.parent, final.name, purpose)
        except OSError as exc:
            raise writing_error(exc, final) from None
        try:
            yield work
            flush_to_disk(work)
            swap_into_place(work, final)
        except OSError as exc:
            shutil.rmtree(work, ignore_errors=True)
            raise writing_error(exc, final) from None
        except BaseException:
            shutil.rmtree(work, ignore_errors=True)
            raise


def default_output_folder(source_name: str | None, fallback: str, command: str) -> str:
    """``SOURCE-COMMAND`` (e.g. ``demo-msp-fit``) in the working folder; the source
    name is the model's ``name`` when it is a plain folder name, else ``fallback``
    (the TOA table's file name without suffix)."""
    import re
    safe = re.compile(r"^[A-Za-z0-9_+][A-Za-z0-9._+-]{0,100}$")
    name = source_name if source_name and safe.match(source_name) else None
    if name is None or name == "unnamed":
        stem = Path(fallback).stem
        name = stem if safe.match(stem) else "timingkit"
    return f"{name}-{command}"
