"""Pulse numbering for the glitch search (timingkit.glitch.search, step 1).

Residual phases (model phase minus pulse count, cycles) at emission times
(TDB s) are numbered TOA by TOA, forward and backward in time: a quadratic
fitted to the last few connected TOAs predicts the next, whose count is the
integer nearest the prediction; a TOA that misses by more than TRACK_Z sigma
(or TRACK_MAX_DEVIATION cycles) breaks the chain. A broken chain restarts
with a *seed solution* (:func:`solve_seed`): every pulse count of three TOAs
allowed by bounded frequency and frequency-derivative offsets is enumerated,
and the following TOAs keep the hypotheses whose least-squares quadratic
still fits (chi-square tail > SEED_PRUNE_P), branching where a prediction is
not sharp enough to round. :func:`number_pulses` joins the chains' pieces
between glitch gaps into one numbering. Written by hand: no general library
numbers pulses.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.stats

SECONDS_PER_DAY = 86400.0
MIN_WINDOW_TOAS = 5                # per window: 3 fitted terms + 2 degrees of freedom
TRACK_WINDOW_TOAS = 8              # TOAs of the local fit that predicts the next TOA
TRACK_Z = 4.0                      # a TOA further than this (sigma) from the prediction breaks
TRACK_MAX_DEVIATION = 0.2          # ... as does one further than this (cycles)
TRACK_MAX_PREDICTION_SIGMA = 0.08  # cycles: beyond this the pulse count is not safe
SEED_TOAS = 6
MAX_SEED_TOAS = 16
SEED_PRUNE_P = 1e-6                # chi-square tail below which a pulse-count hypothesis dies
SEED_UNIQUE_DCHI2 = 25.0           # runner-up must be this much worse (5 sigma)
MAX_SEED_HYPOTHESES = 400_000


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

def _choose_anchors(x, f_range, derivative_range_hz_per_s):
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
        cost = (2 * f_range * d12 + 3) * (derivative_range_hz_per_s * (d12 + d23) * d23 + 3)
        if cost < best_cost:
            best, best_cost = (order[i], order[i + 1], order[i + 2]), cost
    return best, best_cost


def solve_seed(x_s, rho, sigma, f_range_hz, derivative_range_hz_per_s, tolerance: float = 1.0):
    """Pulse-count offsets (integers, one per TOA) that make the residual
    phases ``rho`` (cycles, any integer offset each) at times ``x_s`` (s) lie
    on one quadratic, with |frequency offset| <= ``f_range_hz`` and
    |frequency-derivative offset| <= ``derivative_range_hz_per_s``. Returns (offsets,
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
    anchors, cost = _choose_anchors(x_s, f_range_hz, derivative_range_hz_per_s)
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
    lo = (s12 - 0.5 * derivative_range_hz_per_s * d13) * d23 - (rho[i3] - rho[i2]) + k2
    hi = (s12 + 0.5 * derivative_range_hz_per_s * d13) * d23 - (rho[i3] - rho[i2]) + k2
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
        keep &= np.abs(params[:, 2]) <= 1.5 * derivative_range_hz_per_s * SECONDS_PER_DAY ** 2 + 1e-300
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
class TrackingChain:
    """Pulse-count offsets (integers added to the model's fractional phase) and
    connected-segment labels per TOA (time order), for one tracking direction."""
    offsets: np.ndarray
    segment: np.ndarray
    ambiguous_at: list


def track_phases(t_s, frac, sigma, f_range_hz, derivative_range_hz_per_s, backward: bool = False) -> TrackingChain:
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
                solved = solve_seed(t_s[idx], frac[idx], sigma[idx], f_range_hz, derivative_range_hz_per_s, tol)
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
    return TrackingChain(offsets=offsets, segment=segment.astype(np.int64), ambiguous_at=ambiguous)


def _segments(chain: TrackingChain):
    """(start, end) position of each connected segment of ``chain``, time order."""
    cuts = np.nonzero(np.diff(chain.segment) != 0)[0] + 1
    starts = np.concatenate([[0], cuts])
    ends = np.concatenate([cuts - 1, [len(chain.segment) - 1]])
    return list(zip(starts.tolist(), ends.tolist()))


def _dissolve(chain: TrackingChain, start: int, end: int) -> TrackingChain:
    """``chain`` with the TOAs ``start..end`` each standing alone (unconnected)."""
    breaks = np.diff(chain.segment) != 0
    breaks[max(start - 1, 0):end + 1] = True
    segment = np.concatenate([[0], np.cumsum(breaks)]).astype(np.int64)
    return TrackingChain(offsets=chain.offsets, segment=segment,
                         ambiguous_at=chain.ambiguous_at)


def reconcile_chains(fwd: TrackingChain, bwd: TrackingChain):
    """Make the two numberings agree: where a forward and a backward segment
    share two or more TOAs but count different turns between them (offsets
    not equal up to one constant), one is wrong; the shorter (confirmed by
    fewer TOAs) is dissolved, the shortest such first, until they agree.
    Typical case: a seed across a glitch accepted with a wrong pulse-count
    hypothesis at a large false frequency offset (an alias of the TOA
    spacing), which a scan window would take for a pair of huge steps."""
    chains = [fwd, bwd]
    while True:
        worst = None
        others = _segments(chains[1])
        other_ends = np.array([b1 for _, b1 in others])
        for a0, a1 in _segments(chains[0]):
            if a1 == a0:
                continue
            for b0, b1 in others[int(np.searchsorted(other_ends, a0 + 1)):]:
                if b0 >= a1:
                    break
                lo, hi = max(a0, b0), min(a1, b1)
                if hi - lo < 1:
                    continue       # one shared TOA says nothing about turns between TOAs
                diff = chains[0].offsets[lo:hi + 1] - chains[1].offsets[lo:hi + 1]
                if np.all(diff == diff[0]):
                    continue
                shorter = (0, a0, a1) if a1 - a0 <= b1 - b0 else (1, b0, b1)
                if worst is None or shorter[2] - shorter[1] < worst[2] - worst[1]:
                    worst = shorter
        if worst is None:
            return chains[0], chains[1]
        which, start, end = worst
        chains[which] = _dissolve(chains[which], start, end)


def track_both(data, f_range_hz, derivative_range_hz_per_s):
    """The forward and backward numberings of ``data`` (sorted ``t_s``,
    ``frac``, ``sigma``), reconciled (:func:`reconcile_chains`)."""
    args = (data.t_s, data.frac, data.sigma, f_range_hz, derivative_range_hz_per_s)
    return reconcile_chains(track_phases(*args), track_phases(*args, backward=True))


# ============================================================================ joining pieces

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
    reference_s = t_s[near_p[0]] if piece[0] > conn[-1] else t_s[near_p[-1]]
    xc = (t_s[near_c] - reference_s) / SECONDS_PER_DAY
    params, cov, chi2c = _quadratic_fit(xc, r[near_c], 1.0 / sigma[near_c] ** 2)
    scale = max(1.0, chi2c / max(len(near_c) - 3, 1))
    p_ref = near_p[0] if piece[0] > conn[-1] else near_p[-1]
    pred = params[0]
    sig = math.sqrt(scale * (cov[0, 0] + sigma[p_ref] ** 2))
    k0 = int(np.round(pred - r[p_ref]))
    spread = int(min(200, math.ceil(6 * sig) + 1))
    ks = k0 + np.arange(-spread, spread + 1)
    both = np.concatenate([near_c, near_p])
    x = (t_s[both] - reference_s) / SECONDS_PER_DAY
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


def number_pulses(data, chains, barriers, warnings):
    """Connected pulse-count offsets for every TOA (``data`` has sorted
    ``t_s``, ``frac``, ``sigma``), interval by interval between the glitch
    gaps ``barriers``. Returns (offsets, keep mask, forced
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
