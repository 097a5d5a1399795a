"""Figures: files readable at the right size, panel structure, axis scales, P–Pdot lines."""

import os
import re
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import matplotlib.colors as mcolors
import numpy as np
import pytest
from astropy.time import Time
from matplotlib.image import imread
from PIL import Image

from timingkit.outputs import plotting
from timingkit.formats.errors import InputError
from timingkit.outputs.residual_table import ResidualTable

JULIAN_YEAR_S = 3.15576e7   # IAU Julian year, 365.25 d of 86400 s


def make_table(residual_scale=1.0, flags=True, seed=3, n=14):
    """Invented demo residuals at invented sites."""
    rng = np.random.default_rng(seed)
    mjd = np.sort(rng.uniform(58800.0, 59500.0, n))
    sites = np.array(["desert-dish", "lake-array", "ridge-pair"])[np.arange(n) % 3]
    freq = np.array([820.0, 1400.0, 2300.0, np.inf])[np.arange(n) % 4]
    err = rng.uniform(0.5, 2.0, n)
    residual = residual_scale * rng.normal(0.0, 1.0, n)
    extra = {}
    if flags:
        extra = {"backend": np.array(["wide-a", "wide-b"])[np.arange(n) % 2],
                 "receiver": np.array(["low", "high"])[(np.arange(n) // 7) % 2]}
    return ResidualTable.from_columns(["%.13f" % m for m in mjd], sites, freq, err, residual,
                                      residual * 1e-6 * 18.47, np.arange(n) * 1000, extra)


def panels(figure):
    return [ax for ax in figure.axes if ax.get_label() != "<colorbar>"]


def check_png(path, width_px, height_px):
    assert path.stat().st_size > 1000
    with Image.open(path) as image:
        assert image.format == "PNG"
        assert image.size == (width_px, height_px)
    pixels = imread(path)                     # matplotlib reads it back too
    assert pixels.shape[:2] == (height_px, width_px)
    assert pixels.std() > 0.01                # not a blank canvas


def check_pdf(path, width_in, height_in):
    data = path.read_bytes()
    assert data.startswith(b"%PDF-") and b"%%EOF" in data[-64:]
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert box is not None
    # PDF page size in points (1/72 inch).
    assert float(box.group(1)) == pytest.approx(72 * width_in)
    assert float(box.group(2)) == pytest.approx(72 * height_in)


# --------------------------------------------------------------------------- files

def test_every_plot_writes_png_and_pdf(tmp_path):
    post, pre = make_table(), make_table(residual_scale=20.0)
    rng = np.random.default_rng(0)
    track_mjd = np.linspace(58800, 59500, 8)
    freqs_per_yr = np.logspace(-1, 1, 12)
    makers = {
        "residuals": lambda p: plotting.plot_residuals(post, pre, frequency_hz=18.47, path=p),
        "orbital": lambda p: plotting.plot_residuals_vs_orbital_phase(
            post, rng.uniform(0, 1, len(post)), path=p),
        "doy": lambda p: plotting.plot_residuals_vs_day_of_year(post, path=p),
        "ppdot": lambda p: plotting.plot_ppdot([0.033, 1.0], [4e-13, 1e-15],
                                               ["demo-young", "demo-one"], path=p),
        "glitch": lambda p: plotting.plot_glitch_search(
            post.mjd, post.residual_us, post.err_us, track_mjd, 18.47 + 1e-8 * track_mjd,
            np.full(8, 1e-9), np.full(8, -3e-10), np.full(8, 1e-13), [59100.0], path=p),
        "spectrum": lambda p: plotting.plot_power_spectrum(
            freqs_per_yr, freqs_per_yr ** -3.0, freqs_per_yr ** -3.0, path=p),
    }
    for name, make in makers.items():
        png, pdf = tmp_path / f"{name}.png", tmp_path / f"{name}.pdf"
        figure = make(png)
        width_in, height_in = figure.get_size_inches()
        check_png(png, round(width_in * figure.dpi), round(height_in * figure.dpi))
        make(pdf)
        check_pdf(pdf, width_in, height_in)
    # Nothing but the figures themselves is left behind (no temporary files).
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        f"{n}.{s}" for n in makers for s in ("png", "pdf"))


def test_pixel_size_follows_figsize_and_dpi(tmp_path):
    path = tmp_path / "small.png"
    plotting.plot_residuals(make_table(), figsize=(4.0, 3.0), dpi=50, path=path)
    check_png(path, 200, 150)


def test_unknown_suffix_is_input_error_listing_formats(tmp_path):
    figure = plotting.plot_residuals(make_table())
    with pytest.raises(InputError) as info:
        plotting.save_figure(figure, tmp_path / "figure.xyz")
    assert ".png" in str(info.value) and ".pdf" in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_no_pyplot_and_thread_safe(tmp_path):
    # Importing and drawing must not pull in pyplot (global state, GUI backends).
    code = ("import sys, numpy as np; from timingkit.outputs import plotting; "
            "plotting.plot_ppdot([1.0], [1e-15], ['demo-one']); "
            "print('matplotlib.pyplot' in sys.modules)")
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(Path(__file__).parents[1]),
                                                      env.get("PYTHONPATH")]))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=str(tmp_path), env=env, timeout=120)
    assert out.stdout.strip() == "False"
    # Two threads drawing different figures at once both produce valid files.
    tables = [make_table(seed=s) for s in (1, 2, 3, 4)]
    paths = [tmp_path / f"thread{i}.png" for i in range(4)]
    with ThreadPoolExecutor(2) as pool:
        list(pool.map(lambda tp: plotting.plot_residuals(tp[0], path=tp[1]),
                      zip(tables, paths)))
    for path in paths:
        check_png(path, 800, 480)


