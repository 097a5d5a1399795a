"""Matplotlib figures of residuals: against MJD (pre- and post-fit), day of year,
orbital phase and observing frequency.

Every function builds its own ``matplotlib.figure.Figure`` on an Agg canvas (see
:mod:`timingkit.outputs.figure_basics`), returns it, and, when ``path`` is given, saves
it there. Residuals are drawn in the unit their size calls for (ns, µs, ms or s, named
on the axis). The statistics line sits above each panel and the colour key below the
x axis, so neither hides a point. TOAs left out of the fit are hollow grey circles (not in
the statistics). Colour by site, backend, any TOA flag, or observing
band (``freq``: one colour per band of nearby frequencies). Above
:data:`LARGE_TOAS` TOAs a panel is drawn as a density image (each pixel in the colour
of the category with most TOAs there, darker where there are more), without error bars:
a million TOAs take about a second instead of a minute.

The P–Pdot diagram, the glitch-search figure and the power spectrum live in
:mod:`timingkit.outputs.diagnostic_figures` and are offered here too.
"""

from __future__ import annotations

import erfa
import numpy as np
from matplotlib import colormaps
from matplotlib.lines import Line2D

from timingkit.formats.errors import InputError, excerpt
from timingkit.outputs.figure_basics import (add_footnotes, add_key_entry, finish, new_figure,
                                             power_of_ten_unit, save_figure, set_key, time_unit)
from timingkit.outputs.residual_table import ResidualTable
from timingkit.outputs.diagnostic_figures import (  # noqa: F401  (offered here too)
    plot_glitch_search, plot_power_spectrum, plot_ppdot)

__all__ = ["plot_residuals", "plot_residuals_vs_day_of_year", "plot_residuals_vs_orbital_phase",
           "plot_residuals_vs_frequency", "plot_ppdot", "plot_glitch_search",
           "plot_power_spectrum", "save_figure", "new_figure", "color_choices", "day_of_year",
           "phase_axis_functions", "frequency_bands", "add_key_entry"]

LARGE_TOAS = 20_000          # above this, a panel is a density image without error bars
DENSITY_BINS = (600, 250)    # pixels of the density image (x, y)
BAND_GAP_RATIO = 1.15        # frequencies further apart than 15 % are different bands
INFINITE_FREQUENCY_LABEL = "infinite frequency (no dispersion)"
GLITCH_LABEL = "glitch epoch (model)"
LEFT_OUT_LABEL = "left out of the fit"


def phase_axis_functions(frequency_hz: float, us_per_unit: float = 1.0,
                         cycles_factor: float = 1.0):
    """(residual unit -> cycles, cycles -> residual unit) for spin frequency
    ``frequency_hz``: cycles = value * us_per_unit * 1e-6 * frequency_hz, shown times
    ``cycles_factor`` (µs by default)."""
    frequency_hz = float(frequency_hz)
    if not (np.isfinite(frequency_hz) and frequency_hz > 0):
        raise InputError(f"spin frequency for the phase axis must be > 0 Hz, got {frequency_hz}",
                         field="frequency_hz")
    scale = us_per_unit * 1e-6 * frequency_hz * cycles_factor

    def to_cycles(value):
        return np.asarray(value, dtype=float) * scale

    def from_cycles(cycles):
        return np.asarray(cycles, dtype=float) / scale

    return to_cycles, from_cycles


def day_of_year(mjd) -> np.ndarray:
    """Day of the (Gregorian) year from an MJD: 1.0 at 1 January 0h, fractional.

    The time scale of ``mjd`` is taken as is (UTC/TT/TDB differ by about a
    minute, irrelevant for a seasonal plot). Calendar via erfa.jd2cal/cal2jd.
    """
    mjd = np.atleast_1d(np.asarray(mjd, dtype=float))
    year, _month, _day, _fraction = erfa.jd2cal(2400000.5, mjd)
    _zero, mjd_jan1 = erfa.cal2jd(year, np.ones_like(year), np.ones_like(year))
    return mjd - mjd_jan1 + 1.0


# --------------------------------------------------------------------------- colours

def color_choices(table: ResidualTable) -> list[str]:
    """Legal ``color_by`` values for ``table``: site, backend (if present), freq, other flags."""
    choices = ["site"]
    if "backend" in table.flags:
        choices.append("backend")
    choices.append("freq")
    choices += [name for name in table.flags if name != "backend"]
    return choices


