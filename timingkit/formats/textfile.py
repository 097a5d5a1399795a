"""Reading a user's text file with errors for people (missing, a folder,
binary content, not UTF-8; TOML syntax with its line), shared by the
readers of the format layer and the batch manifest."""

from __future__ import annotations

import re
import tomllib

from timingkit.formats.errors import InputError


def _read_bytes(path, what: str, size: int = -1) -> bytes:
    """The file's first ``size`` bytes (all by default), with errors for people."""
    try:
        with open(path, "rb") as fh:
            return fh.read(size)
    except FileNotFoundError:
        raise InputError(f"{what} not found", path=path) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a {what}", path=path) from None
    except PermissionError:
        raise InputError(f"cannot read this {what} (permission denied)", path=path) from None


def is_fits_file(path, what: str) -> bool:
    """Whether the file starts like FITS (``SIMPLE  =``); ``what`` names the
    expected kind for the errors."""
    return _read_bytes(path, what, 9).startswith(b"SIMPLE  =")


def read_text_file(path, what: str) -> str:
    """The file's text; ``what`` names the expected kind, e.g. "clock table"."""
    raw = _read_bytes(path, what)
    if b"\0" in raw:
        raise InputError(f"not a text {what} (binary content)", path=path)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"not a text {what} (not UTF-8)", path=path) from None


def parse_toml(text: str, path, parse_float=float) -> dict:
    """``text`` as TOML; a syntax error is an InputError "not valid TOML: ..."
    naming the file and the line tomllib reports."""
    try:
        return tomllib.loads(text, parse_float=parse_float)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        line = getattr(exc, "lineno", None)       # Python 3.14 gives it; earlier in the text
        found = re.search(r" \(at line (\d+), column \d+\)$", message)
        if found:
            message = message[:found.start()]
            line = line or int(found.group(1))
        raise InputError(f"not valid TOML: {message}", path=path, line=line) from None


def read_toml_file(path, what: str, parse_float=float) -> dict:
    """Read and parse a TOML file, with the errors of :func:`read_text_file`
    and :func:`parse_toml`."""
    return parse_toml(read_text_file(path, what), path, parse_float)
