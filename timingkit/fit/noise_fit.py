"""Maximum-likelihood estimates of the noise parameters.

The likelihood is the marginal likelihood of :mod:`timingkit.fit.gls`: the
timing-model parameters (linearised about the current solution, flat prior)
and the red-noise Fourier coefficients are integrated out, so the noise
parameters are not biased low by the fitted timing model (the "restricted"
likelihood). It is maximised with scipy.optimize (L-BFGS-B within the legal
ranges of :data:`timingkit.model.noise.BOUNDS`), after a coarse scan of the
red-noise amplitude to start near the global maximum. Uncertainties are the
square roots of the diagonal of the inverse Hessian of -ln L at the maximum
(central finite differences, steps about 0.2 sigma), i.e. the usual
large-sample (Cramer-Rao) approximation; a parameter that ends on a bound of
its range, or along a direction where -ln L has no curvature (e.g. a
red-noise amplitude far below the white level), gets no uncertainty and a
warning instead.

The quadrature term is searched as a variance (added_error_us^2): the
likelihood is smooth there, whereas in added_error_us itself its slope at
zero always vanishes and a search started at zero would never leave it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import FitError
from timingkit.fit.gls import RedLikelihood, marginal_log_likelihood
from timingkit.model.flag_groups import toa_table_of
from timingkit.model.noise import BOUNDS, NoiseModel

AMPLITUDE_SCAN_HALF_WIDTH = 6.0    # decades of amplitude either side of the start
AMPLITUDE_SCAN_STEP = 0.5
HESSIAN_STEP_SIGMA = 0.2


@dataclass
class NoiseEstimate:
    """Maximum-likelihood noise parameters (natural units: error_scale,
    added_error_us in µs, amplitude_log10, spectral_index)."""
    names: list[str]
    values: dict[str, float]
    uncertainties: dict[str, float | None]
    covariance: np.ndarray | None       # over ``names`` (None if any is unconstrained)
    log_likelihood: float
    evaluations: int
    success: bool
    warnings: list[str] = field(default_factory=list)


def _kind(name: str) -> str:
    return name.rsplit(".", 1)[-1]


class NoiseLikelihood:
    """ln L(noise parameters) for fixed residuals and design matrix (seconds).

    ``values`` maps parameter names to natural values; names not given keep
    the noise model's current values."""

    def __init__(self, noise: NoiseModel, toas, design_s: np.ndarray, resid_s: np.ndarray,
                 times_s: np.ndarray, white_fixed: bool = False):
        self.noise = noise
        self.toas = toas
        self.design_s = design_s
        self.resid_s = resid_s
        self.group_index = noise.group_index(toas)
        self.basis, self.span_s = (noise.red_basis(times_s) if noise.red is not None
                                   else (None, None))
        self.evaluations = 0
        self._red_only = None
        if white_fixed and self.basis is not None:
            err_s = noise.white_errors_us(toas, self.group_index) * 1e-6
            self._red_only = RedLikelihood(design_s, resid_s, err_s, self.basis)

    def __call__(self, values: dict) -> float:
        self.evaluations += 1
        phi = self.noise.red_prior(self.span_s, values) if self.basis is not None else None
        if self._red_only is not None:
            return self._red_only(phi)
        err_s = self.noise.white_errors_us(self.toas, self.group_index, values) * 1e-6
        return marginal_log_likelihood(self.design_s, self.resid_s, err_s, self.basis, phi)


class _Coordinates:
    """Search coordinates y: natural values except added_error_us -> its square
    in units of the median TOA error squared."""

    def __init__(self, names, typical_err_us):
        self.names = names
        self.q2_unit = typical_err_us ** 2

    def to_y(self, values: dict) -> np.ndarray:
        return np.array([values[n] ** 2 / self.q2_unit if _kind(n) == "added_error_us"
                         else values[n] for n in self.names], dtype=float)

    def to_values(self, y) -> dict:
        return {n: (math.sqrt(max(v, 0.0) * self.q2_unit) if _kind(n) == "added_error_us"
                    else float(v)) for n, v in zip(self.names, y)}

    def bounds(self):
        out = []
        for n in self.names:
            lo, hi = BOUNDS[_kind(n)]
            if _kind(n) == "added_error_us":
                lo, hi = lo ** 2 / self.q2_unit, hi ** 2 / self.q2_unit
            out.append((lo, hi))
        return out

    def typical_step(self, i: int) -> float:
        return 1.0


