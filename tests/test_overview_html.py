"""The self-contained batch overview page: content, escaping, and a real headless browser.

The browser checks run Debian's ``chromium`` (installed by .ci/run); they are
skipped, saying why, only where no chromium binary is found.
"""

import base64
import json
import re
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from timingkit.outputs.overview_page import png_data_uri, render_overview_html, write_overview_html

COLUMNS = ("source", "status", "toas", "rms_us", "frequency_hz", "period_s", "message")

CHROMIUM = next((shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome")
                 if shutil.which(n)), None)
if CHROMIUM is None and os.environ.get("TIMINGKIT_REQUIRE_BROWSER"):
    # .ci/run sets this: on CI the browser check must run, never skip
    raise RuntimeError("TIMINGKIT_REQUIRE_BROWSER is set but no chromium binary is on PATH")
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="no chromium binary on PATH (Debian package 'chromium'; .ci/run "
                             "installs it): the page cannot be checked in a real browser here")

# Appended to a copy of the page by the browser checks (never part of the page itself):
# once everything has loaded, it records the table rows, whether every image decoded,
# and the row order after clicking a header once and twice, in <pre id="probe">.
PROBE_SCRIPT = """
<script>
window.addEventListener('load', function () {
  var images = Array.prototype.slice.call(document.images);
  var rows = function () {
    return Array.prototype.map.call(document.querySelectorAll('#summary tbody tr'),
                                    function (r) { return r.cells[0].textContent; });
  };
  var result = {rows: rows(), images: images.length,
                decoded: images.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length,
                external: performance.getEntriesByType('resource').map(function (e) { return e.name; })};
  var headers = Array.prototype.slice.call(document.querySelectorAll('#summary thead th'));
  var column = headers.findIndex(function (h) {
    return h.getAttribute('data-column') === '%(column)s' || h.textContent.trim() === '%(column)s';
  });
  headers[column].querySelector('button').click();
  result.ascending = rows();
  result.aria = headers[column].getAttribute('aria-sort');
  headers[column].querySelector('button').click();
  result.descending = rows();
  var pre = document.createElement('pre');
  pre.id = 'probe';
  pre.textContent = JSON.stringify(result);
  document.body.appendChild(pre);
});
</script>
"""


def chromium_probe(page: Path, workdir: Path, sort_column: str = "source",
                   screenshot: Path | None = None) -> dict:
    """Open a copy of ``page`` (with :data:`PROBE_SCRIPT`) in headless chromium and
    return the probe's findings. The copy goes into an otherwise empty folder,
    so any reference to a file next to the page would fail to load."""
    isolated = workdir / "isolated"
    isolated.mkdir(parents=True, exist_ok=True)
    text = page.read_text(encoding="utf-8")
    probed = isolated / "probed.html"
    probed.write_text(text.replace("</body>", PROBE_SCRIPT % {"column": sort_column} + "</body>"),
                      encoding="utf-8")
    base = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--no-first-run", "--disable-extensions", f"--user-data-dir={workdir / 'profile'}",
            "--virtual-time-budget=10000"]
    done = subprocess.run(base + ["--dump-dom", probed.as_uri()], capture_output=True,
                          text=True, timeout=90)
    match = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.S)
    assert match, f"the probe did not run; chromium said:\n{done.stderr[-2000:]}"
    if screenshot is not None:
        subprocess.run(base + ["--window-size=1200,1600", f"--screenshot={screenshot}",
                               page.as_uri()], capture_output=True, timeout=90, check=True)
    return json.loads(match.group(1).replace("&quot;", '"').replace("&amp;", "&")
                      .replace("&lt;", "<").replace("&gt;", ">"))


def _png(path: Path, color: str) -> Path:
    figure = Figure(figsize=(2.0, 1.5), dpi=50)
    FigureCanvasAgg(figure)
    ax = figure.add_subplot()
    ax.plot([0, 1, 2], [0, 1, 0], color=color)
    figure.savefig(path)
    return path


@pytest.fixture()
def page_inputs(tmp_path):
    rows = [
        {"source": "demo-young", "status": "ok", "toas": 120, "rms_us": 2.5,
         "frequency_hz": "18.473162904173582641", "period_s": 0.0541326, "message": ""},
        {"source": "demo-old", "status": "ok", "toas": 80, "rms_us": 10.25,
         "frequency_hz": "1.2345", "period_s": 0.81004455, "message": "no clock corrections"},
        {"source": "demo-<b>bold</b>", "status": "failed", "toas": None, "rms_us": None,
         "frequency_hz": None, "period_s": None, "message": "bad mjd at line 3 & more"},
        {"source": "demo-fast", "status": "ok", "toas": 200, "rms_us": 0.3,
         "frequency_hz": "566.8415", "period_s": 0.001764162, "message": ""},
    ]
    plots = {"demo-young": _png(tmp_path / "a.png", "C0"), "demo-old": _png(tmp_path / "b.png", "C1"),
             "demo-fast": _png(tmp_path / "c.png", "C2")}
    ppdot = _png(tmp_path / "ppdot.png", "k")
    return rows, plots, ppdot


