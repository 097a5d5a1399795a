"""explorer.html in a real browser (Debian's chromium driven by playwright): it
loads offline without console errors, holds one point per TOA, draws what the
controls say, and a box dragged over the plot plus the download give an
exclusion list that `fit --exclude` takes and that leaves out exactly those
TOAs. Where no browser exists the tests are skipped saying why, except under
.ci/run, which sets TIMINGKIT_REQUIRE_BROWSER so that they fail instead."""

import json
import os
import shutil

import numpy as np
import pytest
from scipy.spatial import cKDTree

from explorer_browser import REQUIRE_ENV, ExplorerPage, browser_problem, open_browser
from timingkit.cli.main import main
from timingkit.formats.exclusion_list import read_exclusion_list
from timingkit.formats.mjd_text import format_mjd
from timingkit.formats.toa_reader import read_toa_table
from timingkit.outputs.explorer_page import THIN_ABOVE, write_explorer
from timingkit.outputs.plotting import day_of_year
from timingkit.outputs.residual_table import ResidualTable

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")
PROBLEM = browser_problem()
if PROBLEM and os.environ.get(REQUIRE_ENV):
    raise RuntimeError(f"{REQUIRE_ENV} is set but the browser tests cannot run: {PROBLEM}")
pytestmark = pytest.mark.skipif(PROBLEM is not None, reason=f"no browser check: {PROBLEM}")


@pytest.fixture(scope="module")
def browser():
    with open_browser() as opened:
        yield opened


@pytest.fixture()
def msp(tmp_path):
    for name in ("demo-msp.toas", "demo-msp.toml", "sites.toml"):
        shutil.copy(os.path.join(SAMPLE, name), tmp_path / name)
    return tmp_path


def _fit(folder, out, *extra):
    assert main(["fit", str(folder / "demo-msp.toas"), str(folder / "demo-msp.toml"), "-o",
                 str(folder / out), "--no-plot", "--explore", *extra]) == 0
    return json.loads((folder / out / "report.json").read_text())


def _gap_middles(mjd, at_least):
    """Middles of the gaps between consecutive TOAs wider than ``at_least`` days."""
    mjd = np.sort(mjd)
    wide = np.flatnonzero(np.diff(mjd) > at_least)
    return (mjd[wide] + mjd[wide + 1]) / 2


def test_page_loads_offline_and_draws_one_point_per_toa(browser, msp, tmp_path):
    _fit(msp, "out")
    page = ExplorerPage(browser, msp / "out" / "explorer.html")
    try:
        assert page.errors == [] and page.refused == []
        assert all(url.startswith(("file:", "data:", "blob:")) for url in page.requests)
        status = page.status()
        assert status["toas"] == status["points"] == 360 and not status["thinned"]
        assert status["leftOut"] == 0
        assert "NOT CONVERGED" not in page.page.inner_text("#tk-facts")
        table = read_toa_table(str(msp / "demo-msp.toas"))
        mjd = table.mjd_day + table.mjd_frac
        assert np.allclose(page.plotted("x"), mjd, rtol=0, atol=1e-6)
        # x and y as chosen: day of year (against erfa's calendar, via the
        # project's figure helper), frequency; residual over its error
        page.choose("tk-x", "doy")
        assert np.allclose(page.plotted("x"), day_of_year(mjd), atol=1e-6)
        page.choose("tk-x", "freq")
        assert page.plotted("x") == table.freq_mhz.tolist()
        page.choose("tk-y", "sigma")
        rows = ResidualTable.read_csv(msp / "out" / "residuals.csv")
        assert np.allclose(page.plotted("y"), rows.residual_us / rows.err_us, rtol=1e-6)
        assert page.page.is_disabled("#tk-x option[value=orbit]")   # not a binary
        page.choose("tk-colour", "backend")
        fills = page.plotted("fill")
        assert len(set(fills)) == 2 and all(
            (a == b) == (x == y) for a, b, x, y in zip(fills, fills[1:], table.flags["backend"],
                                                       table.flags["backend"][1:]))
        # hovering a point shows every column of its TOA
        page.choose("tk-x", "mjd")
        page.choose("tk-y", "us")
        sx, sy = page.to_screen(page.plotted("x")[100], page.plotted("y")[100])
        page.page.mouse.move(sx - 20, sy - 20)
        page.page.mouse.move(sx, sy, steps=3)
        page.page.wait_for_selector("#tk-card:not([hidden])", timeout=10_000)
        card = page.page.inner_text("#tk-card")
        for text in (table.mjd_text[100], str(table.line_numbers[100]), table.site[100],
                     table.flags["backend"][100], "pulse number"):
            assert text in card
        page.screenshot(tmp_path / "shot.png")
        from matplotlib.image import imread
        assert np.std(imread(tmp_path / "shot.png")[..., :3]) > 0.05   # something was drawn
        assert page.errors == []
    finally:
        page.close()