# --------------------------------------------------------------------------- residual panels

def test_panel_count_with_prefit_and_phase_axis():
    post, pre = make_table(), make_table(residual_scale=20.0)
    figure = plotting.plot_residuals(post, pre, frequency_hz=18.47)
    main = panels(figure)
    assert len(main) == 2
    # One secondary (pulse-cycle) axis on each panel: 2 panels + 2 twins.
    assert [len(ax.child_axes) for ax in main] == [1, 1]
    assert main[0].get_shared_x_axes().joined(main[0], main[1])
    assert main[0].get_title(loc="left") == "pre-fit"
    assert main[1].get_title(loc="left") == "post-fit"
    # Pre-fit panel shows the pre-fit residuals.
    top_y = np.concatenate([c.lines[0].get_ydata() for c in main[0].containers])
    assert np.allclose(np.sort(top_y), np.sort(pre.residual_us))

    assert len(panels(plotting.plot_residuals(post, pre))) == 2
    assert all(not ax.child_axes for ax in panels(plotting.plot_residuals(post, pre)))
    single = plotting.plot_residuals(post, frequency_hz=18.47)
    assert len(panels(single)) == 1 and len(panels(single)[0].child_axes) == 1


def test_axis_labels_have_units():
    figure = plotting.plot_residuals(make_table(), make_table(), frequency_hz=18.47)
    top, bottom = panels(figure)
    assert "µs" in top.get_ylabel() and "µs" in bottom.get_ylabel()
    assert "MJD" in bottom.get_xlabel()
    assert "cycles" in top.child_axes[0].get_ylabel()


def test_phase_axis_conversion_numbers():
    to_cycles, to_us = plotting.phase_axis_functions(18.47)
    # 1 µs at 18.47 Hz is 18.47e-6 cycles; one full turn is 1/18.47 s = 54141.852 µs.
    assert to_cycles(1.0) == pytest.approx(18.47e-6, rel=1e-14, abs=0)
    assert to_us(1.0) == pytest.approx(1e6 / 18.47, rel=1e-14, abs=0)
    assert np.allclose(to_us(to_cycles(np.array([-5.0, 0.0, 123.4]))), [-5.0, 0.0, 123.4],
                       rtol=1e-14, atol=0)
    with pytest.raises(InputError):
        plotting.phase_axis_functions(0.0)


