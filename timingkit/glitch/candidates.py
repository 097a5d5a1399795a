"""One pass of the glitch search: the phase data it works on, the scan of every gap for a
change in frequency, and the choice of candidates to fit (see timingkit.glitch.search).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from decimal import Decimal

import numpy as np

from timingkit.geometry.observations import Observations
from timingkit.glitch.epochs import glitch_at, glitch_time_s
from timingkit.glitch.results import QUICK_NULL_TRIALS, GlitchSearchSettings
from timingkit.glitch.scan import (
    NullNoise,
    build_windows,
    detection_limit,
    false_alarm_probability,
    gap_statistics,
    null_distribution,
    reported_false_alarm,
    threshold_statistic,
)
from timingkit.glitch.tracking import SECONDS_PER_DAY, TrackingChain
from timingkit.model.glitch import model_glitches
from timingkit.model.noise import NoiseModel, toa_times_s
from timingkit.model.timing_model import TimingModel

FDOT_FRACTIONAL_RANGE = 0.2        # |frequency-derivative offset| <= this * |frequency_derivative| ...
FDOT_RANGE_FLOOR = 1e-14           # ... or this (Hz/s), whichever is larger
DEFER_DAYS = 900.0                 # candidates this soon after a glitch accepted in the ...
DEFER_RATIO = 0.1                  # ... same pass and this much smaller wait a pass
MAX_GLITCHES_PER_PASS = 20


@dataclass
class PhaseData:
    order: np.ndarray       # sorted position -> observation index
    t_s: np.ndarray         # emission time, s since the spin epoch (sorted)
    frac: np.ndarray        # model phase fraction (cycles)
    phase_int: np.ndarray   # model phase integer part
    sigma: np.ndarray       # white TOA uncertainty in cycles (scaled by the noise model)
    frequency_hz: np.ndarray
    spin_epoch_mjd: float
    red: np.ndarray | None = None   # red-noise columns in cycles (see NullNoise), or None

    @property
    def null_noise(self) -> NullNoise:
        return NullNoise(self.sigma, self.red)


def white_errors_us(model: TimingModel, obs: Observations,
                    noise: NoiseModel | None = None) -> np.ndarray:
    """TOA uncertainties the search weights with (µs): the table's, scaled by
    the model's [[white_noise]] groups when it has any."""
    noise = NoiseModel.from_timing_model(model) if noise is None else noise
    return noise.white_errors_us(obs) if noise.white else obs.toas.err_us


def phase_data(model: TimingModel, obs: Observations, reference) -> PhaseData:
    ev = model.evaluate(obs, reference)
    t = ev.extra["spin_dt_s"]
    order = np.argsort(t, kind="stable")
    noise = NoiseModel.from_timing_model(model)
    sigma = white_errors_us(model, obs, noise) * 1e-6 * ev.spin_frequency_hz
    red = None
    if noise.red is not None:
        # the red process on its Fourier basis, each column times the square root
        # of its coefficient's prior variance, in cycles (seconds x spin frequency)
        basis, span_s = noise.red_basis(toa_times_s(obs))
        red = (basis * np.sqrt(noise.red_prior(span_s))[None, :]
               * ev.spin_frequency_hz[:, None])[order]
    return PhaseData(order=order, t_s=t[order], frac=ev.phase_frac[order],
                      phase_int=ev.phase_int[order], sigma=sigma[order],
                      frequency_hz=ev.spin_frequency_hz[order],
                      spin_epoch_mjd=model.spin.epoch_day + model.spin.epoch_frac, red=red)


def search_ranges(model: TimingModel, settings: GlitchSearchSettings):
    frequency_hz = model.spin.frequency.value
    frequency_derivative = model.spin.derivatives[0].value if model.spin.derivatives else 0.0
    return (settings.max_fractional_step * frequency_hz,
            max(FDOT_FRACTIONAL_RANGE * abs(frequency_derivative), FDOT_RANGE_FLOOR))


