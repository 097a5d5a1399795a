"""What every figure shares: a Figure on its own Agg canvas, atomic saving, footnotes,
time units chosen by scale, the colour key placed outside the data area, and a check
that text labels do not overlap.

pyplot is never imported (no screen, no global state, safe in threads, worker processes
and notebooks). The format of a saved figure comes from the suffix (``.png``, ``.pdf``,
``.svg``, ...); the file is written to a temporary name and renamed.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from timingkit.formats.errors import InputError
from timingkit.outputs.residual_table import atomic_output

# µs per unit, and the unit's name: residuals are shown in the largest unit in which
# the biggest value stays below 1000 (so no "8.161e+04 µs" and no offset multiplier).
TIME_UNITS_US = ((1e-3, "ns"), (1.0, "µs"), (1e3, "ms"), (1e6, "s"))
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def new_figure(figsize=(8.0, 4.5), dpi: float = 100) -> Figure:
    """A Figure on its own Agg canvas with constrained layout (no pyplot)."""
    figure = Figure(figsize=figsize, dpi=dpi, layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def save_figure(figure: Figure, path) -> Path:
    """Save ``figure`` to ``path`` atomically; the format is taken from the suffix.

    Raises InputError for a suffix matplotlib cannot write, listing the legal ones.
    """
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    supported = sorted(figure.canvas.get_supported_filetypes())
    if fmt not in supported:
        raise InputError(f"cannot tell the figure format from suffix '{path.suffix}'; "
                         f"use one of: {', '.join('.' + s for s in supported)}", path=str(path))
    with atomic_output(path, binary=True) as handle:
        figure.savefig(handle, format=fmt)
    return path


def finish(figure: Figure, path) -> Figure:
    if path is not None:
        save_figure(figure, path)
    return figure


def add_footnotes(figure: Figure, notes, fontsize: float = 6.5) -> None:
    """Wrapped notes along the bottom edge; the layout keeps room for them.

    ``notes``: (text, colour, gid) tuples, drawn top to bottom.
    """
    width_pt = figure.get_figwidth() * 72.0
    chars_per_line = max(40, int(0.95 * width_pt / (0.62 * fontsize)))  # DejaVu Sans ~0.6 em/char
    wrapped = [(textwrap.fill(text, chars_per_line), color, gid) for text, color, gid in notes]
    line_height = 1.25 * fontsize / 72.0 / figure.get_figheight()   # figure fraction
    y = 0.006
    for text, color, gid in reversed(wrapped):
        figure.text(0.01, y, text, fontsize=fontsize, color=color, ha="left", va="bottom",
                    gid=gid, in_layout=False)
        y += line_height * (text.count("\n") + 1) + 0.004
    gap = y + 6.0 / 72.0 / figure.get_figheight()         # 6 pt between notes and the rest
    figure.get_layout_engine().set(rect=(0.0, gap, 1.0, 1.0 - gap))
    figure._timingkit_key_bottom = gap                     # the key goes above the notes
    if getattr(figure, "_timingkit_key", None):
        _draw_key(figure)


def time_unit(values_us) -> tuple[float, str]:
    """(µs per unit, unit name) for showing ``values_us``: the smallest of ns, µs, ms,
    s in which the largest finite magnitude is below 1000 (s beyond)."""
    values = np.abs(np.asarray(values_us, dtype=float))
    values = values[np.isfinite(values)]
    biggest = float(values.max()) if values.size else 0.0
    for us_per_unit, name in TIME_UNITS_US:
        if biggest < 1000.0 * us_per_unit:
            return us_per_unit, name
    return TIME_UNITS_US[-1]


def power_of_ten_unit(biggest: float, base: str) -> tuple[float, str]:
    """(factor, label) to show numbers up to ``biggest`` without an offset multiplier:
    plain ``base`` when biggest >= 0.01, else ``10⁻ᵏ base`` (k a multiple of 3) with the
    values multiplied by ``factor`` = 10^k."""
    if not (np.isfinite(biggest) and biggest > 0) or biggest >= 0.01:
        return 1.0, base
    exponent = int(3 * np.floor(np.log10(biggest) / 3.0))
    return 10.0 ** (-exponent), f"10{str(exponent).translate(_SUPERSCRIPT)} {base}"


# --------------------------------------------------------------------------- colour key

def set_key(figure: Figure, entries, title: str | None = None) -> None:
    """The figure's colour key, outside the axes below the x label (it never hides a
    point): ``entries`` are (handle, label). Replaces an earlier key of the figure."""
    figure._timingkit_key = (list(entries), title)
    _draw_key(figure)


def add_key_entry(figure: Figure, handle, label: str) -> None:
    """Add one entry (e.g. a fitted curve drawn later) to the figure's key."""
    entries, title = getattr(figure, "_timingkit_key", ([], None))
    set_key(figure, entries + [(handle, label)], title)


def _draw_key(figure: Figure) -> None:
    for legend in list(figure.legends):
        legend.remove()
    entries, title = figure._timingkit_key
    if not entries:
        return
    handles, labels = zip(*entries)
    columns = min(len(labels), 5)
    style = dict(ncols=columns, fontsize=8, title_fontsize=8, frameon=False)
    bottom = getattr(figure, "_timingkit_key_bottom", None)
    if bottom is None:                       # the layout makes room for it at the bottom
        figure.legend(handles, labels, title=title, loc="outside lower center", **style)
        return
    # above the footnotes (add_footnotes), which the layout does not see: the key is
    # anchored on them, and the axes keep out of both
    legend = figure.legend(handles, labels, title=title, loc="lower center",
                           bbox_to_anchor=(0.5, bottom), bbox_transform=figure.transFigure,
                           **style)
    legend.set_in_layout(False)
    height = legend.get_window_extent(figure.canvas.get_renderer()).height / figure.bbox.height
    top = bottom + height + 4.0 / 72.0 / figure.get_figheight()
    figure.get_layout_engine().set(rect=(0.0, top, 1.0, 1.0 - top))


# --------------------------------------------------------------------------- overlaps

def boxes_overlap(a, b, pad_px: float = 0.0) -> bool:
    """True when two boxes overlap by more than ``pad_px`` in both directions."""
    return (min(a.x1, b.x1) - max(a.x0, b.x0) > pad_px
            and min(a.y1, b.y1) - max(a.y0, b.y0) > pad_px)


def overlapping_pairs(boxes, pad_px: float = 0.0) -> list[tuple[int, int]]:
    """Index pairs of boxes that overlap (by more than ``pad_px`` in both directions)."""
    return [(i, j) for i in range(len(boxes)) for j in range(i + 1, len(boxes))
            if boxes_overlap(boxes[i], boxes[j], pad_px)]
