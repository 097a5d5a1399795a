"""Errors meant for people: each names the file, line and field at fault."""

from __future__ import annotations


class TimingkitError(Exception):
    """Base of every error timingkit raises on purpose."""


class InputError(TimingkitError):
    """Bad user input: the CLI prints the message and exits with status 2.

    ``path``, ``line`` (1-based) and ``field`` are optional and, when given,
    are put in front of the message as ``path:line: field 'x': message``.
    """

    def __init__(self, message: str, path: str | None = None,
                 line: int | None = None, field: str | None = None):
        self.message = message
        self.path = None if path is None else str(path)
        self.line = line
        self.field = field
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = ""
        if self.path:
            where = self.path
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        if self.field:
            where += f"field '{self.field}': "
        return where + self.message


class FitError(TimingkitError):
    """The data cannot support the requested fit (degenerate, unconstrained,
    pulse numbering lost). Exit status 2 from the CLI: it is about the input."""
