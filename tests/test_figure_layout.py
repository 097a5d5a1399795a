"""Figure layout as a reader sees it, from the rendered figures: nothing covers the data,
units chosen by size without offset multipliers, labelled glitch candidates, tick and
label texts that do not collide (text bounding boxes compared)."""

import numpy as np
import pytest

from test_plotting import glitch_inputs, make_table, panels
from timingkit.outputs import plotting
from timingkit.outputs.residual_table import ResidualTable


@pytest.mark.parametrize("color_by", ["site", "freq", "backend"])
def test_statistics_and_key_lie_outside_the_data_area(color_by):
    # The first and last points sit at the panel edges; nothing may cover them: the
    # statistics line and the colour key are outside every axes' data area.
    post, pre = make_table(n=60), make_table(residual_scale=20.0, n=60)
    figure = plotting.plot_residuals(post, pre, color_by=color_by, frequency_hz=18.47,
                                     title="demo", glitch_epochs_mjd=[59000.0])
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    areas = [ax.get_window_extent(renderer) for ax in panels(figure)]
    stats = [t for ax in panels(figure) for t in ax.texts if t.get_gid() == "residual_stats"]
    assert len(stats) == 2
    covering = [t.get_window_extent(renderer) for t in stats]
    covering += [legend.get_window_extent(renderer) for legend in figure.legends]
    assert len(figure.legends) == 1 and not any(ax.get_legend() for ax in panels(figure))
    for box in covering:
        for area in areas:
            assert not box.overlaps(area), (box, area)


@pytest.mark.parametrize("scale_us, unit", [(0.05, "ns"), (3.0, "µs"), (8.161e4, "ms"),
                                             (2.5e7, "s")])
def test_residual_axis_unit_follows_the_size(scale_us, unit):
    table = make_table(residual_scale=scale_us)
    table = ResidualTable.from_columns(
        list(table.mjd_text), table.site, table.freq_mhz, table.err_us * scale_us / 3.0,
        table.residual_us, table.residual_phase, table.pulse_number, {})
    figure = plotting.plot_residuals(table, frequency_hz=18.47)
    figure.canvas.draw()
    ax = panels(figure)[0]
    assert ax.get_ylabel() == f"residual ({unit})"
    labels = [t.get_text() for t in ax.get_yticklabels() if t.get_text()]
    assert labels and not any("e" in lab or "×" in lab for lab in labels)
    assert ax.yaxis.get_offset_text().get_text() == ""
    assert ax.child_axes[0].yaxis.get_offset_text().get_text() == ""
    # the drawn values are the residuals in that unit
    factor = {"ns": 1e-3, "µs": 1.0, "ms": 1e3, "s": 1e6}[unit]
    ys = np.concatenate([c.lines[0].get_ydata() for c in ax.containers])
    assert np.allclose(np.sort(ys), np.sort(table.residual_us / factor))
    [stats] = [t for t in ax.texts if t.get_gid() == "residual_stats"]
    assert f" {unit}" in stats.get_text()


def test_glitch_figure_units_error_bars_and_labelled_candidates():
    # As the glitch search draws it: offsets from the fitted spin-down (reference 0),
    # residuals of hundreds of ms, frequency derivatives near -1e-13 Hz/s.
    inputs = glitch_inputs()
    inputs["residual_us"] = np.linspace(-2e5, 4e5, 20)
    inputs["track_freq_hz"] = inputs["track_freq_hz"] - inputs["track_freq_hz"][0]
    inputs["track_derivative"] = -1e-13 + np.linspace(0, 3e-16, 7)
    figure = plotting.plot_glitch_search(**inputs, frequency_reference_hz=0.0,
                                         offset_name="frequency − fitted spin-down")
    figure.canvas.draw()
    top, middle, bottom = figure.axes
    assert "(ms)" in top.get_ylabel()
    for ax in (top, middle, bottom):
        assert ax.yaxis.get_offset_text().get_text() == ""
        assert not any("e" in t.get_text() for t in ax.get_yticklabels())
    assert "10⁻¹⁵ Hz/s" in bottom.get_ylabel()
    # no "reference = 0 Hz"; the axis says what the offsets are relative to
    assert not [t for t in middle.texts if t.get_gid() == "frequency_reference"]
    assert middle.get_ylabel() == "frequency − fitted spin-down (nHz)"
    # 1-sigma error bars on the frequency track, in the axis unit (2e-9 Hz = 2 nHz)
    [track] = middle.containers
    assert track.has_yerr
    segments = track.lines[2][0].get_segments()
    assert np.allclose([seg[1][1] - seg[0][1] for seg in segments], 4.0)
    # each candidate line is labelled with its number and epoch, above the top panel
    labels = [t for t in top.texts if t.get_gid() == "candidate_label"]
    assert [t.get_text() for t in labels] == ["candidate 1\nMJD 59300.0", "candidate 2\nMJD 59450.5"]
    area = top.get_window_extent()
    assert all(t.get_window_extent().y0 >= area.y1 - 1 for t in labels)


