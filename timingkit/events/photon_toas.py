"""Event TOAs: one arrival time per chunk of events, from the unbinned
maximum-likelihood phase shift of a template.

The events of a chunk, folded with the timing model, are taken to follow the
density M(phi - delta), M = (1 - w) + w T with T the template (mean 1) and w
the template's share of the events, fitted once to all events (with the
shift) and then held fixed. For each chunk the log-likelihood
sum_i log M(phi_i - delta) is maximised: first on a grid of 2048 shifts (the
events binned, the grid likelihood a circular cross-correlation done by FFT),
then by Newton steps on the unbinned likelihood. The uncertainty is
1 / sqrt(-d^2 log L / d delta^2) at the maximum (the observed information).
That Gaussian error holds only when the likelihood is concentrated around its
peak: a chunk where less than 99% of the (binned, normalised) likelihood lies
within 4 sigma (plus one grid step) of the peak gives no TOA and is listed as
skipped. Simulations (tests/test_photon_toas.py): the pulls of the TOAs kept
are N(0, 1) (sd 1.0-1.1) down to chunks of ~50 pulsed events; with fewer
(2 ln L gain over a flat profile below ~25, given as the flag
``likelihood_gain``) a few per cent can still be outliers, and a warning says so.

The template's phase zero arrives at model phase delta, so the TOA is the
barycentric TDB time near the chunk's mean event time at which the model
phase, for an arrival at the barycentre, is an integer plus delta (Newton
steps with the model's spin frequency); its uncertainty is sigma_delta / f.
TOAs are written at site ``ssb`` with infinite frequency, ready for the fitter.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from timingkit.events.template import GRID, PulseTemplate
from timingkit.formats.errors import InputError
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry.observer import Observer
from timingkit.numerics.timearray import SplitTime

MIN_EVENTS = 20
MIN_CONCENTRATION = 0.99   # chunks whose likelihood spreads wider give no TOA (see event_toas)
WEAK_GAIN = 25.0           # 2 ln L gain below which a kept chunk is flagged as weak
MAX_NEWTON = 30
WEIGHTS = np.linspace(0.0, 1.0, 41)


@dataclass
class ShiftFit:
    shift: float               # cycles, in [-0.5, 0.5)
    error: float               # cycles
    events: int
    log_likelihood_gain: float  # over a flat profile
    concentration: float = 1.0  # share of the (binned) likelihood within 4 sigma of the peak


def _histogram(phases: np.ndarray) -> np.ndarray:
    return np.bincount(np.minimum((phases * GRID).astype(np.int64), GRID - 1), minlength=GRID)


def _grid_scores(counts: np.ndarray, log_density: np.ndarray) -> np.ndarray:
    """sum_b counts_b log M(b - j) for the GRID shifts delta_j = j / GRID (FFT)."""
    return np.fft.irfft(np.fft.rfft(counts) * np.conj(np.fft.rfft(log_density)), n=GRID)


def _grid_shift(counts: np.ndarray, log_density: np.ndarray) -> tuple[int, float]:
    """Best of the GRID shifts and its score."""
    score = _grid_scores(counts, log_density)
    best = int(np.argmax(score))
    return best, float(score[best])


def fit_weight(phases: np.ndarray, template: PulseTemplate) -> tuple[float, float]:
    """(w, shift) maximising the binned likelihood of (1 - w) + w T(phi - shift)."""
    counts = _histogram(phases)
    best = (-np.inf, 0.0, 0.0)
    for w in WEIGHTS:
        log_density = np.log((1.0 - w) + w * template.values)
        j, score = _grid_shift(counts, log_density)
        if score > best[0]:
            best = (score, float(w), j / GRID)
    return best[1], best[2]


def fit_shift(phases: np.ndarray, model: PulseTemplate) -> ShiftFit:
    """Unbinned maximum-likelihood shift of ``model`` (module docstring)."""
    n = len(phases)
    scores = _grid_scores(_histogram(phases), np.log(model.values))
    shift = int(np.argmax(scores)) / GRID
    second = -1.0
    for _ in range(MAX_NEWTON):
        x = phases - shift
        value, slope, curve = model(x), model(x, 1), model(x, 2)
        ratio = slope / value
        first = -np.sum(ratio)                       # d log L / d shift
        second = np.sum(curve / value - ratio ** 2)  # d^2 log L / d shift^2
        if not second < 0:
            break
        step = -first / second
        if abs(step) > 4.0 / GRID:      # far from the grid maximum: creep, do not jump
            step = math.copysign(0.5 / GRID, step)
        shift += step
        if abs(step) < 1e-12:
            break
    gain = float(np.sum(np.log(model(phases - shift))))
    error = min(1.0 / math.sqrt(-second) if second < 0 else 0.5, 0.5)
    weights = np.exp(scores - scores.max())
    distance = (np.arange(GRID) / GRID - shift + 0.5) % 1.0 - 0.5
    near = np.abs(distance) <= 4.0 * error + 1.0 / GRID
    return ShiftFit(shift=float((shift + 0.5) % 1.0 - 0.5), error=error, events=n,
                    log_likelihood_gain=gain,
                    concentration=float(weights[near].sum() / weights.sum()))


def chunk_edges(bary_mjd: np.ndarray, span_days: float) -> list[np.ndarray]:
    """Indices of the events in consecutive chunks of ``span_days`` from the first."""
    if not span_days > 0:
        raise InputError(f"the chunk span must be > 0 days, found {span_days}", field="span_days")
    order = np.argsort(bary_mjd, kind="stable")
    start = bary_mjd[order[0]]
    label = np.floor((bary_mjd[order] - start) / span_days).astype(np.int64)
    cuts = np.flatnonzero(np.diff(label)) + 1
    return np.split(order, cuts)


def toa_at_shift(model, reference, ephemeris, tdb_guess: SplitTime, shift: np.ndarray):
    """Barycentric TDB times near ``tdb_guess`` where the model phase (arrival at
    the barycentre) is an integer plus ``shift``; returns (times, frequency_hz)."""
    ssb = Observer("ssb", "tdb")
    times = tdb_guess
    planets = model.settings["shapiro_delay_planets"]     # true, false or a list
    frequency = None
    for _ in range(4):
        ev = model.evaluate(ssb.observations(times, ephemeris, planets), reference)
        frequency = ev.spin_frequency_hz
        offset = (shift - ev.phase_frac + 0.5) % 1.0 - 0.5
        times = times.add_seconds(offset / frequency)
        if np.max(np.abs(offset)) < 1e-12:
            break
    return times, frequency


def event_toas(phases: np.ndarray, bary_mjd: np.ndarray, span_days: float,
               template: PulseTemplate, model, reference, ephemeris,
               min_events: int = MIN_EVENTS):
    """TOAs (ToaTable at site 'ssb'), facts for the report, and the fit of each
    chunk, from folded events: ``phases`` (model phase of each event) and
    ``bary_mjd`` (their barycentric TDB times, float MJD: used to form chunks
    and as starting guesses only)."""
    weight, _ = fit_weight(phases, template)
    mixture = template.mixed(weight)
    rows, skipped = [], []
    for index in chunk_edges(bary_mjd, span_days):
        start = float(bary_mjd[index].min())
        if len(index) < min_events:
            skipped.append({"start_mjd": start, "events": len(index),
                            "reason": f"fewer than {min_events} events"})
            continue
        result = fit_shift(phases[index], mixture)
        if result.concentration < MIN_CONCENTRATION:
            skipped.append({"start_mjd": start, "events": len(index),
                            "reason": f"pulse not found: only {result.concentration:.1%} of "
                                      "the likelihood within 4 sigma of its peak"})
            continue
        rows.append((index, result))
    if not rows:
        raise InputError(f"no chunk of {span_days} days gives a TOA (too few events, or the "
                         "pulse not found in any); try longer chunks", field="span_days")
    guess_day = np.array([float(np.floor(bary_mjd[i].mean())) for i, _ in rows])
    guess = SplitTime(guess_day, np.array([bary_mjd[i].mean() for i, _ in rows]) - guess_day,
                      "tdb")
    shifts = np.array([r.shift for _, r in rows])
    times, frequency = toa_at_shift(model, reference, ephemeris, guess, shifts)
    err_us = np.array([r.error for _, r in rows]) / frequency * 1e6
    toas = ToaTable.from_arrays(
        times.day, times.frac, err_us, np.inf, "ssb",
        flags={"events": [str(r.events) for _, r in rows],
               "phase_shift": [f"{r.shift:.6f}" for _, r in rows],
               "likelihood_gain": [f"{2 * r.log_likelihood_gain:.1f}" for _, r in rows]})
    weak = sum(2 * r.log_likelihood_gain < WEAK_GAIN for _, r in rows)
    facts = {"chunks": len(rows), "skipped_chunks": skipped,
             "template": template.source, "template_weight": weight,
             "span_days": span_days, "min_events": min_events,
             "warnings": [] if not weak else
             [f"{weak} TOA(s) come from chunks with a weak pulse (2 ln L gain over a flat "
              f"profile below {WEAK_GAIN:.0f}): their uncertainties may be too small; a longer "
              "--span-days gives fewer, safer TOAs"]}
    return toas, facts, [r for _, r in rows]
