"""Smooth functions of time evaluated on Chebyshev nodes only where there are times to serve.

Some series (IAU 2006/2000A precession-nutation, the TDB-TT series) cost tens of µs per
date, so for many TOAs they are evaluated at a few Chebyshev nodes per interval and
interpolated. A scheme is (maximum interval width W in days, Chebyshev degree d). The
sorted times are cut into clusters wherever two neighbours are W or more apart; a cluster
spanning L days is split into ceil(L/W) equal intervals (each at most W wide), so a 3-hour
session is one interval however it sits on the clock, and days without TOAs get no nodes.
In an interval holding more times than its d + 1 nodes, the function is evaluated at the
Chebyshev nodes (first kind) and the times are interpolated; otherwise they are evaluated
directly (exact). Each call takes the scheme needing the least work, so sparse sessions get
short intervals and dense data long ones. The accuracy of a scheme depends on the function:
the callers state and test theirs.

Written out (not numpy.polynomial.chebyshev) because chebval wants the coefficients
gathered for every point (degree + 1 times the memory and ~10x the time); here each
interval is one small matrix product on a reused basis buffer.
"""

from __future__ import annotations

import functools
import os
from dataclasses import dataclass
from typing import Callable

import numpy as np

_CHUNK = 8192
_CROWDED = 64        # points per interval above which intervals are summed one by one


@functools.lru_cache(maxsize=None)
def chebyshev_setup(degree: int):
    """Chebyshev nodes of the first kind on [-1, 1] and the matrix turning node values
    into Chebyshev coefficients (discrete cosine transform)."""
    j = np.arange(degree + 1)
    nodes = np.cos(np.pi * (j + 0.5) / (degree + 1))
    # c_k = (2 - [k==0]) / (d+1) * sum_j f_j T_k(x_j)
    tk = np.cos(np.outer(j, np.pi * (j + 0.5) / (degree + 1)))   # [k, j]
    to_coeffs = tk * (2.0 / (degree + 1))
    to_coeffs[0] *= 0.5
    return nodes, to_coeffs


@dataclass(frozen=True)
class GridPlan:
    width: float            # scheme's maximum interval width, days
    degree: int
    cost: float             # in function evaluations
    left: np.ndarray        # per interval: start (days)
    span: np.ndarray        # per interval: width, days (> 0)
    counts: np.ndarray      # per interval: times in it (sorted order)


def plan_grid(sorted_t: np.ndarray, width: float, degree: int, term_per_toa_cost: float,
              term_per_interval_cost: float) -> GridPlan:
    """Intervals of one scheme for sorted times, and its cost in function evaluations
    (one Chebyshev term for one time costs ``term_per_toa_cost``, for one interval
    ``term_per_interval_cost``)."""
    n = len(sorted_t)
    gap_after = np.diff(sorted_t) >= width
    c_start = np.flatnonzero(np.r_[True, gap_after])
    c_end = np.r_[c_start[1:], n] - 1                       # index of last time
    c_len = sorted_t[c_end] - sorted_t[c_start]
    c_parts = np.maximum(1, np.ceil(c_len / width)).astype(np.intp)
    # a one-point (or zero-length) cluster still gets a tiny interval
    c_span = np.where(c_len > 0, c_len / c_parts, width * 1e-6)
    cluster = np.repeat(np.arange(len(c_start)), np.diff(np.r_[c_start, n]))
    part = np.minimum(np.floor((sorted_t - sorted_t[c_start][cluster]) / c_span[cluster]),
                      c_parts[cluster] - 1).astype(np.intp)
    first_part = np.r_[0, np.cumsum(c_parts)[:-1]]
    ident = first_part[cluster] + part                       # non-decreasing
    i_start = np.flatnonzero(np.r_[True, ident[1:] != ident[:-1]])
    counts = np.diff(np.r_[i_start, n])
    i_cluster = cluster[i_start]
    span = c_span[i_cluster]
    left = sorted_t[c_start][i_cluster] + part[i_start] * span
    nodes = degree + 1
    interp = counts > nodes
    cost = float(np.sum(np.minimum(counts, nodes))
                 + nodes * (term_per_toa_cost * np.sum(counts[interp])
                            + term_per_interval_cost * np.count_nonzero(interp)))
    return GridPlan(width, degree, cost, left, span, counts)