def fit_noise(noise: NoiseModel, toas, design_s: np.ndarray, resid_s: np.ndarray,
              times_s: np.ndarray, names: list[str]) -> NoiseEstimate:
    """Maximise the marginal likelihood over the noise parameters ``names``
    (the others stay at the model's values); see the module docstring. ``toas``:
    the Observations (or a bare ToaTable: see timingkit.model.flag_groups)."""
    params = {p.name: p for p in noise.parameters()}
    unknown = [n for n in names if n not in params]
    if unknown:
        raise FitError(f"not noise parameters: {', '.join(unknown)}")
    counts = dict(zip([g.array_index for g in noise.white], noise.group_counts(toas)))
    warnings: list[str] = []
    usable = []
    for n in names:
        if n.startswith("white_noise."):
            idx = int(n.split(".")[1])
            if counts.get(idx, 0) == 0:
                warnings.append(f"{n}: no TOAs in this white-noise group; held at its value")
                continue
        usable.append(n)
    names = usable
    white_free = any(n.startswith("white_noise.") for n in names)
    like = NoiseLikelihood(noise, toas, design_s, resid_s, times_s, white_fixed=not white_free)
    start = {n: params[n].value for n in names}
    if not names:
        return NoiseEstimate(names=[], values={}, uncertainties={}, covariance=None,
                             log_likelihood=like({}), evaluations=like.evaluations,
                             success=True, warnings=warnings)
    coords = _Coordinates(names, float(np.median(toa_table_of(toas).err_us)))
    bounds = coords.bounds()

    def objective(y):
        value = like(coords.to_values(y))
        return -value if math.isfinite(value) else 1e300

    y0 = np.clip(coords.to_y(start), [b[0] for b in bounds], [b[1] for b in bounds])
    for i, n in enumerate(names):          # leave a zero quadrature term: the search can move
        if _kind(n) == "added_error_us" and y0[i] == 0.0:
            y0[i] = 0.01
    y0 = _scan_amplitude(objective, y0, names, bounds)
    import scipy.optimize  # here, not at module level: ~0.3 s of import for every CLI run

    opt = scipy.optimize.minimize(objective, y0, method="L-BFGS-B", bounds=bounds,
                                  options={"maxiter": 500})
    y_best = opt.x
    if not opt.success:
        alt = scipy.optimize.minimize(objective, y_best, method="Nelder-Mead",
                                      options={"maxiter": 2000, "xatol": 1e-6, "fatol": 1e-6})
        if alt.fun < opt.fun:
            y_best = np.clip(alt.x, [b[0] for b in bounds], [b[1] for b in bounds])
    success = bool(opt.success) or objective(y_best) <= opt.fun
    values = coords.to_values(y_best)
    uncertainties, covariance, notes = _uncertainties(objective, y_best, names, bounds, coords)
    warnings.extend(notes)
    if not success:
        warnings.append(f"noise-parameter search did not converge ({opt.message})")
    return NoiseEstimate(names=names, values=values, uncertainties=uncertainties,
                         covariance=covariance, log_likelihood=-objective(y_best),
                         evaluations=like.evaluations, success=success, warnings=warnings)


def _scan_amplitude(objective, y0, names, bounds) -> np.ndarray:
    """Coarse scan of the red amplitude (at a few spectral indices when that is
    free too): the best grid point starts the local search."""
    if "red_noise.amplitude_log10" not in names:
        return y0
    ia = names.index("red_noise.amplitude_log10")
    ig = names.index("red_noise.spectral_index") if "red_noise.spectral_index" in names else None
    lo, hi = bounds[ia]
    grid = np.arange(max(lo, y0[ia] - AMPLITUDE_SCAN_HALF_WIDTH),
                     min(hi, y0[ia] + AMPLITUDE_SCAN_HALF_WIDTH) + 1e-9, AMPLITUDE_SCAN_STEP)
    indices = [y0[ig]] if ig is None else sorted({float(y0[ig]), 2.0, 4.0, 6.0})
    best, best_f = y0, objective(y0)
    for g in indices:
        for a in grid:
            y = y0.copy()
            y[ia] = a
            if ig is not None:
                y[ig] = g
            f = objective(y)
            if f < best_f:
                best, best_f = y, f
    return best


