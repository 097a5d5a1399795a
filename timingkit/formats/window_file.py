"""Observing windows: the times a phase predictor must cover (our own small
text format, README "Observing-window file").

::

    # observing windows, UTC at the site; '#' starts a comment
    # start_mjd            end_mjd
    60010.125              60010.1875
    60012.1041666666667    60012.16666666667

One window per line: two decimal MJDs (exact, as the TOA table writes them),
start before end, separated by spaces or tabs. Blank lines and comments are
skipped. Windows may come in any order and may touch but not overlap.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.mjd_text import mjd_problem, parse_mjd_strings
from timingkit.formats.textfile import read_text_file

FIELDS = ("start_mjd", "end_mjd")


def check_windows(windows, path=None, lines=None) -> list[tuple[str, str]]:
    """``windows`` (pairs of MJD strings) sorted by start, after checking each
    and that none overlaps another; errors name ``lines[i]`` of ``path`` or,
    without a file, the field ``windows.<i>`` (0-based, as given)."""
    pairs = [tuple(str(t).strip() for t in w) for w in windows]
    if not pairs:
        raise InputError("no observing windows given", path=path, field="windows")

    def where(i: int, name: str | None = None) -> dict:
        if lines is not None:
            return {"path": path, "line": lines[i], "field": name}
        return {"path": path, "field": f"windows.{i}" + (f".{name}" if name else "")}

    for i, pair in enumerate(pairs):
        if len(pair) != 2:
            raise InputError(f"expected a start and an end MJD, found {len(pair)} value(s)",
                             **where(i))
        for name, text in zip(FIELDS, pair):
            problem = mjd_problem(text)
            if problem:
                raise InputError(problem, quoted=(text,), **where(i, name))
    day, frac = parse_mjd_strings([t for pair in pairs for t in pair])
    start_day, start_frac, end_day, end_frac = day[0::2], frac[0::2], day[1::2], frac[1::2]
    for i in np.flatnonzero(~((end_day - start_day) + (end_frac - start_frac) > 0)):
        raise InputError(f"window ends ({pairs[i][1]}) at or before its start ({pairs[i][0]})",
                         **where(int(i), "end_mjd"))
    order = np.lexsort((start_frac, start_day))
    for a, b in zip(order[:-1], order[1:]):
        if (start_day[b] - end_day[a]) + (start_frac[b] - end_frac[a]) < 0:
            first = f"line {lines[a]}" if lines is not None else f"window {a}"
            raise InputError(f"window {pairs[b][0]} to {pairs[b][1]} overlaps the one from "
                             f"{pairs[a][0]} to {pairs[a][1]} ({first}); windows may touch but "
                             "not overlap", **where(int(b), "start_mjd"))
    return [pairs[i] for i in order]


def read_window_file(path) -> list[tuple[str, str]]:
    """The windows of an observing-window file, sorted by start (module doc)."""
    text = read_text_file(path, "observing-window file")
    pairs, lines = [], []
    for number, row in enumerate(text.splitlines(), start=1):
        content = row.split("#", 1)[0].split()
        if content:
            pairs.append(tuple(content))
            lines.append(number)
    if not pairs:
        raise InputError("no observing windows in the file (one 'START_MJD END_MJD' per line)",
                         path=path)
    return check_windows(pairs, path, lines)


__all__ = ["check_windows", "read_window_file"]
