#!/usr/bin/env python
"""Benchmarks named by the issues, printed (never asserted in tests).

    python scripts/bench.py                 # everything
    python scripts/bench.py barycentre read # some sections
    python scripts/bench.py --quick         # smaller sizes, a quick look

Each heavy measurement runs in a fresh child process so peak memory
(ru_maxrss) and import costs are its own. Ratios are against a reference
measured in the same run where one exists (astropy for barycentring).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SITES = os.path.join(ROOT, "timingkit", "sample_data", "sites.toml")
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.join(ROOT, "scripts"))

from sample_models import MSP_POSITION, MSP_TRUE, model_text  # noqa: E402

# the demo's invented millisecond pulsar, with its epochs in the simulated span
MODEL = model_text("bench-msp", MSP_POSITION, **MSP_TRUE, epoch_mjd="58000", sites=SITES)
# the start of the fit: slightly off, so the fit has work to do
START_MODEL = model_text("bench-msp", MSP_POSITION, "401.735120468732",
                         MSP_TRUE["frequency_derivatives"], "17.9336", epoch_mjd="58000",
                         sites=SITES)


def child(code: str) -> dict:
    """Run code in a fresh interpreter; it must print one JSON line last."""
    prog = "import resource, json, time\n" + textwrap.dedent(code) + \
        "\nout['peak_rss_mb'] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024\n" \
        "print(json.dumps(out))\n"
    res = subprocess.run([sys.executable, "-c", prog], capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise RuntimeError(res.stderr[-3000:])
    return json.loads(res.stdout.strip().splitlines()[-1])


def write_table(path: str, n: int, start=51544.0, end=51544.0 + 40 * 365.25, seed=1) -> None:
    import numpy as np
    rng = np.random.default_rng(seed)
    mjd = np.sort(rng.uniform(start, end, n))
    day = np.floor(mjd).astype(np.int64)
    frac = np.round((mjd - day) * 1e15).astype(np.int64)
    sites = np.array(["desert-dish", "lake-array", "north-ridge"])[rng.integers(0, 3, n)]
    freq = np.array(["820.0", "1400.0", "2300.0"])[rng.integers(0, 3, n)]
    with open(path, "w") as fh:
        fh.write("mjd err_us freq_mhz site\n")
        for i in range(n):
            fh.write(f"{day[i]}.{frac[i]:015d} 1.0 {freq[i]} {sites[i]}\n")


def timed_process(argv) -> tuple[float, float]:
    """(wall seconds, CPU seconds) of one whole child process (start-up included)."""
    import resource
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    res = subprocess.run(argv, capture_output=True, text=True, cwd=ROOT)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if res.returncode != 0:
        raise RuntimeError(res.stderr[-3000:])
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


ASTROPY_BARYCENTRE = """
import numpy as np
import astropy.units as u
from astropy.time import Time
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.utils import iers
iers.conf.auto_download = False
iers.conf.auto_max_age = None
iers.conf.iers_degraded_accuracy = 'warn'
import warnings; warnings.simplefilter('ignore')
from timingkit.formats.toa_reader import read_toa_table
from timingkit.geometry.sites import SiteTable
from timingkit.geometry.ephemeris import builtin_ephemeris_path
toas = read_toa_table(%(toas)r)
table = SiteTable.with_files([%(sites)r])
c = SkyCoord(%(ra)r, %(dec)r, frame="icrs")
tdb_day = np.empty(len(toas)); tdb_frac = np.empty(len(toas)); roemer = np.empty(len(toas))
for name in np.unique(toas.site):
    idx = np.nonzero(toas.site == name)[0]
    site = table.lookup(str(name))
    loc = EarthLocation.from_geocentric(*site.geocentric_itrf_m, unit=u.m)
    t = Time(toas.mjd_day[idx], toas.mjd_frac[idx], format="mjd", scale="utc", location=loc)
    tdb = t.tdb
    roemer[idx] = t.light_travel_time(c, kind="barycentric", location=loc,
                                      ephemeris=builtin_ephemeris_path()).to_value(u.s)
    tdb_day[idx] = tdb.jd1 - 2400000.5; tdb_frac[idx] = tdb.jd2