def frequency_bands(freq_mhz) -> tuple[np.ndarray, list[str]]:
    """(band label per TOA, band labels low to high) for observing frequencies (MHz).

    Sorted distinct frequencies are cut into bands wherever one is more than 15 %
    above the previous; a band is named by its frequency ("1400 MHz") or range
    ("1380–1420 MHz"). Infinite frequencies form their own band, named last."""
    freq = np.asarray(freq_mhz, dtype=float)
    labels = np.full(freq.shape, INFINITE_FREQUENCY_LABEL, dtype=object)
    finite = np.isfinite(freq)
    names = []
    values = np.unique(freq[finite])
    if values.size:
        starts = np.r_[0, np.flatnonzero(values[1:] > BAND_GAP_RATIO * values[:-1]) + 1]
        ends = np.r_[starts[1:], values.size]
        for a, b in zip(starts, ends):
            low, high = values[a], values[b - 1]
            name = f"{low:g} MHz" if low == high else f"{low:g}–{high:g} MHz"
            labels[finite & (freq >= low) & (freq <= high)] = name
            names.append(name)
    if not np.all(finite):
        names.append(INFINITE_FREQUENCY_LABEL)
    return labels, names


def _categories_of(table: ResidualTable, color_by: str) -> np.ndarray:
    if color_by == "freq":
        return frequency_bands(table.freq_mhz)[0]
    return np.asarray(table.site if color_by == "site" else table.flags[color_by], dtype=object)


