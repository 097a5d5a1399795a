"""Gap statistics and their null distribution for the glitch search
(timingkit.glitch.search, steps 2-3).

Each gap between TOAs gets a window of TOAs on each side, fitted with phase,
frequency and frequency derivative referred to the gap; the differences of
the fitted frequency and frequency derivative, with the windows'
covariances scaled up by their reduced chi-squares above 1, give a 2-dof
chi-square per gap. Noise sent through the very same windows gives the null
distribution of the largest one, hence the global false-alarm probability:
white noise with the TOA uncertainties, or, when the timing model has noise
sections, the whole noise model (:class:`NullNoise`: the scaled white errors
plus the red process on its Fourier basis).

With red noise the window fits stay weighted by the white errors (each
window is short, and its quadratic absorbs most of the red power), but the
covariance of the steps between the two windows gains the red-noise term
D Phi D^T (D: response of the step estimates to the Fourier coefficients,
Phi their prior variances), including the correlation of the two windows,
so that each gap's statistic is again close to a 2-dof chi-square under the
noise model; the reduced chi-square of a window is taken against its
expected value under the noise model ((n - 3) plus the red power its
quadratic leaves). All windows are solved at once with batched 3x3 algebra
(numpy), which is why this is written by hand.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.special
import scipy.stats

from timingkit.glitch.tracking import MIN_WINDOW_TOAS, SECONDS_PER_DAY, _design

MIN_GAP_DAYS = 0.1                 # shorter gaps (one observing session) are no candidates


@dataclass
class GapWindows:
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
    red_cov: np.ndarray | None = None     # (G, 2, 2) red-noise covariance of the steps
    red_chi2_left: np.ndarray | None = None   # (G,) expected red-noise chi-square of a window
    red_chi2_right: np.ndarray | None = None


@dataclass
class NullNoise:
    """The noise of the null realisations, in cycles, in the search's
    time-sorted TOA order: white noise of ``sigma`` (N,) and, optionally, red
    noise ``red @ z`` with z unit normal, ``red`` (N, K) the red-noise Fourier
    basis times the square root of each coefficient's prior variance (the same
    draw as timingkit.model.noise.NoiseModel.realisations_s, converted to
    cycles)."""
    sigma: np.ndarray
    red: np.ndarray | None = None

    def draw(self, rng, count: int) -> np.ndarray:
        """(count, N) realisations; white part first from ``rng`` (as before red
        noise existed, so white-only searches keep their random streams)."""
        out = rng.standard_normal((count, len(self.sigma))) * self.sigma[None, :]
        if self.red is not None:
            out += rng.standard_normal((count, self.red.shape[1])) @ self.red.T
        return out


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


def _red_terms(idx, x, est, w, red):
    """Response (G, 3, K) of a window's parameters to the red-noise
    coefficients, and the expected red-noise chi-square (G,) its quadratic
    leaves (sum of w (r - A E r)^2 over the coefficients' unit variances)."""
    rows = red[np.maximum(idx, 0)] * (idx >= 0)[..., None]      # (G, W, K)
    response = np.matmul(est, rows)                               # (G, 3, K)
    left_over = rows - np.matmul(_design(x), response)            # (G, W, K)
    return response, np.einsum("gw,gwk,gwk->g", w, left_over, left_over)


def build_windows(t_s, sigma, chains, barriers, window_toas, window_days,
                  red=None) -> GapWindows:
    """Left/right windows of every candidate gap (module docstring, step 2).
    Each window takes its pulse numbering from whichever tracking chain
    connects more of its TOAs (the forward chain by preference on the left,
    the backward chain on the right). ``red``: the red-noise columns of
    :class:`NullNoise` (cycles), or None for white noise only."""
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
    ok &= ~np.isin(j, np.array(sorted(barriers), dtype=np.int64))
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
    red_cov = red_chi2_l = red_chi2_r = None
    if red is not None:
        resp_l, red_chi2_l = _red_terms(left[sel], x_l[sel], e_l[sel], w_l[sel], red)
        resp_r, red_chi2_r = _red_terms(right[sel], x_r[sel], e_r[sel], w_r[sel], red)
        d = resp_r[:, 1:, :] - resp_l[:, 1:, :]                   # (G, 2, K)
        red_cov = np.matmul(d, np.swapaxes(d, 1, 2))
    return GapWindows(gaps=gaps[sel], left=left[sel], right=right[sel], e_left=e_l[sel],
                    e_right=e_r[sel], aw_left=aw_l[sel], aw_right=aw_r[sel],
                    cov_left=c_l[sel], cov_right=c_r[sel], w_left=w_l[sel], w_right=w_r[sel],
                    n_left=n_l[sel], n_right=n_r[sel], left_bwd=left_bwd[sel],
                    right_bwd=right_bwd[sel], red_cov=red_cov, red_chi2_left=red_chi2_l,
                    red_chi2_right=red_chi2_r)


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


def gap_statistics(win: GapWindows, r_fwd, r_bwd=None):
    """Per-gap 2-dof chi-square of the frequency and frequency-derivative steps,
    and the steps themselves (cycles/day, cycles/day^2, sign: residual).
    ``r_fwd``/``r_bwd``: residuals numbered by the forward/backward chain (N,),
    or noise realisations (M, N) for both."""
    p_l, chi2_l = _window_fits(win.e_left, win.aw_left, win.w_left, win.left, r_fwd,
                               r_bwd, win.left_bwd)
    p_r, chi2_r = _window_fits(win.e_right, win.aw_right, win.w_right, win.right, r_fwd,
                               r_bwd, win.right_bwd)
    d = p_r[..., 1:] - p_l[..., 1:]
    if win.red_cov is None:
        s_l = np.maximum(1.0, chi2_l / (win.n_left - 3))
        s_r = np.maximum(1.0, chi2_r / (win.n_right - 3))
        c = (s_l[..., None, None] * win.cov_left[:, 1:, 1:]
             + s_r[..., None, None] * win.cov_right[:, 1:, 1:])
    else:
        # reduced chi-squares against their expectation under the noise model;
        # the joint red term scales with the mean of the two
        s_l = np.maximum(1.0, chi2_l / (win.n_left - 3 + win.red_chi2_left))
        s_r = np.maximum(1.0, chi2_r / (win.n_right - 3 + win.red_chi2_right))
        c = (s_l[..., None, None] * win.cov_left[:, 1:, 1:]
             + s_r[..., None, None] * win.cov_right[:, 1:, 1:]
             + 0.5 * (s_l + s_r)[..., None, None] * win.red_cov)
    det = c[..., 0, 0] * c[..., 1, 1] - c[..., 0, 1] ** 2
    stat = (c[..., 1, 1] * d[..., 0] ** 2 - 2 * c[..., 0, 1] * d[..., 0] * d[..., 1]
            + c[..., 0, 0] * d[..., 1] ** 2) / det
    return stat, d, c, p_l, p_r


@dataclass
class NullDistribution:
    """Largest gap statistic of each null (noise-only) realisation, all per-gap
    values pooled (sorted), and the effective number of independent gaps."""
    maxima: np.ndarray
    pooled: np.ndarray
    n_effective: float


def null_distribution(win: GapWindows, noise, trials: int, rng) -> NullDistribution:
    """Gap statistics of pure noise through the same windows and scaling
    (step 3): ``noise`` a :class:`NullNoise`, or an array of TOA
    uncertainties in cycles for white noise only. The effective
    number of independent gaps N makes (1 - S(x))^N, with S the pooled per-gap
    survival function, match the distribution of the maxima at its upper
    quantile (1 - 25/trials), where the far tail is extrapolated from."""
    if not isinstance(noise, NullNoise):
        noise = NullNoise(np.asarray(noise, dtype=float))
    g, width = win.left.shape
    chunk = max(1, int(3_000_000 // max(g * width, 1)))
    maxima, pooled = [], []
    done = 0
    while done < trials:
        m = min(chunk, trials - done)
        r = noise.draw(rng, m)
        stat, *_ = gap_statistics(win, r)
        maxima.append(np.max(stat, axis=1))
        pooled.append(stat.ravel())
        done += m
    maxima = np.concatenate(maxima)
    pooled = np.sort(np.concatenate(pooled))
    q = 1.0 - min(0.5, 25.0 / len(maxima))
    survival = local_survival(pooled, float(np.quantile(maxima, q)))
    n_eff = math.log(q) / math.log1p(-min(max(survival, 1e-300), 1 - 1e-16))
    return NullDistribution(maxima=maxima, pooled=pooled, n_effective=max(1.0, n_eff))


def local_survival(pooled, value):
    """P(per-gap statistic >= value) under the null: empirical, with the
    exponential (2-dof chi-square) tail beyond the simulated range."""
    n = len(pooled)
    above = n - np.searchsorted(pooled, value, side="left")
    if above >= 50:
        return above / n
    anchor = pooled[max(n - 50, 0)]
    return (50.0 / n) * math.exp(-0.5 * max(value - anchor, 0.0))


def false_alarm_probability(null: NullDistribution, value: float) -> float:
    """Global FAP of a maximum gap statistic ``value`` (step 3)."""
    exceed = int(np.sum(null.maxima >= value))
    if exceed >= 20:
        return (exceed + 1) / (len(null.maxima) + 1)
    s = local_survival(null.pooled, value)
    return float(-np.expm1(null.n_effective * np.log1p(-min(s, 1 - 1e-16))))


TAIL_EXCEEDANCES = 20     # fewer simulated maxima above a value: the tail model interpolates


def reported_false_alarm(null: NullDistribution, value: float, local: bool = False):
    """The false-alarm probability as reported, never below 1/(N + 1) for N
    simulations: (probability, upper limit?, how it was obtained). ``local``: the
    per-gap probability of a known epoch (pooled gaps) instead of the global one.
    Below the simulated range no tail model is calibrated, so the value is then
    the bound 1/(N + 1), flagged as an upper limit."""
    n = len(null.maxima)
    floor = 1.0 / (n + 1)
    if local:
        fap = local_survival(null.pooled, value)
        method = (f"simulation: share of the per-gap statistics of {n} noise realisations "
                  "(all gaps pooled) at or above the value")
    else:
        exceed = int(np.sum(null.maxima >= value))
        fap = false_alarm_probability(null, value)
        method = (f"simulation: {exceed} of {n} noise realisations had a larger maximum"
                  if exceed >= TAIL_EXCEEDANCES else
                  f"simulation tail: {exceed} of {n} noise realisations had a larger maximum; "
                  "smoothed by the per-gap 2-dof chi-square tail and the effective number of "
                  "independent gaps, within the simulated range")
    if fap < floor:
        return floor, True, (f"upper limit: beyond what {n} noise realisations resolve "
                             f"(none reached the value); below 1/({n} + 1) no tail model is "
                             "calibrated")
    return float(fap), False, method


def gaussian_sigma(fap: float) -> float:
    return float(math.sqrt(2.0) * scipy.special.erfcinv(min(max(fap, 1e-300), 1.0)))


def threshold_statistic(null: NullDistribution, fap: float) -> float:
    """Statistic whose global FAP equals ``fap`` (for the detection limit)."""
    lo, hi = 0.0, 2000.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if false_alarm_probability(null, mid) > fap:
            lo = mid
        else:
            hi = mid
    return hi


def detection_limit(win: GapWindows, threshold: float, frequency_hz: float) -> dict:
    """Smallest frequency step found with 95 % probability at a typical gap:
    non-central 2-dof chi-square above ``threshold`` (the noise model's
    covariance of the steps, no scaling)."""
    if len(win.gaps) == 0:
        return {"frequency_step_hz": None, "fractional_size": None}
    from scipy.optimize import brentq
    lam = brentq(lambda nc: scipy.stats.ncx2.sf(threshold, 2, nc) - 0.95, 1e-6, 1e5)
    c = win.cov_left[:, 1:, 1:] + win.cov_right[:, 1:, 1:]
    if win.red_cov is not None:
        c = c + win.red_cov
    inv_ff = c[:, 1, 1] / (c[:, 0, 0] * c[:, 1, 1] - c[:, 0, 1] ** 2)
    step = np.sqrt(lam / inv_ff) / SECONDS_PER_DAY
    return {"frequency_step_hz": float(np.median(step)),
            "fractional_size": float(np.median(step) / frequency_hz),
            "fractional_size_90th_percentile_gap": float(np.percentile(step, 90) / frequency_hz),
            "statistic_threshold": float(threshold),
            "note": "95 % detection probability for a pure frequency step at the median gap, "
                    + ("white and red noise of the model's noise sections"
                       if win.red_cov is not None else "white noise")
                    + ", at the minimum significance; larger steps than "
                    "max_fractional_step cannot be reconnected"}