@dataclass
class AcceptedGlitch:
    gap: int
    fap: float | None
    stat: float | None
    df_hz: float | None
    df_err_hz: float | None
    derivative_step: float | None
    known: bool = False
    forced: bool = False
    search_pass: int = 1
    epoch: Decimal | None = None          # set when the glitch is placed / refined
    n_roots: int = 1                      # epochs in the bracket with a zero phase step
    bracket: tuple | None = None          # (t_a s, t_b s, mjd text a, mjd text b)
    gap_width_s: float = 0.0              # width of the gap holding the epoch
    consistent_gaps: tuple | None = None  # first and last gap the fit allows
    epoch_variance: float = 0.0           # s^2, over the consistent gaps (mixture)
    root_spread: float = 0.0              # s^2, of the zero-phase-step epochs in the gap
    decay_tried: bool = False             # decaying terms tried
    placed: bool = False                  # placement among nearby gaps done (or not needed)
    rechecked: bool = False               # forced: re-tracked without it after a fit
    steps_checked: bool = False           # found by the scan: its fitted steps tested
    fit_statistic: float | None = None    # likelihood ratio of its fitted steps ...
    fit_dof: int | None = None            # ... and its degrees of freedom
    fap_upper_limit: bool = False         # fap is 1/(trials + 1): no simulation reached it
    fap_method: str | None = None         # how fap was obtained (scan.reported_false_alarm)


def scan_pass(data: PhaseData, chains, barriers, settings, rng, known_gaps=None,
              search_pass=1) -> tuple[list[AcceptedGlitch], dict, list[str]]:
    """Steps 2-3: accept gaps one at a time until none is significant. TOAs that
    neither numbering connects to a neighbour (lone TOAs: often the first TOA after
    a glitch, where a decaying term keeps any quadratic seed from fitting) are left
    out of the scan, so that they do not hide the gap next to them; a gap found
    across lone TOAs is given as the first of the gaps it spans (the fit then
    places the epoch among the nearby gaps)."""
    lone = np.ones(len(data.t_s), dtype=bool)
    for chain in chains:
        _, label, size = np.unique(chain.segment, return_inverse=True, return_counts=True)
        lone &= size[label] == 1
    if not np.any(lone) or np.sum(~lone) < 2:
        return _scan_connected(data, chains, barriers, settings, rng, known_gaps, search_pass)
    kept = np.nonzero(~lone)[0]

    def to_sub(gap):            # full gap (between gap, gap + 1) -> gap of the kept TOAs
        return int(np.searchsorted(kept, gap, side="right") - 1)

    sub = dataclasses.replace(
        data, order=data.order[kept], t_s=data.t_s[kept], frac=data.frac[kept],
        phase_int=data.phase_int[kept], sigma=data.sigma[kept],
        frequency_hz=data.frequency_hz[kept], red=None if data.red is None else data.red[kept])
    sub_chains = tuple(TrackingChain(offsets=c.offsets[kept], segment=c.segment[kept],
                                     ambiguous_at=[]) for c in chains)
    sub_barriers = {to_sub(b) for b in barriers} - {-1, len(kept) - 1}
    sub_known = None if known_gaps is None else [to_sub(j) for j in known_gaps]
    accepted, limit, notes = _scan_connected(sub, sub_chains, sub_barriers, settings, rng,
                                             sub_known, search_pass)
    back = {} if known_gaps is None else dict(zip(sub_known, known_gaps))
    for acc in accepted:
        acc.gap = back.get(acc.gap, int(kept[min(max(acc.gap, 0), len(kept) - 1)]))
    return accepted, limit, notes