def _color_style(tables: list[ResidualTable], color_by: str) -> dict:
    """How to colour the points, shared by all panels of one figure."""
    legal = color_choices(tables[0])
    for table in tables[1:]:
        legal = [c for c in legal if c in color_choices(table)]
    if color_by not in legal:
        raise InputError(f"cannot colour by {excerpt(color_by, 30)}: the residuals have no "
                         f"such column; choose one of {', '.join(legal)}", field="color_by",
                         quoted=(color_by,))
    if color_by == "freq":
        _, categories = frequency_bands(np.concatenate([t.freq_mhz for t in tables]))
        title = "observing band"
    else:
        categories = sorted(set().union(*(set(_categories_of(t, color_by)) for t in tables)))
        title = color_by
    palette = colormaps["tab10" if len(categories) <= 10 else "tab20"].colors
    markers = "os^Dv<>ph*"
    mapping = {}
    for i, category in enumerate(categories):
        color = "k" if category == INFINITE_FREQUENCY_LABEL else palette[i % len(palette)]
        marker = "x" if category == INFINITE_FREQUENCY_LABEL else \
            markers[(i // len(palette)) % len(markers)]
        mapping[category] = (color, marker)
    return {"mapping": mapping, "color_by": color_by, "title": title}


# --------------------------------------------------------------------------- panels

def _stats_text(table: ResidualTable, us_per_unit: float, unit: str) -> str:
    text = (f"N = {len(table)} TOAs   rms = {table.rms_us() / us_per_unit:.4g} {unit}   "
            f"weighted rms = {table.weighted_rms_us() / us_per_unit:.4g} {unit}")
    if len(table) > LARGE_TOAS:
        text += (f"   (density; error bars not drawn, median σ = "
                 f"{np.median(table.err_us) / us_per_unit:.3g} {unit})")
    return text


def _draw_points(ax, x, y, err, categories, style) -> None:
    for category, (color, marker) in style["mapping"].items():
        mask = categories == category
        if np.any(mask):
            ax.errorbar(x[mask], y[mask], yerr=err[mask], fmt=marker, markersize=3.5,
                        color=color, ecolor=color, elinewidth=0.8, capsize=0,
                        linestyle="none", label=category)


def _draw_density(ax, x, y, categories, style, bins=DENSITY_BINS, x_pad: float = 0.0) -> None:
    """Density image: each pixel in the colour of its most numerous category, more
    opaque where there are more TOAs (log scale); single TOAs stay visible."""
    from matplotlib.colors import to_rgb
    good = np.isfinite(x) & np.isfinite(y)
    x, y, categories = x[good], y[good], categories[good]
    if x.size == 0:
        return
    x_width = float(x.max()) - float(x.min())
    x_range = (float(x.min()) - x_pad * x_width,
               float(x.max()) + x_pad * x_width + 1e-9 * max(1.0, abs(float(x.max()))))
    y_pad = 0.02 * (float(y.max()) - float(y.min()) or 1.0)
    y_range = (float(y.min()) - y_pad, float(y.max()) + y_pad)
    names = list(style["mapping"])
    counts = np.zeros((len(names),) + tuple(bins))
    for k, name in enumerate(names):
        mask = categories == name
        if np.any(mask):
            counts[k] = np.histogram2d(x[mask], y[mask], bins=bins,
                                       range=(x_range, y_range))[0]
    total = counts.sum(axis=0)
    colors = np.array([to_rgb(style["mapping"][n][0]) for n in names])
    rgba = np.zeros(tuple(bins) + (4,))
    rgba[..., :3] = colors[np.argmax(counts, axis=0)]
    filled = total > 0
    rgba[..., 3] = np.where(filled, 0.35 + 0.65 * np.log1p(total) / np.log1p(total.max()), 0.0)
    ax.imshow(np.transpose(rgba, (1, 0, 2)), origin="lower", aspect="auto",
              interpolation="nearest", extent=(*x_range, *y_range), gid="residual_density")


def _draw_residual_panel(ax, x, table: ResidualTable, style: dict,
                         density: dict | None = None) -> tuple[float, str]:
    """Residuals with 1σ error bars against ``x`` in a unit chosen by their size;
    returns (µs per unit, unit)."""
    us_per_unit, unit = time_unit(np.r_[np.abs(table.residual_us) + table.err_us])
    ax.axhline(0.0, color="0.55", linewidth=0.6, zorder=0)
    x = np.asarray(x, dtype=float)
    fitted = table.fitted_mask()
    if not fitted.all():      # left-out TOAs: hollow grey circles, not in the statistics
        ax.errorbar(x[~fitted], table.residual_us[~fitted] / us_per_unit,
                    yerr=table.err_us[~fitted] / us_per_unit, fmt="o", markersize=4, mfc="none",
                    color="0.6", elinewidth=0.6, capsize=0, linestyle="none",
                    label=LEFT_OUT_LABEL, zorder=1, rasterized=int(np.sum(~fitted)) > LARGE_TOAS)
        x, table = x[fitted], table.subset(fitted)
    categories = _categories_of(table, style["color_by"])
    y, err = table.residual_us / us_per_unit, table.err_us / us_per_unit
    if len(table) > LARGE_TOAS:
        _draw_density(ax, x, y, categories, style, **(density or {}))
    else:
        _draw_points(ax, x, y, err, categories, style)
    ax.text(1.0, 1.015, _stats_text(table, us_per_unit, unit), transform=ax.transAxes,
            ha="right", va="bottom", fontsize=7.5, gid="residual_stats")
    ax.set_ylabel(f"residual ({unit})")
    ax.ticklabel_format(axis="y", useOffset=False, style="plain")
    ax.residual_us_per_unit = us_per_unit
    return us_per_unit, unit


def _add_phase_axis(ax, frequency_hz, us_per_unit: float) -> None:
    low, high = ax.get_ylim()
    biggest = max(abs(low), abs(high)) * us_per_unit * 1e-6 * float(frequency_hz)
    factor, unit = power_of_ten_unit(biggest, "pulse cycles")
    forward, inverse = phase_axis_functions(frequency_hz, us_per_unit, factor)
    secondary = ax.secondary_yaxis("right", functions=(forward, inverse))
    secondary.set_ylabel(f"residual ({unit})")
    secondary.cycles_factor = factor


def _residual_figure(tables_and_titles, x_of, xlabel, color_by, title, frequency_hz,
                     figsize, dpi, glitch_epochs_mjd=(), notes=(), density=None):
    tables = [t for t, _ in tables_and_titles]
    style = _color_style(tables, color_by)
    if figsize is None:
        figsize = (8.0, 4.8) if len(tables) == 1 else (8.0, 7.8)
    figure = new_figure(figsize, dpi)
    axes = list(np.atleast_1d(figure.subplots(len(tables), 1, sharex=True, squeeze=False)[:, 0]))
    for ax, (table, panel_title) in zip(axes, tables_and_titles):
        us_per_unit, _ = _draw_residual_panel(ax, x_of(table), table, style, density)
        if panel_title:
            ax.set_title(panel_title, fontsize=10, loc="left")
        for i, epoch in enumerate(glitch_epochs_mjd):
            ax.axvline(float(epoch), color="C3", linestyle="--", linewidth=0.9, zorder=1,
                       gid="glitch_epoch")
        if frequency_hz is not None:
            _add_phase_axis(ax, frequency_hz, us_per_unit)
    axes[-1].set_xlabel(xlabel)
    entries = [(Line2D([], [], color=color, marker=marker, linestyle="none", markersize=5),
                str(category)) for category, (color, marker) in style["mapping"].items()]
    if any(c.get_label() == LEFT_OUT_LABEL for ax in axes for c in ax.containers):
        entries.append((Line2D([], [], color="0.6", marker="o", mfc="none", linestyle="none",
                               markersize=5), LEFT_OUT_LABEL))
    if len(glitch_epochs_mjd):
        entries.append((Line2D([], [], color="C3", linestyle="--", linewidth=0.9), GLITCH_LABEL))
    set_key(figure, entries, style["title"])
    if notes:
        add_footnotes(figure, [(n, "0.3", "residual_note") for n in notes])
    if title:
        figure.suptitle(title)
    return figure


def plot_residuals(postfit: ResidualTable, prefit: ResidualTable | None = None,
                   color_by: str = "site", title: str | None = None,
                   frequency_hz: float | None = None, path=None, *,
                   glitch_epochs_mjd=(), figsize=None, dpi: float = 100,
                   prefit_label: str = "pre-fit"):
    """Residuals against MJD with 1σ error bars.

    With ``prefit``: two stacked panels (pre-fit above, titled ``prefit_label``,
    post-fit below, shared MJD axis). ``color_by``: 'site', 'backend', 'freq' (observing bands) or any
    TOA flag name; an unknown name raises InputError listing the legal ones.
    ``frequency_hz``: adds a right-hand axis in pulse cycles to every panel.
    ``glitch_epochs_mjd``: dashed vertical lines (gid ``glitch_epoch``) at the
    model's glitches. Each panel carries N, rms and weighted rms (about zero,
    weights 1/err²) above it.
    """
    panels = [(postfit, "post-fit" if prefit is not None else None)]
    if prefit is not None:
        panels.insert(0, (prefit, prefit_label))
    epochs = [float(e) for e in glitch_epochs_mjd]
    figure = _residual_figure(panels, lambda t: t.mjd, "MJD (days)", color_by, title,
                              frequency_hz, figsize, dpi, glitch_epochs_mjd=epochs)
    for ax in figure.axes:
        if hasattr(ax, "residual_us_per_unit"):
            ax.ticklabel_format(axis="x", useOffset=False, style="plain")
    return finish(figure, path)


def plot_residuals_vs_orbital_phase(table: ResidualTable, orbital_phase, path=None, *,
                                    color_by: str = "site", title: str | None = None,
                                    frequency_hz: float | None = None, figsize=None,
                                    dpi: float = 100):
    """Residuals against orbital phase (cycles, as given, wrapped into [0, 1))."""
    orbital_phase = np.atleast_1d(np.asarray(orbital_phase, dtype=float))
    if orbital_phase.shape != (len(table),):
        raise ValueError(f"orbital_phase has {orbital_phase.size} values, table has {len(table)}")
    wrapped = np.mod(orbital_phase, 1.0)
    figure = _residual_figure([(table, None)], lambda t: wrapped, "orbital phase (cycles)",
                              color_by, title, frequency_hz, figsize, dpi)
    figure.axes[0].set_xlim(0.0, 1.0)
    return finish(figure, path)


def plot_residuals_vs_day_of_year(table: ResidualTable, path=None, *, color_by: str = "site",
                                  title: str | None = None, frequency_hz: float | None = None,
                                  figsize=None, dpi: float = 100):
    """Residuals against day of year (annual signatures: position, parallax errors)."""
    figure = _residual_figure([(table, None)], lambda t: day_of_year(t.mjd),
                              "day of year (1 = 1 January 0h)", color_by, title,
                              frequency_hz, figsize, dpi)
    figure.axes[0].set_xlim(1.0, 367.0)
    return finish(figure, path)


def plot_residuals_vs_frequency(table: ResidualTable, path=None, *, color_by: str = "site",
                                title: str | None = None, frequency_hz: float | None = None,
                                figsize=None, dpi: float = 100):
    """Residuals against observing frequency (MHz; a logarithmic axis when the
    frequencies span more than a factor of 2, unless drawn as a density image): a
    dispersion-measure error shows as
    a trend with 1/f². TOAs at infinite frequency cannot be placed; a note counts them."""
    freq = np.asarray(table.freq_mhz, dtype=float)
    finite = np.isfinite(freq)
    notes = []
    if not np.all(finite):
        notes.append(f"{int(np.sum(~finite))} TOA(s) at infinite frequency (no dispersion) "
                     "are not drawn.")
    shown = table.subset(finite) if not np.all(finite) and np.any(finite) else table
    figure = _residual_figure([(shown, None)], lambda t: np.where(np.isfinite(t.freq_mhz),
                                                                  t.freq_mhz, np.nan),
                              "observing frequency (MHz)", color_by, title, frequency_hz,
                              figsize, dpi, notes=notes,
                              density={"bins": (150, DENSITY_BINS[1]), "x_pad": 0.04})
    ax = figure.axes[0]
    # (a density image, drawn above LARGE_TOAS, needs a linear axis)
    if (np.any(finite) and freq[finite].max() > 2.0 * freq[finite].min()
            and len(shown) <= LARGE_TOAS):
        from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator
        ax.set_xscale("log")
        # ticks at the bands' middles (geometric), which the default log ticks may miss
        labels, names = frequency_bands(freq[finite])
        centres = [float(np.sqrt(freq[finite][labels == n].min() * freq[finite][labels == n].max()))
                   for n in names if n != INFINITE_FREQUENCY_LABEL]
        ax.xaxis.set_major_locator(FixedLocator(centres))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _p=None: f"{v:.4g}"))
        ax.xaxis.set_minor_locator(NullLocator())
    return finish(figure, path)
