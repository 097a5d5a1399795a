"""Reading a user's text file with errors for people (missing, a folder,
binary content, not UTF-8), shared by the readers of the format layer."""

from __future__ import annotations

from timingkit.formats.errors import InputError


def read_text_file(path, what: str) -> str:
    """The file's text; ``what`` names the expected kind, e.g. "clock table"."""
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise InputError(f"{what} not found", path=path) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a {what}", path=path) from None
    except PermissionError:
        raise InputError(f"cannot read this {what} (permission denied)", path=path) from None
    if b"\0" in raw:
        raise InputError(f"not a text {what} (binary content)", path=path)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"not a text {what} (not UTF-8)", path=path) from None