def test_page_of_a_fit_that_did_not_converge_says_so(browser, tmp_path):
    for name in ("demo-young.toas", "demo-young.toml", "sites.toml"):
        shutil.copy(os.path.join(SAMPLE, name), tmp_path / name)
    assert main(["fit", str(tmp_path / "demo-young.toas"), str(tmp_path / "demo-young.toml"),
                 "-o", str(tmp_path / "out"), "--no-plot", "--max-iterations", "1",
                 "--explore"]) == 4
    page = ExplorerPage(browser, tmp_path / "out" / "explorer.html")
    try:
        assert "fit NOT CONVERGED" in page.page.inner_text("#tk-facts")
        assert "fit did not converge" in page.page.inner_text("#tk-foot")
        assert page.errors == []
    finally:
        page.close()


def test_box_selection_download_refit_and_reopen(browser, msp):
    _fit(msp, "first")
    table = read_toa_table(str(msp / "demo-msp.toas"))
    mjd = table.mjd_day + table.mjd_frac
    page = ExplorerPage(browser, msp / "first" / "explorer.html")
    try:
        # zoom to a year (a box drawn with the zoom tool), then select two
        # stretches of time with boxes whose edges lie in gaps several pixels wide
        page.page.click(".tk-gestures button[data-tool=zoom]")
        page.box_between(59000.0, 59365.0)
        f = page.frame()
        assert 58990 < f["x"][0] < 59010 and 59355 < f["x"][1] < 59375
        page.page.click(".tk-gestures button[data-tool=box]")
        days_per_px = (f["x"][1] - f["x"][0]) / f["width"]
        visible = mjd[(mjd > f["x"][0]) & (mjd < f["x"][1])]
        middles = _gap_middles(visible, 6 * days_per_px)
        windows = [(middles[2], middles[5]), (middles[-6], middles[-3])]
        page.page.fill("#tk-reason", "scintillation dropout")
        for low, high in windows:
            page.box_between(low, high)
        expected = {int(n) for n, t in zip(table.line_numbers, mjd)
                    if any(low < t < high for low, high in windows)}
        assert page.status()["markedHere"] == len(expected) >= 4
        assert str(len(expected)) in page.page.inner_text("#tk-count")
        # the second box undone and redone, then a lasso that only puts TOAs back
        page.page.click("#tk-undo")
        assert page.status()["markedHere"] < len(expected)
        page.box_between(*windows[1])
        listing = page.download(msp / "left-out.txt")
        assert page.errors == []
    finally:
        page.close()
    rows = read_exclusion_list(listing).rows
    assert {r.toa_line for r in rows} == expected
    assert {r.reason for r in rows} == {"scintillation dropout"}
    report = _fit(msp, "second", "--exclude", listing)
    assert report["excluded_toas"] == len(expected) and report["toas"] == 360 - len(expected)
    assert {n for g in report["excluded"] for n in g["lines"]} == expected
    assert not [w for w in report["warnings"] if "left-out.txt" in w]   # every row matched
    # re-opened for the new fit, the page shows them as already left out
    page = ExplorerPage(browser, msp / "second" / "explorer.html")
    try:
        status = page.status()
        assert status["inFit"] == len(expected) and status["markedHere"] == 0
        edges = page.plotted("edge")
        assert sum(e == "#6b6457" for e in edges) == len(expected)   # hollow, grey ring
        assert page.errors == []
    finally:
        page.close()


def _thinned_page(folder):
    """explorer.html of 15,000 invented TOAs (thinned); their residual table."""
    n = THIN_ABOVE + 5_000
    rng = np.random.default_rng(7)
    mjd = np.sort(rng.uniform(58000, 60000, n))
    err = rng.choice([0.5, 2.0], n)
    residual = rng.normal(0, err)
    table = ResidualTable.from_columns(format_mjd(np.floor(mjd), mjd - np.floor(mjd)),
                                       rng.choice(["desert-dish", "lake-array"], n),
                                       np.full(n, 1400.0), err, residual, residual * 3e-4,
                                       np.arange(n))
    table.toa_line = np.arange(2, n + 2)
    table.write_csv(folder / "residuals.csv")
    write_explorer(str(folder))
    return table