def _scan_connected(data: PhaseData, chains, barriers, settings, rng, known_gaps=None,
                    search_pass=1) -> tuple[list[AcceptedGlitch], dict, list[str]]:
    """:func:`scan_pass` on TOAs of which none stands alone."""
    fwd, bwd = chains
    r_fwd = data.frac + fwd.offsets     # residual phases numbered by each chain
    r_bwd = data.frac + bwd.offsets
    accepted: list[AcceptedGlitch] = []
    barriers = set(barriers)
    threshold = settings.false_alarm_threshold
    limit = {}
    notes: list[str] = []
    f_ref = float(np.median(data.frequency_hz))

    def estimate(win, k, stat_value, null, known=False):
        stat, d, c, _, _ = gap_statistics(win, r_fwd, r_bwd)
        fap, upper, method = reported_false_alarm(null, float(stat_value), local=known)
        return AcceptedGlitch(gap=int(win.gaps[k]), fap=fap, stat=float(stat_value),
                         df_hz=float(-d[k, 0] / SECONDS_PER_DAY),
                         df_err_hz=float(math.sqrt(c[k, 0, 0]) / SECONDS_PER_DAY),
                         derivative_step=float(-d[k, 1] / SECONDS_PER_DAY ** 2), known=known,
                         search_pass=search_pass, fap_upper_limit=upper, fap_method=method)

    trials = int(settings.null_trials)
    if threshold < 1.0 / (trials + 1):
        notes.append(f"the threshold of {settings.min_significance:g} sigma (false-alarm "
                     f"probability {threshold:.2g}) lies below what {trials} noise simulations "
                     "resolve: candidates were accepted by the per-gap 2-dof chi-square tail "
                     "extrapolated beyond the simulations, and their false-alarm probabilities "
                     f"are given as upper limits; use at least {math.ceil(20 / threshold)} "
                     "null trials to measure them")

    if known_gaps is not None:
        for gap in known_gaps:
            others = barriers | (set(known_gaps) - {gap})
            win = build_windows(data.t_s, data.sigma, chains, others,
                                settings.window_toas, settings.window_days, data.red)
            hit = np.nonzero(win.gaps == gap)[0]
            if len(hit) == 0:
                mjd = data.spin_epoch_mjd + data.t_s[gap] / SECONDS_PER_DAY
                notes.append(f"known glitch after MJD {mjd:.4f}: too few TOAs on one side to "
                             "measure it from the windows; fitted without a false-alarm "
                             "probability")
                accepted.append(AcceptedGlitch(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, derivative_step=None, known=True,
                                          search_pass=search_pass))
                continue
            k = int(hit[0])
            stat, *_ = gap_statistics(win, r_fwd, r_bwd)
            null = null_distribution(win, data.null_noise, trials, rng)
            accepted.append(estimate(win, k, stat[k], null, known=True))
            if not limit:
                limit = detection_limit(win, threshold_statistic(null, threshold), f_ref)
        return accepted, limit, notes

    for _ in range(MAX_GLITCHES_PER_PASS):
        win = build_windows(data.t_s, data.sigma, chains, barriers,
                            settings.window_toas, settings.window_days, data.red)
        if len(win.gaps) == 0:
            break
        stat, *_ = gap_statistics(win, r_fwd, r_bwd)
        k = int(np.argmax(stat))
        # a short null run settles clear cases; borderline ones get the full run
        null = null_distribution(win, data.null_noise, min(trials, QUICK_NULL_TRIALS), rng)
        fap = false_alarm_probability(null, float(stat[k]))
        if trials > QUICK_NULL_TRIALS and threshold / 30 < fap < min(0.5, 30 * threshold):
            null = null_distribution(win, data.null_noise, trials, rng)
            fap = false_alarm_probability(null, float(stat[k]))
        if not limit:
            limit = detection_limit(win, threshold_statistic(null, threshold), f_ref)
        if fap > threshold:
            break
        if len(null.maxima) < trials:     # the reported value comes from the full run
            null = null_distribution(win, data.null_noise, trials, rng)
        accepted.append(estimate(win, k, stat[k], null))
        barriers.add(int(win.gaps[k]))
    return accepted, limit, notes


def select_for_fit(candidates: list[AcceptedGlitch], data: PhaseData, everything: bool):
    """(accepted now, waiting): see the comment in :func:`search_glitches`."""
    if everything or not candidates:
        return list(candidates), []
    accepted, waiting = [candidates[0]], []
    for cand in candidates[1:]:
        t = data.t_s[cand.gap]
        shadowed = any(
            0 < t - data.t_s[a.gap] < DEFER_DAYS * SECONDS_PER_DAY
            and a.df_hz is not None and cand.df_hz is not None
            and abs(cand.df_hz) < DEFER_RATIO * abs(a.df_hz) for a in accepted)
        (waiting if shadowed else accepted).append(cand)
    return accepted, waiting


def sync_gaps(found: list[AcceptedGlitch], model: TimingModel, data: PhaseData) -> set[int]:
    """Each glitch's gap in ``data`` from its model epoch; the set of all
    glitch gaps of the model."""
    for acc in found:
        if acc.epoch is not None:
            acc.gap = int(np.searchsorted(data.t_s, glitch_time_s(model, glitch_at(model,
                                                                               acc.epoch))) - 1)
    return {int(np.searchsorted(data.t_s, glitch_time_s(model, g)) - 1)
            for g in model_glitches(model)}
