"""Glitch search and glitch-parameter estimation.

The search works on the pulse-phase residuals of a starting timing model
(cycles, at the emission times) in five steps:

1. **Phase tracking.** Pulses are numbered TOA by TOA, forward in time and,
   independently, backward: a quadratic in phase fitted to the last few
   connected TOAs predicts the next one, whose pulse number is the integer that
   brings it nearest the prediction. When a TOA misses the prediction (a glitch
   has unwound the phase, possibly by many turns) the chain restarts with a
   *seed solution*: for three TOAs every pulse count allowed by a bounded
   frequency offset (``max_fractional_step`` of the spin frequency) and a
   bounded frequency-derivative offset is enumerated, and the count is kept
   that the following TOAs confirm uniquely (least-squares chi-square, with a
   margin to the runner-up).
2. **Frequency track.** For every gap between TOAs, the windows of TOAs just
   before it (numbered by the forward chain) and just after it (backward chain)
   are fitted with phase, frequency and frequency derivative, referred to the
   gap. Their differences (a frequency and a frequency-derivative step) with
   the windows' covariances, scaled up by each window's reduced chi-square
   when that exceeds 1, give a 2-dof chi-square per gap.
3. **Change points with an honest null.** The largest gap statistic is
   compared with its distribution when there is no glitch, obtained by
   simulating white noise with the TOA uncertainties through exactly the same
   windows and scaling (``null_trials`` realisations; the far tail from the
   pooled per-gap distribution raised to the effective number of independent
   gaps). A candidate is accepted when this global false-alarm probability is
   below the two-sided Gaussian tail of ``min_significance`` sigma; windows are
   then cut at it and the next largest gap is tested the same way.
4. **Fit.** Pulses are numbered across the whole data set (intervals between
   accepted glitches, pieces joined where unambiguous) and the starting model
   plus one glitch component per candidate (phase step, frequency step,
   frequency-derivative step) is fitted with timingkit.fitting. A decaying
   frequency step is added where it improves the fit significantly
   (time-scale grid, then fitted). Then each epoch is moved, within the gap
   between the TOAs that bracket the glitch, to where the phase step vanishes
   (common practice); when the glitch is so large that several epochs in the
   gap do so, the middle one is taken and the epoch uncertainty is the
   gap's (uniform) spread. Uncertainties of the steps include the epoch's.
5. A second pass searches the residuals of the fitted model for glitches the
   first pass could not see.

Assumptions stated with the results: white TOA noise (red timing noise makes
false-alarm probabilities optimistic) and a locally quadratic phase over each
window. Glitches closer than ``MIN_WINDOW_TOAS`` TOAs to the ends of the data
or to another glitch cannot be measured. Times in this module are seconds of
TDB at the pulsar (emission times) unless named ``_days`` or ``_mjd``.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from decimal import Decimal

import numpy as np
import scipy.special
import scipy.stats

from timingkit.errors import FitError, InputError
from timingkit.fitting import FitResult, fit
from timingkit.model.glitch import (DECAY_AMPLITUDE, DECAY_TIME, Glitch, glitch_section,
                                    model_glitches, set_glitches)
from timingkit.model.timing_model import TimingModel
from timingkit.observations import Observations

SECONDS_PER_DAY = 86400.0
DEFAULT_WINDOW_TOAS = 10
DEFAULT_MIN_SIGNIFICANCE = 3.0     # sigma (two-sided Gaussian tail of the global FAP)
DEFAULT_NULL_TRIALS = 1000
QUICK_NULL_TRIALS = 250            # first null run; the full one only for borderline cases
DEFAULT_MAX_FRACTIONAL_STEP = 2e-5  # largest reconnectable step, fraction of the frequency
MIN_WINDOW_TOAS = 5                # per window: 3 fitted terms + 2 degrees of freedom
MIN_GAP_DAYS = 0.1                 # shorter gaps (one observing session) are no candidates
TRACK_WINDOW_TOAS = 8              # TOAs of the local fit that predicts the next TOA
TRACK_Z = 4.0                      # a TOA further than this (sigma) from the prediction breaks
TRACK_MAX_DEVIATION = 0.2          # ... as does one further than this (cycles)
TRACK_MAX_PREDICTION_SIGMA = 0.08  # cycles: beyond this the pulse count is not safe
SEED_TOAS = 6
MAX_SEED_TOAS = 16
SEED_PRUNE_P = 1e-6                # chi-square tail below which a pulse-count hypothesis dies
SEED_UNIQUE_DCHI2 = 25.0           # runner-up must be this much worse (5 sigma)
MAX_SEED_HYPOTHESES = 400_000
FDOT_FRACTIONAL_RANGE = 0.2        # |frequency-derivative offset| <= this * |fdot| ...
FDOT_RANGE_FLOOR = 1e-14           # ... or this (Hz/s), whichever is larger
DECAY_GRID_DAYS = (10.0, 30.0, 100.0, 300.0)
MAX_PASSES = 12                    # one glitch (plus unbridgeable ones) per pass
LOCALISE_GAPS = 2                  # gaps tried on each side of the change point ...
LOCALISE_MAX_GAPS = 6              # ... extended while the best is at the edge
LOCALISE_DCHI2 = 9.0               # gaps this close to the best fit are in the bracket
ADEQUATE_REDUCED_CHI2 = 4.0        # decays and placements only with a model that fits
DEFER_DAYS = 900.0                 # candidates this soon after a glitch accepted in the ...
DEFER_RATIO = 0.1                  # ... same pass and this much smaller wait a pass
MAX_GLITCHES_PER_PASS = 20

ASSUMPTIONS = ("false-alarm probabilities assume white TOA noise with the stated uncertainties "
               "and a locally quadratic phase over each window (red timing noise makes them "
               "optimistic); glitch epochs are only known to lie between the bracketing TOAs")


# ============================================================================ settings, results

@dataclass
class GlitchSearchSettings:
    """Search options. ``window_toas`` or ``window_days`` sets the window on each
    side of a gap (default 10 TOAs); ``min_significance`` in Gaussian sigma
    (two-sided) of the global false-alarm probability; ``known_epochs_mjd``
    (TDB at the pulsar) are tested instead of searching."""
    window_toas: int | None = None
    window_days: float | None = None
    min_significance: float = DEFAULT_MIN_SIGNIFICANCE
    known_epochs_mjd: list | None = None
    null_trials: int = DEFAULT_NULL_TRIALS
    max_fractional_step: float = DEFAULT_MAX_FRACTIONAL_STEP
    fit_decays: bool = True
    decay_grid_days: tuple = DECAY_GRID_DAYS
    passes: int = MAX_PASSES
    seed: int = 20240611

    def __post_init__(self):
        if self.window_toas is not None and self.window_days is not None:
            raise InputError("give either a window in TOAs or in days, not both",
                             field="--window-toas/--window-days")
        if self.window_toas is None and self.window_days is None:
            self.window_toas = DEFAULT_WINDOW_TOAS
        if self.window_toas is not None and (int(self.window_toas) != self.window_toas
                                             or self.window_toas < MIN_WINDOW_TOAS):
            raise InputError(f"window must be an integer of at least {MIN_WINDOW_TOAS} TOAs, "
                             f"found {self.window_toas}", field="--window-toas")
        if self.window_days is not None and not (self.window_days > 0 and
                                                 math.isfinite(self.window_days)):
            raise InputError(f"window must be > 0 days, found {self.window_days}",
                             field="--window-days")
        if not (self.min_significance > 0 and math.isfinite(self.min_significance)):
            raise InputError(f"minimum significance must be > 0 sigma, found "
                             f"{self.min_significance}", field="--min-significance")
        if int(self.null_trials) < 100:
            raise InputError("use at least 100 null trials", field="null_trials")
        if not 0 < self.max_fractional_step < 1e-2:
            raise InputError("max_fractional_step must be in (0, 0.01)",
                             field="max_fractional_step")

    @property
    def false_alarm_threshold(self) -> float:
        return float(scipy.special.erfc(self.min_significance / math.sqrt(2.0)))

    def as_dict(self) -> dict:
        return {"window_toas": self.window_toas, "window_days": self.window_days,
                "min_significance_sigma": self.min_significance,
                "false_alarm_threshold": self.false_alarm_threshold,
                "known_epochs_mjd": None if self.known_epochs_mjd is None
                else [float(x) for x in self.known_epochs_mjd],
                "null_trials": int(self.null_trials),
                "max_fractional_step": self.max_fractional_step,
                "fit_decays": self.fit_decays, "decay_grid_days": list(self.decay_grid_days),
                "passes": self.passes, "seed": self.seed}


@dataclass
class GlitchCandidate:
    """One glitch found (or tested) and fitted. Units in the names; the
    frequency-derivative step is in Hz/s and the phase step in cycles."""
    epoch_mjd: Decimal
    epoch_min_mjd: float
    epoch_max_mjd: float
    epoch_uncertainty_days: float
    frequency_step_hz: float
    frequency_step_uncertainty_hz: float
    frequency_derivative_step: float
    frequency_derivative_step_uncertainty: float
    phase_step: float
    phase_step_uncertainty: float
    decaying_terms: list
    fractional_size: float
    permanent_fractional_size: float
    false_alarm_probability: float | None
    significance_sigma: float | None
    detection_chi2: float | None
    window_frequency_step_hz: float | None
    window_frequency_step_uncertainty_hz: float | None
    bracket_toa_mjd: tuple
    epoch_choice: str
    model_index: int
    known: bool = False
    forced: bool = False
    search_pass: int = 1

    def to_json(self) -> dict:
        return {
            "epoch_mjd": float(self.epoch_mjd), "epoch_mjd_text": str(self.epoch_mjd),
            "epoch_min_mjd": self.epoch_min_mjd, "epoch_max_mjd": self.epoch_max_mjd,
            "epoch_uncertainty_days": self.epoch_uncertainty_days,
            "frequency_step_hz": self.frequency_step_hz,
            "frequency_step_uncertainty_hz": self.frequency_step_uncertainty_hz,
            "frequency_derivative_step": self.frequency_derivative_step,
            "frequency_derivative_step_uncertainty": self.frequency_derivative_step_uncertainty,
            "fractional_size": self.fractional_size,
            "false_alarm_probability": self.false_alarm_probability,
            "permanent_fractional_size": self.permanent_fractional_size,
            "phase_step": self.phase_step, "phase_step_uncertainty": self.phase_step_uncertainty,
            "decaying_terms": self.decaying_terms,
            "significance_sigma": self.significance_sigma,
            "detection_chi2": self.detection_chi2,
            "window_frequency_step_hz": self.window_frequency_step_hz,
            "window_frequency_step_uncertainty_hz": self.window_frequency_step_uncertainty_hz,
            "bracket_toa_mjd": list(self.bracket_toa_mjd),
            "epoch_choice": self.epoch_choice, "model_glitch_index": self.model_index,
            "known_epoch": self.known, "forced_by_lost_connection": self.forced,
            "search_pass": self.search_pass,
        }


UNITS = {"epoch_mjd": "MJD (TDB at the pulsar)", "frequency_step_hz": "Hz",
         "frequency_derivative_step": "Hz/s", "phase_step": "cycles",
         "fractional_size": "(frequency step incl. decaying terms) / spin frequency",
         "decay_time_days": "days", "false_alarm_probability": "global, for the whole search"}


@dataclass
class FrequencyTrack:
    """Local spin frequency relative to the fitted spin model without glitch
    terms (Hz), and the local frequency derivative (Hz/s), at window centres."""
    mjd: np.ndarray
    frequency_offset_hz: np.ndarray
    frequency_err_hz: np.ndarray
    frequency_derivative: np.ndarray
    frequency_derivative_err: np.ndarray


@dataclass
class GlitchSearchResult:
    candidates: list[GlitchCandidate]
    model: TimingModel                 # fitted model with the glitches
    fit: FitResult | None
    obs: Observations                  # the TOAs used in the final fit
    track: FrequencyTrack
    residual_mjd: np.ndarray           # residuals before glitch terms (emission MJD)
    residual_us: np.ndarray
    residual_err_us: np.ndarray
    detection_limit: dict
    settings: GlitchSearchSettings
    warnings: list[str] = field(default_factory=list)
    dropped_toas: int = 0

    def to_json(self) -> dict:
        return {"candidates": [c.to_json() for c in self.candidates],
                "units": UNITS, "detection_limit": self.detection_limit,
                "settings": self.settings.as_dict(), "assumptions": ASSUMPTIONS,
                "toas_used": int(len(self.obs)), "toas_left_out": int(self.dropped_toas),
                "warnings": list(self.warnings)}


# ============================================================================ local fits

def _design(x):
    """Columns [1, x, x^2/2] of a quadratic phase; x in days."""
    x = np.asarray(x, dtype=float)
    return np.stack([np.ones_like(x), x, 0.5 * x * x], axis=-1)


def _quadratic_fit(x_days, r, w):
    """Weighted fit r ~ a + b x + c x^2/2: (params, covariance, chi2). The
    abscissa is scaled to O(1) before the 3x3 solve (normal equations of a
    well-conditioned basis; small enough to do by hand quickly)."""
    x = np.asarray(x_days, dtype=float)
    scale = max(float(np.max(np.abs(x))), 1e-12)
    u = x / scale
    a = np.stack([np.ones_like(u), u, 0.5 * u * u], axis=1)
    aw = a * w[:, None]
    gram = a.T @ aw
    cov_u = np.linalg.inv(gram)
    params_u = cov_u @ (aw.T @ r)
    resid = r - a @ params_u
    unscale = np.array([1.0, 1.0 / scale, 1.0 / scale ** 2])
    return (params_u * unscale, cov_u * np.outer(unscale, unscale),
            float(np.sum(w * resid ** 2)))


def _chi2_limit(dof: int, p: float = SEED_PRUNE_P) -> float:
    return float(scipy.stats.chi2.isf(p, max(int(dof), 1)))


# ============================================================================ seed solution

def _choose_anchors(x, f_range, fdot_range):
    """Three seed TOAs (indices) with few pulse-count hypotheses and no two at
    nearly the same time."""
    order = np.argsort(x)
    xs = x[order]
    spacing = np.diff(xs)
    typical = np.median(spacing[spacing > 0]) if np.any(spacing > 0) else 0.0
    best, best_cost = None, np.inf
    for i in range(len(xs) - 2):
        d12, d23 = xs[i + 1] - xs[i], xs[i + 2] - xs[i + 1]
        if min(d12, d23) <= max(0.25 * typical, 1.0):
            continue
        cost = (2 * f_range * d12 + 3) * (fdot_range * (d12 + d23) * d23 + 3)
        if cost < best_cost:
            best, best_cost = (order[i], order[i + 1], order[i + 2]), cost
    return best, best_cost


def solve_seed(x_s, rho, sigma, f_range_hz, fdot_range, tolerance: float = 1.0):
    """Pulse-count offsets (integers, one per TOA) that make the residual
    phases ``rho`` (cycles, any integer offset each) at times ``x_s`` (s) lie
    on one quadratic, with |frequency offset| <= ``f_range_hz`` and
    |frequency-derivative offset| <= ``fdot_range``. Returns (offsets,
    chi2, unique) or None when no hypothesis survives. ``tolerance`` scales the
    TOA uncertainties (for data noisier than stated)."""
    x_s = np.asarray(x_s, float)
    rho = np.asarray(rho, float)
    sig = np.asarray(sigma, float) * tolerance
    m = len(x_s)
    if m < 4:
        return None
    xd = (x_s - np.mean(x_s)) / SECONDS_PER_DAY
    w = 1.0 / sig ** 2
    _, _, chi2 = _quadratic_fit(xd, rho, w)
    if chi2 <= _chi2_limit(m - 3):
        return np.zeros(m, dtype=np.int64), chi2, True
    anchors, cost = _choose_anchors(x_s, f_range_hz, fdot_range)
    if anchors is None or cost > MAX_SEED_HYPOTHESES:
        return None
    i1, i2, i3 = anchors
    t1, t2, t3 = x_s[i1], x_s[i2], x_s[i3]
    d12, d23, d13 = t2 - t1, t3 - t2, t3 - t1
    base12 = rho[i2] - rho[i1]
    k2 = np.arange(math.floor(-f_range_hz * d12 - base12) - 1,
                   math.ceil(f_range_hz * d12 - base12) + 2)
    s12 = (base12 + k2) / d12
    # phase change from t2 to t3 for the allowed frequency-derivative offsets
    lo = (s12 - 0.5 * fdot_range * d13) * d23 - (rho[i3] - rho[i2]) + k2
    hi = (s12 + 0.5 * fdot_range * d13) * d23 - (rho[i3] - rho[i2]) + k2
    k3_lo = np.floor(lo).astype(np.int64) - 1
    counts = (np.ceil(hi).astype(np.int64) + 1) - k3_lo + 1
    total = int(np.sum(counts))
    if total > MAX_SEED_HYPOTHESES:
        return None
    rep = np.repeat(np.arange(len(k2)), counts)
    within = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts)
    k3 = k3_lo[rep] + within
    h = total
    offsets = np.zeros((h, m), dtype=np.int64)
    offsets[:, i2] = k2[rep]
    offsets[:, i3] = k3
    assigned = [i1, i2, i3]
    rest = [i for i in np.argsort(np.abs(x_s - np.mean([t1, t2, t3]))) if i not in assigned]
    for i in rest:
        idx = np.array(assigned)
        a = _design(xd[idx])
        wa = a * w[idx][:, None]
        gram = a.T @ wa
        try:
            ginv = np.linalg.inv(gram)
        except np.linalg.LinAlgError:
            return None
        r_h = rho[idx][None, :] + offsets[:, idx]
        params = (r_h @ wa) @ ginv
        a_new = _design(xd[i])
        pred = params @ a_new
        sig_pred = math.sqrt(max(float(a_new @ ginv @ a_new), 0.0) + sig[i] ** 2)
        spread = int(min(3, math.floor(5.0 * sig_pred + 0.5)))
        base = np.round(pred - rho[i]).astype(np.int64)
        if spread > 0:
            choices = base[:, None] + np.arange(-spread, spread + 1)[None, :]
            parent = np.repeat(np.arange(len(base)), 2 * spread + 1)
            offsets = offsets[parent]
            offsets[:, i] = choices.ravel()
        else:
            offsets[:, i] = base
        assigned.append(i)
        idx = np.array(assigned)
        r_h = rho[idx][None, :] + offsets[:, idx]
        a = _design(xd[idx])
        wa = a * w[idx][:, None]
        ginv = np.linalg.inv(a.T @ wa)
        b = r_h @ wa
        chi2 = np.sum(w[idx] * r_h ** 2, axis=1) - np.einsum("hk,kl,hl->h", b, ginv, b)
        keep = chi2 <= _chi2_limit(len(idx) - 3)
        # the frequency-derivative bound holds for the whole seed, not only the anchors
        params = b @ ginv
        keep &= np.abs(params[:, 2]) <= 1.5 * fdot_range * SECONDS_PER_DAY ** 2 + 1e-300
        offsets = offsets[keep]
        if len(offsets) == 0:
            return None
        if len(offsets) > MAX_SEED_HYPOTHESES:
            return None
    idx = np.arange(m)
    r_h = rho[None, :] + offsets
    a = _design(xd)
    wa = a * w[:, None]
    ginv = np.linalg.inv(a.T @ wa)
    b = r_h @ wa
    chi2 = np.sum(w * r_h ** 2, axis=1) - np.einsum("hk,kl,hl->h", b, ginv, b)
    # the same numbering can appear twice (branching); keep distinct ones
    offsets = offsets - offsets[:, :1]
    offsets, first = np.unique(offsets, axis=0, return_index=True)
    chi2 = chi2[first]
    order = np.argsort(chi2)
    best = order[0]
    scale = max(1.0, chi2[best] / max(m - 3, 1))
    unique = len(order) == 1 or chi2[order[1]] - chi2[best] >= SEED_UNIQUE_DCHI2 * scale
    return offsets[best] - 0, float(chi2[best]), bool(unique)


# ============================================================================ phase tracking

@dataclass
class _Chain:
    """Pulse-count offsets (integers added to the model's fractional phase) and
    connected-segment labels per TOA (time order), for one tracking direction."""
    offsets: np.ndarray
    segment: np.ndarray
    ambiguous_at: list


def track_phases(t_s, frac, sigma, f_range_hz, fdot_range, backward: bool = False) -> _Chain:
    """Number the pulses TOA by TOA (module docstring, step 1). ``t_s`` sorted."""
    n = len(t_s)
    order = np.arange(n)[::-1] if backward else np.arange(n)
    offsets = np.zeros(n, dtype=np.int64)
    segment = np.full(n, -1, dtype=np.int64)
    ambiguous = []
    p, seg = 0, 0
    while p < n:
        # ---- seed
        size = min(SEED_TOAS, n - p)
        solved = None
        while True:
            idx = order[p:p + size]
            for tol in (1.0, 10.0):
                solved = solve_seed(t_s[idx], frac[idx], sigma[idx], f_range_hz, fdot_range, tol)
                if solved is not None:
                    break
            if solved is None or solved[2] or p + size >= n or size >= MAX_SEED_TOAS:
                break
            size = min(size + 2, n - p)
        if solved is None:
            offsets[order[p]] = 0
            segment[order[p]] = seg
            seg += 1
            p += 1
            continue
        if not solved[2]:
            ambiguous.append(int(order[p]))
        offsets[idx] = solved[0]
        segment[idx] = seg
        p += size
        # ---- track
        while p < n:
            nxt = order[p]
            start = max(p - TRACK_WINDOW_TOAS, 0)
            win = order[start:p]
            win = win[segment[win] == seg]
            if len(win) < 4:
                break
            x = (t_s[win] - t_s[nxt]) / SECONDS_PER_DAY
            r = frac[win] + offsets[win]
            params, cov, chi2 = _quadratic_fit(x, r, 1.0 / sigma[win] ** 2)
            scale = max(1.0, chi2 / (len(win) - 3))
            pred = params[0]
            sig_pred = math.sqrt(scale * cov[0, 0])
            k = int(np.round(pred - frac[nxt]))
            dev = frac[nxt] + k - pred
            total = math.sqrt(sig_pred ** 2 + scale * sigma[nxt] ** 2)
            if (sig_pred > TRACK_MAX_PREDICTION_SIGMA or abs(dev) > TRACK_MAX_DEVIATION
                    or abs(dev) > TRACK_Z * total):
                break
            offsets[nxt] = k
            segment[nxt] = seg
            p += 1
        seg += 1
    if backward:   # label segments in time order
        _, segment = np.unique(-segment, return_inverse=True)
    return _Chain(offsets=offsets, segment=segment.astype(np.int64), ambiguous_at=ambiguous)


# ============================================================================ gap statistics

@dataclass
class _Windows:
    gaps: np.ndarray          # gap j lies between sorted TOAs j and j+1
    left: np.ndarray          # (G, W) TOA indices, -1 = padding
    right: np.ndarray
    e_left: np.ndarray        # (G, 3, W) estimators: params = e @ r (x in days from the gap)
    e_right: np.ndarray
    aw_left: np.ndarray       # (G, 3, W) A^T W of each window
    aw_right: np.ndarray
    cov_left: np.ndarray      # (G, 3, 3)
    cov_right: np.ndarray
    w_left: np.ndarray        # (G, W) weights (0 for padding)
    w_right: np.ndarray
    n_left: np.ndarray
    n_right: np.ndarray
    left_bwd: np.ndarray      # (G,) window numbered by the backward chain
    right_bwd: np.ndarray


def _barrier_bounds(n, barriers):
    """For each TOA position: first position after the last barrier before
    it, and last position before the next barrier after it."""
    b = np.array(sorted(barriers), dtype=np.int64)
    pos = np.arange(n)
    if len(b) == 0:
        return np.zeros(n, np.int64), np.full(n, n - 1, np.int64)
    k = np.searchsorted(b, pos, side="left")        # barriers >= pos
    prev = np.where(k > 0, b[np.maximum(k - 1, 0)] + 1, 0)
    k2 = np.searchsorted(b, pos, side="left")        # first barrier >= pos
    nxt = np.where(k2 < len(b), b[np.minimum(k2, len(b) - 1)], n - 1)
    return prev, nxt


def _segment_bounds(segment):
    n = len(segment)
    start = np.zeros(n, np.int64)
    end = np.zeros(n, np.int64)
    change = np.nonzero(np.diff(segment) != 0)[0]
    starts = np.concatenate([[0], change + 1])
    ends = np.concatenate([change, [n - 1]])
    for s, e in zip(starts, ends):
        start[s:e + 1] = s
        end[s:e + 1] = e
    return start, end


def _estimators(idx, x, sigma):
    """Per-window weighted LS estimators of [1, x, x^2/2] (padded idx=-1)."""
    mask = idx >= 0
    w = np.where(mask, 1.0 / sigma[np.maximum(idx, 0)] ** 2, 0.0)
    a = _design(x)                                  # (G, W, 3)
    gram = np.einsum("gw,gwk,gwl->gkl", w, a, a)
    # condition the 3x3 systems by their diagonals before inverting
    d = np.sqrt(np.maximum(np.einsum("gkk->gk", gram), 1e-300))
    scaled = gram / (d[:, :, None] * d[:, None, :])
    ok = np.linalg.cond(scaled) < 1e12
    scaled[~ok] = np.eye(3)
    cov = np.linalg.inv(scaled) / (d[:, :, None] * d[:, None, :])
    aw = np.einsum("gwk,gw->gkw", a, w)
    est = np.matmul(cov, aw)
    return est, aw, cov, w, ok


def build_windows(t_s, sigma, chains, barriers, window_toas, window_days,
                  exclude=()) -> _Windows:
    """Left/right windows of every candidate gap (module docstring, step 2).
    Each window takes its pulse numbering from whichever tracking chain
    connects more of its TOAs (the forward chain by preference on the left,
    the backward chain on the right)."""
    n = len(t_s)
    t_days = t_s / SECONDS_PER_DAY
    gap_width = np.diff(t_days)
    prev_b, next_b = _barrier_bounds(n, barriers)
    fwd, bwd = chains
    start_f, end_f = _segment_bounds(fwd.segment)
    start_b, end_b = _segment_bounds(bwd.segment)
    j = np.arange(n - 1)
    left_bwd = start_b[j] < start_f[j]
    right_fwd = end_f[j + 1] > end_b[j + 1]
    lo = np.maximum(np.where(left_bwd, start_b[j], start_f[j]), prev_b[j])
    hi = np.minimum(np.where(right_fwd, end_f[j + 1], end_b[j + 1]), next_b[j + 1])
    if window_toas is not None:
        lo = np.maximum(lo, j - int(window_toas) + 1)
        hi = np.minimum(hi, j + int(window_toas))
    else:
        lo = np.maximum(lo, np.searchsorted(t_days, t_days[j] - window_days, side="left"))
        hi = np.minimum(hi, np.searchsorted(t_days, t_days[j + 1] + window_days, side="right") - 1)
    n_l = j - lo + 1
    n_r = hi - j
    ok = (n_l >= MIN_WINDOW_TOAS) & (n_r >= MIN_WINDOW_TOAS) & (gap_width >= MIN_GAP_DAYS)
    ok &= ~np.isin(j, np.array(sorted(set(barriers) | set(exclude)), dtype=np.int64))
    gaps = j[ok]
    lo, hi, n_l, n_r = lo[ok], hi[ok], n_l[ok], n_r[ok]
    left_bwd, right_bwd = left_bwd[ok], ~right_fwd[ok]
    width = int(max(np.max(n_l, initial=1), np.max(n_r, initial=1)))
    k = np.arange(width)
    left = gaps[:, None] - k[None, :]
    left = np.where(k[None, :] < n_l[:, None], left, -1)
    right = gaps[:, None] + 1 + k[None, :]
    right = np.where(k[None, :] < n_r[:, None], right, -1)
    mid = 0.5 * (t_days[gaps] + t_days[gaps + 1])
    x_l = np.where(left >= 0, t_days[np.maximum(left, 0)] - mid[:, None], 0.0)
    x_r = np.where(right >= 0, t_days[np.maximum(right, 0)] - mid[:, None], 0.0)
    e_l, aw_l, c_l, w_l, ok_l = _estimators(left, x_l, sigma)
    e_r, aw_r, c_r, w_r, ok_r = _estimators(right, x_r, sigma)
    sel = np.nonzero(ok_l & ok_r)[0]
    return _Windows(gaps=gaps[sel], left=left[sel], right=right[sel], e_left=e_l[sel],
                    e_right=e_r[sel], aw_left=aw_l[sel], aw_right=aw_r[sel],
                    cov_left=c_l[sel], cov_right=c_r[sel], w_left=w_l[sel], w_right=w_r[sel],
                    n_left=n_l[sel], n_right=n_r[sel], left_bwd=left_bwd[sel],
                    right_bwd=right_bwd[sel])


def _window_fits(e, aw, w, idx, r, r_alt=None, use_alt=None):
    """Window parameters (..., G, 3) and chi-squares (..., G) for residuals
    ``r`` (N,) or realisations (M, N), by batched matrix products; windows
    flagged ``use_alt`` take their values from ``r_alt`` instead."""
    single = r.ndim == 1
    rt = r[:, None] if single else r.T                       # (N, M)
    vals = rt[np.maximum(idx, 0)] * (idx >= 0)[..., None]    # (G, W, M)
    if r_alt is not None and np.any(use_alt):
        alt = r_alt[:, None] if single else r_alt.T
        vals = np.where(use_alt[:, None, None],
                        alt[np.maximum(idx, 0)] * (idx >= 0)[..., None], vals)
    params = np.matmul(e, vals)                              # (G, 3, M)
    proj = np.matmul(aw, vals)                               # (G, 3, M): A^T W r
    sumsq = np.matmul(w[:, None, :], vals * vals)[:, 0, :]   # (G, M)
    chi2 = sumsq - np.sum(params * proj, axis=1)
    params = np.moveaxis(params, 2, 0)                       # (M, G, 3)
    chi2 = chi2.T                                            # (M, G)
    return (params[0], chi2[0]) if single else (params, chi2)


def gap_statistics(win: _Windows, r_fwd, r_bwd=None):
    """Per-gap 2-dof chi-square of the frequency and frequency-derivative steps,
    and the steps themselves (cycles/day, cycles/day^2, sign: residual).
    ``r_fwd``/``r_bwd``: residuals numbered by the forward/backward chain (N,),
    or noise realisations (M, N) for both."""
    p_l, chi2_l = _window_fits(win.e_left, win.aw_left, win.w_left, win.left, r_fwd,
                               r_bwd, win.left_bwd)
    p_r, chi2_r = _window_fits(win.e_right, win.aw_right, win.w_right, win.right, r_fwd,
                               r_bwd, win.right_bwd)
    s_l = np.maximum(1.0, chi2_l / (win.n_left - 3))
    s_r = np.maximum(1.0, chi2_r / (win.n_right - 3))
    d = p_r[..., 1:] - p_l[..., 1:]
    c = (s_l[..., None, None] * win.cov_left[:, 1:, 1:]
         + s_r[..., None, None] * win.cov_right[:, 1:, 1:])
    det = c[..., 0, 0] * c[..., 1, 1] - c[..., 0, 1] ** 2
    stat = (c[..., 1, 1] * d[..., 0] ** 2 - 2 * c[..., 0, 1] * d[..., 0] * d[..., 1]
            + c[..., 0, 0] * d[..., 1] ** 2) / det
    return stat, d, c, p_l, p_r


@dataclass
class _Null:
    maxima: np.ndarray         # per realisation: max over gaps
    pooled: np.ndarray         # sorted per-gap values of all realisations
    n_effective: float
    per_gap: np.ndarray | None = None  # (M, G) kept for known-epoch tests


def null_distribution(win: _Windows, sigma, trials: int, rng, keep_per_gap=False) -> _Null:
    """Gap statistics of pure white noise through the same windows (step 3)."""
    n = len(sigma)
    g, width = win.left.shape
    chunk = max(1, int(3_000_000 // max(g * width, 1)))
    maxima, pooled, per_gap = [], [], []
    done = 0
    while done < trials:
        m = min(chunk, trials - done)
        r = rng.standard_normal((m, n)) * sigma[None, :]
        stat, *_ = gap_statistics(win, r)
        maxima.append(np.max(stat, axis=1))
        pooled.append(stat.ravel())
        if keep_per_gap:
            per_gap.append(stat)
        done += m
    maxima = np.concatenate(maxima)
    pooled = np.sort(np.concatenate(pooled))
    local_at_median = _local_survival(pooled, np.median(maxima))
    # effective number of independent gaps: median of the maximum <-> (1 - S)^N = 1/2
    n_eff = math.log(0.5) / math.log1p(-min(max(local_at_median, 1e-300), 1 - 1e-16))
    return _Null(maxima=maxima, pooled=pooled, n_effective=max(1.0, n_eff),
                 per_gap=np.concatenate(per_gap) if keep_per_gap else None)


def _local_survival(pooled, value):
    """P(per-gap statistic >= value) under the null: empirical, with the
    exponential (2-dof chi-square) tail beyond the simulated range."""
    n = len(pooled)
    above = n - np.searchsorted(pooled, value, side="left")
    if above >= 50:
        return above / n
    anchor = pooled[max(n - 50, 0)]
    return (50.0 / n) * math.exp(-0.5 * max(value - anchor, 0.0))


def false_alarm_probability(null: _Null, value: float) -> float:
    """Global FAP of a maximum gap statistic ``value`` (step 3)."""
    exceed = int(np.sum(null.maxima >= value))
    if exceed >= 20:
        return (exceed + 1) / (len(null.maxima) + 1)
    s = _local_survival(null.pooled, value)
    return float(-np.expm1(null.n_effective * np.log1p(-min(s, 1 - 1e-16))))


def _sigma_of(fap: float) -> float:
    return float(math.sqrt(2.0) * scipy.special.erfcinv(min(max(fap, 1e-300), 1.0)))


def _threshold_statistic(null: _Null, fap: float) -> float:
    """Statistic whose global FAP equals ``fap`` (for the detection limit)."""
    lo, hi = 0.0, 2000.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if false_alarm_probability(null, mid) > fap:
            lo = mid
        else:
            hi = mid
    return hi


def detection_limit(win: _Windows, threshold: float, frequency_hz: float) -> dict:
    """Smallest frequency step found with 95 % probability at a typical gap:
    non-central 2-dof chi-square above ``threshold`` (white noise, no scaling)."""
    if len(win.gaps) == 0:
        return {"frequency_step_hz": None, "fractional_size": None}
    from scipy.optimize import brentq
    lam = brentq(lambda nc: scipy.stats.ncx2.sf(threshold, 2, nc) - 0.95, 1e-6, 1e5)
    c = win.cov_left[:, 1:, 1:] + win.cov_right[:, 1:, 1:]
    inv_ff = c[:, 1, 1] / (c[:, 0, 0] * c[:, 1, 1] - c[:, 0, 1] ** 2)
    step = np.sqrt(lam / inv_ff) / SECONDS_PER_DAY
    return {"frequency_step_hz": float(np.median(step)),
            "fractional_size": float(np.median(step) / frequency_hz),
            "fractional_size_90th_percentile_gap": float(np.percentile(step, 90) / frequency_hz),
            "statistic_threshold": float(threshold),
            "note": "95 % detection probability for a pure frequency step at the median gap, "
                    "white noise, at the minimum significance; larger steps than "
                    "max_fractional_step cannot be reconnected"}


# ============================================================================ the search

@dataclass
class _PhaseData:
    order: np.ndarray       # sorted position -> observation index
    t_s: np.ndarray         # emission time, s since the spin epoch (sorted)
    frac: np.ndarray        # model phase fraction (cycles)
    phase_int: np.ndarray   # model phase integer part
    sigma: np.ndarray       # TOA uncertainty in cycles
    frequency_hz: np.ndarray


def _phase_data(model: TimingModel, obs: Observations, reference) -> _PhaseData:
    ev = model.evaluate(obs, reference)
    t = ev.extra["spin_dt_s"]
    order = np.argsort(t, kind="stable")
    sigma = obs.toas.err_us * 1e-6 * ev.spin_frequency_hz
    return _PhaseData(order=order, t_s=t[order], frac=ev.phase_frac[order],
                      phase_int=ev.phase_int[order], sigma=sigma[order],
                      frequency_hz=ev.spin_frequency_hz[order])


def _ranges(model: TimingModel, settings: GlitchSearchSettings):
    f0 = model.spin.frequency.value
    fdot = model.spin.derivatives[0].value if model.spin.derivatives else 0.0
    return (settings.max_fractional_step * f0,
            max(FDOT_FRACTIONAL_RANGE * abs(fdot), FDOT_RANGE_FLOOR))


@dataclass
class _Accepted:
    gap: int
    fap: float | None
    stat: float | None
    df_hz: float | None
    df_err_hz: float | None
    dfdot: float | None
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


def _scan(data: _PhaseData, chains, barriers, settings, rng, known_gaps=None,
          search_pass=1) -> tuple[list[_Accepted], dict, list[str]]:
    """Steps 2-3: accept gaps one at a time until none is significant."""
    fwd, bwd = chains
    r_fwd = data.frac + fwd.offsets     # residual phases numbered by each chain
    r_bwd = data.frac + bwd.offsets
    accepted: list[_Accepted] = []
    barriers = set(barriers)
    threshold = settings.false_alarm_threshold
    limit = {}
    notes: list[str] = []
    f_ref = float(np.median(data.frequency_hz))

    def estimate(win, k, stat_value, fap, known=False):
        stat, d, c, _, _ = gap_statistics(win, r_fwd, r_bwd)
        return _Accepted(gap=int(win.gaps[k]), fap=fap, stat=float(stat_value),
                         df_hz=float(-d[k, 0] / SECONDS_PER_DAY),
                         df_err_hz=float(math.sqrt(c[k, 0, 0]) / SECONDS_PER_DAY),
                         dfdot=float(-d[k, 1] / SECONDS_PER_DAY ** 2), known=known,
                         search_pass=search_pass)

    if known_gaps is not None:
        for gap in known_gaps:
            others = barriers | (set(known_gaps) - {gap})
            win = build_windows(data.t_s, data.sigma, chains, others,
                                settings.window_toas, settings.window_days)
            hit = np.nonzero(win.gaps == gap)[0]
            if len(hit) == 0:
                notes.append(f"known epoch in the gap after TOA {gap}: too few TOAs on one "
                             "side to measure it from the windows; fitted without a "
                             "false-alarm probability")
                accepted.append(_Accepted(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, dfdot=None, known=True,
                                          search_pass=search_pass))
                continue
            k = int(hit[0])
            stat, *_ = gap_statistics(win, r_fwd, r_bwd)
            null = null_distribution(win, data.sigma, int(settings.null_trials), rng)
            local = _local_survival(null.pooled, float(stat[k]))
            accepted.append(estimate(win, k, stat[k], float(local), known=True))
            if not limit:
                limit = detection_limit(win, _threshold_statistic(null, threshold), f_ref)
        return accepted, limit, notes

    for _ in range(MAX_GLITCHES_PER_PASS):
        win = build_windows(data.t_s, data.sigma, chains, barriers,
                            settings.window_toas, settings.window_days)
        if len(win.gaps) == 0:
            break
        stat, *_ = gap_statistics(win, r_fwd, r_bwd)
        k = int(np.argmax(stat))
        # a short null run settles clear cases; borderline ones get the full run
        trials = int(settings.null_trials)
        null = null_distribution(win, data.sigma, min(trials, QUICK_NULL_TRIALS), rng)
        fap = false_alarm_probability(null, float(stat[k]))
        if trials > QUICK_NULL_TRIALS and threshold / 30 < fap < min(0.5, 30 * threshold):
            null = null_distribution(win, data.sigma, trials, rng)
            fap = false_alarm_probability(null, float(stat[k]))
        if not limit:
            limit = detection_limit(win, _threshold_statistic(null, threshold), f_ref)
        if fap > threshold:
            break
        accepted.append(estimate(win, k, stat[k], fap))
        barriers.add(int(win.gaps[k]))
    return accepted, limit, notes


# ---------------------------------------------------------------------------- numbering

def _bridge(t_s, sigma, r, conn, piece):
    """Integer offset joining ``piece`` (positions, self-consistent residuals
    ``r``) to the connected positions ``conn``; None when not unambiguous."""
    conn = np.asarray(conn)
    piece = np.asarray(piece)
    if piece[0] > conn[-1]:
        near_c, near_p = conn[-TRACK_WINDOW_TOAS:], piece[:TRACK_WINDOW_TOAS]
    else:
        near_c, near_p = conn[:TRACK_WINDOW_TOAS], piece[-TRACK_WINDOW_TOAS:]
    if len(near_c) < 4:
        return None
    t0 = t_s[near_p[0]] if piece[0] > conn[-1] else t_s[near_p[-1]]
    xc = (t_s[near_c] - t0) / SECONDS_PER_DAY
    params, cov, chi2c = _quadratic_fit(xc, r[near_c], 1.0 / sigma[near_c] ** 2)
    scale = max(1.0, chi2c / max(len(near_c) - 3, 1))
    p_ref = near_p[0] if piece[0] > conn[-1] else near_p[-1]
    pred = params[0]
    sig = math.sqrt(scale * (cov[0, 0] + sigma[p_ref] ** 2))
    k0 = int(np.round(pred - r[p_ref]))
    spread = int(min(200, math.ceil(6 * sig) + 1))
    ks = k0 + np.arange(-spread, spread + 1)
    both = np.concatenate([near_c, near_p])
    x = (t_s[both] - t0) / SECONDS_PER_DAY
    w = 1.0 / sigma[both] ** 2
    a = _design(x)
    ginv = np.linalg.inv(a.T @ (a * w[:, None]))
    is_p = np.concatenate([np.zeros(len(near_c)), np.ones(len(near_p))])
    rr = r[both][None, :] + ks[:, None] * is_p[None, :]
    b = rr @ (a * w[:, None])
    chi2 = np.sum(w * rr ** 2, axis=1) - np.einsum("hk,kl,hl->h", b, ginv, b)
    order = np.argsort(chi2)
    best = order[0]
    dof = len(both) - 3
    s = max(1.0, chi2c / max(len(near_c) - 3, 1))
    if chi2[best] > s * _chi2_limit(dof, 1e-4):
        return None
    if len(order) > 1 and chi2[order[1]] - chi2[best] < SEED_UNIQUE_DCHI2 * s:
        return None
    return int(ks[best])


def _number_pulses(data: _PhaseData, chains, barriers, warnings):
    """Connected pulse-count offsets for every TOA, interval by interval
    between the glitch gaps ``barriers``. Returns (offsets, keep mask, forced
    gaps); a forced gap is one where the connection could not be made and
    more than a few TOAs lie beyond it (the caller fits a glitch there)."""
    n = len(data.t_s)
    fwd, bwd = chains
    offsets = np.zeros(n, dtype=np.int64)
    keep = np.ones(n, dtype=bool)
    edges = [-1] + sorted(barriers) + [n - 1]
    for lo, hi in zip(np.array(edges[:-1]) + 1, edges[1:]):
        if hi < lo:
            continue
        span = np.arange(lo, hi + 1)
        chosen = next((c for c in (fwd, bwd) if len(np.unique(c.segment[span])) == 1), None)
        if chosen is not None:
            offsets[span] = chosen.offsets[span]
            continue
        # join the forward chain's pieces, starting from the largest, nearest first
        cuts = np.nonzero(np.diff(fwd.segment[span]) != 0)[0] + 1
        pieces = np.split(span, cuts)
        big = int(np.argmax([len(p) for p in pieces]))
        lo_p, hi_p = big, big
        offsets[pieces[big]] = fwd.offsets[pieces[big]]
        while lo_p > 0 or hi_p < len(pieces) - 1:
            conn = np.arange(pieces[lo_p][0], pieces[hi_p][-1] + 1)
            conn = conn[keep[conn]]
            options = []
            if hi_p < len(pieces) - 1:
                piece = pieces[hi_p + 1]
                options.append((data.t_s[piece[0]] - data.t_s[conn[-1]], "right", piece))
            if lo_p > 0:
                piece = pieces[lo_p - 1]
                options.append((data.t_s[conn[0]] - data.t_s[piece[-1]], "left", piece))
            _, side, piece = min(options, key=lambda o: o[0])
            r = (data.frac + offsets).astype(float)
            r[piece] = data.frac[piece] + fwd.offsets[piece]
            k = _bridge(data.t_s, data.sigma, r, conn, piece)
            if k is not None:
                offsets[piece] = fwd.offsets[piece] + k
            elif len(piece) < MIN_WINDOW_TOAS:
                keep[piece] = False
                offsets[piece] = fwd.offsets[piece]
                days = (data.t_s[piece[0]]) / SECONDS_PER_DAY
                warnings.append(f"phase connection lost {days:.1f} days after the spin epoch: "
                                f"{len(piece)} TOA(s) left out of the fit")
            else:
                return offsets, keep, [int(piece[0] - 1 if side == "right" else piece[-1])]
            if side == "right":
                hi_p += 1
            else:
                lo_p -= 1
    return offsets, keep, []


# ---------------------------------------------------------------------------- fitting

def _emission_mjd(model: TimingModel, t_s):
    return model.spin.epoch_day + model.spin.epoch_frac + np.asarray(t_s) / SECONDS_PER_DAY


def _epoch_decimal(model: TimingModel, t_s: float) -> Decimal:
    """Spin epoch + t_s as an exact-enough decimal MJD (1e-12 day = 86 ns)."""
    value = (Decimal(int(model.spin.epoch_day)) + Decimal(repr(model.spin.epoch_frac))
             + Decimal(repr(float(t_s))) / Decimal(86400))
    return value.quantize(Decimal("1e-12"))


def _glitch_t_s(model: TimingModel, g: Glitch) -> float:
    return ((g.epoch_day - model.spin.epoch_day) * SECONDS_PER_DAY
            + (g.epoch_frac - model.spin.epoch_frac) * SECONDS_PER_DAY)


def _spin_frequency_at(model: TimingModel, t_s):
    f = model.spin.frequency.value
    term, fdot = 1.0, 0.0
    for k, p in enumerate(model.spin.derivatives, start=1):
        if k == 1:
            fdot = p.value
        term = term * t_s / k
        f = f + p.value * term
    return f


def _spin_fdot_at(model: TimingModel, t_s):
    out = 0.0
    term = 1.0
    for k, p in enumerate(model.spin.derivatives):
        if k > 0:
            term = term * t_s / k
        out = out + p.value * term
    return out


def _free_names(model: TimingModel, glitch_free_keys=()):
    names = list(model.free_names)
    for p in [model.spin.frequency, *model.spin.derivatives[:1]]:
        if p.name not in names:
            names.append(p.name)
    for g in model_glitches(model):
        for p in g.parameters():
            if p.free and p.name not in names:
                names.append(p.name)
    return names


def _sections_of(model: TimingModel) -> list[dict]:
    out = []
    for g in model_glitches(model):
        out.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                  g.frequency_derivative_step.value, g.decays))
    return out


def _rebuild(model: TimingModel, sections: list[dict], free_by_epoch: dict) -> TimingModel:
    """Copy of ``model`` with glitches ``sections``; free flags per glitch
    epoch (Decimal) -> set of keys."""
    new = model.copy()
    set_glitches(new, sections)
    for g in model_glitches(new):
        keys = free_by_epoch.get(g.epoch, set())
        for p in g.parameters():
            p.free = p.key in keys
    return new


def _glitch_keys(decays: int) -> set:
    keys = {"phase_step", "frequency_step_hz", "frequency_derivative_step"}
    if decays:
        keys |= {DECAY_AMPLITUDE, DECAY_TIME}
    return keys


def _carry_pulses(old: TimingModel, new: TimingModel, obs, reference, pulse):
    """Pulse numbers for ``new`` from those pinned for ``old``: the counts are
    data, but a glitch moved across TOAs (or a phase step changed by whole
    turns) changes how many turns the model gives them; the integers follow
    the change of the model phase, the fractions stay for the fit to judge."""
    a = old.evaluate(obs, reference)
    b = new.evaluate(obs, reference)
    change = (b.phase_int - a.phase_int) + (b.phase_frac - a.phase_frac)
    return np.asarray(pulse, dtype=np.int64) + np.round(change).astype(np.int64)


def _fit(model, obs, reference, pulse=None) -> FitResult:
    """Fit with the search's free parameters; ``pulse`` pins pulse numbers
    (None: numbered from the model, ignoring any table column)."""
    toas = dataclasses.replace(obs.toas, pulse=None if pulse is None
                               else np.asarray(pulse, dtype=np.int64))
    return fit(model, dataclasses.replace(obs, toas=toas), free=_free_names(model),
               reference=reference)


def _glitch_at(model: TimingModel, epoch: Decimal) -> Glitch:
    return next(g for g in model_glitches(model) if g.epoch == epoch)


def _free_flags(model: TimingModel) -> dict:
    return {g.epoch: {p.key for p in g.parameters() if p.free} for g in model_glitches(model)}


def _try_decay(res: FitResult, obs, reference, pulse, epoch, settings, span_after_days):
    """The fit with one more decaying term on the glitch at ``epoch`` when it
    is significant (likelihood ratio above the search threshold, divided over
    the time-scale grid; amplitude > 3 sigma; time-scale bounded), else None."""
    base = res
    best = None
    for days in settings.decay_grid_days:
        if days > 3 * span_after_days:
            continue
        sections = _sections_of(base.model)
        i = model_glitches(base.model).index(_glitch_at(base.model, epoch))
        g = _glitch_at(base.model, epoch)
        sections[i] = glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                     g.frequency_derivative_step.value,
                                     list(g.decays) + [(0.0, days)])
        free = _free_flags(base.model)
        free[epoch] = _glitch_keys(0) | {DECAY_AMPLITUDE}
        trial = _rebuild(base.model, sections, free)
        _fix_decay_times_except_last(trial, epoch)
        try:
            fitted = _fit(trial, obs, reference, pulse)
        except FitError:
            continue
        if best is None or fitted.chi2 < best.chi2:
            best = fitted
    if best is None:
        return None
    free = _free_flags(best.model)
    free[epoch] = _glitch_keys(1)
    trial = _rebuild(best.model, _sections_of(best.model), free)
    try:
        fitted = _fit(trial, obs, reference, pulse)
    except FitError:
        return None
    g = _glitch_at(fitted.model, epoch)
    amp, tau = g.decay_amplitudes[-1], g.decay_times[-1]
    threshold = scipy.stats.chi2.isf(settings.false_alarm_threshold
                                     / max(len(settings.decay_grid_days), 1), 2)
    scale = max(1.0, fitted.reduced_chi2)
    if not fitted.converged or (base.chi2 - fitted.chi2) / scale < threshold:
        return None
    longest = min(3.0 * max(settings.decay_grid_days), 2.0 * span_after_days)
    if not (amp.uncertainty and tau.uncertainty and abs(amp.value) > 3 * amp.uncertainty
            and 0 < tau.value < longest and tau.uncertainty < 0.5 * tau.value):
        return None
    return fitted


def _fix_decay_times_except_last(model, epoch):
    g = _glitch_at(model, epoch)
    for p in g.decay_times:
        p.free = False


def _add_decays(res, accepted, obs, reference, pulse, settings):
    for acc in accepted:
        if acc.forced:
            continue
        t_g = _glitch_t_s(res.model, _glitch_at(res.model, acc.epoch))
        later = [_glitch_t_s(res.model, g) for g in model_glitches(res.model)]
        later = [t for t in later if t > t_g + 1.0]
        end = min(later) if later else float(np.max(_phase_data(res.model, obs, reference).t_s))
        better = _try_decay(res, obs, reference, pulse, acc.epoch, settings,
                            (end - t_g) / SECONDS_PER_DAY)
        if better is not None:
            res = better
    return res


def _placement_fit(res: FitResult, epoch, gap: int, data: _PhaseData, obs, reference, pulse):
    """The fit with the glitch at ``epoch`` moved to the middle of ``gap``
    (pulse numbers pinned): (fit, chi2 with the phase-continuity penalty,
    zero-phase-step epoch (s), its variance (s^2), new epoch) or None."""
    model = res.model
    g = _glitch_at(model, epoch)
    t_a, t_b = float(data.t_s[gap]), float(data.t_s[gap + 1])
    t_mid = 0.5 * (t_a + t_b)
    sections = _sections_of(model)
    # carry the glitch to the new epoch unchanged in its predictions after it; the
    # pulse counts of the TOAs that change sides follow the carried model
    new_sec = _transported(model, g, t_mid, None)
    new_epoch = new_sec["epoch_mjd"]
    sections[model_glitches(model).index(g)] = new_sec
    free = _free_flags(model)
    free[new_epoch] = free.pop(epoch)
    trial = _rebuild(model, sections, free)
    moved_pulse = _carry_pulses(model, trial, obs, reference, pulse)
    try:
        fitted = _fit(trial, obs, reference, moved_pulse)
    except FitError:
        return None
    h = _glitch_at(fitted.model, new_epoch)
    t_new, step, n_roots, spread, _ = _refine_epoch(fitted.model, h, t_a, t_b)
    sig = h.phase_step.uncertainty
    penalty = (step / sig) ** 2 if sig else 0.0
    df_inst = h.frequency_step.value + sum(a for a, _ in h.decays)
    uniform = (t_b - t_a) ** 2 / 12.0
    fitted_var = (sig / df_inst) ** 2 if (sig and df_inst) else uniform
    var = (min(fitted_var, uniform) + spread) if n_roots else uniform
    return fitted, fitted.chi2 + penalty, t_new, var, new_epoch, moved_pulse


def _localise(res: FitResult, acc: _Accepted, data: _PhaseData, obs, reference,
              barriers, pulse):
    """Choose the gap of a glitch by the fit (the change point only points
    near it): each nearby gap is tried with phase continuity required (a phase
    step that no epoch inside the gap can remove costs chi-square); gaps
    within LOCALISE_DCHI2 of the best form the reported bracket."""
    others = sorted(b for b in barriers if b != acc.gap)
    lo_allowed = max([b for b in others if b < acc.gap], default=-1) + 1
    hi_allowed = min([b for b in others if b > acc.gap], default=len(data.t_s) - 1) - 1
    width = np.diff(data.t_s) / SECONDS_PER_DAY
    tried: dict[int, tuple] = {}

    def attempt(j):
        if j in tried or not lo_allowed <= j <= hi_allowed or width[j] < MIN_GAP_DAYS:
            return
        tried[j] = _placement_fit(res, acc.epoch, j, data, obs, reference, pulse)

    lo = hi = acc.gap
    attempt(acc.gap)
    for j in range(acc.gap - LOCALISE_GAPS, acc.gap + LOCALISE_GAPS + 1):
        attempt(j)
    lo, hi = acc.gap - LOCALISE_GAPS, acc.gap + LOCALISE_GAPS
    while True:
        good = {j: v for j, v in tried.items() if v is not None}
        if not good:
            return res, pulse
        best = min(good, key=lambda j: good[j][1])
        if best == lo and lo - 1 >= lo_allowed and acc.gap - lo < LOCALISE_MAX_GAPS:
            lo -= 1
            attempt(lo)
        elif best == hi and hi + 1 <= hi_allowed and hi - acc.gap < LOCALISE_MAX_GAPS:
            hi += 1
            attempt(hi)
        else:
            break
    fitted, chi2_best, t_best, _, new_epoch, new_pulse = good[best]
    consistent = sorted(j for j, v in good.items() if v[1] - chi2_best <= LOCALISE_DCHI2)
    weights = np.array([math.exp(-0.5 * (good[j][1] - chi2_best)) for j in consistent])
    spread = np.array([(good[j][2] - t_best) ** 2 + good[j][3] for j in consistent])
    acc.epoch_variance = float(np.sum(weights * spread) / np.sum(weights))
    acc.consistent_gaps = (consistent[0], consistent[-1])
    acc.gap, acc.epoch = best, new_epoch
    return fitted, new_pulse


def _refine_epochs(res: FitResult, accepted, obs, reference, pulse):
    """Move each new glitch to the epoch in its bracket that zeroes the phase
    step (module docstring), then refit with pulses numbered by that model."""
    data = _phase_data(res.model, obs, reference)
    sections = []
    moved = {}
    for g in model_glitches(res.model):
        acc = next((a for a in accepted if a.epoch == g.epoch), None)
        if acc is None:
            sections.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                           g.frequency_derivative_step.value, g.decays))
            continue
        j = int(np.searchsorted(data.t_s, _glitch_t_s(res.model, g)) - 1)
        t_a, t_b = float(data.t_s[j]), float(data.t_s[j + 1])
        _, _, n_roots, spread, sec = _refine_epoch(res.model, g, t_a, t_b)
        sections.append(sec)
        moved[g.epoch] = sec["epoch_mjd"]
        acc.n_roots = n_roots
        acc.root_spread = spread
        acc.gap_width_s = t_b - t_a
        first, last = acc.consistent_gaps or (j, j)
        first, last = min(first, j), max(last, j)
        acc.bracket = (float(data.t_s[first]), float(data.t_s[last + 1]),
                       str(obs.toas.mjd_text[data.order[first]]),
                       str(obs.toas.mjd_text[data.order[last + 1]]))
    free = {moved.get(e, e): keys for e, keys in _free_flags(res.model).items()}
    for acc in accepted:
        acc.epoch = moved.get(acc.epoch, acc.epoch)
    refined = _rebuild(res.model, sections, free)
    pulse = _carry_pulses(res.model, refined, obs, reference, pulse)
    return _fit(refined, obs, reference, pulse), pulse


def _refine_epoch(model: TimingModel, g: Glitch, t_a: float, t_b: float):
    """Epoch in [t_a, t_b] (s since the spin epoch) where the glitch phase
    step vanishes modulo whole turns. Moving the epoch within the bracket
    changes no prediction when the phase step becomes the glitch phase there
    and the steps are carried along (df' = df + dfdot d, decaying amplitude
    times exp(-d/tau)). Returns (t_new, phase_step_new, number of such
    epochs in the gap, their mean square distance from t_new (s^2; the gap's
    uniform variance when there is none), section at the new epoch)."""
    t_e = _glitch_t_s(model, g)
    margin = min(1.0, 1e-3 * (t_b - t_a))
    lo, hi = t_a + margin, t_b - margin
    grid = np.linspace(lo, hi, 4001)
    phase = g.phase_after(grid - t_e)
    roots = []
    for k in range(math.ceil(np.min(phase)), math.floor(np.max(phase)) + 1):
        s = phase - k
        for i in np.nonzero(s[:-1] * s[1:] <= 0)[0]:
            x0, x1 = grid[i], grid[i + 1]
            for _ in range(60):          # bisection: the bracket is tiny already
                mid = 0.5 * (x0 + x1)
                if (float(g.phase_after(x0 - t_e)) - k) * (float(g.phase_after(mid - t_e)) - k) <= 0:
                    x1 = mid
                else:
                    x0 = mid
                if x1 - x0 < 1e-4:
                    break
            roots.append((0.5 * (x0 + x1), k))
    distinct = sorted({round(r, 1): (r, k) for r, k in roots}.values())
    if distinct:
        # every root fits equally well: take the one nearest their mean; the
        # spread of the roots about it is the epoch's ambiguity
        times = np.array([r for r, _ in distinct])
        t_new, k = min(distinct, key=lambda rk: abs(rk[0] - np.mean(times)))
        step = float(g.phase_after(t_new - t_e)) - k
        spread = float(np.mean((times - t_new) ** 2))
    else:
        vals = [float(g.phase_after(x - t_e)) for x in (lo, hi)]
        j = int(np.argmin([abs(v - round(v)) for v in vals]))
        t_new, step = (lo, hi)[j], vals[j] - round(vals[j])
        spread = (t_b - t_a) ** 2 / 12.0     # no root: anywhere in the gap
    return t_new, step, len(distinct), spread, _transported(model, g, t_new, step)


def _transported(model: TimingModel, g: Glitch, t_new: float, phase_step: float | None) -> dict:
    """Section of glitch ``g`` moved to ``t_new`` (s since the spin epoch) with
    the same predictions after both epochs: df' = df + dfdot d, decaying
    amplitudes times exp(-d/tau), phase step = the glitch phase at t_new
    (or ``phase_step``, which differs from it by whole turns)."""
    delta = t_new - _glitch_t_s(model, g)
    df = g.frequency_step.value + g.frequency_derivative_step.value * delta
    decays = [(a * math.exp(-delta / (d * SECONDS_PER_DAY)), d) for a, d in g.decays]
    step = float(g.phase_after(delta)) if phase_step is None else phase_step
    return glitch_section(_epoch_decimal(model, t_new), step, df,
                          g.frequency_derivative_step.value, decays)


def _glitch_uncertainties(res: FitResult, g: Glitch, acc: _Accepted) -> dict:
    """Uncertainties of the steps with the epoch's propagated: the fit holds
    the epoch fixed and frees the phase step; equivalently the phase step is
    zero and the epoch moves by d = -phase_step / (glitch frequency change at
    the epoch), which carries df by dfdot d and each decaying amplitude by
    -A d / tau. When several epochs in the gap zero the phase step (a glitch
    that unwinds more than a turn there) their spread is added; with none,
    the epoch variance is that of a uniform spread over the gap; and it is at
    least the spread over all gaps the fit allows (``acc.epoch_variance``)."""
    names = res.free_names
    cov = res.covariance[:len(names), :len(names)]
    idx = {p.name: names.index(p.name) for p in g.parameters() if p.name in names}
    df_inst = g.frequency_step.value + sum(a for a, _ in g.decays)
    m = 3 + len(g.decays)      # rows: df, dfdot, epoch, decaying amplitudes
    jac = np.zeros((m, len(names)))
    shift = np.zeros(m)        # d(row)/d(epoch shift, s)
    for row, p in ((0, g.frequency_step), (1, g.frequency_derivative_step)):
        if p.name in idx:
            jac[row, idx[p.name]] = 1.0
    shift[0] = g.frequency_derivative_step.value
    shift[2] = 1.0
    for k, (amp, days) in enumerate(zip(g.decay_amplitudes, g.decay_times)):
        if amp.name in idx:
            jac[3 + k, idx[amp.name]] = 1.0
        shift[3 + k] = -amp.value / (days.value * SECONDS_PER_DAY)
    if g.phase_step.name in idx and df_inst != 0:
        jac[:, idx[g.phase_step.name]] += shift * (-1.0 / df_inst)
    out = jac @ cov @ jac.T
    uniform_gap = acc.gap_width_s ** 2 / 12.0
    target = (min(out[2, 2], uniform_gap) + acc.root_spread) if acc.n_roots else uniform_gap
    target = max(target, acc.epoch_variance)
    out = out + (target - out[2, 2]) * np.outer(shift, shift)
    sig = np.sqrt(np.maximum(np.diag(out), 0.0))
    return {"frequency_step": float(sig[0]), "frequency_derivative_step": float(sig[1]),
            "epoch_s": float(sig[2]), "decay_amplitudes": [float(x) for x in sig[3:]]}


def _select(candidates: list[_Accepted], data: _PhaseData, everything: bool):
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


def _sync_gaps(found: list[_Accepted], model: TimingModel, data: _PhaseData) -> set[int]:
    """Each glitch's gap in ``data`` from its model epoch; the set of all
    glitch gaps of the model."""
    for acc in found:
        if acc.epoch is not None:
            acc.gap = int(np.searchsorted(data.t_s, _glitch_t_s(model, _glitch_at(model,
                                                                               acc.epoch))) - 1)
    return {int(np.searchsorted(data.t_s, _glitch_t_s(model, g)) - 1)
            for g in model_glitches(model)}


def _settle(res: FitResult, found: list[_Accepted], obs, reference, pulse, settings):
    """After a pass's fit: decaying terms for the glitches new in it; placement
    among nearby gaps for those not yet placed, when the model fits (reduced
    chi-square at most ADEQUATE_REDUCED_CHI2: otherwise glitches not yet
    found, or timing noise, would drive the choice); then epochs where the
    phase steps vanish."""
    data = _phase_data(res.model, obs, reference)
    if settings.fit_decays:
        res = _add_decays(res, [a for a in found if not (a.decay_tried or a.forced)], obs,
                          reference, pulse, settings)
    for acc in found:
        acc.decay_tried = True
    if res.reduced_chi2 <= ADEQUATE_REDUCED_CHI2:
        barriers = _sync_gaps(found, res.model, data)
        for acc in found:
            if not (acc.placed or acc.forced or acc.known):
                before = acc.gap
                res, pulse = _localise(res, acc, data, obs, reference, barriers, pulse)
                barriers = (barriers - {before}) | {acc.gap}
            acc.placed = True
    _sync_gaps(found, res.model, data)
    res, pulse = _refine_epochs(res, found, obs, reference, pulse)
    return res, pulse


def search_glitches(model: TimingModel, obs: Observations,
                    settings: GlitchSearchSettings | None = None,
                    reference: Observations | None = None) -> GlitchSearchResult:
    """Find, fit and report glitches in ``obs`` starting from ``model`` (see
    the module docstring). Glitches already in the model are kept and fitted;
    the candidates are the new ones (or the known epochs tested)."""
    settings = settings or GlitchSearchSettings()
    rng = np.random.default_rng(settings.seed)
    warnings: list[str] = []
    if len(obs) < 2 * MIN_WINDOW_TOAS:
        raise InputError(f"a glitch search needs at least {2 * MIN_WINDOW_TOAS} TOAs, "
                         f"found {len(obs)}", path=obs.toas.path)
    if obs.toas.pulse is not None:
        warnings.append("the TOA table's 'pulse' column was not used: the glitch search "
                        "numbers the pulses itself")
    f_range, fdot_range = _ranges(model, settings)
    current = model.copy()
    use_obs = obs
    spin_epoch = current.spin.epoch_day + current.spin.epoch_frac
    known_t = None
    if settings.known_epochs_mjd:
        known_t = sorted((float(Decimal(str(e))) - spin_epoch) * SECONDS_PER_DAY
                         for e in settings.known_epochs_mjd)
    found: list[_Accepted] = []
    detection: dict = {}
    result_fit: FitResult | None = None
    dropped = 0
    for search_pass in range(1, max(1, int(settings.passes)) + 1):
        data = _phase_data(current, use_obs, reference)
        n = len(data.t_s)
        existing = [int(np.searchsorted(data.t_s, _glitch_t_s(current, g)) - 1)
                    for g in model_glitches(current)]
        existing = [b for b in existing if 0 <= b < n - 1]
        chains = (track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range),
                  track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range,
                               backward=True))
        known_gaps = None
        if known_t is not None:
            known_gaps = []
            for e in known_t:
                j = int(np.searchsorted(data.t_s, e) - 1)
                if j < 0 or j >= n - 1:
                    raise InputError(f"known glitch epoch MJD {spin_epoch + e / SECONDS_PER_DAY:.6f}"
                                     " is outside the span of the TOAs", field="--known-epochs")
                known_gaps.append(j)
            known_gaps = sorted(set(known_gaps))
        accepted, limit, notes = _scan(data, chains, existing, settings, rng, known_gaps,
                                       search_pass)
        warnings.extend(notes)
        detection = detection or limit
        if not accepted:
            if result_fit is None:
                # nothing found: fit the starting model with the tracked pulse numbers
                offsets, keep, forced = _number_pulses(data, chains, set(existing), warnings)
                if not forced and np.all(keep):
                    pulse = np.empty(len(use_obs), dtype=np.int64)
                    pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
                    try:
                        result_fit = _fit(current, use_obs, reference, pulse)
                        current = result_fit.model
                    except FitError:
                        result_fit = None
            break
        # The most significant candidate is accepted, and with it every other one
        # except those just after a much larger glitch accepted now: there, unmodelled
        # decaying terms mimic small steps, so they wait until the larger glitch's
        # decay has been fitted. Pulses that cannot be numbered across a waiting
        # candidate promote it (a hard sign of a large glitch).
        accepted, pending = _select(accepted, data, known_t is not None)
        barriers = set(existing) | {a.gap for a in accepted}
        failed_before: set[int] = set()
        while True:
            offsets, keep, forced = _number_pulses(data, chains, barriers, warnings)
            if not forced:
                break
            gap = forced[0]
            near = [a for a in pending if abs(a.gap - gap) <= 2]
            if near and gap not in failed_before:
                promoted = min(near, key=lambda a: abs(a.gap - gap))
                pending.remove(promoted)
                accepted.append(promoted)
                barriers.add(promoted.gap)
            else:
                accepted.append(_Accepted(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, dfdot=None, forced=True,
                                          search_pass=search_pass))
                barriers.add(gap)
                warnings.append("phase connection was lost in a gap with no significant "
                                "glitch: a glitch was fitted there to keep the solution "
                                "connected (flagged forced_by_lost_connection)")
            failed_before.add(gap)
        sections = _sections_of(current)
        free = _free_flags(current)
        for acc in accepted:
            t_mid = 0.5 * (data.t_s[acc.gap] + data.t_s[acc.gap + 1])
            acc.epoch = _epoch_decimal(current, t_mid)
            sections.append(glitch_section(acc.epoch, 0.0, acc.df_hz or 0.0, acc.dfdot or 0.0))
            free[acc.epoch] = _glitch_keys(0)
        trial = _rebuild(current, sections, free)
        pulse = np.empty(len(use_obs), dtype=np.int64)
        pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
        if not np.all(keep):
            kept = np.sort(data.order[keep])
            dropped += len(use_obs) - len(kept)
            use_obs, pulse = use_obs.select(kept), pulse[kept]
            data = _phase_data(current, use_obs, reference)
        found.extend(accepted)
        res = _fit(trial, use_obs, reference, pulse)
        res, pulse = _settle(res, found, use_obs, reference, pulse, settings)
        current, result_fit = res.model, res
        if known_t is not None:
            break
    if result_fit is None:
        try:
            result_fit = _fit(current, use_obs, reference)
            current = result_fit.model
        except FitError as exc:
            warnings.append(f"no glitch found, and the starting model could not be fitted: {exc}")
    if any(not a.placed for a in found):
        warnings.append(f"the fit with the glitches has reduced chi-square "
                        f"{result_fit.reduced_chi2:.2f} (> {ADEQUATE_REDUCED_CHI2:g}): epochs "
                        "were left in the gaps the frequency track points to, not compared "
                        "with nearby gaps (timing noise or unmodelled structure?)")
    candidates = _candidates(current, result_fit, found)
    if any(c.epoch_choice.startswith("ambiguous") for c in candidates):
        warnings.append("some glitches unwound the phase by more than one turn between the "
                        "bracketing TOAs: their epochs are uncertain over the whole gap")
    track, before = _track_and_residuals(current, use_obs, reference, settings, result_fit)
    return GlitchSearchResult(
        candidates=candidates, model=current, fit=result_fit, obs=use_obs, track=track,
        residual_mjd=before[0], residual_us=before[1], residual_err_us=before[2],
        detection_limit=detection, settings=settings, warnings=warnings, dropped_toas=dropped)


def _candidates(model, res, found: list[_Accepted]) -> list[GlitchCandidate]:
    if res is None or not found:
        return []
    out = []
    for acc in found:
        g = next((g for g in model_glitches(model) if g.epoch == acc.epoch), None)
        if g is None or acc.bracket is None:
            continue
        t_a, t_b, text_a, text_b = acc.bracket
        unc = _glitch_uncertainties(res, g, acc)
        t_g = _glitch_t_s(model, g)
        f_here = float(_spin_frequency_at(model, t_g))
        df_total = g.frequency_step.value + sum(a for a, _ in g.decays)
        if acc.n_roots == 1:
            choice = "unique epoch in the bracket where the phase step vanishes"
        elif acc.n_roots > 1:
            choice = (f"ambiguous: {acc.n_roots} epochs in the bracket make the phase step a "
                      "whole number of turns; the one nearest their mean is used")
        else:
            choice = ("no epoch in the bracket zeroes the phase step: epoch at the nearer "
                      "end of the bracket, phase step fitted")
        decays = [{"decaying_frequency_step_hz": amp.value,
                   "decaying_frequency_step_uncertainty_hz": float(unc["decay_amplitudes"][k]),
                   "decay_time_days": days.value,
                   "decay_time_uncertainty_days": days.uncertainty}
                  for k, (amp, days) in enumerate(zip(g.decay_amplitudes, g.decay_times))]
        out.append(GlitchCandidate(
            epoch_mjd=g.epoch,
            epoch_min_mjd=float(_emission_mjd(model, t_a)),
            epoch_max_mjd=float(_emission_mjd(model, t_b)),
            epoch_uncertainty_days=float(unc["epoch_s"] / SECONDS_PER_DAY),
            frequency_step_hz=g.frequency_step.value,
            frequency_step_uncertainty_hz=float(unc["frequency_step"]),
            frequency_derivative_step=g.frequency_derivative_step.value,
            frequency_derivative_step_uncertainty=float(unc["frequency_derivative_step"]),
            phase_step=g.phase_step.value,
            phase_step_uncertainty=float(g.phase_step.uncertainty or float("nan")),
            decaying_terms=decays,
            fractional_size=df_total / f_here,
            permanent_fractional_size=g.frequency_step.value / f_here,
            false_alarm_probability=acc.fap,
            significance_sigma=None if acc.fap is None else _sigma_of(acc.fap),
            detection_chi2=acc.stat,
            window_frequency_step_hz=acc.df_hz,
            window_frequency_step_uncertainty_hz=acc.df_err_hz,
            bracket_toa_mjd=(text_a, text_b), epoch_choice=choice, model_index=g.array_index,
            known=acc.known, forced=acc.forced, search_pass=acc.search_pass))
    out.sort(key=lambda c: c.epoch_mjd)
    return out


def _track_and_residuals(model, obs, reference, settings, res):
    """Residuals of the fitted model without its glitch terms (µs, with the
    connected pulse numbers) and the local frequency track."""
    bare = model.copy()
    set_glitches(bare, [])
    ev_full = model.evaluate(obs, reference)
    ev = bare.evaluate(obs, reference)
    t = ev.extra["spin_dt_s"]
    order = np.argsort(t, kind="stable")
    if res is not None:
        pulse = np.round(res.postfit.pulse_number)
        # the fit's pulse numbers are aligned to the full model; re-align them
        shift = np.round(np.median(ev_full.phase_int - pulse))
        pulse = pulse + shift
    else:
        pulse = ev_full.phase_int
    phase = (ev.phase_int - pulse) + ev.phase_frac
    f = ev.spin_frequency_hz
    err_us = obs.toas.err_us
    w = 1.0 / err_us ** 2
    resid_us = phase / f * 1e6
    resid_us = resid_us - np.sum(w * resid_us) / np.sum(w)
    mjd = _emission_mjd(model, t)
    # the track: windows inside the intervals between glitches
    ts = t[order]
    r = phase[order]
    sigma = (err_us * 1e-6 * f)[order]
    glitch_t = sorted(_glitch_t_s(model, g) for g in model_glitches(model))
    interval = np.searchsorted(np.array(glitch_t), ts) if glitch_t else np.zeros(len(ts), int)
    width = settings.window_toas or max(MIN_WINDOW_TOAS, int(np.ceil(
        settings.window_days / max(np.median(np.diff(ts)) / SECONDS_PER_DAY, 1e-9))))
    step = max(1, width // 2)
    rows = []
    for k in np.unique(interval):
        pos = np.nonzero(interval == k)[0]
        if len(pos) < MIN_WINDOW_TOAS:
            continue
        starts = list(range(0, max(len(pos) - width, 0) + 1, step))
        if starts[-1] != max(len(pos) - width, 0):
            starts.append(max(len(pos) - width, 0))
        for s in starts:
            sel = pos[s:s + width]
            if len(sel) < MIN_WINDOW_TOAS:
                continue
            tc = float(np.average(ts[sel], weights=1.0 / sigma[sel] ** 2))
            x = (ts[sel] - tc) / SECONDS_PER_DAY
            params, cov, _ = _quadratic_fit(x, r[sel], 1.0 / sigma[sel] ** 2)
            rows.append((tc, -params[1] / SECONDS_PER_DAY,
                         math.sqrt(cov[1, 1]) / SECONDS_PER_DAY,
                         _spin_fdot_at(bare, tc) - params[2] / SECONDS_PER_DAY ** 2,
                         math.sqrt(cov[2, 2]) / SECONDS_PER_DAY ** 2))
    rows = np.array(rows) if rows else np.zeros((0, 5))
    track = FrequencyTrack(mjd=_emission_mjd(model, rows[:, 0]), frequency_offset_hz=rows[:, 1],
                           frequency_err_hz=rows[:, 2], frequency_derivative=rows[:, 3],
                           frequency_derivative_err=rows[:, 4])
    return track, (mjd, resid_us, err_us)


__all__ = ["GlitchSearchSettings", "GlitchCandidate", "GlitchSearchResult", "FrequencyTrack",
           "search_glitches", "track_phases", "solve_seed", "build_windows", "gap_statistics",
           "null_distribution", "false_alarm_probability", "DEFAULT_WINDOW_TOAS",
           "DEFAULT_MIN_SIGNIFICANCE"]