def test_thinned_page_hover_finds_toas_that_are_not_drawn(browser, tmp_path):
    table = _thinned_page(tmp_path)
    page = ExplorerPage(browser, tmp_path / "explorer.html")
    try:
        assert page.status()["thinned"]
        f = page.frame()
        # every TOA's place on the screen (y as the page holds it: float32), and
        # the pixel distance to its nearest neighbour (scipy's k-d tree)
        sx, sy = page.to_screen(table.mjd, table.residual_us.astype(np.float32).astype(float))
        distance, _ = cKDTree(np.column_stack([sx, sy])).query(np.column_stack([sx, sy]), k=2)
        drawn = set(page.plotted("x"))
        hidden = [i for i in np.argsort(-distance[:, 1])
                  if table.mjd[i] not in drawn and f["left"] < sx[i] < f["left"] + f["width"]
                  and f["top"] < sy[i] < f["top"] + f["height"]]
        # TOAs left out of the drawing but over 2 pixels from any other TOA
        targets = [i for i in hidden if distance[i, 1] > 2.0][:3]
        assert len(targets) == 3
        for i in targets:
            page.page.mouse.move(5, 5)
            page.page.mouse.move(sx[i], sy[i], steps=3)
            page.page.wait_for_function(
                "t => !document.getElementById('tk-card').hidden && "
                "document.getElementById('tk-card').innerText.includes(t)",
                arg=table.mjd_text[i], timeout=10_000)
            assert f"line\n{table.toa_line[i]}" in page.page.inner_text("#tk-card")
        assert "hover shows the TOA nearest the pointer" in page.page.inner_text("#tk-foot")
        page.page.mouse.move(5, 5)
        page.page.wait_for_selector("#tk-card", state="hidden", timeout=10_000)
        assert page.errors == []
    finally:
        page.close()


def test_thinned_page_selects_every_toa_under_a_box_and_a_lasso(browser, tmp_path):
    table = _thinned_page(tmp_path)
    n = len(table)
    page = ExplorerPage(browser, tmp_path / "explorer.html")
    try:
        status = page.status()
        assert status["thinned"] and status["points"] < n and status["toas"] == n
        page.page.click(".tk-gestures button[data-tool=box]")
        page.box_between(58500.0, 58600.0)
        in_box = {int(k) for k, t in zip(table.toa_line, table.mjd) if 58500 < t < 58600}
        drawn = [x for x in page.plotted("x") if 58500 < x < 58600]
        assert page.status()["markedHere"] == len(in_box) > len(drawn)   # hidden ones too
        # a lasso (triangle) that puts TOAs back: those well inside it come back,
        # none well outside it does (allowing 3 pixels at its edges)
        page.page.check("input[name=tk-mode][value=return]")
        page.page.click(".tk-gestures button[data-tool=lasso]")
        f = page.frame()
        corners = [(58450.0, f["y"][1] * 0.9), (58650.0, f["y"][1] * 0.9), (58550.0, 0.0)]
        page.drag([page.to_screen(*c) for c in corners] + [page.to_screen(*corners[0])])
        text = page.status()["exclusionList"]
        assert page.errors == []
    finally:
        page.close()
    (tmp_path / "list.txt").write_text(text)
    still_out = {r.toa_line for r in read_exclusion_list(tmp_path / "list.txt").rows}
    scale = np.array([(f["x"][1] - f["x"][0]) / f["width"], (f["y"][1] - f["y"][0]) / f["height"]])
    inside, edge_px = _triangle_inside_and_distance(
        np.column_stack([table.mjd, table.residual_us]) / scale, np.array(corners) / scale)
    boxed = np.array([k in in_box for k in table.toa_line])
    clear = edge_px > 3
    assert (boxed & inside & clear).sum() > 50
    assert not (set(table.toa_line[boxed & inside & clear]) & still_out)
    assert set(table.toa_line[boxed & ~inside & clear]) <= still_out


def _triangle_inside_and_distance(points, corners):
    """For each point (pixels): inside the triangle?, distance to its nearest edge."""
    def cross(u, v):
        return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]
    inside = np.ones(len(points), dtype=bool)
    distance = np.full(len(points), np.inf)
    sign = np.sign(cross(corners[1] - corners[0], corners[2] - corners[0]))
    for a, b in ((0, 1), (1, 2), (2, 0)):
        edge = corners[b] - corners[a]
        rel = points - corners[a]
        inside &= np.sign(cross(edge, rel)) == sign
        t = np.clip(rel @ edge / (edge @ edge), 0, 1)
        distance = np.minimum(distance, np.hypot(*(rel - t[:, None] * edge).T))
    return inside, distance