@pytest.mark.parametrize("low, high", [(0.14, 1.2), (0.23, 7.1), (0.05, 40.0), (0.3, 0.9),
                                       (1.0, 300.0)])
def test_power_spectrum_tick_labels_do_not_collide(low, high):
    from timingkit.outputs.figure_basics import overlapping_pairs
    freqs = np.geomspace(low, high, 25)
    figure = plotting.plot_power_spectrum(freqs, 1e3 * freqs ** -3.5 + 0.05,
                                          1e3 * freqs ** -3.5 + 0.05)
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    ax = figure.axes[0]
    for axis in (ax.xaxis, ax.yaxis):
        shown = [t for t in axis.get_ticklabels(which="both") if t.get_visible() and t.get_text()]
        ticks = axis.get_majorticklocs()
        lo, hi = sorted(axis.get_view_interval())
        assert sum(lo <= v <= hi for v in ticks) >= 2          # at least two labelled ticks
        boxes = [t.get_window_extent(renderer) for t in shown]
        assert overlapping_pairs(boxes) == [], [t.get_text() for t in shown]


def test_ppdot_labels_do_not_overlap():
    from timingkit.outputs.figure_basics import overlapping_pairs
    rng = np.random.default_rng(11)
    p = np.r_[rng.uniform(0.1, 0.2, 12), rng.uniform(0.002, 0.004, 8), [0.5, 0.51, 1.2]]
    pdot = np.r_[10 ** rng.uniform(-15, -14.5, 12), 10 ** rng.uniform(-20, -19.8, 8),
                 [1e-15, 1.05e-15, 4e-14]]
    names = [f"demo-src-{i:02d}" for i in range(len(p))]
    figure = plotting.plot_ppdot(p, pdot, names)
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    ax = figure.axes[0]
    from matplotlib.text import Text
    labels = [t for t in ax.texts if t.get_gid() == "source_label"]
    lines = [t for t in ax.texts if (t.get_gid() or "").endswith("_label") and t not in labels]
    assert len(lines) > 5
    boxes = [Text.get_window_extent(t, renderer) for t in labels + lines]
    assert overlapping_pairs(boxes) == []
    # every source is labelled, or named in the note
    unlabelled = [t for t in figure.texts if t.get_gid() == "unlabelled_sources_note"]
    shown = {t.get_text() for t in labels}
    assert shown == set(names) or unlabelled
    assert len(shown) >= 15
    area = ax.get_window_extent(renderer)
    assert all(area.x0 <= b.x0 and b.x1 <= area.x1 and area.y0 <= b.y0 and b.y1 <= area.y1
               for b in boxes[:len(labels)])


def _event_report():
    """A small events_report as timingkit events writes it (two long footnotes)."""
    centres = (np.arange(16) + 0.5) / 16
    return {"source": "demo", "events": 1000,
            "profile": {"bins": 16, "counts": list(60 + 40 * np.exp(-((centres - 0.3) / 0.05) ** 2)),
                        "phase_bin_centres": list(centres), "unpulsed_level_counts_per_bin": 60.0,
                        "unpulsed_level_uncertainty": 2.0, "smooth_harmonics": 3},
            "pulsed_fraction": {"value": 0.2, "uncertainty": 0.02,
                                "off_pulse_window": [[0.6, 0.9]]},
            "h_test": {"value": 50.0, "harmonics": 3, "false_alarm_probability": 1e-5,
                       "false_alarm_probability_upper_limit": True},
            "settings": {"observer": {"observer": "site obsgeo"}, "ephemeris": "builtin DE421",
                         "clock": "no observatory clock corrections applied " * 3},
            "cautions": ["a caution long enough to wrap onto a second line " * 4], "warnings": []}


@pytest.mark.parametrize("kind", ["frequency", "events"])
def test_the_key_sits_between_the_axes_and_the_footnotes(kind):
    """Footnotes (infinite-frequency TOAs, an event list's observer and cautions) and the
    colour key share the bottom edge: neither may cover the other nor the x label."""
    from timingkit.outputs.profile_figure import plot_event_profile
    if kind == "frequency":
        table = make_table(n=40)
        freq = np.array(table.freq_mhz, dtype=float)
        freq[:5] = np.inf
        table = ResidualTable.from_columns(list(table.mjd_text), table.site, freq, table.err_us,
                                           table.residual_us, table.residual_phase,
                                           table.pulse_number, {})
        figure = plotting.plot_residuals_vs_frequency(table)
    else:
        figure = plot_event_profile(_event_report())
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    [legend] = figure.legends
    key = legend.get_window_extent(renderer)
    notes = [text.get_window_extent(renderer) for text in figure.texts if text.get_text()]
    ax = figure.axes[0]
    label = ax.xaxis.label.get_window_extent(renderer)
    ticks = [t.get_window_extent(renderer) for t in ax.get_xticklabels() if t.get_text()]
    assert notes
    for box in notes + [label, *ticks, ax.get_window_extent(renderer)]:
        assert not key.overlaps(box), (key, box)
    assert all(key.y0 > note.y1 for note in notes)              # the key above the notes
