"""Figures of the search and summary stages: the P–Pdot diagram of a batch, the glitch
search, and the power spectrum of a noise fit. Built as in
:mod:`timingkit.outputs.figure_basics` (own Agg canvas, atomic save)."""

from __future__ import annotations

import numpy as np
from matplotlib.ticker import FixedLocator, FuncFormatter, LogLocator, NullFormatter

from matplotlib.text import Text
from matplotlib.transforms import Bbox

from timingkit.outputs.figure_basics import (add_footnotes, boxes_overlap, finish, new_figure,
                                             power_of_ten_unit, time_unit)

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


# Offsets (points) tried for a source label, nearest first: right, left, above, below,
# then the diagonals, then twice as far.
_LABEL_OFFSETS_PT = [(dx * r, dy * r) for r in (1, 2, 3.5) for dx, dy in
                     ((4, 2), (-4, 2), (0, 6), (0, -8), (4, -6), (-4, -6), (4, 8), (-4, 8))]


def _place_source_labels(figure, ax, names, p, pdot) -> None:
    """Label each source where its text overlaps no other label (source or line label)
    and stays inside the axes; sources that find no room are listed in
    ``ax.unlabelled_sources`` (and in a note). Text extents come from the drawn figure."""
    figure.canvas.draw()                           # fixes the layout; labels stay out of it
    renderer = figure.canvas.get_renderer()
    axes_box = ax.get_window_extent(renderer)
    taken = [t.get_window_extent(renderer) for t in ax.texts]     # the line labels
    point_px = ax.transData.transform(np.column_stack([p, pdot]))
    dots = [Bbox.from_extents(x - 3, y - 3, x + 3, y + 3) for x, y in point_px]
    ax.unlabelled_sources = []
    for name, (x, y) in sorted(zip(names, point_px), key=lambda item: item[1][0]):
        placed = None
        for k, (dx, dy) in enumerate(_LABEL_OFFSETS_PT):
            far = k >= 8                                # a leader line to the point
            text = ax.annotate(str(name), ax.transData.inverted().transform((x, y)),
                               xytext=(dx, dy), textcoords="offset points", fontsize=7,
                               ha="left" if dx > 0 else "right" if dx < 0 else "center",
                               va="bottom" if dy > 0 else "top", in_layout=False,
                               gid="source_label",
                               arrowprops={"arrowstyle": "-", "color": "0.55", "lw": 0.5,
                                           "shrinkA": 0, "shrinkB": 3} if far else None)
            text.update_positions(renderer)
            box = Text.get_window_extent(text, renderer)     # the text, not its leader
            inside = (box.x0 >= axes_box.x0 and box.x1 <= axes_box.x1
                      and box.y0 >= axes_box.y0 and box.y1 <= axes_box.y1)
            if inside and not any(boxes_overlap(box, other) for other in taken + dots):
                placed = box
                break
            text.remove()
        if placed is None:
            ax.unlabelled_sources.append(str(name))
        else:
            taken.append(placed)


def plot_ppdot(period_s, period_derivative, names, path=None, *, title: str | None = None,
               label_sources: bool | None = None, figsize=(7.5, 6.5),
               dpi: float = 100):
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
    ax.set_xlim(*p_range)
    ax.set_ylim(*pdot_range)
    ax.set_xlabel("period P (s)")
    ax.set_ylabel("period derivative Pdot (s/s)")
    if title:
        ax.set_title(title)
    notes = []
    skipped = [n for n, ok in zip(names, drawable) if not ok]
    if skipped:
        listed = ", ".join(skipped[:6]) + (", ..." if len(skipped) > 6 else "")
        notes.append((f"Not drawn: {len(skipped)} source(s) with period derivative <= 0 or "
                      f"missing ({listed}).", "C3", "skipped_sources_note"))
    notes.append((PPDOT_ASSUMPTIONS.replace("\n", " "), "0.3", "assumptions_note"))
    add_footnotes(figure, notes)
    if label_sources:
        # labels go last, on the final layout (a note added later would move the points)
        shown = np.asarray(names, dtype=object)[drawable]
        _place_source_labels(figure, ax, shown, p_shown, pdot_shown)
        if ax.unlabelled_sources:
            for text in [t for t in figure.texts if t.get_gid() in
                         ("skipped_sources_note", "assumptions_note")]:
                text.remove()
            for text in [t for t in ax.texts if t.get_gid() == "source_label"]:
                text.remove()
            count = len(ax.unlabelled_sources)
            add_footnotes(figure, notes[:-1] + [(f"Not labelled for lack of room: {count} "
                                                 "source(s); summary.csv lists every source.",
                                                 "0.3", "unlabelled_sources_note"), notes[-1]])
            _place_source_labels(figure, ax, shown, p_shown, pdot_shown)
            for text in figure.texts:          # the count of the final placement
                if text.get_gid() == "unlabelled_sources_note":
                    text.set_text(text.get_text().replace(f"{count} source",
                                                          f"{len(ax.unlabelled_sources)} source"))
    return finish(figure, path)