@pytest.mark.parametrize("frequency_hz", [18.47, 700.0])
def test_drawn_secondary_axis_matches_us_to_cycles(frequency_hz):
    figure = plotting.plot_residuals(make_table(), frequency_hz=frequency_hz)
    figure.canvas.draw()
    ax = panels(figure)[0]
    secondary = ax.child_axes[0]
    low_us, high_us = ax.get_ylim()
    assert "µs" in ax.get_ylabel()
    # Secondary axis limits are the primary limits (µs) times 1e-6 * f (cycles), shown
    # in the power of ten named on the axis (a few µs: 10⁻⁶ cycles at 18 Hz, 10⁻³ at 700 Hz),
    # so that the tick labels are plain numbers between 0.01 and 1000.
    factor = secondary.cycles_factor
    expected = {18.47: (1e6, "10⁻⁶ pulse cycles"), 700.0: (1e3, "10⁻³ pulse cycles")}
    assert (factor, secondary.get_ylabel()) == (expected[frequency_hz][0],
                                                f"residual ({expected[frequency_hz][1]})")
    assert np.allclose(secondary.get_ylim(),
                       (low_us * 1e-6 * frequency_hz * factor, high_us * 1e-6 * frequency_hz * factor),
                       rtol=1e-9, atol=0)


def test_color_by_site_categories_are_the_sites():
    table = make_table()
    figure = plotting.plot_residuals(table, color_by="site")
    ax = panels(figure)[0]
    [legend] = figure.legends
    assert {t.get_text() for t in legend.get_texts()} == set(table.site)
    assert legend.get_title().get_text() == "site"
    # One error-bar group per site, each with its own colour, holding that site's points.
    groups = {c.get_label(): c for c in ax.containers}
    assert set(groups) == set(table.site)
    colors = {mcolors.to_hex(c.lines[0].get_color()) for c in groups.values()}
    assert len(colors) == 3
    for site, container in groups.items():
        assert np.allclose(np.sort(container.lines[0].get_ydata()),
                           np.sort(table.residual_us[table.site == site]))


def test_color_by_backend_and_other_flag():
    table = make_table()
    [legend] = plotting.plot_residuals(table, color_by="backend").legends
    assert {t.get_text() for t in legend.get_texts()} == {"wide-a", "wide-b"}
    [legend] = plotting.plot_residuals(table, color_by="receiver").legends
    assert {t.get_text() for t in legend.get_texts()} == {"low", "high"}


def test_categories_shared_between_prefit_and_postfit():
    post = make_table()
    pre = post.subset(post.site != "ridge-pair")
    figure = plotting.plot_residuals(post, pre, color_by="site")
    top, bottom = panels(figure)
    color_top = {c.get_label(): mcolors.to_hex(c.lines[0].get_color()) for c in top.containers}
    color_bottom = {c.get_label(): mcolors.to_hex(c.lines[0].get_color())
                    for c in bottom.containers}
    assert set(color_top) == {"desert-dish", "lake-array"}
    assert all(color_bottom[site] == color for site, color in color_top.items())
    assert {t.get_text() for t in figure.legends[0].get_texts()} == set(post.site)


def test_color_by_freq_gives_one_colour_per_band_and_no_colorbar():
    # 1380/1400/1420 MHz are one band (within 15 %), 820 and 2300 MHz others, and
    # infinite frequency its own: four distinct colours in the key, no colour bar.
    table = make_table(n=40)
    freq = np.array([820.0, 1380.0, 1400.0, 1420.0, 2300.0, np.inf])[np.arange(40) % 6]
    table = ResidualTable.from_columns(
        list(table.mjd_text), table.site, freq, table.err_us, table.residual_us,
        table.residual_phase, table.pulse_number, {})
    figure = plotting.plot_residuals(table, color_by="freq")
    assert not [ax for ax in figure.axes if ax.get_label() == "<colorbar>"]
    assert len(figure.axes) == 1
    [legend] = figure.legends
    names = [t.get_text() for t in legend.get_texts()]
    assert names == ["820 MHz", "1380–1420 MHz", "2300 MHz", "infinite frequency (no dispersion)"]
    assert legend.get_title().get_text() == "observing band"
    ax = panels(figure)[0]
    groups = {c.get_label(): c for c in ax.containers}
    assert set(groups) == set(names)
    colors = {name: mcolors.to_hex(c.lines[0].get_color()) for name, c in groups.items()}
    assert len(set(colors.values())) == 4
    middle = groups["1380–1420 MHz"].lines[0].get_ydata()
    assert np.allclose(np.sort(middle), np.sort(table.residual_us[np.isin(freq, [1380, 1400, 1420])]))
    labels, bands = plotting.frequency_bands([1400.0, 1500.0, 1800.0, 1810.0])
    assert bands == ["1400–1500 MHz", "1800–1810 MHz"] and list(labels[:2]) == [bands[0]] * 2


