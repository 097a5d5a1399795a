"""profile.png: the folded pulse profile of photon events over two cycles.

Counts per phase bin with Poisson (sqrt N) error bars, the Fourier series
with the H-test's harmonics, the unpulsed level with its 1-sigma band, and
the off-pulse window it was measured in (shaded), drawn on an Agg figure
(timingkit.outputs.plotting: no pyplot); the key sits below the axes, as on every
figure, so it hides no peak.
"""

from __future__ import annotations

import numpy as np

from timingkit.outputs.figure_basics import (add_footnotes as _add_footnotes, finish as _finish,
                                             new_figure, set_key)


def plot_event_profile(report: dict, smooth_phase=None, smooth_counts=None, path=None,
                       dpi: float = 100):
    """The figure of an events_report (dict); returns the Figure."""
    profile = report["profile"]
    bins = profile["bins"]
    counts = np.asarray(profile["counts"], dtype=float)
    centres = np.asarray(profile["phase_bin_centres"])
    level = profile["unpulsed_level_counts_per_bin"]
    level_error = profile["unpulsed_level_uncertainty"]
    figure = new_figure((8.0, 4.8), dpi)
    ax = figure.subplots()
    windows = report["pulsed_fraction"]["off_pulse_window"]
    for cycle in (0, 1):
        for i, (start, end) in enumerate(windows):
            ax.axvspan(start + cycle, end + cycle, color="0.92", zorder=0, linewidth=0,
                       label="off-pulse window" if cycle == 0 and i == 0 else None)
    two = np.concatenate([centres, centres + 1.0])
    doubled = np.concatenate([counts, counts])
    ax.step(np.concatenate([[0.0], two + 0.5 / bins]), np.concatenate([[doubled[0]], doubled]),
            where="pre", color="tab:blue", linewidth=1.0, label="events per bin")
    ax.errorbar(two, doubled, yerr=np.sqrt(np.maximum(doubled, 1.0)), fmt="none",
                ecolor="tab:blue", elinewidth=0.9, label="±√N")
    if smooth_phase is not None:
        phase = np.concatenate([smooth_phase, smooth_phase + 1.0])
        ax.plot(phase, np.concatenate([smooth_counts, smooth_counts]), color="tab:orange",
                linewidth=1.2, label=f"Fourier series ({_harmonics(profile['smooth_harmonics'])}, "
                                     "as the H-test)")
    ax.axhline(level, color="k", linestyle="--", linewidth=1.0, label="unpulsed level")
    ax.axhspan(level - level_error, level + level_error, color="k", alpha=0.12, linewidth=0)
    ax.set_xlim(0.0, 2.0)
    ax.set_xlabel("pulse phase (cycles; two cycles shown)")
    ax.set_ylabel(f"events per bin ({bins} bins per cycle)")
    h = report["h_test"]
    pf = report["pulsed_fraction"]
    fap = h["false_alarm_probability"]
    fap_text = f"FAP < {fap:.0g}" if h["false_alarm_probability_upper_limit"] else \
        f"FAP {fap:.1g}"
    ax.set_title(f"{report['source']}: {report['events']:,} events; H = {h['value']:.1f} "
                 f"({_harmonics(h['harmonics'])}, {fap_text}); pulsed fraction "
                 f"{pf['value']:.3f} ± {pf['uncertainty']:.3f}", fontsize=9.5)
    set_key(figure, list(zip(*ax.get_legend_handles_labels())))   # below: hides no peak
    settings = report["settings"]
    notes = [(f"observer: {settings['observer']['observer']}; ephemeris: "
              f"{settings['ephemeris']}; clock: {settings['clock']}", "0.3", "settings")]
    for caution in report.get("cautions", []) + report.get("warnings", []):
        notes.append((caution, "tab:red", "caution"))
    _add_footnotes(figure, notes)
    return _finish(figure, path)


def _harmonics(count: int) -> str:
    return f"{count} harmonic" + ("s" if count != 1 else "")