def test_glitch_search_page_draws_the_candidate(browser, tmp_path, sites, ephemeris):
    # `glitches --explore` on invented TOAs with one glitch at MJD 58400.3:
    # the fitted glitch (found by the search) is drawn as a line at its epoch,
    # with the search's bracket, while the x axis is MJD
    from conftest import glitch_text, young_pulsar_text
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.model import TimingModel
    from timingkit.model.simulate import simulate_toas
    start = young_pulsar_text(10.0, -1e-11)
    toas = simulate_toas(TimingModel.from_text(start + glitch_text(58400.3, 1e-6, -1e-14)),
                         58000, 58730, 104, 50.0, sites, ephemeris, site_names=["ssb"],
                         freqs_mhz=[1400.0], seed=21)
    write_toa_table(toas, str(tmp_path / "glitch.toas"))
    (tmp_path / "start.toml").write_text(start)
    assert main(["glitches", str(tmp_path / "glitch.toas"), str(tmp_path / "start.toml"), "-o",
                 str(tmp_path / "out"), "--no-plot", "--null-trials", "200", "--explore"]) == 0
    (candidate,) = json.loads((tmp_path / "out" / "glitches.json").read_text())["candidates"]
    page = ExplorerPage(browser, tmp_path / "out" / "explorer.html")
    try:
        marks = "Bokeh.documents[0].all_models"
        shown = ("(kind) => Array.from(" + marks + ").filter(m => m.type === kind && m.visible)"
                 ".map(m => kind === 'Span' ? [m.dimension, m.location] : [m.left, m.right])")
        spans = page.page.evaluate(shown, "Span")
        epoch = [x for d, x in spans if d == "height"]
        assert len(epoch) == 1 and epoch[0] == pytest.approx(candidate["epoch_mjd"], abs=1e-6)
        assert [candidate["epoch_min_mjd"], candidate["epoch_max_mjd"]] in page.page.evaluate(
            shown, "BoxAnnotation")
        # its label stands above the data area (covering no TOA), centred on the line, the
        # long form on hover and in the key; after a resize it follows the line
        for width, height in ((1200, 800), (900, 640)):
            page.page.set_viewport_size({"width": width, "height": height})
            page.settle()
            page.settle()
            (label,) = _epoch_labels(page)
            f = page.frame()
            assert label["text"] == "glitch 1"
            assert label["title"].startswith("glitch 1 (model; search candidate 1, FAP < 0.005)")
            assert label["bottom"] <= f["top"] and label["top"] >= f["top"] - 30
            line_x, _ = page.to_screen(epoch[0], 0.0)
            assert (label["left"] + label["right"]) / 2 == pytest.approx(line_x, abs=1.5)
        assert "glitch 1 (model; search candidate 1, FAP < 0.005)" in page.page.inner_text(
            "#tk-key")
        page.page.click("button[data-tool=zoom]")   # zoomed to a part without the epoch:
        page.box_between(58000.0, 58300.0)          # no label left over the margin
        assert page.frame()["x"][1] < epoch[0] and _epoch_labels(page) == []
        page.page.click("#tk-fit-view")
        page.settle()
        assert len(_epoch_labels(page)) == 1
        page.choose("tk-x", "freq")          # epochs mean nothing against frequency
        assert not [x for d, x in page.page.evaluate(shown, "Span") if d == "height"]
        assert _epoch_labels(page) == []
        assert page.errors == []
    finally:
        page.close()


def _epoch_labels(page) -> list[dict]:
    """The epoch labels on the page: text, hover text and box in page pixels."""
    return page.page.evaluate(
        "Array.from(document.querySelectorAll('#tk-epoch-labels .tk-epoch-label')).map(e => {"
        " const b = e.getBoundingClientRect(); return {text: e.textContent, title: e.title,"
        " left: b.left, right: b.right, top: b.top, bottom: b.bottom}; })")


def test_a_flag_with_more_values_than_16_bits_hold(browser, tmp_path):
    # a flag naming each of 70,000 observations: its codes need 32 bits, and
    # the hover card of observation 69,000 (alone, far above the others) names it
    n, k = 70_000, 69_000
    rng = np.random.default_rng(3)
    mjd = np.sort(rng.uniform(58000, 60000, n))
    residual = rng.normal(0, 1.0, n)
    residual[k] = 40.0
    table = ResidualTable.from_columns(format_mjd(np.floor(mjd), mjd - np.floor(mjd)),
                                       np.full(n, "desert-dish"), np.full(n, 1400.0),
                                       np.ones(n), residual, residual * 3e-4, np.arange(n),
                                       {"observation": [f"obs-{i:06d}" for i in range(n)]})
    table.write_csv(tmp_path / "residuals.csv")
    write_explorer(str(tmp_path))
    page = ExplorerPage(browser, tmp_path / "explorer.html")
    try:
        page.page.mouse.move(5, 5)
        page.page.mouse.move(*page.to_screen(mjd[k], 40.0), steps=3)
        page.page.wait_for_selector("#tk-card:not([hidden])", timeout=10_000)
        card = page.page.inner_text("#tk-card")
        assert table.mjd_text[k] in card and "obs-069000" in card
        assert page.errors == []
    finally:
        page.close()
