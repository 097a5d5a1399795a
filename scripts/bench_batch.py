#!/usr/bin/env python
"""Batch benchmark (issue 6) and the simulated source trees it and the tests use.

``bench_batch()`` simulates N invented sources of M TOAs each and prints:
- the speed-up of two workers over one on the same 200 sources (target >= 1.7x
  on a machine with at least two free cores);
- the scaling with the number of sources: time(200) / time(50), target within
  10 % of 4, and the same ratio with the fixed start-up time (a batch of one
  source per worker) taken off, which isolates the growth per source;
- the per-source overhead: the first source a worker fits (imports, ephemeris
  and site tables loaded) against the median of the later ones, and the wall
  time per source against the median fit time inside the workers, which shows
  that the start-up cost is paid once per worker, not once per source.

All sources are invented (names ``demo-batch-NNN``, site ``desert-dish`` from
the sample site file). Run: ``python scripts/bench_batch.py [--sources 200]
[--toas 2000]``; ``scripts/bench.py`` calls :func:`bench_batch`.
"""

from __future__ import annotations

import argparse
import math
import os
import shutil
import statistics
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SITE_FILE = ROOT / "timingkit" / "sample_data" / "sites.toml"
JULIAN_YEAR_S = 365.25 * 86400.0

sys.path.insert(0, str(ROOT / "scripts"))
from sample_models import model_text  # noqa: E402


def simulated_spin(index: int) -> dict:
    """Invented, deterministic spin and position of source ``index``: periods from
    2 ms to 2 s and characteristic ages from 1e4 to 1e9 yr (spread over the
    P-Pdot diagram), Pdot = P / (2 age)."""
    golden = (index * 0.6180339887498949) % 1.0
    period_s = 10 ** (-2.7 + 3.0 * golden)
    age_yr = 10 ** (4.0 + 5.0 * ((index * 0.41421356237) % 1.0))
    period_derivative = period_s / (2.0 * age_yr * JULIAN_YEAR_S)
    ra = f"{index % 24:02d}h{(7 * index) % 60:02d}m{(13.1 * index) % 60:07.4f}s"
    dec = (f"{'+' if index % 2 else '-'}{(11 * index) % 60:02d}d{(17 * index) % 60:02d}m"
           f"{(19.7 * index) % 60:06.3f}s")
    return {"frequency_hz": 1.0 / period_s,
            "frequency_derivative": -period_derivative / period_s ** 2,
            "dm": round(10.0 + 7.3 * index % 200, 3),
            "position": f'ra = "{ra}"\ndec = "{dec}"'}


def _write_model(path: Path, name: str, spin: dict, frequency_offset_hz=0.0,
                 derivative_offset=0.0, dm_offset=0.0):
    text = model_text(name, spin["position"], repr(spin["frequency_hz"] + frequency_offset_hz),
                      [repr(spin["frequency_derivative"] + derivative_offset)],
                      repr(spin["dm"] + dm_offset))
    path.write_text(text, encoding="utf-8")


def _simulate_one(task) -> str:
    folder, name, index, toas_per_source, error_us, seed = task
    from timingkit.pipeline.inputs import load_context, load_model
    from timingkit.model.simulate import simulate_toas
    from timingkit.formats.toa_writer import write_toa_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(SITE_FILE, folder / "sites.toml")
    spin = simulated_spin(index)
    truth = folder / ".true-model.toml"  # hidden: not picked up as a source model
    _write_model(truth, name, spin)
    model = load_model(str(truth))
    sites, eph, clocks = load_context(model)
    toas = simulate_toas(model, 58800.0, 59200.0, toas_per_source, error_us, sites, eph,
                         site_names=("desert-dish",), freqs_mhz=(820.0, 1400.0), seed=seed,
                         clocks=clocks)
    write_toa_table(toas, folder / "obs.toas")
    # starting model slightly off the truth, so the fit has work to do but stays
    # phase-connected (offsets << 1 cycle over the 400-day span)
    _write_model(folder / "model.toml", name, spin, frequency_offset_hz=2e-9,
                 derivative_offset=-2e-18, dm_offset=0.01)
    return name


def write_simulated_sources(root, count: int, toas_per_source: int = 150, *, error_us: float = 5.0,
                            broken: tuple[int, ...] = (), seed: int = 2024,
                            workers: int | None = None) -> list[str]:
    """Write ``count`` invented sources into ``root/demo-batch-NNN/`` (``obs.toas``,
    ``model.toml``, ``sites.toml``, and the true model as hidden
    ``.true-model.toml``). Sources whose index is in ``broken`` get a TOA table
    with a malformed MJD on its third data line. Simulated in parallel."""
    root = Path(root)
    tasks = [(str(root / f"demo-batch-{i:03d}"), f"demo-batch-{i:03d}", i, toas_per_source,
              error_us, seed + i) for i in range(count)]
    workers = workers or min(os.cpu_count() or 1, count)
    if workers > 1 and count > 1:
        import multiprocessing

        with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            names = list(pool.map(_simulate_one, tasks))
    else:
        names = [_simulate_one(t) for t in tasks]
    for i in broken:
        table = root / f"demo-batch-{i:03d}" / "obs.toas"
        lines = table.read_text(encoding="utf-8").splitlines(keepends=True)
        header = next(n for n, line in enumerate(lines) if line.strip() and not line.startswith("#"))
        fields = lines[header + 3].split()
        fields[0] = fields[0].replace(".", "x", 1)  # e.g. 58812x1234...: not a decimal MJD
        lines[header + 3] = " ".join(fields) + "\n"
        table.write_text("".join(lines), encoding="utf-8")
    return names