np.savez(%(out)r, tdb_day=tdb_day, tdb_frac=tdb_frac, roemer=roemer)
"""


def _model_key(key: str) -> str:
    """A quoted value of the benchmark model's [position] (the same sky position for both)."""
    import re
    return re.search(rf'^{key} = "([^"]+)"', MSP_POSITION, re.M).group(1)


def bench_barycentre(n: int, tmp: str, repeats: int = 2) -> None:
    """``timingkit barycentre`` (the whole command: start-up, table -> CSV) against
    astropy's own path (Time.tdb + light_travel_time, also a whole process), each run
    ``repeats`` times alternately; the best of each is compared, in wall and CPU time."""
    toas = os.path.join(tmp, f"bary{n}.toas")
    model = os.path.join(tmp, "model.toml")
    write_table(toas, n)
    with open(model, "w") as fh:
        fh.write(MODEL)
    ours_csv = os.path.join(tmp, "ours.csv")
    ref_out = os.path.join(tmp, "astropy.npz")
    ours_cmd = [sys.executable, "-m", "timingkit", "barycentre", toas, model, "-o", ours_csv]
    ref_cmd = [sys.executable, "-c",
               ASTROPY_BARYCENTRE % dict(toas=toas, sites=SITES, out=ref_out,
                                         ra=_model_key("ra"), dec=_model_key("dec"))]
    ours, ref = [], []
    for _ in range(repeats):
        ours.append(timed_process(ours_cmd))
        ref.append(timed_process(ref_cmd))
    import numpy as np
    import csv
    from decimal import Decimal
    z = np.load(ref_out)
    tdb_day, tdb_frac = z["tdb_day"], z["tdb_frac"]
    with open(ours_csv) as fh:
        rows = list(csv.DictReader(fh))
    whole = np.floor(tdb_day + tdb_frac)
    ours_tdb = np.array([float(Decimal(r["tdb_mjd"]) - Decimal(int(d)))
                         for r, d in zip(rows, whole)])
    diff_ns = float(np.max(np.abs(ours_tdb - ((tdb_day - whole) + tdb_frac))) * 86400e9)
    wall = min(w for w, _ in ours), min(w for w, _ in ref)
    cpu = min(c for _, c in ours), min(c for _, c in ref)
    print(f"barycentre {n:,} TOAs (whole command, table -> CSV; best of {repeats}): timingkit "
          f"{wall[0]:.2f} s wall / {cpu[0]:.2f} s CPU; astropy Time.tdb + light_travel_time "
          f"{wall[1]:.2f} s / {cpu[1]:.2f} s; speed-up {wall[1] / wall[0]:.1f}x wall, "
          f"{cpu[1] / cpu[0]:.1f}x CPU (target >= 10x, aim 20x); TDB agreement "
          f"{diff_ns:.3f} ns (15-decimal CSV rounding included)")


def bench_read(n: int, tmp: str) -> None:
    toas = os.path.join(tmp, f"read{n}.toas")
    write_table(toas, n)
    r = child(f"""
        from timingkit.formats.toa_reader import read_toa_table
        started = time.perf_counter()
        t = read_toa_table({toas!r})
        out = dict(seconds=time.perf_counter() - started, n=len(t))
    """)
    print(f"read {r['n']:,}-line TOA table: {r['seconds']:.2f} s, peak memory "
          f"{r['peak_rss_mb']:.0f} MB (targets: < 5 s, < 1 GB)")


