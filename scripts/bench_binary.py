#!/usr/bin/env python
"""Binary benchmark (issue 4): a 100,000-TOA binary millisecond-pulsar fit
with 20 free parameters against the same fit without the binary component.

``bench_binary()`` simulates an invented MSP (site ``desert-dish`` from the
sample site file, three frequencies, two backends) twice over the same
arrival-time slots: once in a relativistic (Damour-Deruelle) orbit with a
companion Shapiro delay, once isolated. Both fits start from the same
offset in spin frequency, so they take the same number of iterations. It
prints, for the relativistic and the low-eccentricity orbit:

- time of the binary fit (12 non-binary + 8 binary free parameters = 20);
- time of the fit without the binary (the same 12 non-binary parameters),
  and the ratio (target <= 3x);
- the same ratio per iteration, and against a no-binary fit that also has
  20 free parameters (8 DM offsets in place of the orbit), which separates
  the cost of the orbit from the cost of the extra design-matrix columns.

Run: ``python scripts/bench_binary.py [--toas 100000]``; ``scripts/bench.py``
calls :func:`bench_binary`.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SITES = os.path.join(ROOT, "timingkit", "sample_data", "sites.toml")
sys.path.insert(0, ROOT)

START, END = 55000.0, 59000.0
# An invented binary millisecond pulsar: 229.6 Hz, DM 27.2, a 3.8-day
# near-circular orbit (no published pulsar within a few per cent of these).
ISOLATED = """name = "bench-binary-msp"
[position]
ra = "02h51m14.7183265s"
dec = "-36d22m48.03127s"
pm_ra_cosdec_mas_per_yr = 12.4
pm_dec_mas_per_yr = -7.9
parallax_mas = 0.83
[spin]
epoch_mjd = "57000"
frequency_hz = "229.6138472615839"
frequency_derivatives = ["-7.41e-16"]
[dispersion]
dm = 27.163
epoch_mjd = "57000"
derivatives = [1e-4, 1e-5]
%(dm_offsets)s
[[time_offset]]
flag = "backend"
value = "wide-b"
offset_s = 2.0e-6
[[time_offset]]
flag = "backend"
value = "wide-c"
offset_s = -1.0e-6
"""
BINARIES = {
    "relativistic": """
[binary]
model = "relativistic"
orbital_period_days = "3.8172064518"
orbital_period_derivative = 3.0e-13
projected_semi_major_axis_lt_s = 4.4931183
eccentricity = 2.1e-5
periastron_longitude_deg = 231.7
periastron_epoch_mjd = "57001.43"
shapiro_range_s = 1.03e-6
shapiro_shape = 0.9712
""",
    "low_eccentricity": """
