"""Pulse-profile template files (our own format): the relative intensity of
the pulse against phase, one row per phase::

    # timingkit pulse template
    phase     intensity
    0.0000    0.9312
    0.0020    0.9330

``#`` lines are comments; the header names the two columns; phases lie in
[0, 1) and increase; intensities are >= 0, not all zero, in any unit (the
template is normalised to mean 1 when read). Phase zero of the template is the
phase the event TOAs refer to. ``timingkit event-toas --save-template``
writes the template it used in this form.
"""

from __future__ import annotations

import os

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.textfile import read_text_file
from timingkit.formats.toa_table import SPLIT_RE

COLUMNS = ("phase", "intensity")


def read_template_table(path) -> tuple[np.ndarray, np.ndarray]:
    """(phase, intensity) rows of a template file (see the module docstring)."""
    path = os.fspath(path)
    text = read_text_file(path, "template")
    header, rows = None, []
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        fields = [f for f in SPLIT_RE.split(stripped) if f]
        if header is None:
            if [f.lower() for f in fields] != list(COLUMNS):
                raise InputError(f"expected the header 'phase intensity', found {stripped!r}",
                                 path=path, line=number)
            header = number
            continue
        if len(fields) != 2:
            raise InputError(f"{len(fields)} fields, expected 2 (phase intensity)", path=path,
                             line=number)
        try:
            values = [float(f) for f in fields]
        except ValueError:
            raise InputError(f"expected two numbers, found {stripped!r}", path=path,
                             line=number) from None
        if not 0.0 <= values[0] < 1.0:
            raise InputError(f"phase {values[0]} is outside [0, 1)", path=path, line=number,
                             field="phase")
        if not (np.isfinite(values[1]) and values[1] >= 0):
            raise InputError(f"intensity {values[1]} must be finite and >= 0", path=path,
                             line=number, field="intensity")
        if rows and values[0] <= rows[-1][0]:
            raise InputError("phases must increase from row to row", path=path, line=number,
                             field="phase")
        rows.append(values)
    if len(rows) < 4:
        raise InputError(f"a template needs at least 4 rows, found {len(rows)}", path=path)
    table = np.array(rows)
    if not np.any(table[:, 1] > 0):
        raise InputError("all intensities are zero", path=path, field="intensity")
    return table[:, 0], table[:, 1]


def write_template_table(path, phase, intensity, comment: str = "") -> None:
    from timingkit.formats.model_file import atomic_write_text
    lines = ["# timingkit pulse template (relative intensity against pulse phase)"]
    lines += [f"# {line}" for line in comment.splitlines() if line]
    lines.append("phase intensity")
    lines += [f"{p:.6f} {v:.8g}" for p, v in zip(np.asarray(phase), np.asarray(intensity))]
    atomic_write_text(os.fspath(path), "\n".join(lines) + "\n")