def test_unknown_color_by_lists_choices():
    with pytest.raises(InputError) as info:
        plotting.plot_residuals(make_table(), color_by="colour")
    message = str(info.value)
    assert info.value.field == "color_by"
    assert "site, backend, freq, receiver" in message
    no_flags = make_table(flags=False)
    with pytest.raises(InputError) as info:
        plotting.plot_residuals(no_flags, color_by="backend")
    assert "site, freq" in str(info.value) and "backend," not in str(info.value)
    assert plotting.color_choices(no_flags) == ["site", "freq"]


def test_stats_box_numbers():
    table = make_table(residual_scale=3.0)
    ax = panels(plotting.plot_residuals(table))[0]
    [box] = [t for t in ax.texts if t.get_gid() == "residual_stats"]
    text = box.get_text()
    n = int(re.search(r"N = (\d+) TOAs", text).group(1))
    rms = float(re.search(r"  rms = ([\d.eE+-]+) µs", text).group(1))
    wrms = float(re.search(r"weighted rms = ([\d.eE+-]+) µs", text).group(1))
    weights = table.err_us ** -2.0
    assert n == len(table)
    assert rms == pytest.approx(np.sqrt(np.mean(table.residual_us ** 2)), rel=1e-3)
    assert wrms == pytest.approx(np.sqrt(np.sum(weights * table.residual_us ** 2)
                                         / np.sum(weights)), rel=1e-3)
    assert wrms != pytest.approx(rms, rel=1e-3)      # the two really differ here


def test_glitch_epochs_of_the_model_are_marked():
    table = make_table()
    figure = plotting.plot_residuals(table, make_table(), glitch_epochs_mjd=[59100.5, 59300.0])
    for ax in panels(figure):
        lines = [ln for ln in ax.lines if ln.get_gid() == "glitch_epoch"]
        assert sorted(ln.get_xdata()[0] for ln in lines) == [59100.5, 59300.0]
    assert "glitch epoch (model)" in [t.get_text() for t in figure.legends[0].get_texts()]
    assert not [ln for ln in panels(plotting.plot_residuals(table))[0].lines
                if ln.get_gid() == "glitch_epoch"]
    # the fit passes the model's glitches: glitch_epochs() reads them from the model
    from timingkit.model import TimingModel
    from timingkit.pipeline.fit_run import glitch_epochs
    model = TimingModel.from_text('name = "demo-one"\n[position]\nra = "05h00m00s"\ndec = "+10d00m00s"\n[spin]\nepoch_mjd = "59000"\n'
                                  'frequency_hz = "10.0"\n[[glitch]]\nepoch_mjd = "59100.5"\n'
                                  'frequency_step_hz = 1e-7\n')
    assert glitch_epochs(model) == [59100.5]


def test_residuals_against_observing_frequency(tmp_path):
    table = make_table(n=24)
    figure = plotting.plot_residuals_vs_frequency(table, tmp_path / "f.png", frequency_hz=18.47)
    ax = panels(figure)[0]
    xs = np.concatenate([c.lines[0].get_xdata() for c in ax.containers])
    finite = np.isfinite(table.freq_mhz)
    assert np.allclose(np.sort(xs), np.sort(table.freq_mhz[finite]))
    assert "observing frequency (MHz)" == ax.get_xlabel() and ax.get_xscale() == "log"
    [note] = [t for t in figure.texts if t.get_gid() == "residual_note"]
    assert note.get_text().startswith(f"{int(np.sum(~finite))} TOA(s) at infinite frequency")
    check_png(tmp_path / "f.png", 800, 480)


def test_large_data_sets_are_drawn_as_density(monkeypatch):
    monkeypatch.setattr(plotting, "LARGE_TOAS", 30)
    table = make_table(n=200)
    ax = panels(plotting.plot_residuals(table, color_by="backend"))[0]
    assert not ax.containers                      # no per-point error bars
    [image] = [im for im in ax.images if im.get_gid() == "residual_density"]
    rgba = image.get_array()
    assert rgba.shape[-1] == 4 and np.count_nonzero(rgba[..., 3]) > 0
    [stats] = [t for t in ax.texts if t.get_gid() == "residual_stats"]
    assert "error bars not drawn" in stats.get_text()