def test_page_embeds_every_image_and_fetches_nothing(page_inputs, tmp_path):
    rows, plots, ppdot = page_inputs
    text = render_overview_html(rows, COLUMNS, ppdot_png=ppdot, residual_plots=plots,
                                cautions=["ages assume a dipole"])
    sources = re.findall(r'src="([^"]*)"', text)
    # the P-Pdot diagram and the three residual plots; the failed source has none
    assert len(sources) == 4
    assert all(s.startswith("data:image/png;base64,") for s in sources)
    decoded = {base64.b64decode(s.split(",", 1)[1]) for s in sources}
    assert decoded == {p.read_bytes() for p in [ppdot, *plots.values()]}
    assert not re.search(r'(href|src)="(?!data:|#)', text)  # no links to other files
    assert "http://" not in text and "https://" not in text
    assert "Caution: ages assume a dipole" in text


def test_table_has_one_row_per_source_and_escapes_text(page_inputs):
    rows, plots, ppdot = page_inputs
    text = render_overview_html(rows, COLUMNS, ppdot_png=ppdot, residual_plots=plots,
                                warnings={"demo-old": ["no clock <tables>"]},
                                source_cautions={"demo-fast": ["kinematic Pdot terms"]})
    assert "Warning: no clock &lt;tables&gt;" in text and "Caution: kinematic Pdot terms" in text
    body = text.split("<tbody>")[1].split("</tbody>")[0]
    assert body.count("<tr") == len(rows)
    assert "<b>bold</b>" not in text and "demo-&lt;b&gt;bold&lt;/b&gt;" in text
    assert "bad mjd at line 3 &amp; more" in text
    # high-precision frequency shown with every digit; a float rounded for display,
    # with its exact value kept for sorting
    assert ">18.473162904173582641<" in text
    assert 'data-value="0.0541326">0.0541326<' in text
    assert 'data-value="0.81004455">0.810045<' in text


def test_write_is_atomic_and_missing_plot_is_said(page_inputs, tmp_path):
    rows, plots, ppdot = page_inputs
    target = tmp_path / "out" / "overview.html"
    target.parent.mkdir()
    plots = {**plots, "demo-fast": tmp_path / "does-not-exist.png"}
    write_overview_html(target, rows, COLUMNS, ppdot_png=None, residual_plots=plots)
    assert [p.name for p in target.parent.iterdir()] == ["overview.html"]
    text = target.read_text(encoding="utf-8")
    assert "No P&ndash;Pdot diagram was made." in text
    assert text.count("No residual plot.") == 1
    assert png_data_uri(tmp_path / "does-not-exist.png") is None


@needs_chromium
def test_page_renders_and_sorts_in_headless_chromium(page_inputs, tmp_path):
    rows, plots, ppdot = page_inputs
    page = write_overview_html(tmp_path / "overview.html", rows, COLUMNS, ppdot_png=ppdot,
                               residual_plots=plots)
    shot = tmp_path / "shot.png"
    probe = chromium_probe(page, tmp_path / "browser", sort_column="rms_us", screenshot=shot)
    assert probe["rows"] == [r["source"] for r in rows]
    assert probe["images"] == 4 and probe["decoded"] == 4
    assert not [e for e in probe["external"] if not e.startswith("data:")]
    # numeric sort (10.25 after 2.5, which a text sort would put first), empty cell last
    # in both directions
    assert probe["ascending"] == ["demo-fast", "demo-young", "demo-old", "demo-<b>bold</b>"]
    assert probe["aria"] == "ascending"
    assert probe["descending"] == ["demo-old", "demo-young", "demo-fast", "demo-<b>bold</b>"]
    from matplotlib.image import imread

    pixels = imread(shot)
    assert pixels.shape[0] == 1600 and np.std(pixels[..., :3]) > 0.05  # something was drawn


def _fake_batch(tmp_path, count, figures=("residuals.png", "residuals_day_of_year.png")):
    """A batch folder of ``count`` fitted sources whose figures are small PNGs."""
    from timingkit.batch.outcomes import BatchResult, SourceOutcome
    from timingkit.batch.summary import SUMMARY_COLUMNS
    outdir = tmp_path / "batch"
    rows, outcomes = [], []
    for i in range(count):
        name = f"demo-src-{i:04d}"
        (outdir / name).mkdir(parents=True)
        for k, file in enumerate(figures):
            _png(outdir / name / file, f"C{k}")
        row = dict.fromkeys(SUMMARY_COLUMNS)
        row.update(source=name, status="ok", toas=100, rms_us=1.5 + i, message="",
                   frequency_hz="18.473162904173582641", frequency_hz_uncertainty=1.234e-10,
                   dm="56.7012", dm_uncertainty=0.0034, period_s=0.0333924 + 1e-4 * i,
                   period_derivative=4.2e-13)
        rows.append(row)
        outcomes.append(SourceOutcome(name, "ok", ""))
    return outdir, BatchResult(outdir, outcomes, rows, "test", 0.0)