def _bases(x: np.ndarray, nterms: int, derivative: bool):
    """T_j(x) (and T'_j(x)) for j < nterms, each (nterms, len(x))."""
    basis = np.empty((nterms, len(x)))
    basis[0] = 1.0
    if nterms > 1:
        basis[1] = x
    twox = 2.0 * x
    for j in range(2, nterms):
        np.multiply(twox, basis[j - 1], out=basis[j])
        basis[j] -= basis[j - 2]
    if not derivative:
        return basis, None
    dbasis = np.empty_like(basis)      # T'_j = 2 T_{j-1} + 2x T'_{j-1} - T'_{j-2}
    dbasis[0] = 0.0
    if nterms > 1:
        dbasis[1] = 1.0
    for j in range(2, nterms):
        np.multiply(twox, dbasis[j - 1], out=dbasis[j])
        dbasis[j] += 2.0 * basis[j - 1]
        dbasis[j] -= dbasis[j - 2]
    return basis, dbasis


def chebyshev_sum(coeffs: np.ndarray, counts: np.ndarray, x: np.ndarray,
                  derivative: bool = False):
    """Sum Chebyshev series interval by interval: ``coeffs`` is (degree+1, intervals, k),
    the points sorted by interval, ``counts`` per interval, ``x`` their position in
    [-1, 1]. Returns (k, N) values, and with ``derivative`` also d/dx (k, N).

    Crowded intervals take one small matrix product each; when intervals hold few
    points on average, blocks of points are done at once with each point's
    coefficients gathered (a Python loop per interval would dominate)."""
    nterms, intervals, k = coeffs.shape
    n = len(x)
    out = np.empty((k, n))
    slope = np.empty((k, n)) if derivative else None
    if n == 0:
        return (out, slope) if derivative else out
    if n >= _CROWDED * intervals:
        start = 0
        for i, count in enumerate(counts):
            c_i = coeffs[:, i, :].T                        # (k, nterms)
            for s in range(start, start + count, _CHUNK):
                e = min(s + _CHUNK, start + count)
                basis, dbasis = _bases(x[s:e], nterms, derivative)
                out[:, s:e] = c_i @ basis
                if derivative:
                    slope[:, s:e] = c_i @ dbasis
            start += count
    else:
        interval = np.repeat(np.arange(intervals), counts)
        for s in range(0, n, _CHUNK):
            e = min(s + _CHUNK, n)
            c = coeffs[:, interval[s:e], :]                # (nterms, chunk, k)
            basis, dbasis = _bases(x[s:e], nterms, derivative)
            out[:, s:e] = np.einsum("jn,jnk->kn", basis, c)
            if derivative:
                slope[:, s:e] = np.einsum("jn,jnk->kn", dbasis, c)
    return (out, slope) if derivative else out


def cache_folder() -> str:
    """Where derived tables are kept between runs: $TIMINGKIT_CACHE_DIR, else
    ~/.cache/timingkit (as the parsed Earth-orientation table)."""
    return os.environ.get("TIMINGKIT_CACHE_DIR") or os.path.join(
        os.path.expanduser("~"), ".cache", "timingkit")


class NodeCache:
    """Function values at the Chebyshev nodes of a fixed grid of intervals
    [k W, (k + 1) W) days, kept in memory and in ``cache_folder()/NAME.npz``.

    Only the intervals that data have needed are stored (~0.6 kB each; 40 years of
    32-day intervals ~0.3 MB). The values are those the function gives at the very
    same node times, so a result is identical with and without the cache. The file
    is a derived copy, replaced atomically; an unreadable one is ignored, and where
    the folder is not writable the cache lives in memory only."""

    def __init__(self, name: str, width_days: float, degree: int):
        self.name, self.width, self.degree = name, float(width_days), int(degree)
        self._values: dict[int, np.ndarray] | None = None

    @property
    def path(self) -> str:
        return os.path.join(cache_folder(), f"{self.name}-{self.width:g}d{self.degree}.npz")

    def _load(self) -> dict:
        if self._values is None:
            self._values = {}
            try:
                with np.load(self.path) as z:
                    self._values = dict(zip(z["index"].tolist(), z["values"]))
            except Exception:   # missing or damaged: computed again
                pass
        return self._values

    def node_times(self, index: np.ndarray) -> np.ndarray:
        xnode, _ = chebyshev_setup(self.degree)
        return (index[:, None] * self.width
                + (xnode[None, :] + 1.0) * (0.5 * self.width))

    def values(self, index: np.ndarray, function) -> np.ndarray:
        """(intervals, k, degree + 1) node values for the interval numbers ``index``."""
        known = self._load()
        missing = np.array([i for i in index.tolist() if i not in known], dtype=np.int64)
        if missing.size:
            fresh = np.atleast_2d(np.asarray(function(self.node_times(missing).ravel()),
                                             dtype=float))
            fresh = fresh.reshape(fresh.shape[0], len(missing), self.degree + 1)
            for j, i in enumerate(missing.tolist()):
                known[i] = fresh[:, j, :].copy()
            self._save()
        return np.stack([known[i] for i in index.tolist()])

    def _save(self) -> None:
        import tempfile
        folder = os.path.dirname(self.path)
        try:
            os.makedirs(folder, exist_ok=True)
            index = np.array(sorted(self._values), dtype=np.int64)
            fd, tmp = tempfile.mkstemp(prefix=f".{self.name}-", suffix=".npz", dir=folder)
            with os.fdopen(fd, "wb") as fh:
                np.savez(fh, index=index, values=np.stack([self._values[i] for i in index]))
            os.replace(tmp, self.path)
        except OSError:
            pass