# --------------------------------------------------------------------------- other x axes

def test_orbital_phase_wrapped():
    table = make_table()
    phase = np.linspace(0.0, 2.6, len(table))
    ax = panels(plotting.plot_residuals_vs_orbital_phase(table, phase, color_by="backend"))[0]
    xs = np.concatenate([c.lines[0].get_xdata() for c in ax.containers])
    assert np.allclose(np.sort(xs), np.sort(np.mod(phase, 1.0)))
    assert ax.get_xlim() == (0.0, 1.0) and "orbital phase" in ax.get_xlabel()
    with pytest.raises(ValueError):
        plotting.plot_residuals_vs_orbital_phase(table, phase[:-1])


def test_day_of_year_against_astropy():
    # MJD 51544.0 = 2000 January 1, 0h (J2000.0 = JD 2451545.0 = MJD 51544.5 is Jan 1 12h,
    # IAU 1976 / Explanatory Supplement); 2000 is a leap year, so Dec 31 is day 366.
    assert plotting.day_of_year(51544.0)[0] == 1.0
    assert plotting.day_of_year(51544.5)[0] == 1.5
    assert plotting.day_of_year(51544.0 + 365.25)[0] == 366.25
    assert plotting.day_of_year(51544.0 + 366.0)[0] == 1.0
    mjd = np.array([51603.0, 58849.75, 59215.999, 60000.125])   # incl. 29 Feb 2000
    # Independent check: astropy's calendar (day of year from its yday string).
    expected = [int(Time(m, format="mjd", scale="tai").yday.split(":")[1]) + (m % 1.0)
                for m in mjd]
    assert np.allclose(plotting.day_of_year(mjd), expected, atol=1e-9)


def test_day_of_year_plot_x_values():
    table = make_table()
    ax = panels(plotting.plot_residuals_vs_day_of_year(table))[0]
    xs = np.concatenate([c.lines[0].get_xdata() for c in ax.containers])
    assert np.allclose(np.sort(xs), np.sort(plotting.day_of_year(table.mjd)))
    assert xs.min() >= 1.0 and xs.max() < 367.0


# --------------------------------------------------------------------------- P–Pdot

def line_by_gid(ax, gid):
    [line] = [ln for ln in ax.lines if ln.get_gid() == gid]
    return line


def loglog_at(line, period_s):
    p, pdot = line.get_xdata(), line.get_ydata()
    return 10 ** np.interp(np.log10(period_s), np.log10(p), np.log10(pdot))


