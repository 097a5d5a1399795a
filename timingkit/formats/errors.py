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
MAX_PATH_CHARS, MAX_FIELD_CHARS = 300, 120   # and the path and field it names


def excerpt(text, limit: int = MAX_EXCERPT_CHARS) -> str:
    """``text`` as a short quotable excerpt: control and non-printing characters
    shown as ``?``, cut to ``limit`` characters (with ``...``), in quotes."""
    text = str(text)
    cut = len(text) > limit
    text = "".join(c if c.isprintable() else "?" for c in text[:limit])
    return repr(text + ("..." if cut else ""))


def excerpt_value(value, limit: int = MAX_EXCERPT_CHARS) -> str:
    """:func:`excerpt` of a value read from a file: a string as it is, anything else
    (a number, a list of a JSON or FITS file) as Python shows it."""
    return excerpt(value if isinstance(value, str) else repr(value), limit)


def cap(text: str, limit: int = MAX_MESSAGE_CHARS) -> str:
    """``text`` cut to ``limit`` characters (a note says how much was left out)."""
    if len(text) <= limit:
        return text
    return text[:limit - 40] + f" ... ({len(text) - limit + 40} more characters)"


EXCERPT_LIMITS = (MAX_EXCERPT_CHARS, 30, 24)   # the lengths messages cut excerpts to
MIN_BARE_PIECE_CHARS = 4    # shorter quoted pieces are hidden only where shown in quotes


def hide_pieces(text: str, pieces) -> str:
    """``text`` with every piece of input in ``pieces`` replaced by '...': as an
    :func:`excerpt` (with or without its quotes), in quotes, and (pieces of at
    least MIN_BARE_PIECE_CHARS characters) bare."""
    for piece in sorted(set(pieces), key=len, reverse=True):
        shown_as = [excerpt(piece, limit) for limit in EXCERPT_LIMITS]
        for shown in shown_as + [repr(piece), f"'{piece}'", f'"{piece}"']:
            text = text.replace(shown, "'...'")
        for bare in [shown[1:-1] for shown in shown_as] + [piece]:
            if len(bare) >= MIN_BARE_PIECE_CHARS:
                text = text.replace(bare, "...")
    return text


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
        self._full_message = str(message)
        self.message = cap(self._full_message)
        self.quoted = tuple(str(q) for q in quoted if q is not None and str(q))
        self.path = None if path is None else cap(str(path), MAX_PATH_CHARS)
        self.line = line
        self._full_field = None if field is None else str(field)
        self.field = None if field is None else cap(self._full_field, MAX_FIELD_CHARS)
        self.excerpt = excerpt
        super().__init__(self.__str__())

    def _where(self, field: str | None = None) -> str:
        field = self.field if field is None else field
        where = ""
        if self.path:
            where = self.path
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        if field:
            where += f"field '{field}': "
        return where

    def __str__(self) -> str:
        tail = "" if self.excerpt is None else f": {excerpt(self.excerpt)}"
        return self._where() + self.message + tail

    @property
    def public_message(self) -> str:
        """The message without any excerpt of the input (for shared outputs): the
        ``quoted`` pieces become '...' wherever the message or the field shows them."""
        message = hide_pieces(self._full_message, self.quoted)
        field = hide_pieces(self._full_field or "", self.quoted)
        where = self._where(cap(field, MAX_FIELD_CHARS))
        return where + cap(message) + (" (the text is not shown here)"
                                       if self.excerpt is not None else "")

    def located(self, path=None, line=None, field=None) -> "InputError":
        """A copy with the place filled in where this error lacks it."""
        return InputError(self._full_message, path=self.path or path,
                          line=self.line if self.line is not None else line,
                          field=self._full_field or field, excerpt=self.excerpt,
                          quoted=self.quoted)


class FitError(TimingkitError):
    """The data cannot support the requested fit (degenerate, unconstrained,
    pulse numbering lost). Exit status 2 from the CLI: it is about the input."""
