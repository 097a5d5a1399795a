"""Reading a user's text file with errors for people (missing, a folder, not a
regular file, too large, binary content, not UTF-8; TOML syntax with its line),
shared by the readers of the format layer and the batch manifest. A leading
byte-order mark is not content and is dropped."""

from __future__ import annotations

import re
import tomllib

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.safe_read import MAX_TEXT_INPUT_BYTES, open_regular, read_regular_bytes

BYTE_ORDER_MARK = "\ufeff"


def _read_bytes(path, what: str, size: int = -1,
                limit: int = MAX_TEXT_INPUT_BYTES) -> bytes:
    """The file's first ``size`` bytes (all, up to ``limit``, by default); regular
    files only (timingkit.formats.safe_read), with errors for people."""
    if size < 0:
        return read_regular_bytes(path, what, limit)
    with open_regular(path, what, limit=1 << 62) as handle:
        return handle.read(size)


def is_fits_file(path, what: str) -> bool:
    """Whether the file starts like FITS (``SIMPLE  =``); ``what`` names the
    expected kind for the errors."""
    return _read_bytes(path, what, 9).startswith(b"SIMPLE  =")


def read_text_file(path, what: str, limit: int = MAX_TEXT_INPUT_BYTES) -> str:
    """The file's text; ``what`` names the expected kind, e.g. "clock table"."""
    raw = _read_bytes(path, what, limit=limit)
    if b"\0" in raw:
        raise InputError(f"not a text {what} (binary content)", path=path)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"not a text {what} (not UTF-8)", path=path) from None
    return text[1:] if text.startswith(BYTE_ORDER_MARK) else text


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


def top_level_table(data: dict, key: str, legal: tuple[str, ...], path, legal_text: str,
                    default=None):
    """``data[key]`` of a parsed TOML file after refusing top-level keys outside
    ``legal`` (the message lists ``legal_text``); ``default`` when absent."""
    unknown = sorted(set(data) - set(legal))
    if unknown:
        raise InputError(f"unknown top-level key(s) {', '.join(map(excerpt, unknown))}; legal: "
                         f"{legal_text}", path=path, field=unknown[0], quoted=unknown)
    return data.get(key, default)