def _fit_child(n: int, tmp: str, with_figures: bool = False) -> dict:
    toas = os.path.join(tmp, f"fit{n}.toas")
    model = os.path.join(tmp, "model.toml")
    with open(model, "w") as fh:
        fh.write(MODEL)
    sim = child(f"""
        started = time.perf_counter()
        from timingkit.pipeline.inputs import load_context, load_model
        from timingkit.model.simulate import simulate_toas
        from timingkit.formats.toa_writer import write_toa_table
        m = load_model({model!r})
        sites, eph, clocks = load_context(m)
        toas = simulate_toas(m, 55000, 60000, {n}, 1.0, sites, eph,
                             site_names=["desert-dish", "lake-array"], freqs_mhz=[820, 1400, 2300],
                             seed=1)
        write_toa_table(toas, {toas!r})
        out = dict(seconds=time.perf_counter() - started)
    """)
    start = os.path.join(tmp, "start.toml")
    with open(start, "w") as fh:
        fh.write(START_MODEL)
    fit = child(f"""
        started = time.perf_counter()
        from timingkit.pipeline.fit_run import fit_files
        rep = fit_files({toas!r}, {start!r}, {os.path.join(tmp, f'fit{n}')!r}, make_plots=False)
        out = dict(seconds=time.perf_counter() - started, chi2=rep["reduced_chi2"])
    """)
    result = dict(sim=sim, fit=fit)
    if with_figures:     # the same fit with its figures (residuals, day of year, frequency)
        result["fit_figures"] = child(f"""
            started = time.perf_counter()
            from timingkit.pipeline.fit_run import fit_files
            rep = fit_files({toas!r}, {start!r}, {os.path.join(tmp, f'fitfig{n}')!r},
                            make_plots=True)
            seconds = time.perf_counter() - started
            # the figures alone, drawn again from the written tables (steadier than the
            # difference of two whole runs on a shared machine)
            import os
            from timingkit.outputs.residual_table import ResidualTable
            from timingkit.outputs import plotting
            folder = {os.path.join(tmp, f'fitfig{n}')!r}
            post = ResidualTable.read_csv(os.path.join(folder, "residuals.csv"))
            pre = ResidualTable.read_csv(os.path.join(folder, "prefit_residuals.csv"))
            t1 = time.perf_counter()
            plotting.plot_residuals(post, prefit=pre, frequency_hz=401.7,
                                    path=os.path.join(folder, "again.png"))
            plotting.plot_residuals_vs_day_of_year(post, os.path.join(folder, "again_doy.png"),
                                                   frequency_hz=401.7)
            plotting.plot_residuals_vs_frequency(post, os.path.join(folder, "again_f.png"),
                                                 frequency_hz=401.7)
            out = dict(seconds=seconds, figures_s=time.perf_counter() - t1)
        """)
    return result


def bench_fit(sizes, tmp: str) -> None:
    results = {n: _fit_child(n, tmp, with_figures=(n == max(sizes))) for n in sizes}
    for n, r in results.items():
        print(f"simulate {n:,} TOAs: {r['sim']['seconds']:.1f} s (target < 60 s at 1e6); "
              f"fit (spin + DM, whole command without plots): {r['fit']['seconds']:.1f} s, peak "
              f"{r['fit']['peak_rss_mb']:.0f} MB, reduced chi2 {r['fit']['chi2']:.3f} "
              "(target < 60 s, < 3 GB at 1e6)")
        if "fit_figures" in r:
            with_figures = r["fit_figures"]["seconds"]
            print(f"fit {n:,} TOAs with figures (residuals, day of year, observing frequency; "
                  f"density images above 20,000 TOAs): {with_figures:.1f} s, without "
                  f"{r['fit']['seconds']:.1f} s; the three figures alone "
                  f"{r['fit_figures']['figures_s']:.1f} s (issue 14 before: 75 s with, 16.6 s "
                  "without)")
    if len(sizes) == 2:
        a, b = sizes
        print(f"fit scaling {a:,} -> {b:,} TOAs: "
              f"{results[b]['fit']['seconds'] / results[a]['fit']['seconds']:.1f}x "
              f"for {b / a:.0f}x the TOAs (target <= 12x at 10x)")