def _uncertainties(objective, y, names, bounds, coords):
    """Inverse-Hessian uncertainties in natural units (module docstring)."""
    notes = []
    k = len(names)
    best_value = objective(y)
    steps = np.empty(k)
    active = []
    for i in range(k):
        lo, hi = bounds[i]
        h = 1e-3 * max(abs(y[i]), 1.0)
        if y[i] - lo < 1e-6 * max(abs(y[i]), 1.0) or hi - y[i] < 1e-6 * max(abs(y[i]), 1.0):
            notes.append(f"{names[i]} is at the edge of its search range "
                         f"({coords.to_values(y)[names[i]]:.6g}); no uncertainty given"
                         + (": no added white noise detected" if _kind(names[i]) == "added_error_us"
                            else ""))
            continue
        # second derivative with a trial step, then a step of ~0.2 sigma
        for _ in range(3):
            h = min(h, 0.5 * (y[i] - lo), 0.5 * (hi - y[i]))
            d2 = (_shifted(objective, y, i, h) - 2 * best_value
                  + _shifted(objective, y, i, -h)) / h ** 2
            if not (np.isfinite(d2) and d2 > 0):
                break
            new_h = HESSIAN_STEP_SIGMA / math.sqrt(d2)
            if abs(new_h / h - 1) < 0.5:
                break
            h = new_h
        h = min(h, 0.5 * (y[i] - lo), 0.5 * (hi - y[i]))
        steps[i] = h
        active.append(i)
    values = coords.to_values(y)
    unc = {n: None for n in names}
    if not active:
        return unc, None, notes
    hess = np.empty((len(active), len(active)))
    for a, i in enumerate(active):
        for b, j in enumerate(active):
            if b < a:
                hess[a, b] = hess[b, a]
                continue
            if i == j:
                hess[a, a] = (_shifted(objective, y, i, steps[i]) - 2 * best_value
                              + _shifted(objective, y, i, -steps[i])) / steps[i] ** 2
            else:
                hess[a, b] = (_shifted2(objective, y, i, steps[i], j, steps[j])
                              - _shifted2(objective, y, i, steps[i], j, -steps[j])
                              - _shifted2(objective, y, i, -steps[i], j, steps[j])
                              + _shifted2(objective, y, i, -steps[i], j, -steps[j])
                              ) / (4 * steps[i] * steps[j])
    eig = np.linalg.eigvalsh(hess) if np.all(np.isfinite(hess)) else np.array([-1.0])
    if not np.all(eig > 0):
        notes.append("noise parameters " + ", ".join(names[i] for i in active) +
                     ": the likelihood has no curvature in some direction at its maximum "
                     "(a parameter is not constrained by these data); no uncertainties given")
        return unc, None, notes
    cov_y = np.linalg.inv(hess)
    # Jacobian d(natural)/d(y): added_error_us = sqrt(y * unit)
    jac = np.ones(len(active))
    for a, i in enumerate(active):
        if _kind(names[i]) == "added_error_us":
            q = values[names[i]]
            jac[a] = coords.q2_unit / (2.0 * q) if q > 0 else np.inf
    cov = cov_y * np.outer(jac, jac)
    for a, i in enumerate(active):
        unc[names[i]] = float(math.sqrt(cov[a, a])) if np.isfinite(cov[a, a]) else None
    full = None
    if len(active) == len(names):
        full = cov
    return unc, full, notes


def _shifted(f, y, i, h):
    z = y.copy()
    z[i] += h
    return f(z)


def _shifted2(f, y, i, hi, j, hj):
    z = y.copy()
    z[i] += hi
    z[j] += hj
    return f(z)
