#!/usr/bin/env python
"""Noise benchmark (issue 7): generalised least squares with 30 Fourier
frequencies of red noise on 10,000 TOAs against the weighted least-squares
fit of the same TOAs (target <= 5x), and how the GLS cost grows with the
number of TOAs (target: linear, Woodbury identity, no N x N matrix).

``bench_noise()`` simulates an invented young pulsar at the geocentre (two
observing frequencies, red noise injected) and prints:

- the WLS fit (spin frequency, its derivative, dispersion measure, position;
  no noise sections) and the GLS fit of the same free parameters with a
  fixed [red_noise] of 30 frequencies: times and ratio, per iteration too;
- the maximum-likelihood estimate of the red-noise amplitude and index on
  top of that (reported separately: it is many likelihood evaluations);
- one linear GLS solve (timingkit.fit.gls.gls_solve) for N = 1,250 ... 40,000
  and the log-log slope of time against N (1 = linear).

Both fits start from the same offset in spin frequency and run in this
process one after the other; medians of three runs. The load average is
printed beside the figures: on a busy machine a multi-threaded BLAS slows
the many small LAPACK calls of both fits (the GLS ones most), so the same
measurement is repeated in a child process with one BLAS thread
(OPENBLAS_NUM_THREADS=1), which is the figure to compare across machines.

Run: ``python scripts/bench_noise.py [--toas 10000]``; ``scripts/bench.py``
calls :func:`bench_noise`.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

START, END = 55000.0, 59000.0
MODEL = """name = "bench-noisy-young"
[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"
[spin]
epoch_mjd = "57000"
frequency_hz = "10.6173"
frequency_derivatives = ["-1.0e-13"]
[dispersion]
dm = 131.8
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm", "position.ra",
        "position.dec"]