def test_ppdot_age_and_field_lines():
    figure = plotting.plot_ppdot([0.033, 1.0, 0.0016], [4e-13, 1e-15, 1e-20],
                                 ["demo-young", "demo-one", "demo-fast"])
    ax = figure.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    ages = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("characteristic_age")]
    fields = [ln for ln in ax.lines if (ln.get_gid() or "").startswith("surface_dipole")]
    assert len(ages) == 8 and len(fields) == 7          # 1e3..1e10 yr, 1e8..1e14 G
    # Characteristic age tau = P / (2 Pdot) (Lorimer & Kramer 2005): the 1e6 yr line
    # passes through P = 1 s, Pdot = 1 / (2 * 1e6 * 3.15576e7) = 1.5844e-14.
    age_line = line_by_gid(ax, "characteristic_age_1e6_yr")
    # (abs=0: pytest.approx would otherwise accept anything within 1e-12 of these tiny values.)
    assert loglog_at(age_line, 1.0) == pytest.approx(1.0 / (2 * 1e6 * JULIAN_YEAR_S),
                                                     rel=1e-9, abs=0)
    assert loglog_at(age_line, 1.0) == pytest.approx(1.5844e-14, rel=1e-4, abs=0)
    assert loglog_at(age_line, 0.1) == pytest.approx(0.1 / (2 * 1e6 * JULIAN_YEAR_S),
                                                     rel=1e-9, abs=0)
    # 1e3 yr line at P = 33 ms: Pdot = 0.033 / (2 * 1e3 * 3.15576e7) = 5.2285e-13.
    assert loglog_at(line_by_gid(ax, "characteristic_age_1e3_yr"), 0.033) == pytest.approx(
        5.2285e-13, rel=1e-4, abs=0)
    # Dipole field B = 3.2e19 G sqrt(P Pdot) (Lorimer & Kramer 2005): the 1e12 G line
    # passes through P = 1 s, Pdot = (1e12 / 3.2e19)^2 = 9.765625e-16, and has slope -1.
    field_line = line_by_gid(ax, "surface_dipole_field_1e12_gauss")
    assert loglog_at(field_line, 1.0) == pytest.approx(9.765625e-16, rel=1e-9, abs=0)
    assert loglog_at(field_line, 0.01) == pytest.approx(9.765625e-14, rel=1e-9, abs=0)
    # 1e8 G at 3 ms (a recycled-pulsar regime): Pdot = (1e8/3.2e19)^2 / 0.003 = 3.2552e-21.
    assert loglog_at(line_by_gid(ax, "surface_dipole_field_1e8_gauss"), 0.003) == pytest.approx(
        3.2552e-21, rel=1e-4, abs=0)
    # Every line is labelled.
    labels = {t.get_gid() for t in ax.texts}
    assert "characteristic_age_1e6_yr_label" in labels
    assert "surface_dipole_field_1e12_gauss_label" in labels
    # All three sources inside the plotted range.
    xlim, ylim = ax.get_xlim(), ax.get_ylim()
    assert xlim[0] < 0.0016 and xlim[1] > 1.0 and ylim[0] < 1e-20 and ylim[1] > 4e-13


def test_ppdot_skips_nonpositive_pdot_with_note():
    figure = plotting.plot_ppdot([0.5, 1.0, 2.0, 0.1], [1e-15, -2e-16, 0.0, np.nan],
                                 ["demo-mid", "demo-spinup", "demo-flat", "demo-unknown"])
    ax = figure.axes[0]
    [points] = [c for c in ax.collections if c.get_gid() == "sources"]
    assert np.allclose(points.get_offsets(), [[0.5, 1e-15]], rtol=1e-12, atol=0)
    [note] = [t for t in figure.texts if t.get_gid() == "skipped_sources_note"]
    text = note.get_text().replace("\n", " ")
    assert "3 source(s)" in text
    for name in ("demo-spinup", "demo-flat", "demo-unknown"):
        assert name in text
    assert "demo-mid" not in text
    [caution] = [t for t in figure.texts if t.get_gid() == "assumptions_note"]
    assert "dipole" in caution.get_text() and "braking index 3" in caution.get_text()
    annotated = {t.get_text() for t in ax.texts if t.get_gid() == "source_label"}
    assert annotated == {"demo-mid"}


def test_ppdot_with_nothing_to_draw(tmp_path):
    # A batch where no source was fitted still gets a (labelled, empty) diagram.
    figure = plotting.plot_ppdot([], [], [], path=tmp_path / "empty.png")
    check_png(tmp_path / "empty.png", 750, 650)
    assert len([ln for ln in figure.axes[0].lines if ln.get_gid()]) == 15
    figure = plotting.plot_ppdot([1.0], [-1e-15], ["demo-spinup"])
    [note] = [t for t in figure.texts if t.get_gid() == "skipped_sources_note"]
    assert "demo-spinup" in note.get_text()


def test_ppdot_without_skips_has_no_skip_note():
    figure = plotting.plot_ppdot([1.0], [1e-15], ["demo-one"])
    assert not [t for t in figure.texts if t.get_gid() == "skipped_sources_note"]
    with pytest.raises(ValueError):
        plotting.plot_ppdot([1.0, 2.0], [1e-15], ["demo-one"])


# --------------------------------------------------------------------------- glitch search

def glitch_inputs(step_hz=1.2e-6):
    track_mjd = np.linspace(59000.0, 59600.0, 7)
    base = 18.47
    freq = base + np.where(track_mjd > 59250.0, step_hz, 0.0)
    return dict(mjd=np.linspace(59000, 59600, 20), residual_us=np.linspace(-5, 5, 20),
                err_us=np.full(20, 1.0), track_mjd=track_mjd, track_freq_hz=freq,
                track_freq_err_hz=np.full(7, 2e-9), track_derivative=np.full(7, -2.2e-11),
                track_derivative_err=np.full(7, 1e-14), candidate_epochs_mjd=[59300.0, 59450.5])