def _timed_batch(sources, outdir, workers):
    from timingkit.batch.runner import run_batch

    start = time.perf_counter()
    result = run_batch(sources, outdir, workers=workers, progress=False)
    wall = time.perf_counter() - start
    if result.failed:
        raise RuntimeError(f"benchmark sources failed: {result.failed[:3]}")
    return wall, result


def _first_and_later(result) -> tuple[list[float], list[float]]:
    first, later, seen = [], [], set()
    for outcome in result.outcomes:  # outcomes are in source order; workers take them in order
        (later if outcome.worker in seen else first).append(outcome.elapsed_s)
        seen.add(outcome.worker)
    return first, later


def bench_batch(sources: int = 200, small: int = 50, toas_per_source: int = 2000,
                keep: str | None = None) -> dict:
    """Run the batch benchmark and print its figures; returns them as a dict."""
    from timingkit.batch.sources import discover_sources

    cores = os.cpu_count() or 1
    work = Path(keep) if keep else Path(tempfile.mkdtemp(prefix="timingkit-bench-batch-"))
    try:
        load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
        print(f"batch benchmark: {sources} simulated sources x {toas_per_source} TOAs "
              f"({cores} cores, load average {load:.1f} before the start: speed-ups are only "
              "meaningful when no other work competes for the cores)")
        start = time.perf_counter()
        write_simulated_sources(work / "sources", sources, toas_per_source)
        print(f"  simulated the sources in {time.perf_counter() - start:.1f} s")
        everything = discover_sources(work / "sources")
        one, r1 = _timed_batch(everything, work / "out-1", 1)
        two, r2 = _timed_batch(everything, work / "out-2", 2)
        part, _ = _timed_batch(everything[:small], work / "out-small", 2)
        # start-up alone: one source per worker (spawn, imports, first fit, summary files)
        startup, _ = _timed_batch(everything[:2], work / "out-startup", 2)
        first, later = _first_and_later(r1)
        warm_s = statistics.median(later) if later else float("nan")
        warm_two_s = statistics.median(_first_and_later(r2)[1] or [float("nan")])
        figures = {
            "sources": sources, "toas_per_source": toas_per_source,
            "one_worker_s": one, "two_workers_s": two, "speedup_2_vs_1": one / two,
            "small_sources": small, "small_two_workers_s": part,
            "scaling_ratio": two / part, "scaling_expected": sources / small,
            "startup_two_workers_s": startup,
            "scaling_ratio_net": (two - startup) / (part - startup),
            "scaling_expected_net": (sources - 2) / (small - 2),
            "first_source_s": statistics.mean(first), "warm_source_median_s": warm_s,
            "warm_source_median_two_workers_s": warm_two_s,
            "wall_per_source_1_worker_s": one / sources,
        }
        ratio_error = abs(figures["scaling_ratio"] / figures["scaling_expected"] - 1.0)
        print(f"  1 worker : {one:8.1f} s  ({one / sources * 1e3:.0f} ms per source)")
        print(f"  2 workers: {two:8.1f} s  speed-up {one / two:.2f}x (target >= 1.7x"
              + ("" if cores >= 2 else "; this machine has one core") + ")")
        print(f"  median fit time inside a worker: {warm_s:.3f} s with 1 worker, {warm_two_s:.3f} s "
              "with 2 (a larger second figure means the cores were shared with other work)")
        net_error = abs(figures["scaling_ratio_net"] / figures["scaling_expected_net"] - 1.0)
        print(f"  {small} vs {sources} sources (2 workers): {part:.1f} s vs {two:.1f} s, ratio "
              f"{two / part:.2f} (ideal {sources / small:.0f}, off by {ratio_error:.1%}; "
              "target within 10 %)")
        print(f"  start-up alone (2 sources, 2 workers): {startup:.1f} s; without it the ratio is "
              f"{figures['scaling_ratio_net']:.2f} (ideal {figures['scaling_expected_net']:.2f}, "
              f"off by {net_error:.1%})"
              + (": the time per source does not grow with the batch" if net_error < 0.1 else ""))
        print(f"  per-source overhead: first source in a fresh worker {figures['first_source_s']:.2f} s"
              f" (imports, ephemeris, tables), later sources median {warm_s:.3f} s; wall time "
              f"per source with 1 worker {one / sources:.3f} s "
              f"(= {one / sources / warm_s:.2f} x the warm fit time)" if later else "")
        return figures
    finally:
        if not keep:
            shutil.rmtree(work, ignore_errors=True)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sources", type=int, default=200)
    parser.add_argument("--small", type=int, default=50)
    parser.add_argument("--toas", type=int, default=2000)
    parser.add_argument("--keep", default=None, help="keep the simulated tree and outputs here")
    args = parser.parse_args(argv)
    figures = bench_batch(args.sources, args.small, args.toas, args.keep)
    return 0 if all(math.isfinite(v) for v in figures.values() if isinstance(v, float)) else 1


if __name__ == "__main__":
    sys.exit(main())
