"""Kepler's equation E - e sin E = M, vectorised, to the limit of float64.

Written by hand because numpy/scipy have no vectorised Kepler solver and the
binary model needs one that is fast on 1e5 TOAs and exact to rounding.

Newton's method from Danby's starting value E0 = M + 0.85 e sign(sin M)
(Danby 1987, Celest. Mech. 40, 303), which converges for every e < 1. The
mean anomaly is first reduced to [-pi, pi) (where the float64 spacing is at
most 4.4e-16 rad). Iteration stops once every Newton step is below 1e-12
rad, and one more step is then taken: Newton's quadratic convergence leaves a
truncation error below ~1e-20 rad, so the result carries only the rounding
of the last step, below 1e-15 rad for e <= 0.95 (tests/test_binary.py checks
this against 50-digit solutions and against Meeus' worked example).
"""

from __future__ import annotations

import numpy as np

TWO_PI = 2.0 * np.pi
MAX_ITERATIONS = 60
SWITCH_TO_FINAL_STEP_RAD = 1e-12


def wrap_angle(angle: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(angle reduced to [-pi, pi), number of whole turns removed)."""
    turns = np.floor((np.asarray(angle, dtype=float) + np.pi) / TWO_PI)
    return angle - TWO_PI * turns, turns


def solve_kepler(mean_anomaly, eccentricity, guess=None) -> np.ndarray:
    """Eccentric anomaly E (rad) with E - e sin E = M.

    ``mean_anomaly`` (rad, any range; the result carries the same whole turns),
    ``eccentricity`` in [0, 1) (scalar or array), ``guess``: optional starting
    eccentric anomalies (e.g. from a nearby time), same turns as M.
    """
    m_in = np.atleast_1d(np.asarray(mean_anomaly, dtype=float))
    e = np.broadcast_to(np.asarray(eccentricity, dtype=float), m_in.shape)
    if np.any(~np.isfinite(e)) or np.any(e < 0) or np.any(e >= 1):
        raise ValueError("eccentricity must lie in [0, 1)")
    m, turns = wrap_angle(m_in)
    if guess is None:
        ecc_anom = m + 0.85 * e * np.where(np.sin(m) >= 0, 1.0, -1.0)
    else:
        ecc_anom = np.atleast_1d(np.asarray(guess, dtype=float)) - TWO_PI * turns
    active = np.ones(m.shape, dtype=bool)
    for _ in range(MAX_ITERATIONS):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        ea, ee = ecc_anom[idx], e[idx]
        step = (ea - ee * np.sin(ea) - m[idx]) / (1.0 - ee * np.cos(ea))
        ecc_anom[idx] = ea - step
        done = np.abs(step) < SWITCH_TO_FINAL_STEP_RAD
        if done.any():
            # one last Newton step from within 1e-12 rad: truncation < 1e-20 rad
            j = idx[done]
            ea, ee = ecc_anom[j], e[j]
            ecc_anom[j] = ea - (ea - ee * np.sin(ea) - m[j]) / (1.0 - ee * np.cos(ea))
            active[j] = False
    else:  # pragma: no cover - Danby's start converges for all e < 1
        raise ArithmeticError("Kepler's equation did not converge")
    return ecc_anom + TWO_PI * turns


def true_anomaly(eccentric_anomaly, eccentricity) -> np.ndarray:
    """True anomaly (rad) from the eccentric anomaly, keeping the whole turns
    of E (continuous over many orbits): tan(nu/2) = sqrt((1+e)/(1-e)) tan(E/2)."""
    ea = np.asarray(eccentric_anomaly, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    wrapped, turns = wrap_angle(ea)
    nu = 2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(wrapped / 2.0),
                          np.sqrt(1.0 - e) * np.cos(wrapped / 2.0))
    return nu + TWO_PI * turns


__all__ = ["solve_kepler", "true_anomaly", "wrap_angle"]