def test_glitch_search_three_shared_panels():
    inputs = glitch_inputs()
    figure = plotting.plot_glitch_search(**inputs, frequency_reference_hz=18.47)
    axes = figure.axes
    assert len(axes) == 3
    assert axes[0].get_shared_x_axes().joined(axes[0], axes[2])
    assert axes[1].get_shared_x_axes().joined(axes[1], axes[2])
    # Candidate epochs as vertical lines on the frequency panel (and the others).
    for ax in axes:
        verticals = [ln for ln in ax.lines if ln.get_gid() == "candidate_epoch"]
        assert sorted(ln.get_xdata()[0] for ln in verticals) == [59300.0, 59450.5]
        assert all(ln.get_xdata()[0] == ln.get_xdata()[1] for ln in verticals)
    # Frequency track relative to the reference, in nHz: the 1.2 µHz step is 1200 nHz.
    assert "nHz" in axes[1].get_ylabel()
    [track] = [c for c in axes[1].containers]
    assert np.allclose(track.lines[0].get_ydata(), [0, 0, 0, 1200, 1200, 1200, 1200])
    assert "µs" in axes[0].get_ylabel() and "Hz/s" in axes[2].get_ylabel()
    assert "MJD" in axes[2].get_xlabel()


def test_glitch_search_default_reference_and_hz_units():
    inputs = glitch_inputs(step_hz=0.05)
    figure = plotting.plot_glitch_search(**inputs)
    middle = figure.axes[1]
    # Default reference: median of the track (18.52 Hz here); offsets >= 1 mHz shown in Hz.
    assert "(Hz)" in middle.get_ylabel() and "nHz" not in middle.get_ylabel()
    [track] = middle.containers
    assert np.allclose(track.lines[0].get_ydata(), [-0.05, -0.05, -0.05, 0, 0, 0, 0])
    [ref] = [t for t in middle.texts if t.get_gid() == "frequency_reference"]
    assert "18.52 Hz" in ref.get_text()


# --------------------------------------------------------------------------- spectrum

def test_power_spectrum_log_axes_model_and_left_out_points():
    freqs = np.array([0.1, 0.2, 0.5, 1.0, 2.0, 5.0])
    power = np.array([100.0, 12.5, 0.0, 0.1, -1.0, 0.0008])
    model = 0.1 * freqs ** -3.0
    ax = plotting.plot_power_spectrum(freqs, power, model).axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    measured = line_by_gid(ax, "measured_power")
    assert np.allclose(measured.get_xdata(), [0.1, 0.2, 1.0, 5.0])
    assert np.allclose(measured.get_ydata(), [100.0, 12.5, 0.1, 0.0008], rtol=1e-12, atol=0)
    assert np.allclose(line_by_gid(ax, "model_power").get_ydata(), model, rtol=1e-12, atol=0)
    [note] = [t for t in ax.texts if t.get_gid() == "left_out_note"]
    assert note.get_text().startswith("2 point(s)")
    assert "1/yr" in ax.get_xlabel()
    plain = plotting.plot_power_spectrum(freqs[:2], power[:2]).axes[0]
    assert not [ln for ln in plain.lines if ln.get_gid() == "model_power"]


def test_plot_command_marks_the_fitted_glitches(tmp_path, monkeypatch):
    from timingkit.cli.main import main
    make_table().write_csv(str(tmp_path / "residuals.csv"))
    (tmp_path / "fitted.toml").write_text('name = "demo-one"\n[[glitch]]\nepoch_mjd = "59123.5"\n')
    seen = {}
    real = plotting.plot_residuals

    def spy(*args, **kwargs):
        seen.update(kwargs)
        return real(*args, **kwargs)

    monkeypatch.setattr(plotting, "plot_residuals", spy)
    assert main(["plot", str(tmp_path)]) == 0
    assert seen["glitch_epochs_mjd"] == [59123.5]
    assert (tmp_path / "residuals.png").exists()