def bench_sites(n: int) -> None:
    r = child(f"""
        import numpy as np
        import astropy.units as u
        from astropy.time import Time
        from astropy.coordinates import EarthLocation
        from astropy.utils import iers
        iers.conf.auto_download = False
        iers.conf.auto_max_age = None
        iers.conf.iers_degraded_accuracy = 'warn'
        import warnings; warnings.simplefilter('ignore')
        from timingkit.geometry.sites import SiteTable, site_gcrs_posvel
        from timingkit.numerics.timearray import SplitTime
        from timingkit.geometry import timescales
        site = SiteTable.with_files([{SITES!r}]).lookup("desert-dish")
        rng = np.random.default_rng(0)
        mjd = np.sort(rng.uniform(51544, 51544 + 25 * 365.25, {n}))
        day = np.floor(mjd); utc = SplitTime(day, mjd - day, "utc")
        tt = timescales.utc_to_tt(utc)
        from timingkit.geometry import earth_orientation
        earth_orientation.eop_table()     # one-time table load, paid once per process
        started = time.perf_counter(); pos, vel = site_gcrs_posvel(site, utc, tt)
        ours = time.perf_counter() - started
        loc = EarthLocation.from_geocentric(*site.geocentric_itrf_m, unit=u.m)
        t = Time(day, mjd - day, format="mjd", scale="utc")
        started = time.perf_counter(); p, v = loc.get_gcrs_posvel(t); ref = time.perf_counter() - started
        dp = np.max(np.linalg.norm(pos - p.xyz.to_value(u.m).T, axis=1))
        dv = np.max(np.linalg.norm(vel - v.xyz.to_value(u.m / u.s).T, axis=1))
        out = dict(ours=ours, ref=ref, dp=float(dp), dv=float(dv))
    """)
    print(f"site GCRS posvel, {n:,} times: timingkit {r['ours']:.2f} s, astropy "
          f"{r['ref']:.2f} s, speed-up {r['ref'] / r['ours']:.0f}x; max difference "
          f"{r['dp'] * 100:.2f} cm, {r['dv'] * 1000:.3f} mm/s (limits 3 cm, 1 mm/s)")


def bench_predict(n: int, tmp: str) -> None:
    model = os.path.join(tmp, "model.toml")
    with open(model, "w") as fh:
        fh.write(MODEL)
    r = child(f"""
        import numpy as np
        from timingkit.pipeline.inputs import load_context, load_model
        from timingkit.predict import PhaseContext, build_predictor, model_phase_at
        from timingkit.numerics.timearray import SplitTime
        m = load_model({model!r})
        sites, eph, clocks = load_context(m)
        ctx = PhaseContext(sites, eph, clocks)
        t0 = time.perf_counter()
        p = build_predictor(m, "desert-dish", "60000", "60001", 1400.0, ctx)
        build = time.perf_counter() - t0
        rng = np.random.default_rng(0)
        frac = rng.uniform(0, 1, {n})
        day = np.full({n}, 60000.0)
        p.phase((day[:1000], frac[:1000]))                  # warm up
        ordered = np.sort(frac)
        t0, c0 = time.perf_counter(), time.process_time(); p.phase((day, ordered))
        phase_s, phase_cpu = time.perf_counter() - t0, time.process_time() - c0
        t0, c0 = time.perf_counter(), time.process_time(); whole, fraction = p.phase((day, frac))
        random_s, random_cpu = time.perf_counter() - t0, time.process_time() - c0
        t0 = time.perf_counter(); p.frequency_hz((day, ordered))
        freq_s = time.perf_counter() - t0
        check = SplitTime(day[:2000], frac[:2000], "utc")
        mi, mf = model_phase_at(m, check, "desert-dish", 1400.0, ctx)
        err = float(np.max(np.abs((whole[:2000] - mi) + (fraction[:2000] - mf))))
        out = dict(build=build, segments=len(p), phase_s=phase_s, phase_cpu=phase_cpu,
                   random_s=random_s, random_cpu=random_cpu, freq_s=freq_s, err=err)
    """)
    print(f"phase predictor (sample MSP, 1 day at desert-dish): built in {r['build']:.2f} s "
          f"({r['segments']} segments); {n:,} phases in {r['phase_s']:.2f} s "
          f"({r['phase_cpu']:.2f} s CPU) in time order, {r['random_s']:.2f} s "
          f"({r['random_cpu']:.2f} s CPU) shuffled; frequencies {r['freq_s']:.2f} s (target "
          f"well under 1 s); largest difference from the full model at 2,000 times "
          f"{r['err']:.1e} cycles (target 1e-9)")