"""
RED = """
[red_noise]
amplitude_log10 = -11.5
spectral_index = 4.0
frequencies = 30
"""
FREE_RED = ("red_noise.amplitude_log10", "red_noise.spectral_index")


def _median_time(func, repeats=3):
    times, out = [], None
    for _ in range(repeats):
        started = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - started)
    return sorted(times)[len(times) // 2], out


def _load() -> float:
    return os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")


SIZES = (1250, 2500, 5000, 10_000, 20_000, 40_000)


def bench_noise(toas: int = 10_000, sizes=SIZES, single_thread_child: bool = True) -> dict:
    """Measure here (default BLAS threads), then in a one-thread child."""
    out = {"default_threads": _measure(toas, sizes)}
    if single_thread_child:
        import subprocess
        env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1",
                   MKL_NUM_THREADS="1")
        print("same, one BLAS thread (child process):")
        res = subprocess.run([sys.executable, os.path.abspath(__file__), "--toas", str(toas),
                              "--here-only"], env=env, capture_output=True, text=True)
        print(res.stdout.rstrip() or res.stderr[-2000:])
        out["single_thread_output"] = res.stdout
    return out


def _measure(toas: int, sizes) -> dict:
    import numpy as np

    from timingkit.geometry.ephemeris import load_ephemeris
    from timingkit.fit.least_squares import fit
    from timingkit.fit.gls import gls_solve
    from timingkit.model import TimingModel
    from timingkit.model.noise import fourier_basis, fourier_prior_variances
    from timingkit.geometry.observations import prepare_observations
    from timingkit.model.simulate import simulate_toas
    from timingkit.geometry.sites import SiteTable

    eph = load_ephemeris()
    sites = SiteTable()
    truth = TimingModel.from_text(MODEL + RED)
    started = time.perf_counter()
    sim = simulate_toas(truth, START, END, toas, 1.0, sites, eph, site_names=["geocentre"],
                        freqs_mhz=[820.0, 1400.0], seed=7)
    obs = prepare_observations(sim, sites, eph)
    print(f"noise benchmark: {toas} TOAs simulated and prepared in "
          f"{time.perf_counter() - started:.1f} s (load average {_load():.1f})")

    def start(text):
        m = TimingModel.from_text(text)
        m.parameter("spin.frequency_hz").add(3e-11)
        return m

    wls_model, gls_model = start(MODEL), start(MODEL + RED)
    t_wls, r_wls = _median_time(lambda: fit(wls_model, obs))
    t_gls, r_gls = _median_time(lambda: fit(gls_model, obs))
    assert r_gls.noise.method == "generalised least squares"
    ml_model = start(MODEL + RED.replace("-11.5", "-12.5").replace("4.0", "3.0"))
    for name in FREE_RED:
        ml_model.parameter(name).free = True
    t_ml, r_ml = _median_time(lambda: fit(ml_model, obs), repeats=1)
    est = r_ml.noise.estimate

    print(f"  WLS fit ({len(r_wls.free_names)} free + offset): {t_wls:.3f} s, "
          f"{r_wls.iterations} iterations ({t_wls / r_wls.iterations * 1e3:.1f} ms each)")
    print(f"  GLS fit, 30 red-noise frequencies:  {t_gls:.3f} s, {r_gls.iterations} iterations "
          f"({t_gls / r_gls.iterations * 1e3:.1f} ms each)")
    ratio = t_gls / t_wls
    per_it = (t_gls / r_gls.iterations) / (t_wls / r_wls.iterations)
    print(f"  GLS / WLS time: {ratio:.2f}x (per iteration {per_it:.2f}x; target <= 5x)")
    print(f"  + ML red-noise amplitude and index: {t_ml:.2f} s in total, "
          f"{est.evaluations} likelihood evaluations, {r_ml.noise.rounds} rounds; "
          f"amplitude_log10 {est.values['red_noise.amplitude_log10']:.3f} ± "
          f"{est.uncertainties['red_noise.amplitude_log10'] or float('nan'):.3f} "
          f"(injected -11.5), spectral_index {est.values['red_noise.spectral_index']:.2f} ± "
          f"{est.uncertainties['red_noise.spectral_index'] or float('nan'):.2f} (injected 4.0)")

    # N-scaling of one linear GLS solve (offset, linear, quadratic + 3 random columns; 30
    # Fourier frequencies)
    rng = np.random.default_rng(3)
    span = (END - START) * 86400.0
    phi = fourier_prior_variances(span, 30, -11.5, 4.0)
    solve_times = []
    for n in sizes:
        t = np.sort(rng.uniform(0, span, n))
        design = np.column_stack([np.ones(n), t, 0.5 * t ** 2, rng.normal(size=(n, 3))])
        basis = fourier_basis(t, span, 30)
        err = np.full(n, 1e-6)
        resid = rng.normal(size=n) * 1e-6
        names = [f"p{j}" for j in range(design.shape[1])]
        dt, _ = _median_time(lambda: gls_solve(design, resid, err, basis, phi, names), repeats=5)
        solve_times.append(dt)
    slope = float(np.polyfit(np.log(sizes), np.log(solve_times), 1)[0])
    upper = float(np.polyfit(np.log(sizes[len(sizes) // 2:]),
                             np.log(solve_times[len(sizes) // 2:]), 1)[0])
    print("  one GLS solve (6 columns + 60 Fourier columns):")
    for n, dt in zip(sizes, solve_times):
        print(f"    N = {n:6d}: {dt * 1e3:8.2f} ms  ({dt / n * 1e9:6.0f} ns per TOA)")
    print(f"  log-log slope of solve time vs N: {slope:.2f} overall, {upper:.2f} for the larger "
          f"half (1.0 = linear; an N x N method would be 2-3)")
    print(f"  load average at the end: {_load():.1f}")
    return {"toas": toas, "wls_s": t_wls, "gls_s": t_gls, "ratio": ratio,
            "ratio_per_iteration": per_it, "ml_noise_s": t_ml, "sizes": list(sizes),
            "solve_s": solve_times, "slope": slope, "slope_upper": upper}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--toas", type=int, default=10_000)
    ap.add_argument("--here-only", action="store_true",
                    help="no one-thread child run (used by that child)")
    args = ap.parse_args(argv)
    bench_noise(args.toas, single_thread_child=not args.here_only)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
