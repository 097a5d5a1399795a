"""Weighted least-squares fitting of a timing model to TOAs.

The model is linearised about its current parameters; the design-matrix
columns are analytic (timingkit.model), converted to seconds, weighted by the
TOA uncertainties, scaled to unit norm and solved by SVD (never a plain
normal-equation inverse). A phase-offset column is always present. The fit
iterates until every parameter changes by less than 1e-3 of its uncertainty.
Pulse numbers are assigned once, from the starting model (or from the
table's ``pulse`` column), and then held fixed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from timingkit.errors import FitError
from timingkit.model.base import Evaluation
from timingkit.model.timing_model import TimingModel
from timingkit.observations import Observations

OFFSET_NAME = "phase_offset_cycles"
DEGENERACY_RCOND = 1e-10   # smallest/largest singular value of the scaled matrix


@dataclass
class Residuals:
    """Timing residuals at each TOA. ``phase`` in cycles, ``time_s`` in seconds
    (phase divided by the instantaneous spin frequency); positive = late."""
    phase: np.ndarray
    time_s: np.ndarray
    pulse_number: np.ndarray
    err_s: np.ndarray
    evaluation: Evaluation

    @property
    def time_us(self) -> np.ndarray:
        return self.time_s * 1e6

    def rms_us(self) -> float:
        return float(np.sqrt(np.mean(self.time_s ** 2)) * 1e6)

    def weighted_rms_us(self) -> float:
        w = 1.0 / self.err_s ** 2
        mean = np.sum(w * self.time_s) / np.sum(w)
        return float(np.sqrt(np.sum(w * (self.time_s - mean) ** 2) / np.sum(w)) * 1e6)

    def chi2(self) -> float:
        return float(np.sum((self.time_s / self.err_s) ** 2))


@dataclass
class FitResult:
    model: TimingModel
    prefit_model: TimingModel
    prefit: Residuals
    postfit: Residuals
    free_names: list[str]
    covariance: np.ndarray          # (k+1, k+1) including the phase offset (last)
    chi2: float
    dof: int
    iterations: int
    converged: bool
    warnings: list[str] = field(default_factory=list)

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    @property
    def uncertainties(self) -> dict[str, float]:
        sig = np.sqrt(np.diag(self.covariance))
        return dict(zip(self.free_names + [OFFSET_NAME], sig))

    @property
    def correlation(self) -> np.ndarray:
        sig = np.sqrt(np.diag(self.covariance))
        return self.covariance / np.outer(sig, sig)


def compute_residuals(model: TimingModel, obs: Observations, pulse_number=None,
                      reference: Observations | None = None,
                      subtract_mean: bool = True) -> Residuals:
    """Residuals of ``model``; pulse numbers from the model when not given."""
    ev = model.evaluate(obs, reference)
    if pulse_number is None:
        pulse_number = ev.phase_int.copy()
        phase = ev.phase_frac.copy()
    else:
        phase = (ev.phase_int - pulse_number) + ev.phase_frac
    err_s = obs.toas.err_us * 1e-6
    time_s = phase / ev.spin_frequency_hz
    if subtract_mean:
        w = 1.0 / err_s ** 2
        mean = np.sum(w * time_s) / np.sum(w)
        time_s = time_s - mean
        phase = time_s * ev.spin_frequency_hz
    return Residuals(phase=phase, time_s=time_s, pulse_number=pulse_number, err_s=err_s,
                     evaluation=ev)


def pulse_numbers_from_table(obs: Observations, ev: Evaluation) -> np.ndarray | None:
    """Pulse numbers pinned by the table's ``pulse`` column, shifted by the one
    integer that best aligns them with the model's own count."""
    pulse = obs.toas.pulse
    if pulse is None:
        return None
    shift = np.round(np.median(ev.phase_int - pulse))
    return pulse.astype(float) + shift


def _solve(design_s: np.ndarray, resid_s: np.ndarray, err_s: np.ndarray, names: list[str]):
    """Weighted LS: returns (delta, covariance, postfit residual) with column
    scaling and SVD; names degenerate parameters instead of failing."""
    a = design_s / err_s[:, None]
    b = resid_s / err_s
    norms = np.sqrt(np.sum(a ** 2, axis=0))
    dead = [names[j] for j in range(len(names)) if not np.isfinite(norms[j]) or norms[j] == 0]
    if dead:
        raise FitError(f"unconstrained parameter(s): {', '.join(dead)} have no effect on these "
                       "TOAs; fix them or add data that constrain them")
    a = a / norms
    u, s, vt = scipy.linalg.svd(a, full_matrices=False, lapack_driver="gesdd")
    if s[-1] < DEGENERACY_RCOND * s[0]:
        v = vt[-1]
        involved = [names[j] for j in np.argsort(-np.abs(v)) if abs(v[j]) > 0.2]
        raise FitError(f"degenerate fit: {', '.join(involved)} cannot be separated by these "
                       "TOAs (fix one of them, or add TOAs over a longer span / more frequencies)")
    x = vt.T @ ((u.T @ b) / s)
    cov = (vt.T / s ** 2) @ vt
    delta = x / norms
    cov = cov / np.outer(norms, norms)
    post = resid_s - design_s @ delta
    return delta, cov, post