def bench_profiles(n: int, tmp: str) -> None:
    r = child(f"""
        import glob, os
        import numpy as np
        from timingkit.profiles.phase_gradient import fit_shifts, shift_profiles
        from timingkit.profiles.templates import builtin_template
        template = builtin_template(1024).profile
        rng = np.random.default_rng(1)
        clean = shift_profiles(np.broadcast_to(template, ({n}, 1024)), rng.uniform(-.5, .5, {n}))
        profiles = 5.0 + 3.0 * clean + rng.normal(0, 1, clean.shape)
        t0, c0 = time.perf_counter(), time.process_time(); fit_shifts(profiles, template)
        memory, memory_cpu = time.perf_counter() - t0, time.process_time() - c0
        from timingkit.formats.profile_file import ProfileSet, write_profile_file
        folder = {os.path.join(tmp, "profiles")!r}
        os.makedirs(folder, exist_ok=True)
        for k in range(50):        # 50 files of 4 sub-integrations x 8 channels, each format
            for suffix in ("npz", "fits"):
                write_profile_file(ProfileSet(
                    site="desert-dish", centre_freq_mhz=1400.0, dedispersion_dm=20.0,
                    channel_freq_mhz=1400.0 + np.arange(8) * 10.0,
                    reference_mjd=[f"60000.{{k:02d}}{{j}}" for j in range(4)],
                    folding_frequency_hz=np.full(4, 401.7),
                    data=profiles[k * 32:(k + 1) * 32].reshape(4, 8, 1024)),
                    os.path.join(folder, f"obs-{{k:02d}}.{{suffix}}"))
        from timingkit.cli.main import main
        out = dict(memory=memory, memory_cpu=memory_cpu)
        for suffix in ("npz", "fits"):
            t0 = time.perf_counter()
            main(["profile-toas", *sorted(glob.glob(folder + "/*." + suffix)), "--template",
                  "auto", "--per-channel", "--per-subint", "-o",
                  os.path.join(folder, suffix + ".toas")])
            out[suffix] = time.perf_counter() - t0
    """)
    print(f"profile TOAs, 1,024-bin profiles: phase-gradient fit of {n:,} in memory "
          f"{n / r['memory']:,.0f} profiles/s ({n / r['memory_cpu']:,.0f} per CPU second); "
          "50 files x 32 profiles to a TOA table with an "
          f"auto template (command, incl. start-up) {1600 / r['npz']:,.0f} profiles/s from .npz, "
          f"{1600 / r['fits']:,.0f} from FITS")


def bench_helpers(names) -> None:
    for module, func in names:
        try:
            mod = __import__(module)
        except ImportError as exc:
            print(f"{module}: not available ({exc})")
            continue
        getattr(mod, func)()


SECTIONS = ["barycentre", "read", "fit", "sites", "predict", "profiles", "events", "binary",
            "glitches", "noise", "batch", "explorer"]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("sections", nargs="*", choices=SECTIONS + [[]], default=[])
    ap.add_argument("--quick", action="store_true", help="smaller sizes")
    args = ap.parse_args()
    wanted = args.sections or SECTIONS
    quick = args.quick
    with tempfile.TemporaryDirectory(prefix="timingkit-bench-") as tmp:
        if "barycentre" in wanted:
            bench_barycentre(20_000 if quick else 200_000, tmp)
        if "read" in wanted:
            bench_read(100_000 if quick else 1_000_000, tmp)
        if "sites" in wanted:
            bench_sites(20_000 if quick else 200_000)
        if "fit" in wanted:
            bench_fit([10_000, 100_000] if quick else [100_000, 1_000_000], tmp)
        if "predict" in wanted:
            bench_predict(100_000 if quick else 1_000_000, tmp)
        if "profiles" in wanted:
            bench_profiles(2_000 if quick else 10_000, tmp)
        if "events" in wanted:
            from bench_events import bench_events
            bench_events(quick=quick)
        extra = {"binary": ("bench_binary", "bench_binary"),
                 "glitches": ("bench_glitches", "bench_glitches"),
                 "noise": ("bench_noise", "bench_noise"),
                 "batch": ("bench_batch", "bench_batch"),
                 "explorer": ("bench_explorer", "bench_explorer")}
        bench_helpers([extra[s] for s in wanted if s in extra])
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
