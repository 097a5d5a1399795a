#!/usr/bin/env python
"""explorer.html for 10,000 and 100,000 TOAs: time to write it, its size, and in
headless chromium (software WebGL: the worst case, no GPU) the time to load and
draw it, to redraw after a zoom and to apply a box selection. Then, for 100,000
and 1,000,000 TOAs, the CPU time to write the page with residuals.csv read
column by column (the reader) and row by row (the reference reader kept for
naming bad lines; what the reader was before), in the same run.

    python scripts/bench_explorer.py [--quick]

The TOAs are simulated for an invented millisecond pulsar at two invented sites
and fitted (spin and DM); the page is written from that fit's folder, as
``timingkit fit --explore`` does.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.join(ROOT, "tests"))
sys.path.insert(0, os.path.join(ROOT, "scripts"))

from bench import MODEL  # noqa: E402  (the invented millisecond pulsar of the other benchmarks)


def _fitted_folder(n: int, tmp: str) -> str:
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.model.simulate import simulate_toas
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.pipeline.inputs import load_context, load_model
    model_path = os.path.join(tmp, "model.toml")
    with open(model_path, "w") as fh:
        fh.write(MODEL)
    model = load_model(model_path)
    sites, eph, clocks = load_context(model)
    toas = simulate_toas(model, 55000, 60000, n, 1.0, sites, eph,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[820, 1400, 2300],
                         flags={"backend": ["wide-a", "wide-b"]}, seed=1)
    toas_path = os.path.join(tmp, f"bench{n}.toas")
    write_toa_table(toas, toas_path)
    outdir = os.path.join(tmp, f"fit{n}")
    fit_files(toas_path, model_path, outdir, make_plots=False, leave_out=["mjd=57000..57030"])
    return outdir


def _browser_times(path: str) -> dict | None:
    from explorer_browser import ExplorerPage, browser_problem, open_browser
    problem = browser_problem()
    if problem:
        print(f"  (no browser timings: {problem})")
        return None
    with open_browser() as browser:
        page = ExplorerPage(browser, path)
        status = page.status()
        start = time.perf_counter()
        page.page.evaluate("(() => { const p = Bokeh.documents[0].get_model_by_name("
                           "'residual_plot'); const w = p.x_range.end - p.x_range.start; "
                           "p.x_range.setv({start: p.x_range.start + w / 4, "
                           "end: p.x_range.end - w / 4}); })()")
        page.settle()
        redraw = time.perf_counter() - start
        start = time.perf_counter()
        page.box_between(58000.0, 58100.0)
        select = time.perf_counter() - start
        f = page.frame()                  # hover over the middle of the plot (many TOAs)
        page.page.mouse.move(f["left"] + 5, f["top"] + 5)
        page.page.wait_for_timeout(200)
        start = time.perf_counter()
        page.page.mouse.move(f["left"] + f["width"] / 2, f["top"] + f["height"] / 2)
        page.page.wait_for_selector("#tk-card:not([hidden])", timeout=60_000)
        hover = time.perf_counter() - start
        errors = list(page.errors)
        page.close()
    return {"load_s": page.load_s, "redraw_s": redraw, "select_s": select,
            "points": status["points"], "hover_s": hover, "errors": errors}


def _residual_folder(n: int, tmp: str) -> str:
    """residuals.csv and prefit_residuals.csv of n invented TOAs (no fit: only
    the files the page is written from)."""
    import numpy as np
    from timingkit.formats.mjd_text import format_mjd
    from timingkit.outputs.residual_table import ResidualTable
    rng = np.random.default_rng(3)
    mjd = np.sort(rng.uniform(55000, 60000, n))
    err = rng.choice([0.5, 2.0], n)
    folder = os.path.join(tmp, f"residuals{n}")
    os.makedirs(folder)
    for name, scale in (("residuals.csv", 1.0), ("prefit_residuals.csv", 30.0)):
        residual = rng.normal(0, err) * scale
        table = ResidualTable.from_columns(
            format_mjd(np.floor(mjd), mjd - np.floor(mjd)),
            rng.choice(["desert-dish", "lake-array"], n), rng.choice([820.0, 1400.0], n), err,
            residual, residual * 3e-4, np.arange(n),
            {"backend": rng.choice(["wide-a", "wide-b"], n)})
        table.toa_line = np.arange(2, n + 2)
        table.write_csv(os.path.join(folder, name))
    return folder


def _page_cpu_s(folder: str, row_by_row: bool) -> float:
    from timingkit.outputs import residual_table
    from timingkit.outputs.explorer_page import write_explorer
    columns = residual_table._read_columns
    if row_by_row:
        residual_table._read_columns = lambda body, header, quoted: None
    try:
        start = time.process_time()
        write_explorer(folder)
        return time.process_time() - start
    finally:
        residual_table._read_columns = columns


def bench_explorer_reading(sizes=(100_000, 1_000_000)) -> None:
    with tempfile.TemporaryDirectory(prefix="timingkit-explorer-") as tmp:
        _page_cpu_s(_residual_folder(1_000, tmp), False)      # imports Bokeh: not timed
        for n in sizes:
            folder = _residual_folder(n, tmp)
            by_columns, by_rows = _page_cpu_s(folder, False), _page_cpu_s(folder, True)
            print(f"explorer.html from residuals.csv + prefit_residuals.csv, {n:,} TOAs: "
                  f"{by_columns:.2f} s CPU with the files read column by column, {by_rows:.2f} s "
                  f"read row by row ({by_rows / by_columns:.1f}x)")


def bench_explorer(sizes=(10_000, 100_000), reading_sizes=(100_000, 1_000_000)) -> None:
    from timingkit.outputs.explorer_page import write_explorer
    with tempfile.TemporaryDirectory(prefix="timingkit-explorer-") as tmp:
        for n in sizes:
            outdir = _fitted_folder(n, tmp)
            start = time.perf_counter()
            path = write_explorer(outdir)
            written = time.perf_counter() - start
            size = os.path.getsize(path)
            print(f"explorer.html, {n:,} TOAs: written in {written:.2f} s, {size / 1e6:.1f} MB "
                  f"({(size - 1.5e6) / n:.0f} bytes per TOA besides ~1.5 MB of Bokeh)")
            times = _browser_times(path)
            if times:
                print(f"  headless chromium, software WebGL: ready in {times['load_s']:.1f} s "
                      f"({times['points']:,} points drawn), redraw after a zoom "
                      f"{times['redraw_s']:.2f} s, box selection applied in "
                      f"{times['select_s']:.2f} s, hover card (nearest of all TOAs) in "
                      f"{times['hover_s']:.2f} s; console errors: {len(times['errors'])}")
    bench_explorer_reading(reading_sizes)


if __name__ == "__main__":
    if "--quick" in sys.argv:
        bench_explorer((2_000, 10_000), (10_000, 100_000))
    else:
        bench_explorer()