def evaluate_on_grid(t, function: Callable[[np.ndarray], np.ndarray], schemes, *,
                     term_per_toa_cost: float, term_per_interval_cost: float,
                     cache: NodeCache | None = None) -> np.ndarray:
    """``function`` (times in days -> array (k, m)) at every time of ``t`` (any order),
    through the cheapest of ``schemes`` (module docstring). Returns (k, len(t)).

    With ``cache`` (whose width and degree should be those of the coarsest scheme),
    intervals of its fixed grid crowded with times take their node values from it,
    and the rest go through the schemes."""
    t = np.asarray(t, dtype=float)
    n = len(t)
    order = np.argsort(t, kind="stable")
    ts = t[order]
    pieces = []                      # (indices into ts, values (k, m))
    rest = np.arange(n)
    if cache is not None and n:
        interval = np.floor(ts / cache.width).astype(np.int64)
        numbers, counts = np.unique(interval, return_counts=True)
        crowded = counts > 2 * (cache.degree + 1)
        if np.any(crowded):
            served = np.repeat(crowded, counts)
            _, to_coeffs = chebyshev_setup(cache.degree)
            vals = cache.values(numbers[crowded], function)        # (m, k, d+1)
            coeffs = np.einsum("kj,mcj->kmc", to_coeffs, vals)      # (d+1, m, k)
            x = 2.0 * (ts[served] - interval[served] * cache.width) / cache.width - 1.0
            pieces.append((np.flatnonzero(served),
                           chebyshev_sum(coeffs, counts[crowded], np.clip(x, -1.0, 1.0))))
            rest = np.flatnonzero(~served)
    if rest.size:
        pieces += [(rest[i], v) for i, v in _planned(ts[rest], function, schemes,
                                                       term_per_toa_cost, term_per_interval_cost)]
    result = np.empty((pieces[0][1].shape[0], n)) if pieces else np.empty((0, 0))
    for index, values in pieces:
        result[:, index] = values
    out = np.empty_like(result)
    out[:, order] = result
    return out


def _planned(ts, function, schemes, term_per_toa_cost, term_per_interval_cost):
    """(indices into ``ts``, values) pieces for sorted times through the cheapest scheme."""
    plan = min((plan_grid(ts, w, d, term_per_toa_cost, term_per_interval_cost)
                for w, d in schemes), key=lambda p: p.cost)
    nodes = plan.degree + 1
    dense_interval = plan.counts > nodes
    dense = np.repeat(dense_interval, plan.counts)
    pieces = []
    if not np.all(dense):
        sparse_idx = np.flatnonzero(~dense)
        pieces.append((sparse_idx, np.atleast_2d(np.asarray(function(ts[sparse_idx]),
                                                            dtype=float))))
    if np.any(dense):
        dense_idx = np.flatnonzero(dense)
        left, span = plan.left[dense_interval], plan.span[dense_interval]
        counts = plan.counts[dense_interval]
        xnode, to_coeffs = chebyshev_setup(plan.degree)
        node_t = left[:, None] + (xnode[None, :] + 1.0) * (0.5 * span[:, None])
        vals = np.atleast_2d(np.asarray(function(node_t.ravel()), dtype=float))
        vals = vals.reshape(vals.shape[0], len(left), nodes)
        coeffs = np.einsum("kj,cmj->kmc", to_coeffs, vals)               # (d+1, m, k)
        x = (2.0 * (ts[dense_idx] - np.repeat(left, counts)) / np.repeat(span, counts)
             - 1.0)
        pieces.append((dense_idx, chebyshev_sum(coeffs, counts, np.clip(x, -1.0, 1.0))))
    return pieces
