"""Simulated TOAs that a timing model predicts exactly, plus noise: white
noise of the stated TOA errors (scaled per group when the noise model has
[[white_noise]] groups) and, with [red_noise], a random realisation of the
power-law red process on its Fourier basis (timingkit.model.noise).

For each requested arrival the site-clock time is solved iteratively so that
the model phase there is an integer (Newton steps with the instantaneous
spin frequency; each step recomputes time scales and geometry, so the result
is exact to < 1 ps before rounding to the 15 decimal places of the table).
Arrivals whose line of sight crosses the solar disc are left out (no
telescope sees a pulse through the Sun), so the table may be shorter than
asked. Deterministic for a given seed.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.clock_table import ClockTable
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.formats.errors import InputError
from timingkit.formats.quantities import in_unit
from timingkit.model.noise import NoiseModel, toa_times_s
from timingkit.model.timing_model import TimingModel
from timingkit.geometry.observations import Observations
from timingkit.geometry.solar_approach import SOLAR_RADIUS_M, closest_approach_m
from timingkit.geometry.sites import SiteTable
from timingkit.numerics.timearray import SplitTime
from timingkit.formats.toa_reader import ERR_US_RANGE, FREQ_MHZ_RANGE
from timingkit.formats.toa_table import ToaTable

MAX_NEWTON_STEPS = 6
CONVERGED_S = 1e-11


def arrival_times(start_mjd: float, end_mjd: float, count: int, rng: np.random.Generator,
                  jitter: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Roughly even cadence over the span, jittered within each slot; sorted."""
    if count < 1:
        raise InputError("count must be >= 1", field="count")
    for name, value in (("start", start_mjd), ("end", end_mjd)):
        if not (np.isfinite(value) and 0 <= value <= 200000):
            raise InputError(f"expected an MJD (0-200000), got {float(value):g}", field=name)
    if not end_mjd > start_mjd:
        raise InputError("end MJD must be later than start MJD", field="end")
    edges = np.linspace(start_mjd, end_mjd, count + 1)
    width = edges[1] - edges[0]
    offsets = rng.uniform(0.0, 1.0, count) if jitter else np.full(count, 0.5)
    mjd = edges[:-1] + offsets * width
    day = np.floor(mjd)
    return day, mjd - day


def simulate_toas(model: TimingModel, start_mjd: float, end_mjd: float, count: int,
                  error_us: float | np.ndarray, sites: SiteTable, ephemeris: Ephemeris,
                  site_names=("geocentre",), freqs_mhz=(1400.0,), seed: int | None = None,
                  clocks: list[ClockTable] | tuple = (), flags: dict | None = None,
                  add_noise: bool = True, reference: Observations | None = None,
                  times: tuple[np.ndarray, np.ndarray] | None = None,
                  noise: NoiseModel | None = None) -> ToaTable:
    """TOAs at which ``model`` predicts integer phase, with Gaussian noise of
    ``error_us`` (1 sigma, also written as the TOA uncertainty).

    ``noise``: the noise to inject (default: the model's own [[white_noise]] and
    [red_noise] sections). White-noise groups draw the noise with
    sqrt((scale * error)^2 + added^2) while the table keeps the stated error;
    red noise adds one realisation of the power law on the Fourier basis of
    the simulated span (the same basis the fitter uses). The white draws come
    first from the seeded generator, so a seed gives the same white noise with
    or without red noise."""
    rng = np.random.default_rng(seed)
    error_us = in_unit(error_us, "us", "error_us")
    freqs_mhz = in_unit(freqs_mhz, "MHz", "freqs_mhz")
    freqs_mhz = np.atleast_1d(freqs_mhz)
    if times is None:
        day, frac = arrival_times(start_mjd, end_mjd, count, rng)
    else:
        day, frac = (np.asarray(t, dtype=float) for t in times)
        count = len(day)
    err_us = np.broadcast_to(np.asarray(error_us, dtype=float), (count,)).copy()
    if np.any(~np.isfinite(err_us)) or np.any(err_us <= 0):
        raise InputError("TOA error must be > 0 µs", field="error_us")
    if np.any(err_us < ERR_US_RANGE[0]) or np.any(err_us > ERR_US_RANGE[1]):
        raise InputError(f"TOA error must lie between {ERR_US_RANGE[0]:g} and "
                         f"{ERR_US_RANGE[1]:g} µs", field="error_us")
    site_col = np.array([site_names[i % len(site_names)] for i in range(count)])
    freq_col = np.array([float(freqs_mhz[i % len(freqs_mhz)]) for i in range(count)])
    low, high = FREQ_MHZ_RANGE
    for value in map(float, freqs_mhz):
        if not (low <= value <= high or value == np.inf):
            raise InputError(f"observing frequency must lie between {low:g} and {high:g} MHz, or "
                             f"be inf (no dispersion); got {value:g}", field="freq_mhz")
    flag_cols = {}
    for name, values in (flags or {}).items():
        values = list(values) if isinstance(values, (list, tuple)) else [values]
        flag_cols[name] = np.array([values[i % len(values)] for i in range(count)])
    for name in site_col[:len(site_names)]:
        sites.lookup(str(name))
    blank = np.full(count, "", dtype="<U1")
    for _ in range(MAX_NEWTON_STEPS):
        # a bare table for the iterations (text is made once, at the end)
        toas = ToaTable(mjd_text=blank, mjd_day=day, mjd_frac=frac, err_us=err_us,
                    freq_mhz=freq_col, site=site_col, flags=flag_cols)
        obs = model.prepare_observations(toas, sites, ephemeris, clocks)
        keep = (closest_approach_m(obs.sun_to_observer_m, model.astrometry.line_of_sight(obs))
                >= SOLAR_RADIUS_M) | obs.barycentric_input
        if not keep.all():
            # no telescope sees a pulse through the Sun: those arrivals are left
            # out (the caller sees a shorter table)
            day, frac, err_us, freq_col, site_col, blank = (
                a[keep] for a in (day, frac, err_us, freq_col, site_col, blank))
            flag_cols = {k: v[keep] for k, v in flag_cols.items()}
            count = len(day)
            if count == 0:
                raise InputError("every requested TOA has its line of sight through the solar "
                                 "disc; choose other dates", field="start")
            obs = obs.select(keep)
            toas = obs.toas
        ev = model.evaluate(obs, reference)
        shift_s = -ev.phase_frac / ev.spin_frequency_hz
        t = SplitTime(day, frac, "utc").add_seconds(shift_s)
        day, frac = t.day, t.frac
        if np.max(np.abs(shift_s)) < CONVERGED_S:
            break
    if add_noise:
        noise = NoiseModel.from_timing_model(model) if noise is None else noise
        sigma_us = noise.white_errors_us(obs) if noise.white else err_us
        offset_s = rng.normal(0.0, 1.0, count) * sigma_us * 1e-6
        if noise.red is not None:
            offset_s = offset_s + noise.red_realisation_s(toa_times_s(obs), rng)
        t = SplitTime(day, frac, "utc").add_seconds(offset_s)
        day, frac = t.day, t.frac
    return ToaTable.from_arrays(day, frac, err_us, freq_col, site_col, flags=flag_cols)