# --------------------------------------------------------------------------- glitches

def _frequency_scale(offsets_hz, errors_hz):
    """(factor, unit): nHz when every offset (plus error) is below 1 mHz, else Hz."""
    values = np.abs(np.concatenate([offsets_hz, offsets_hz + errors_hz]))
    values = values[np.isfinite(values)]
    if values.size == 0 or values.max() < 1e-3:
        return 1e9, "nHz"
    return 1.0, "Hz"


def plot_glitch_search(mjd, residual_us, err_us, track_mjd, track_freq_hz, track_freq_err_hz,
                       track_derivative, track_derivative_err, candidate_epochs_mjd, path=None,
                       frequency_reference_hz: float | None = None, *,
                       offset_name: str = "frequency offset",
                       title: str | None = None, figsize=(8.0, 9.0),
                       dpi: float = 100):
    """Three stacked panels on a shared MJD axis for a glitch search.

    Top: residuals before any glitch terms, in the unit their size calls for.
    Middle: the local spin frequency track with 1σ error bars, minus
    ``frequency_reference_hz`` (default: the median of the track; 0 means the
    track already holds offsets, named by ``offset_name``), in nHz when all
    offsets are below 1 mHz, else Hz. Bottom: the frequency-derivative track
    (Hz/s, scaled by a power of ten named on the axis). Candidate epochs (MJD)
    are drawn as vertical lines (gid ``candidate_epoch``) on every panel and
    labelled above the top panel (gid ``candidate_label``).
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
    track_derivative = column(track_derivative, "track_derivative", n_track)
    track_derivative_err = column(track_derivative_err, "track_derivative_err", n_track)
    candidates = column(candidate_epochs_mjd, "candidate_epochs_mjd")

    if frequency_reference_hz is None:
        finite = track_freq_hz[np.isfinite(track_freq_hz)]
        frequency_reference_hz = float(np.median(finite)) if finite.size else 0.0
    offsets_hz = track_freq_hz - float(frequency_reference_hz)
    factor, unit_name = _frequency_scale(offsets_hz, track_freq_err_hz)

    figure = new_figure(figsize, dpi)
    axes = figure.subplots(3, 1, sharex=True)
    top, middle, bottom = axes
    us_per_unit, unit = time_unit(np.abs(residual_us) + err_us)
    top.axhline(0.0, color="0.55", linewidth=0.6, zorder=0)
    top.errorbar(mjd, residual_us / us_per_unit, yerr=err_us / us_per_unit, fmt="o",
                 markersize=2.5, color="C0", elinewidth=0.7, capsize=0, linestyle="none")
    top.set_ylabel(f"residual before\nglitch terms ({unit})")
    middle.errorbar(track_mjd, offsets_hz * factor, yerr=track_freq_err_hz * factor, fmt="o",
                    markersize=3, color="C1", ecolor="0.25", elinewidth=0.9, capsize=2.5,
                    linestyle="-", linewidth=0.6, zorder=3)
    finite_err = track_freq_err_hz[np.isfinite(track_freq_err_hz)]
    if finite_err.size:
        middle.text(1.0, 1.015, f"1σ error bars (median {np.median(finite_err) * factor:.2g} "
                    f"{unit_name}; hidden by the points where smaller)", transform=middle.transAxes,
                    ha="right", va="bottom", fontsize=7.5, gid="frequency_error_note")
    if float(frequency_reference_hz) == 0.0:
        middle.set_ylabel(f"{offset_name} ({unit_name})")
    else:
        middle.set_ylabel(f"frequency - reference ({unit_name})")
        middle.text(0.01, 0.96, f"reference = {float(frequency_reference_hz):.15g} Hz",
                    transform=middle.transAxes, fontsize=8, va="top", gid="frequency_reference")
    derivative_factor, derivative_unit = power_of_ten_unit(
        float(np.nanmax(np.abs(track_derivative))) if np.any(np.isfinite(track_derivative)) else 1.0, "Hz/s")
    bottom.errorbar(track_mjd, track_derivative * derivative_factor, yerr=track_derivative_err * derivative_factor,
                    fmt="o", markersize=3, color="C2", elinewidth=0.8, capsize=2,
                    linestyle="-", linewidth=0.6)
    bottom.set_ylabel(f"frequency derivative\n({derivative_unit})")
    bottom.set_xlabel("MJD (days)")
    for ax in axes:
        for epoch in candidates:
            ax.axvline(epoch, color="C3", linestyle="--", linewidth=0.9, gid="candidate_epoch")
        ax.ticklabel_format(axis="both", useOffset=False, style="plain")
    for i, epoch in enumerate(candidates):
        top.annotate(f"candidate {i + 1}\nMJD {epoch:.1f}", (epoch, 1.0),
                     xycoords=("data", "axes fraction"), xytext=(0, 3),
                     textcoords="offset points", ha="center", va="bottom", fontsize=7,
                     color="C3", gid="candidate_label")
    if title:
        figure.suptitle(title)
    return finish(figure, path)


# --------------------------------------------------------------------------- noise

def _plain_number(value, _position=None) -> str:
    """Tick text without a multiplier: 0.2, 5, 1000, 1e+05 only beyond 10^4."""
    if value == 0 or not np.isfinite(value):
        return ""
    if 1e-3 <= abs(value) < 1e4:
        return f"{value:g}"
    exponent = int(np.floor(np.log10(abs(value)) + 1e-9))
    mantissa = value / 10.0 ** exponent
    return (f"$10^{{{exponent}}}$" if abs(mantissa - 1.0) < 1e-6
            else f"${mantissa:g}\\times10^{{{exponent}}}$")


def _readable_log_ticks(axis) -> None:
    """Log-axis ticks at 1, 2, 5 x 10^k when the axis spans under three decades, else
    at the decades only; plain numbers, no minor labels (the default minor labels
    of a log axis run into each other)."""
    low, high = sorted(axis.get_view_interval())
    if not (low > 0 and np.isfinite(high)):
        return
    decades = np.log10(high / low)
    subs = (1.0, 2.0, 5.0) if decades < 3 else (1.0,)
    axis.set_major_locator(LogLocator(base=10.0, subs=subs))
    axis.set_major_formatter(FuncFormatter(_plain_number))
    axis.set_minor_formatter(NullFormatter())
    if decades < 0.5:                 # too narrow for 1-2-5: a few evenly spread ticks
        axis.set_major_locator(FixedLocator(np.geomspace(low, high, 4)[1:-1]))
        axis.set_major_formatter(FuncFormatter(lambda v, _p=None: f"{v:.3g}"))


def plot_power_spectrum(freqs_per_yr, power, model_power=None, path=None, *,
                        power_label: str = "power spectral density (µs² yr)",
                        title: str | None = None, figsize=(7.0, 5.0),
                        dpi: float = 100):
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
    for axis in (ax.xaxis, ax.yaxis):
        _readable_log_ticks(axis)
    ax.set_xlabel("frequency (1/yr)")
    ax.set_ylabel(power_label)
    ax.legend(fontsize=8)
    if title:
        ax.set_title(title)
    return finish(figure, path)