[binary]
model = "low_eccentricity"
orbital_period_days = "3.8172064518"
orbital_period_derivative = 3.0e-13
projected_semi_major_axis_lt_s = 4.4931183
e_sin_omega = -1.65e-5
e_cos_omega = -1.30e-5
ascending_node_epoch_mjd = "56998.97"
companion_mass_msun = 0.21
sin_inclination = 0.9712
""",
}
NON_BINARY_FREE = ["spin.frequency_hz", "spin.frequency_derivatives.0", "position.ra",
                   "position.dec", "position.pm_ra_cosdec_mas_per_yr",
                   "position.pm_dec_mas_per_yr", "position.parallax_mas", "dispersion.dm",
                   "dispersion.derivatives.0", "dispersion.derivatives.1",
                   "time_offset.0.offset_s", "time_offset.1.offset_s"]
BINARY_FREE = {
    "relativistic": ["orbital_period_days", "orbital_period_derivative",
                     "projected_semi_major_axis_lt_s", "eccentricity", "periastron_longitude_deg",
                     "periastron_epoch_mjd", "shapiro_range_s", "shapiro_shape"],
    "low_eccentricity": ["orbital_period_days", "orbital_period_derivative",
                         "projected_semi_major_axis_lt_s", "e_sin_omega", "e_cos_omega",
                         "ascending_node_epoch_mjd", "companion_mass_msun", "sin_inclination"],
}


def _dm_offset_block(count: int) -> str:
    if not count:
        return ""
    # ranges over the first count/(count+1) of the span: the rest pins the mean DM
    edges = [START + (END - START) * k / (count + 1) for k in range(count + 1)]
    ranges = ", ".join(f"[{a:.1f}, {b:.1f}]" for a, b in zip(edges, edges[1:]))
    return f"dm_offset_ranges_mjd = [{ranges}]\ndm_offsets = [{', '.join(['0.0'] * count)}]"


def _simulate(text, n, sites, eph, times=None, seed=1):
    from timingkit.model import TimingModel
    from timingkit.geometry.observations import prepare_observations
    from timingkit.model.simulate import simulate_toas
    model = TimingModel.from_text(text)
    toas = simulate_toas(model, START, END, n, 1.0, sites, eph, site_names=["desert-dish"],
                         freqs_mhz=[820.0, 1400.0, 2300.0], seed=seed,
                         flags={"backend": ["wide-a", "wide-b", "wide-c"]}, times=times)
    return model, prepare_observations(toas, sites, eph)


def _timed_fit(model, obs, free, repeats: int = 1):
    from timingkit.fit.least_squares import fit
    start = model.copy()
    start.parameter("spin.frequency_hz").add(2e-11)
    best, res = float("inf"), None
    for _ in range(repeats):
        started = time.perf_counter()
        res = fit(start, obs, free=free)
        best = min(best, time.perf_counter() - started)
    return best, res


def bench_binary(n_toas: int = 100_000, repeats: int = 2) -> dict:
    """Print and return the timings described in the module docstring."""
    import numpy as np
    from timingkit.geometry.ephemeris import load_ephemeris
    from timingkit.model.simulate import arrival_times
    from timingkit.geometry.sites import SiteTable

    sites = SiteTable.with_files([SITES])
    eph = load_ephemeris()
    times = arrival_times(START, END, n_toas, np.random.default_rng(5))
    started = time.perf_counter()
    iso_text = ISOLATED % {"dm_offsets": ""}
    iso_model, iso_obs = _simulate(iso_text, n_toas, sites, eph, times)
    sim_s = time.perf_counter() - started
    t_iso, r_iso = _timed_fit(iso_model, iso_obs, NON_BINARY_FREE, repeats)
    wide_text = ISOLATED % {"dm_offsets": _dm_offset_block(8)}
    wide_model = type(iso_model).from_text(wide_text)
    wide_free = NON_BINARY_FREE + [f"dispersion.dm_offsets.{k}" for k in range(8)]
    t_wide, r_wide = _timed_fit(wide_model, iso_obs, wide_free, repeats)
    print(f"binary fit benchmark: {n_toas} TOAs (simulation of each set {sim_s:.1f} s)")
    print(f"  no binary, {len(NON_BINARY_FREE)} free: {t_iso:.2f} s, {r_iso.iterations} "
          f"iterations ({t_iso / r_iso.iterations:.3f} s each)")
    print(f"  no binary, {len(wide_free)} free (8 DM offsets): {t_wide:.2f} s, "
          f"{r_wide.iterations} iterations ({t_wide / r_wide.iterations:.3f} s each)")
    out = {"toas": n_toas, "no_binary_s": t_iso, "no_binary_iterations": r_iso.iterations,
           "no_binary_20_free_s": t_wide}
    for name, block in BINARIES.items():
        model, obs = _simulate(iso_text + block, n_toas, sites, eph, times)
        free = NON_BINARY_FREE + [f"binary.{k}" for k in BINARY_FREE[name]]
        t_bin, r_bin = _timed_fit(model, obs, free, repeats)
        ratio = t_bin / t_iso
        per_iter = (t_bin / r_bin.iterations) / (t_iso / r_iso.iterations)
        print(f"  {name} binary, {len(free)} free: {t_bin:.2f} s, {r_bin.iterations} "
              f"iterations, reduced chi2 {r_bin.reduced_chi2:.3f}")
        print(f"    ratio to the fit without the binary: {ratio:.2f}x (target <= 3x); "
              f"per iteration {per_iter:.2f}x; against the 20-parameter no-binary fit "
              f"{t_bin / t_wide:.2f}x")
        out[name] = {"seconds": t_bin, "iterations": r_bin.iterations, "ratio": ratio,
                     "ratio_per_iteration": per_iter, "ratio_vs_20_free": t_bin / t_wide}
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--toas", type=int, default=100_000)
    ap.add_argument("--repeats", type=int, default=2, help="best of this many fits")
    args = ap.parse_args()
    bench_binary(args.toas, args.repeats)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