def fit(model: TimingModel, obs: Observations, free: list[str] | None = None,
        max_iterations: int = 20, reference: Observations | None = None,
        tolerance_sigma: float = 1e-3, progress=None) -> FitResult:
    """Fit the free parameters of ``model`` (a copy is fitted) to ``obs``."""
    model = model.copy()
    prefit_model = model.copy()
    if free is not None:
        for p in model.parameters():
            p.free = p.name in free
    names = model.free_names
    n = len(obs)
    if not names:
        raise FitError("no free parameters: list some in [fit] free or with --free "
                       f"(this model has: {', '.join(model.parameter_names())})")
    if n < len(names) + 1:
        raise FitError(f"only {n} TOAs for {len(names)} free parameters plus the phase offset: "
                       "need at least one more TOA than fitted quantities")
    problems = model.unconstrained(obs, names)
    if problems:
        raise FitError("unconstrained parameter(s): " + "; ".join(problems))
    ev0 = model.evaluate(obs, reference)
    pulse = pulse_numbers_from_table(obs, ev0)
    prefit = compute_residuals(model, obs, pulse, reference)
    if pulse is None:
        pulse = prefit.pulse_number
    err_s = obs.toas.err_us * 1e-6
    columns = names + [OFFSET_NAME]
    converged = False
    warnings: list[str] = []
    iterations = 0
    for iterations in range(1, max_iterations + 1):
        res = compute_residuals(model, obs, pulse, reference, subtract_mean=False)
        ev = res.evaluation
        design = model.design_matrix(ev, names) / ev.spin_frequency_hz[:, None]
        design = np.column_stack([design, 1.0 / ev.spin_frequency_hz])
        # residual = model phase - pulse number: the fit moves the model so it vanishes
        delta, cov, post = _solve(design, res.time_s, err_s, columns)
        delta = -delta
        for name, d in zip(names, delta[:-1]):
            model.parameter(name).add(d)
        if progress is not None:
            progress(iterations)
        sig = np.sqrt(np.diag(cov))
        if np.all(np.abs(delta) <= tolerance_sigma * sig):
            converged = True
            break
    if not converged:
        warnings.append(f"fit did not converge in {max_iterations} iterations "
                        "(parameter changes still above 1e-3 sigma)")
    sig = np.sqrt(np.diag(cov))
    for name, s in zip(names, sig[:-1]):
        model.parameter(name).uncertainty = float(s)
    final = compute_residuals(model, obs, pulse, reference, subtract_mean=False)
    # remove the fitted phase offset exactly as the last linear solve placed it
    design = model.design_matrix(final.evaluation, names) / final.evaluation.spin_frequency_hz[:, None]
    design = np.column_stack([design, 1.0 / final.evaluation.spin_frequency_hz])
    _, _, post = _solve(design, final.time_s, err_s, columns)
    postfit = Residuals(phase=post * final.evaluation.spin_frequency_hz, time_s=post,
                        pulse_number=pulse, err_s=err_s, evaluation=final.evaluation)
    chi2 = postfit.chi2()
    dof = n - len(columns)
    pinned = obs.toas.pulse is not None
    warnings.extend(_check_phase_connection(prefit, postfit, chi2, dof, pinned))
    return FitResult(model=model, prefit_model=prefit_model, prefit=prefit, postfit=postfit,
                     free_names=names, covariance=cov, chi2=chi2, dof=dof,
                     iterations=iterations, converged=converged, warnings=warnings)


def _check_phase_connection(prefit: Residuals, postfit: Residuals, chi2: float, dof: int,
                            pinned: bool = False) -> list[str]:
    """A starting model too far off leaves post-fit phases spread over the
    whole turn; say so rather than report nonsense. With pulse numbers pinned
    by the table, the user's numbering stands and a warning is returned."""
    typical_err_cycles = np.median(postfit.err_s * postfit.evaluation.spin_frequency_hz)
    rms_cycles = np.sqrt(np.mean(postfit.phase ** 2))
    if rms_cycles > 0.1 and rms_cycles > 3 * typical_err_cycles and dof > 0 and chi2 / dof > 9:
        if pinned:
            return [f"post-fit residuals spread over {rms_cycles:.2f} cycles rms with the pulse "
                    "numbers of the table's 'pulse' column: check those numbers"]
        raise FitError(
            f"cannot number the pulses: post-fit residuals spread over {rms_cycles:.2f} cycles rms "
            "(the starting model is too far off for this span). Fit a shorter span first "
            "(a few days to weeks of TOAs), then extend it with the improved model, or add a "
            "'pulse' column that pins the pulse numbers")
    return []
