"""Matplotlib figures: residuals, P–Pdot diagram, glitch search, noise spectrum.

Every function builds its own ``matplotlib.figure.Figure`` on an Agg canvas
(pyplot is never imported: no screen, no global state, safe in threads,
worker processes and notebooks), returns it, and, when ``path`` is given,
saves it there. The format comes from the suffix (``.png``, ``.pdf``, ``.svg``,
...); the file is written to a temporary name and renamed, so a failed save
never leaves half a figure. ResidualSet are drawn in µs (DESIGN.md §3).
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import erfa
import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from timingkit.formats.errors import InputError
from timingkit.outputs.residual_table import ResidualTable, atomic_output

JULIAN_YEAR_S = 365.25 * 86400.0          # IAU Julian year, s
# Surface dipole field B = 3.2e19 G sqrt(P Pdot), P in s (Lorimer & Kramer 2005,
# Handbook of Pulsar Astronomy): centred orthogonal dipole, R = 10 km, I = 1e45 g cm^2.
DIPOLE_FIELD_COEFFICIENT_GAUSS = 3.2e19
AGE_LINE_EXPONENTS_YR = tuple(range(3, 11))      # 1e3 .. 1e10 yr
FIELD_LINE_EXPONENTS_GAUSS = tuple(range(8, 15))  # 1e8 .. 1e14 G

PPDOT_ASSUMPTIONS = (
    "Dashed: characteristic age P/(2 Pdot) (braking index 3, birth period << P). "
    "Dotted: surface dipole field 3.2e19 G sqrt(P Pdot)\n(centred orthogonal dipole, "
    "R = 10 km, I = 1e45 g cm^2), after Lorimer & Kramer 2005. "
    "Both rest on these assumptions; true ages and fields may differ.")


# --------------------------------------------------------------------------- basics

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


def _add_footnotes(figure: Figure, notes, fontsize: float = 6.5) -> None:
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
    figure.get_layout_engine().set(rect=(0.0, y + 0.004, 1.0, 1.0 - y - 0.004))


def _finish(figure: Figure, path) -> Figure:
    if path is not None:
        save_figure(figure, path)
    return figure


def phase_axis_functions(frequency_hz: float):
    """(µs -> cycles, cycles -> µs) converters for spin frequency ``frequency_hz``.

    cycles = µs * 1e-6 * frequency_hz.
    """
    frequency_hz = float(frequency_hz)
    if not (np.isfinite(frequency_hz) and frequency_hz > 0):
        raise InputError(f"spin frequency for the phase axis must be > 0 Hz, got {frequency_hz}",
                         field="frequency_hz")
    scale = 1e-6 * frequency_hz

    def microseconds_to_cycles(us):
        return np.asarray(us, dtype=float) * scale

    def cycles_to_microseconds(cycles):
        return np.asarray(cycles, dtype=float) / scale

    return microseconds_to_cycles, cycles_to_microseconds


def day_of_year(mjd) -> np.ndarray:
    """Day of the (Gregorian) year from an MJD: 1.0 at 1 January 0h, fractional.

    The time scale of ``mjd`` is taken as is (UTC/TT/TDB differ by about a
    minute, irrelevant for a seasonal plot). Calendar via erfa.jd2cal/cal2jd.
    """
    mjd = np.atleast_1d(np.asarray(mjd, dtype=float))
    year, _month, _day, _fraction = erfa.jd2cal(2400000.5, mjd)
    _zero, mjd_jan1 = erfa.cal2jd(year, np.ones_like(year), np.ones_like(year))
    return mjd - mjd_jan1 + 1.0


# --------------------------------------------------------------------------- residuals

def color_choices(table: ResidualTable) -> list[str]:
    """Legal ``color_by`` values for ``table``: site, backend (if present), freq, other flags."""
    choices = ["site"]
    if "backend" in table.flags:
        choices.append("backend")
    choices.append("freq")
    choices += [name for name in table.flags if name != "backend"]
    return choices


def _category_values(table: ResidualTable, color_by: str) -> np.ndarray:
    return table.site if color_by == "site" else table.flags[color_by]


def _color_style(tables: list[ResidualTable], color_by: str) -> dict:
    """How to colour the points, shared by all panels of one figure."""
    legal = color_choices(tables[0])
    for table in tables[1:]:
        legal = [c for c in legal if c in color_choices(table)]
    if color_by not in legal:
        raise InputError(f"unknown color_by {color_by!r}; choose one of: {', '.join(legal)}",
                         field="color_by")
    if color_by == "freq":
        finite = np.concatenate([t.freq_mhz[np.isfinite(t.freq_mhz)] for t in tables])
        if finite.size:
            low, high = float(finite.min()), float(finite.max())
            if low == high:
                low, high = low - 0.5, high + 0.5
        else:
            low, high = 0.0, 1.0
        return {"kind": "freq", "norm": Normalize(low, high), "cmap": colormaps["viridis"],
                "any_finite": bool(finite.size)}
    categories = sorted(set().union(*(set(_category_values(t, color_by)) for t in tables)))
    palette = colormaps["tab10" if len(categories) <= 10 else "tab20"].colors
    markers = "os^Dv<>ph*"
    mapping = {c: (palette[i % len(palette)], markers[(i // len(palette)) % len(markers)])
               for i, c in enumerate(categories)}
    return {"kind": "category", "mapping": mapping, "color_by": color_by}


def _stats_text(table: ResidualTable) -> str:
    return (f"N = {len(table)} TOAs\nrms = {table.rms_us():.4g} µs\n"
            f"weighted rms = {table.weighted_rms_us():.4g} µs")


LEFT_OUT_LABEL = "left out of the fit"


def _draw_residual_panel(ax, x, table: ResidualTable, style: dict) -> None:
    """ResidualSet (µs) with 1σ error bars against ``x``, coloured per ``style``;
    TOAs left out of the fit as hollow grey circles (not in the statistics)."""
    ax.axhline(0.0, color="0.55", linewidth=0.6, zorder=0)
    fitted = table.fitted_mask()
    if not fitted.all():
        ax.errorbar(x[~fitted], table.residual_us[~fitted], yerr=table.err_us[~fitted], fmt="o",
                    markersize=4, mfc="none", color="0.6", elinewidth=0.6, capsize=0,
                    linestyle="none", label=LEFT_OUT_LABEL, zorder=1)
        x, table = x[fitted], table.subset(fitted)
    if style["kind"] == "category":
        values = _category_values(table, style["color_by"])
        for category, (color, marker) in style["mapping"].items():
            mask = values == category
            if np.any(mask):
                ax.errorbar(x[mask], table.residual_us[mask], yerr=table.err_us[mask],
                            fmt=marker, markersize=3.5, color=color, ecolor=color,
                            elinewidth=0.8, capsize=0, linestyle="none", label=category)
    else:
        ax.errorbar(x, table.residual_us, yerr=table.err_us, fmt="none", ecolor="0.7",
                    elinewidth=0.8, capsize=0, zorder=1)
        finite = np.isfinite(table.freq_mhz)
        if np.any(finite):
            ax.scatter(x[finite], table.residual_us[finite], c=table.freq_mhz[finite],
                       cmap=style["cmap"], norm=style["norm"], s=14, zorder=2)
        if np.any(~finite):
            ax.scatter(x[~finite], table.residual_us[~finite], color="k", marker="x", s=16,
                       zorder=2, label="infinite frequency (no dispersion)")
    ax.text(0.01, 0.97, _stats_text(table), transform=ax.transAxes, ha="left", va="top",
            fontsize=8, gid="residual_stats",
            bbox={"boxstyle": "round", "facecolor": "white", "alpha": 0.85, "edgecolor": "0.7"})
    ax.set_ylabel("residual (µs)")


def _add_phase_axis(ax, frequency_hz) -> None:
    forward, inverse = phase_axis_functions(frequency_hz)
    secondary = ax.secondary_yaxis("right", functions=(forward, inverse))
    secondary.set_ylabel("residual (pulse cycles)")


def _add_color_key(figure: Figure, axes: list, style: dict) -> None:
    if style["kind"] == "category":
        handles = [Line2D([], [], color=color, marker=marker, linestyle="none", markersize=5)
                   for color, marker in style["mapping"].values()]
        labels = [str(c) for c in style["mapping"]]
        if any(c.get_label() == LEFT_OUT_LABEL for ax in axes for c in ax.containers):
            handles.append(Line2D([], [], color="0.6", marker="o", mfc="none", linestyle="none",
                                  markersize=5))
            labels.append(LEFT_OUT_LABEL)
        axes[0].legend(handles, labels, title=style["color_by"], fontsize=8, title_fontsize=8,
                       loc="upper right", ncols=max(1, (len(labels) + 7) // 8))
    else:
        if style["any_finite"]:
            figure.colorbar(ScalarMappable(norm=style["norm"], cmap=style["cmap"]), ax=axes,
                            label="observing frequency (MHz)", pad=0.02)
        for ax in axes:
            if any(h.get_label() == "infinite frequency (no dispersion)"
                   for h in ax.collections):
                ax.legend(fontsize=8, loc="upper right")


def _residual_figure(tables_and_titles, x_of, xlabel, color_by, title, frequency_hz,
                     figsize, dpi) -> Figure:
    tables = [t for t, _ in tables_and_titles]
    style = _color_style(tables, color_by)
    if figsize is None:
        figsize = (8.0, 4.5) if len(tables) == 1 else (8.0, 7.5)
    figure = new_figure(figsize, dpi)
    axes = list(np.atleast_1d(figure.subplots(len(tables), 1, sharex=True, squeeze=False)[:, 0]))
    for ax, (table, panel_title) in zip(axes, tables_and_titles):
        _draw_residual_panel(ax, x_of(table), table, style)
        if panel_title:
            ax.set_title(panel_title, fontsize=10, loc="left")
        if frequency_hz is not None:
            _add_phase_axis(ax, frequency_hz)
    axes[-1].set_xlabel(xlabel)
    _add_color_key(figure, axes, style)
    if title:
        figure.suptitle(title)
    return figure


def plot_residuals(postfit: ResidualTable, prefit: ResidualTable | None = None,
                   color_by: str = "site", title: str | None = None,
                   frequency_hz: float | None = None, path=None, *,
                   figsize=None, dpi: float = 100) -> Figure:
    """ResidualSet (µs) against MJD with 1σ error bars.

    With ``prefit``: two stacked panels (pre-fit above, post-fit below, shared
    MJD axis). ``color_by``: 'site', 'backend', 'freq' (continuous colour map
    and colour bar, MHz) or any TOA flag name; an unknown name raises
    InputError listing the legal ones. ``frequency_hz``: adds a right-hand axis
    in pulse cycles (µs * 1e-6 * frequency_hz) to every panel. Each panel
    carries N, rms and weighted rms (about zero, weights 1/err²).
    """
    panels = [(postfit, "post-fit" if prefit is not None else None)]
    if prefit is not None:
        panels.insert(0, (prefit, "pre-fit"))
    figure = _residual_figure(panels, lambda t: t.mjd, "MJD (days)", color_by, title,
                              frequency_hz, figsize, dpi)
    for ax in figure.axes:
        if ax.get_label() != "<colorbar>":
            ax.ticklabel_format(axis="x", useOffset=False, style="plain")
    return _finish(figure, path)


def plot_residuals_vs_orbital_phase(table: ResidualTable, orbital_phase, path=None, *,
                                    color_by: str = "site", title: str | None = None,
                                    frequency_hz: float | None = None, figsize=None,
                                    dpi: float = 100) -> Figure:
    """ResidualSet (µs) against orbital phase (cycles, as given, wrapped into [0, 1))."""
    orbital_phase = np.atleast_1d(np.asarray(orbital_phase, dtype=float))
    if orbital_phase.shape != (len(table),):
        raise ValueError(f"orbital_phase has {orbital_phase.size} values, table has {len(table)}")
    wrapped = np.mod(orbital_phase, 1.0)
    figure = _residual_figure([(table, None)], lambda t: wrapped, "orbital phase (cycles)",
                              color_by, title, frequency_hz, figsize, dpi)
    figure.axes[0].set_xlim(0.0, 1.0)
    return _finish(figure, path)


def plot_residuals_vs_day_of_year(table: ResidualTable, path=None, *, color_by: str = "site",
                                  title: str | None = None, frequency_hz: float | None = None,
                                  figsize=None, dpi: float = 100) -> Figure:
    """ResidualSet (µs) against day of year (annual signatures: position, parallax errors)."""
    figure = _residual_figure([(table, None)], lambda t: day_of_year(t.mjd),
                              "day of year (1 = 1 January 0h)", color_by, title,
                              frequency_hz, figsize, dpi)
    figure.axes[0].set_xlim(1.0, 367.0)
    return _finish(figure, path)


# --------------------------------------------------------------------------- P–Pdot

def _decade_range(values, low_default, high_default, margin):
    low = min(low_default, float(np.min(values)) / margin) if values.size else low_default
    high = max(high_default, float(np.max(values)) * margin) if values.size else high_default
    return 10.0 ** np.floor(np.log10(low)), 10.0 ** np.ceil(np.log10(high))


def _label_on_line(ax, p_grid, pdot_line, p_range, pdot_range, fraction, text, gid):
    """Put ``text`` on a line at ``fraction`` of its visible part (log space)."""
    visible = ((pdot_line >= pdot_range[0]) & (pdot_line <= pdot_range[1])
               & (p_grid >= p_range[0]) & (p_grid <= p_range[1]))
    if not np.any(visible):
        return
    indices = np.flatnonzero(visible)
    i = indices[int(round(fraction * (len(indices) - 1)))]
    ax.text(p_grid[i], pdot_line[i], text, fontsize=7, color="0.35", ha="center", va="center",
            gid=gid, bbox={"facecolor": "white", "edgecolor": "none", "pad": 0.5, "alpha": 0.8})


def plot_ppdot(period_s, period_derivative, names, path=None, *, title: str | None = None,
               label_sources: bool | None = None, figsize=(7.5, 6.5),
               dpi: float = 100) -> Figure:
    """Log-log P–Pdot diagram with lines of constant characteristic age and dipole field.

    ``period_s`` (s) and ``period_derivative`` (s/s) per source, ``names`` for
    labels (labelled when ``label_sources`` is True; default: up to 30 sources).
    Age lines 1e3..1e10 yr: Pdot = P / (2 tau), Julian year 3.15576e7 s (line
    gid ``characteristic_age_1e{k}_yr``). Field lines 1e8..1e14 G: Pdot =
    (B / 3.2e19 G)² / P (gid ``surface_dipole_field_1e{k}_gauss``). Sources
    with non-positive or missing P or Pdot are not drawn; the figure names
    them in a note. The assumptions behind the lines are printed on the figure.
    """
    period_s = np.atleast_1d(np.asarray(period_s, dtype=float))
    period_derivative = np.atleast_1d(np.asarray(period_derivative, dtype=float))
    names = [str(n) for n in np.atleast_1d(names)]
    if not (len(period_s) == len(period_derivative) == len(names)):
        raise ValueError(f"period_s, period_derivative and names differ in length: "
                         f"{len(period_s)}, {len(period_derivative)}, {len(names)}")
    drawable = (np.isfinite(period_s) & (period_s > 0)
                & np.isfinite(period_derivative) & (period_derivative > 0))
    p_shown, pdot_shown = period_s[drawable], period_derivative[drawable]
    p_range = _decade_range(p_shown, 1e-3, 10.0, 2.0)
    pdot_range = _decade_range(pdot_shown, 1e-21, 1e-10, 3.0)

    figure = new_figure(figsize, dpi)
    ax = figure.add_subplot()
    ax.set_xscale("log")
    ax.set_yscale("log")
    p_grid = np.logspace(np.log10(p_range[0]), np.log10(p_range[1]), 400)
    for k in AGE_LINE_EXPONENTS_YR:
        pdot_line = p_grid / (2.0 * 10.0 ** k * JULIAN_YEAR_S)
        ax.plot(p_grid, pdot_line, linestyle="--", color="0.6", linewidth=0.8,
                gid=f"characteristic_age_1e{k}_yr")
        _label_on_line(ax, p_grid, pdot_line, p_range, pdot_range, 0.85,
                       f"$10^{{{k}}}$ yr", f"characteristic_age_1e{k}_yr_label")
    for k in FIELD_LINE_EXPONENTS_GAUSS:
        pdot_line = (10.0 ** k / DIPOLE_FIELD_COEFFICIENT_GAUSS) ** 2 / p_grid
        ax.plot(p_grid, pdot_line, linestyle=":", color="0.45", linewidth=0.9,
                gid=f"surface_dipole_field_1e{k}_gauss")
        _label_on_line(ax, p_grid, pdot_line, p_range, pdot_range, 0.15,
                       f"$10^{{{k}}}$ G", f"surface_dipole_field_1e{k}_gauss_label")
    ax.scatter(p_shown, pdot_shown, s=18, color="C0", zorder=3, gid="sources")
    if label_sources is None:
        label_sources = len(p_shown) <= 30
    if label_sources:
        for name, p, pdot in zip(np.asarray(names, dtype=object)[drawable], p_shown, pdot_shown):
            ax.annotate(name, (p, pdot), xytext=(4, 3), textcoords="offset points", fontsize=7)
    ax.set_xlim(*p_range)
    ax.set_ylim(*pdot_range)
    ax.set_xlabel("period P (s)")
    ax.set_ylabel("period derivative Pdot (s/s)")
    notes = []
    skipped = [n for n, ok in zip(names, drawable) if not ok]
    if skipped:
        listed = ", ".join(skipped[:6]) + (", ..." if len(skipped) > 6 else "")
        notes.append((f"Not drawn: {len(skipped)} source(s) with period derivative <= 0 or "
                      f"missing ({listed}).", "C3", "skipped_sources_note"))
    notes.append((PPDOT_ASSUMPTIONS.replace("\n", " "), "0.3", "assumptions_note"))
    _add_footnotes(figure, notes)
    if title:
        ax.set_title(title)
    return _finish(figure, path)


# --------------------------------------------------------------------------- glitches

def _frequency_scale(offsets_hz, errors_hz):
    """(factor, unit): nHz when every offset (plus error) is below 1 mHz, else Hz."""
    values = np.abs(np.concatenate([offsets_hz, offsets_hz + errors_hz]))
    values = values[np.isfinite(values)]
    if values.size == 0 or values.max() < 1e-3:
        return 1e9, "nHz"
    return 1.0, "Hz"


def plot_glitch_search(mjd, residual_us, err_us, track_mjd, track_freq_hz, track_freq_err_hz,
                       track_fdot, track_fdot_err, candidate_epochs_mjd, path=None,
                       frequency_reference_hz: float | None = None, *,
                       title: str | None = None, figsize=(8.0, 9.0),
                       dpi: float = 100) -> Figure:
    """Three stacked panels on a shared MJD axis for a glitch search.

    Top: residuals (µs) before any glitch terms. Middle: the local spin
    frequency track minus ``frequency_reference_hz`` (default: the median of
    the track), in nHz when all offsets are below 1 mHz, else Hz. Bottom:
    the frequency-derivative track (Hz/s). Candidate epochs (MJD) are drawn as
    vertical lines (gid ``candidate_epoch``) on every panel.
    """
    def column(values, name, n=None):
        array = np.atleast_1d(np.asarray(values, dtype=float))
        if n is not None and array.shape != (n,):
            raise ValueError(f"{name} has {array.size} values, expected {n}")
        return array

    mjd = column(mjd, "mjd")
    residual_us = column(residual_us, "residual_us", len(mjd))
    err_us = column(err_us, "err_us", len(mjd))
    track_mjd = column(track_mjd, "track_mjd")
    n_track = len(track_mjd)
    track_freq_hz = column(track_freq_hz, "track_freq_hz", n_track)
    track_freq_err_hz = column(track_freq_err_hz, "track_freq_err_hz", n_track)
    track_fdot = column(track_fdot, "track_fdot", n_track)
    track_fdot_err = column(track_fdot_err, "track_fdot_err", n_track)
    candidates = column(candidate_epochs_mjd, "candidate_epochs_mjd")

    if frequency_reference_hz is None:
        finite = track_freq_hz[np.isfinite(track_freq_hz)]
        frequency_reference_hz = float(np.median(finite)) if finite.size else 0.0
    offsets_hz = track_freq_hz - float(frequency_reference_hz)
    factor, unit = _frequency_scale(offsets_hz, track_freq_err_hz)

    figure = new_figure(figsize, dpi)
    axes = figure.subplots(3, 1, sharex=True)
    top, middle, bottom = axes
    top.axhline(0.0, color="0.55", linewidth=0.6, zorder=0)
    top.errorbar(mjd, residual_us, yerr=err_us, fmt="o", markersize=2.5, color="C0",
                 elinewidth=0.7, capsize=0, linestyle="none")
    top.set_ylabel("residual before\nglitch terms (µs)")
    middle.errorbar(track_mjd, offsets_hz * factor, yerr=track_freq_err_hz * factor, fmt="o",
                    markersize=3, color="C1", elinewidth=0.8, capsize=2, linestyle="-",
                    linewidth=0.6)
    middle.set_ylabel(f"frequency - reference ({unit})")
    middle.text(0.01, 0.96, f"reference = {float(frequency_reference_hz):.15g} Hz",
                transform=middle.transAxes, fontsize=8, va="top", gid="frequency_reference")
    bottom.errorbar(track_mjd, track_fdot, yerr=track_fdot_err, fmt="o", markersize=3,
                    color="C2", elinewidth=0.8, capsize=2, linestyle="-", linewidth=0.6)
    bottom.set_ylabel("frequency derivative (Hz/s)")
    bottom.set_xlabel("MJD (days)")
    for ax in axes:
        for i, epoch in enumerate(candidates):
            ax.axvline(epoch, color="C3", linestyle="--", linewidth=0.9, gid="candidate_epoch",
                       label="candidate glitch epoch" if i == 0 else None)
        ax.ticklabel_format(axis="x", useOffset=False, style="plain")
    if candidates.size:
        middle.legend(fontsize=8, loc="lower left")
    if title:
        figure.suptitle(title)
    return _finish(figure, path)


# --------------------------------------------------------------------------- noise

def plot_power_spectrum(freqs_per_yr, power, model_power=None, path=None, *,
                        power_label: str = "power spectral density (µs² yr)",
                        title: str | None = None, figsize=(7.0, 5.0),
                        dpi: float = 100) -> Figure:
    """Log-log power spectrum of whitened residuals, with an optional fitted model.

    ``freqs_per_yr`` in cycles per year; ``power`` and ``model_power`` in the
    units named by ``power_label``. Non-positive or non-finite points cannot
    be drawn on log axes; they are left out and counted in a note. A dotted
    line marks 1/yr (annual: position and parallax errors).
    """
    freqs = np.atleast_1d(np.asarray(freqs_per_yr, dtype=float))
    power = np.atleast_1d(np.asarray(power, dtype=float))
    if power.shape != freqs.shape:
        raise ValueError(f"power has {power.size} values, freqs_per_yr has {freqs.size}")
    figure = new_figure(figsize, dpi)
    ax = figure.add_subplot()
    ax.set_xscale("log")
    ax.set_yscale("log")
    good = np.isfinite(freqs) & (freqs > 0) & np.isfinite(power) & (power > 0)
    ax.plot(freqs[good], power[good], marker="o", markersize=3, linewidth=0.8, color="C0",
            label="whitened residuals", gid="measured_power")
    left_out = int(np.sum(~good))
    if model_power is not None:
        model_power = np.atleast_1d(np.asarray(model_power, dtype=float))
        if model_power.shape != freqs.shape:
            raise ValueError(f"model_power has {model_power.size} values, "
                             f"freqs_per_yr has {freqs.size}")
        model_good = np.isfinite(freqs) & (freqs > 0) & np.isfinite(model_power) & (model_power > 0)
        order = np.argsort(freqs[model_good])
        ax.plot(freqs[model_good][order], model_power[model_good][order], color="C3",
                linewidth=1.4, label="fitted red-noise model", gid="model_power")
    ax.axvline(1.0, color="0.6", linestyle=":", linewidth=0.8, label="1/yr", gid="annual_frequency")
    if left_out:
        ax.text(0.99, 0.02, f"{left_out} point(s) with zero, negative or missing power "
                f"or frequency not drawn", transform=ax.transAxes, ha="right", va="bottom",
                fontsize=7, color="C3", gid="left_out_note")
    ax.set_xlabel("frequency (1/yr)")
    ax.set_ylabel(power_label)
    ax.legend(fontsize=8)
    if title:
        ax.set_title(title)
    return _finish(figure, path)
