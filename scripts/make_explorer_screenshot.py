#!/usr/bin/env python
"""docs/explorer.png: the README's picture of the residual explorer, made with
the browser tests' machinery (tests/explorer_browser.py) on an invented source.

    python scripts/make_explorer_screenshot.py [-o docs/explorer.png]

An invented young pulsar glitches at MJD 59010; it is observed from two invented
sites with two backends, and a few weak detections (60 µs errors) are left out by
a rule of an exclusion list. `timingkit glitches` finds and fits the glitch; the
page then gets a box of TOAs marked as left out and a hovered TOA, as a person
would leave it.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.join(ROOT, "tests"))
SAMPLE = os.path.join(ROOT, "timingkit", "sample_data")


def make_outputs(folder: str) -> str:
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.model.simulate import simulate_toas
    from timingkit.pipeline.glitch_run import glitch_files
    from timingkit.pipeline.inputs import load_context, load_model
    shutil.copy(os.path.join(SAMPLE, "sites.toml"), folder)
    start = open(os.path.join(SAMPLE, "demo-young.true.toml")).read().replace(
        'name = "demo-young"', 'name = "demo-glitcher"')
    with open(os.path.join(folder, "start.toml"), "w") as fh:
        fh.write(start)
    with open(os.path.join(folder, "truth.toml"), "w") as fh:
        fh.write(start + '\n[[glitch]]\nepoch_mjd = "59010"\nfrequency_step_hz = 3e-7\n'
                         'frequency_derivative_step = -2e-14\n')
    truth = load_model(os.path.join(folder, "truth.toml"))
    sites, eph, _ = load_context(truth)
    count = 320
    err = np.where(np.random.default_rng(5).uniform(size=count) < 0.04, 60.0, 12.0)
    toas = simulate_toas(truth, 58850, 59250, count, err, sites, eph,
                         site_names=["north-ridge", "desert-dish"], freqs_mhz=(700.0, 1400.0),
                         flags={"backend": ["wide-a", "wide-a", "wide-b"]}, seed=11)
    write_toa_table(toas, os.path.join(folder, "glitcher.toas"))
    with open(os.path.join(folder, "weak.txt"), "w") as fh:
        fh.write("# TOAs left out of the fit\n# rules\nerr_us>50  weak detection\n")
    outdir = os.path.join(folder, "out")
    glitch_files(os.path.join(folder, "glitcher.toas"), os.path.join(folder, "start.toml"),
                 outdir, exclude_paths=[os.path.join(folder, "weak.txt")], make_plots=False)
    return outdir


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("-o", "--output", default=os.path.join(ROOT, "docs", "explorer.png"))
    args = ap.parse_args()
    from explorer_browser import ExplorerPage, browser_problem, open_browser
    from timingkit.outputs.explorer_page import write_explorer
    problem = browser_problem()
    if problem:
        print(f"cannot make the screenshot: {problem}", file=sys.stderr)
        return 1
    with tempfile.TemporaryDirectory(prefix="timingkit-shot-") as tmp:
        path = write_explorer(make_outputs(tmp))
        with open_browser() as browser:
            page = ExplorerPage(browser, path, width=1200, height=760)
            page.page.fill("#tk-reason", "scintillation fade")
            page.box_between(58950.0, 58972.0)
            x, y = page.plotted("x"), page.plotted("y")
            k = int(np.argmin(np.abs(np.array(x) - 59195.0)))
            sx, sy = page.to_screen(x[k], y[k])
            page.page.mouse.move(sx - 30, sy - 30)
            page.page.mouse.move(sx, sy, steps=3)
            page.page.wait_for_selector("#tk-card:not([hidden])")
            raw = os.path.join(tmp, "shot.png")
            page.screenshot(raw)
            assert not page.errors, page.errors
            page.close()
        from PIL import Image
        os.makedirs(os.path.dirname(os.path.abspath(args.output)), exist_ok=True)
        Image.open(raw).convert("RGB").quantize(colors=64).save(args.output, optimize=True)
    print(f"wrote {args.output} ({os.path.getsize(args.output) / 1024:.0f} kB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
