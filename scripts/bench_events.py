#!/usr/bin/env python
"""Photon-event benchmark (issue 13): barycentre and fold 10,000,000 events.

``bench_events()`` simulates, for an invented 41.2 Hz source, 10^7 events of an
invented spacecraft in a 550 km circular orbit (orbit table every 30 s, with
velocities) over one day, written as an OGIP FITS list (TIMESYS TT, TIMEREF
LOCAL), plus a copy holding the first 10^6 events. It then measures, each in a
fresh process (wall time, CPU time and peak memory of that process):

- the whole ``timingkit events EVENTS MODEL --orbit FILE -o OUT`` command on
  10^7 events (reading, barycentring, folding, statistics, phases.fits,
  events_report.json, profile.png); targets < 20 s and < 3 GB;
- the same command on the 10^6-event list, and on a copy of it whose keywords
  say TIMESYS = UTC (the same TIME values read as UTC elapsed seconds: the
  UTC -> TT step, one constant through ERFA, against the TT case of the same
  run);
- astropy's own path on the 10^6 events: astropy.io.fits reads the list,
  ``Time(..., scale='tt').tdb`` gives geocentric TDB, the spacecraft position
  comes from scipy's CubicHermiteSpline through the orbit table, the Earth and
  Sun from ``get_body_barycentric_posvel`` with the same DE421 file, plus the
  v_E.r/c^2 term, the Roemer delay and the solar Shapiro delay, the phase from
  ``Time`` differences, and an astropy Table with PHASE written as FITS; target:
  timingkit at least 20x faster per event. The largest phase difference between
  the two is printed as a check.

CPU seconds are printed beside wall seconds because the machine is shared:
the ratio of CPU times is the steadier figure. Run
``python scripts/bench_events.py [--quick]``; ``scripts/bench.py events`` calls it.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import textwrap

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

RA, DEC = "11h24m07.512s", "-32d18m40.25s"
F0, F1 = 41.2308765432, -2.2e-11
# The astropy path below has the solar Shapiro delay only: the planets' (on by
# default in timingkit, ~10 ns here) are switched off so the phases compare.
MODEL = (f'name = "bench-xray"\n[settings]\nshapiro_delay_planets = false\n'
         f'[position]\nra = "{RA}"\ndec = "{DEC}"\n[spin]\n'
         f'epoch_mjd = "58000"\nfrequency_hz = "{F0}"\nfrequency_derivatives = ["{F1}"]\n')


def _child(code: str) -> dict:
    prog = ("import json, resource, time, os\nt0 = time.perf_counter()\n"
            + textwrap.dedent(code)
            + "\nr = resource.getrusage(resource.RUSAGE_SELF)\n"
              "out.update(wall_s=time.perf_counter() - t0, cpu_s=r.ru_utime + r.ru_stime, "
              "peak_rss_mb=r.ru_maxrss / 1024)\nprint(json.dumps(out))\n")
    res = subprocess.run([sys.executable, "-c", prog], capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise RuntimeError(res.stderr[-3000:])
    return json.loads(res.stdout.strip().splitlines()[-1])


def _make_data(tmp: str, events: int) -> dict:
    model = os.path.join(tmp, "model.toml")
    with open(model, "w") as fh:
        fh.write(MODEL)
    orbit = os.path.join(tmp, "orbit.txt")
    big = os.path.join(tmp, "events.fits")
    small = os.path.join(tmp, "events_1e6.fits")
    utc = os.path.join(tmp, "events_1e6_utc.fits")
    _child(f"""
        from timingkit.events.simulate import circular_orbit
        from timingkit.formats.orbit_table import write_orbit_text
        from timingkit.pipeline.event_run import simulate_event_file
        t, p, v = circular_orbit(57999.99, 58001.01, 30.0)
        write_orbit_text({orbit!r}, t, p, v)
        simulate_event_file({model!r}, {big!r}, start_mjd=58000.0, end_mjd=58001.0,
                            rate_per_s={events / 86400.0!r}, pulsed_fraction=0.2,
                            orbit={orbit!r}, seed=1)
        from astropy.io import fits
        with fits.open({big!r}) as f:
            keep = min(1_000_000, len(f["EVENTS"].data))
            hdus = fits.HDUList([f[0].copy(), fits.BinTableHDU(f["EVENTS"].data[:keep],
                                 header=f["EVENTS"].header), f["GTI"].copy()])
            hdus.writeto({small!r}, overwrite=True)
            for hdu in hdus[1:]:
                hdu.header["TIMESYS"] = "UTC"
            hdus.writeto({utc!r}, overwrite=True)
        out = {{}}
    """)
    return {"model": model, "orbit": orbit, "big": big, "small": small, "utc": utc}


def _ours(files: dict, events_path: str, outdir: str) -> dict:
    return _child(f"""
        from timingkit.cli.main import main
        code = main(["events", {events_path!r}, {files['model']!r}, "--orbit",
                     {files['orbit']!r}, "-o", {outdir!r}])
        out = {{"exit": code}}
    """)


def _astropy(files: dict, outdir: str) -> dict:
    return _child(f"""
        import numpy as np, warnings
        warnings.simplefilter("ignore")
        import astropy.units as u
        from astropy.io import fits
        from astropy.table import Table
        from astropy.time import Time
        from astropy.coordinates import SkyCoord, get_body_barycentric_posvel, solar_system_ephemeris
        from astropy.utils import iers
        from scipy.interpolate import CubicHermiteSpline
        iers.conf.auto_download = False
        from timingkit.geometry.ephemeris import builtin_ephemeris_path
        with fits.open({files['small']!r}) as f:
            data = Table(f["EVENTS"].data); header = f["EVENTS"].header
        t = Time(header["MJDREFI"] + header["MJDREFF"],
                 (np.asarray(data["TIME"]) + header["TIMEZERO"]) / 86400.0, format="mjd", scale="tt")
        rows = np.loadtxt({files['orbit']!r}, skiprows=2)
        t_rows = Time(np.floor(rows[:, 0]), rows[:, 0] - np.floor(rows[:, 0]), format="mjd", scale="tt")
        x_rows = (t_rows - t_rows[0]).sec
        r_sc = CubicHermiteSpline(x_rows, rows[:, 1:4], rows[:, 4:7], axis=0)((t - t_rows[0]).sec)
        tdb = t.tdb
        with solar_system_ephemeris.set(builtin_ephemeris_path()):
            earth, earth_v = get_body_barycentric_posvel("earth", tdb)
            sun, _ = get_body_barycentric_posvel("sun", tdb)
        c = 299792458.0
        earth_m = earth.xyz.to_value(u.m).T
        vel = earth_v.xyz.to_value(u.m / u.s).T
        observer = earth_m + r_sc
        n = SkyCoord({RA!r}, {DEC!r}, frame="icrs").cartesian.xyz.value
        rho = observer - sun.xyz.to_value(u.m).T
        shapiro = -2 * 4.925490947e-6 * np.log((np.linalg.norm(rho, axis=1) + rho @ n) / 1.495978707e11)
        delay = (observer @ n) / c - shapiro + np.einsum("ij,ij->i", vel, r_sc) / c ** 2
        bary = tdb + delay * u.s
        dt = (bary - Time(58000.0, format="mjd", scale="tdb")).sec
        f0, f1 = {F0!r}, {F1!r}
        phase = np.mod(f0 * dt + 0.5 * f1 * dt ** 2, 1.0)
        data["PHASE"] = phase
        os.makedirs({outdir!r}, exist_ok=True)
        data.write(os.path.join({outdir!r}, "phases.fits"), overwrite=True)
        np.save(os.path.join({outdir!r}, "phase.npy"), phase)
        out = {{}}
    """)


def _agreement(ours_dir: str, theirs_dir: str) -> float:
    import numpy as np
    from astropy.io import fits
    with fits.open(os.path.join(ours_dir, "phases.fits")) as f:
        ours = np.asarray(f["EVENTS"].data["PHASE"], dtype=float)
    theirs = np.load(os.path.join(theirs_dir, "phase.npy"))
    diff = (ours - theirs + 0.5) % 1.0 - 0.5
    return float(np.max(np.abs(diff)))


def bench_events(quick: bool = False) -> None:
    events = 1_000_000 if quick else 10_000_000
    with tempfile.TemporaryDirectory(prefix="timingkit-bench-events-") as tmp:
        files = _make_data(tmp, events)
        big = _ours(files, files["big"], os.path.join(tmp, "out_big"))
        small = _ours(files, files["small"], os.path.join(tmp, "out_small"))
        utc = _ours(files, files["utc"], os.path.join(tmp, "out_utc"))
        ref = _astropy(files, os.path.join(tmp, "out_astropy"))
        worst = _agreement(os.path.join(tmp, "out_small"), os.path.join(tmp, "out_astropy"))
    n_small = min(events, 1_000_000)
    per_big = big["cpu_s"] / events * 1e6
    per_ref = ref["cpu_s"] / n_small * 1e6
    print(f"timingkit events, {events:,} events (FITS, spacecraft orbit), whole command: "
          f"{big['wall_s']:.1f} s wall, {big['cpu_s']:.1f} s CPU, peak {big['peak_rss_mb']:.0f} MB "
          f"(targets < 20 s, < 3 GB)")
    print(f"timingkit events, {n_small:,} events: {small['wall_s']:.1f} s wall, "
          f"{small['cpu_s']:.1f} s CPU, peak {small['peak_rss_mb']:.0f} MB")
    print(f"timingkit events, {n_small:,} events on UTC (TIMESYS = UTC): {utc['wall_s']:.1f} s "
          f"wall, {utc['cpu_s']:.1f} s CPU; UTC / TT case {utc['cpu_s'] / small['cpu_s']:.2f} "
          f"(CPU), {utc['wall_s'] / small['wall_s']:.2f} (wall)")
    print(f"astropy's own path, {n_small:,} events: {ref['wall_s']:.1f} s wall, "
          f"{ref['cpu_s']:.1f} s CPU, peak {ref['peak_rss_mb']:.0f} MB")
    print(f"per event (CPU): timingkit {per_big:.3f} µs at {events:,}, "
          f"{small['cpu_s'] / n_small * 1e6:.3f} µs at {n_small:,}; astropy {per_ref:.2f} µs; "
          f"speed-up {per_ref / per_big:.0f}x (target >= 20x); wall-clock speed-up "
          f"{ref['wall_s'] / n_small / (big['wall_s'] / events):.0f}x")
    print(f"largest phase difference timingkit - astropy path: {worst:.2e} cycles "
          f"({worst / F0 * 1e9:.1f} ns)")


if __name__ == "__main__":
    bench_events(quick="--quick" in sys.argv)
