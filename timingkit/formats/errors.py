"""Errors meant for people: each names the file, line and field at fault.

Messages are capped (:data:`MAX_MESSAGE_CHARS`), and what a reader could not
parse is quoted only as a short, sanitised excerpt (:func:`excerpt`) passed
separately (``InputError(..., excerpt=text)``), so that outputs meant for
sharing (a batch summary) can give the reason without the file's contents
(:attr:`InputError.public_message`).
"""

from __future__ import annotations

MAX_MESSAGE_CHARS = 600      # an error message is cut to this many characters
MAX_EXCERPT_CHARS = 40       # a quoted piece of input is cut to this many


def excerpt(text, limit: int = MAX_EXCERPT_CHARS) -> str:
    """``text`` as a short quotable excerpt: control and non-printing characters
    shown as ``?``, cut to ``limit`` characters (with ``...``), in quotes."""
    text = str(text)
    cut = len(text) > limit
    text = "".join(c if c.isprintable() else "?" for c in text[:limit])
    return repr(text + ("..." if cut else ""))


def cap(text: str, limit: int = MAX_MESSAGE_CHARS) -> str:
    """``text`` cut to ``limit`` characters (a note says how much was left out)."""
    if len(text) <= limit:
        return text
    return text[:limit - 40] + f" ... ({len(text) - limit + 40} more characters)"


class TimingkitError(Exception):
    """Base of every error timingkit raises on purpose."""


class InputError(TimingkitError):
    """Bad user input: the CLI prints the message and exits with status 2.

    ``path``, ``line`` (1-based) and ``field`` are optional and, when given,
    are put in front of the message as ``path:line: field 'x': message``.
    ``excerpt``: the piece of input that could not be read, shown sanitised and
    cut short after the message, and left out of :attr:`public_message`;
    ``quoted``: pieces of input that the message itself quotes, replaced by '...'
    in :attr:`public_message`.
    """

    def __init__(self, message: str, path: str | None = None,
                 line: int | None = None, field: str | None = None,
                 excerpt: str | None = None, quoted=()):
        self.message = cap(str(message))
        self.quoted = tuple(str(q) for q in quoted if q)
        self.path = None if path is None else cap(str(path), 300)
        self.line = line
        self.field = None if field is None else cap(str(field), 120)
        self.excerpt = excerpt
        super().__init__(self.__str__())

    def _where(self) -> str:
        where = ""
        if self.path:
            where = self.path
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        if self.field:
            where += f"field '{self.field}': "
        return where

    def __str__(self) -> str:
        tail = "" if self.excerpt is None else f": {excerpt(self.excerpt)}"
        return self._where() + self.message + tail

    @property
    def public_message(self) -> str:
        """The message without any excerpt of the input (for shared outputs)."""
        message = self.message
        for piece in sorted(self.quoted, key=len, reverse=True):
            message = message.replace(repr(piece), "'...'").replace(piece, "...")
        return self._where() + message + (" (the text is not shown here)"
                                          if self.excerpt is not None else "")

    def located(self, path=None, line=None, field=None) -> "InputError":
        """A copy with the place filled in where this error lacks it."""
        return InputError(self.message, path=self.path or path,
                          line=self.line if self.line is not None else line,
                          field=self.field or field, excerpt=self.excerpt,
                          quoted=self.quoted)


class FitError(TimingkitError):
    """The data cannot support the requested fit (degenerate, unconstrained,
    pulse numbering lost). Exit status 2 from the CLI: it is about the input."""