def test_headers_are_human_with_units_and_uncertainties_shown():
    from timingkit.batch.summary import COLUMN_HEADERS, PAGE_COLUMNS, PAGE_UNCERTAINTIES
    row = {"source": "demo-young", "status": "ok", "rms_us": 2.5, "dm": "56.7012",
           "dm_uncertainty": 0.0034, "frequency_hz": "18.473162904173582641",
           "frequency_hz_uncertainty": 1.234e-10}
    text = render_overview_html([row], PAGE_COLUMNS, headers=COLUMN_HEADERS,
                                uncertainties=PAGE_UNCERTAINTIES)
    head = text.split("<thead>")[1].split("</thead>")[0]
    for header in ("RMS residual (µs)", "DM (pc cm⁻³)", "Spin frequency (Hz)",
                   "Reduced χ²", "Span (days)", "Orbital period (days)"):
        assert f">{header}</button>" in head
    assert "rms_us" not in re.sub(r'data-column="[^"]*"', "", head)
    assert "_uncertainty" not in head                 # folded into the value's cell
    # value rounded to two significant digits of its uncertainty (0.0034 -> 4 decimals)
    assert ">56.7012 ± 0.0034<" in text
    assert ">18.47316290417 ± 1.2e-10<" in text
    # tiny values and uncertainties take an exponent, as in the terminal summary, never a
    # run of twenty zeros (outputs.numbers.format_value)
    row.update(frequency_derivative="-8.214205038237418566294172e-16",
               frequency_derivative_uncertainty=1.9e-20, period_derivative=5.0896268e-21,
               period_derivative_uncertainty=1.2e-25)
    text = render_overview_html([row], PAGE_COLUMNS, headers=COLUMN_HEADERS,
                                uncertainties=PAGE_UNCERTAINTIES)
    assert ">-8.21421e-16 ± 1.9e-20<" in text and ">5.08963e-21 ± 1.2e-25<" in text
    assert "0.0000000000" not in text


def test_every_figure_of_a_source_is_on_the_page(tmp_path):
    figures = {"demo-binary": [("residuals", _png(tmp_path / "r.png", "C0")),
                               ("residuals by orbital phase", _png(tmp_path / "o.png", "C1")),
                               ("glitch search", _png(tmp_path / "g.png", "C2"))]}
    rows = [{"source": "demo-binary", "status": "ok"}]
    text = render_overview_html(rows, ("source", "status"), figures=figures)
    sources = re.findall(r'src="(data:image/png;base64,[^"]*)"', text)
    decoded = [base64.b64decode(s.split(",", 1)[1]) for s in sources]
    assert decoded == [p.read_bytes() for _, p in figures["demo-binary"]]
    assert "<figcaption>residuals by orbital phase</figcaption>" in text
    assert "<figcaption>glitch search</figcaption>" in text


def test_large_batch_gets_linked_thumbnails_and_a_small_page(tmp_path):
    from PIL import Image
    from timingkit.batch.summary import write_summaries
    from timingkit.outputs.overview_page import EMBED_UP_TO_SOURCES
    count = EMBED_UP_TO_SOURCES + 5
    outdir, result = _fake_batch(tmp_path, count)
    files = write_summaries(result, {"timingkit": "test"}, {})
    text = files["overview_html"].read_text(encoding="utf-8")
    assert "data:image" not in text                   # nothing embedded
    links = re.findall(r'<a href="([^"]+)"><img [^>]*src="([^"]+)"></a>', text)
    assert len(links) == 1 + 2 * count                # P-Pdot and two figures per source
    for full, thumb in links:
        assert (outdir / full).exists() and thumb.startswith("thumbnails/")
        with Image.open(outdir / thumb) as image, Image.open(outdir / full) as original:
            assert image.format == "PNG" and image.width <= 240
            assert image.width < original.width or original.width <= 240
    # a 1,000-source page: about 2 kB per source (the table row and the figure links)
    rows = result.rows * (1000 // count + 1)
    page = render_overview_html(
        rows[:1000], ("source", "status", "rms_us", "frequency_hz", "period_s"),
        figures={r["source"]: [(lab, outdir / r["source"] / f) for lab, f in
                               (("residuals", "residuals.png"),
                                ("residuals by day of year", "residuals_day_of_year.png"))]
                 for r in rows[:1000]},
        thumbnail_of=lambda p: (str(p), "thumbnails/x.png"))
    assert len(page.encode("utf-8")) / 1000 < 3000
