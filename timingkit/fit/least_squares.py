"""Weighted (and, with a noise model, generalised) least-squares fitting of a
timing model to TOAs.

The model is linearised about its current parameters; the design-matrix
columns are analytic (timingkit.model), converted to seconds, weighted by the
TOA uncertainties, scaled to unit norm and solved by SVD (never a plain
normal-equation inverse). A phase-offset column is always present. The fit
iterates until every parameter changes by less than 1e-3 of its uncertainty.
Pulse numbers are assigned once, from the starting model (or from the
table's ``pulse`` column), and then held fixed.

Noise (timingkit.model.noise): with [[white_noise]] groups the TOA
uncertainties are scaled (sigma' = sqrt((scale sigma)^2 + added^2)); with
[red_noise] each linear solve is the Fourier-basis GLS of timingkit.fit.gls, and
the covariance of the timing parameters is marginalised over the red noise.
Free noise parameters are estimated by maximum marginal likelihood
(timingkit.fit.noise_fit) alternately with the timing parameters, until they
move by less than 0.1 sigma. Without noise sections the fit is exactly the
weighted least squares above.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.gls import FourierFactor, GlsSolution, gls_solve, marginal_log_likelihood
from timingkit.model.base import Evaluation
from timingkit.model.correlations import set_covariance
from timingkit.model.noise import NoiseModel, fourier_frequencies_hz, toa_times_s
from timingkit.model.timing_model import TimingModel
from timingkit.fit.noise_fit import NoiseEstimate, fit_noise
from timingkit.geometry.observations import Observations

OFFSET_NAME = "phase_offset_cycles"
MAX_NOISE_ROUNDS = 6            # alternations of timing fit and noise estimation
NOISE_TOLERANCE_SIGMA = 0.1     # noise parameters settled when they move less than this
DEGENERACY_RCOND = 1e-10   # smallest/largest singular value of the scaled matrix
POOR_FIT_HIGH, POOR_FIT_LOW = 2.0, 0.5   # reduced chi-square this far from 1 ...
POOR_FIT_PROBABILITY = 1e-3              # ... and this unlikely by chance is a poor fit
NEAR_DEGENERATE_CORRELATION = 0.9999
# beginnings of the warnings a summary shows first, in capitals
NOT_CONVERGED_WARNING = "fit did not converge"
POOR_FIT_WARNING = "poor fit"
LOUD_WARNINGS = (NOT_CONVERGED_WARNING, POOR_FIT_WARNING)


@dataclass
class ResidualSet:
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

    def chi_square(self) -> float:
        return float(np.sum((self.time_s / self.err_s) ** 2))


@dataclass
class FitResult:
    model: TimingModel
    prefit_model: TimingModel
    prefit: ResidualSet
    postfit: ResidualSet
    free_names: list[str]
    covariance: np.ndarray          # (k+1, k+1) including the phase offset (last)
    chi2: float
    dof: int
    iterations: int
    converged: bool
    warnings: list[str] = field(default_factory=list)
    noise: "NoiseSummary | None" = None   # set when the model has noise sections

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
                      subtract_mean: bool = True,
                      evaluation: Evaluation | None = None) -> ResidualSet:
    """ResidualSet of ``model``; pulse numbers from the model when not given.
    ``evaluation``: the model already evaluated on ``obs`` (saves a pass)."""
    ev = evaluation if evaluation is not None else model.evaluate(obs, reference)
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
    return ResidualSet(phase=phase, time_s=time_s, pulse_number=pulse_number, err_s=err_s,
                     evaluation=ev)


def pulse_numbers_from_table(obs: Observations, ev: Evaluation) -> np.ndarray | None:
    """Pulse numbers pinned by the table's ``pulse`` column, shifted by the one
    integer that best aligns them with the model's own count."""
    pulse = obs.toas.pulse
    if pulse is None:
        return None
    shift = np.round(np.median(ev.phase_int - pulse))
    pinned = pulse.astype(float) + shift
    # A pulse number that differs from the model's count by more than 1 % of the turns
    # over the whole span (at least a million) is a wild value, not a pinned turn.
    seconds = (obs.tdb.day - obs.tdb.day.min() + obs.tdb.frac) * 86400.0
    frequency = float(np.median(np.abs(ev.spin_frequency_hz)))
    limit = max(1e6, 0.01 * frequency * float(np.ptp(seconds)))
    wild = np.flatnonzero(np.abs(ev.phase_int - pinned) > limit)
    if len(wild):
        row = int(wild[0])
        lines = obs.toas.line_numbers
        raise InputError(f"pulse number {int(pulse[row])} is {abs(ev.phase_int[row] - pinned[row]):.3g} "
                         f"turns away from the model's count (more than {limit:.3g}, 1 % of the "
                         "turns over the span): a wrong value in the 'pulse' column?",
                         path=obs.toas.path, line=None if lines is None else int(lines[row]),
                         field="pulse")
    return pinned


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


@dataclass
class NoiseSummary:
    """What the noise model did in a fit. With red noise, FitResult.chi2 is the
    generalised chi-square r^T C^-1 r of the post-fit timing residual."""
    method: str                                # "weighted least squares" | "generalised least squares"
    err_s: np.ndarray                          # scaled white TOA uncertainties used (s)
    group_index: np.ndarray                    # white-noise group of each TOA (-1: none)
    group_counts: list[int]                    # TOAs per [[white_noise]] group
    log_likelihood: float                      # ln marginal likelihood at the solution
    red_realisation_s: np.ndarray | None = None  # ML red-noise realisation at each TOA (s)
    red_frequencies_hz: np.ndarray | None = None
    red_prior_var_s2: np.ndarray | None = None   # per Fourier coefficient (sin, cos per frequency)
    red_span_s: float | None = None
    times_s: np.ndarray | None = None          # Fourier-basis clock: TDB s since the first TOA
    estimate: NoiseEstimate | None = None      # ML estimate of the free noise parameters
    rounds: int = 0                            # noise-estimation rounds


class _Solver:
    """One linear solve with the current noise model: WLS with the (scaled)
    white errors, or the Fourier-basis GLS when there is red noise."""

    def __init__(self, noise: NoiseModel, obs: Observations, columns: list[str]):
        self.noise, self.obs, self.columns = noise, obs, columns
        self.group_index = noise.group_index(obs)
        self.times_s = self.basis = self.span_s = self.phi = self.factor = None
        if noise.red is not None:
            self.times_s = toa_times_s(obs)
            self.basis, self.span_s = noise.red_basis(self.times_s)
        self.refresh()

    def refresh(self) -> None:
        """Re-read the noise parameters (after they were re-estimated)."""
        self.err_s = self.noise.white_errors_us(self.obs.toas, self.group_index) * 1e-6
        if self.basis is not None:   # the red-noise part, factored once per noise setting
            self.phi = self.noise.red_prior(self.span_s)
            self.factor = FourierFactor(self.err_s, self.basis, self.phi)

    def __call__(self, design, resid):
        if self.basis is None:
            delta, cov, post = _solve(design, resid, self.err_s, self.columns)
            return delta, cov, post, None
        sol = gls_solve(design, resid, self.err_s, self.basis, self.phi, self.columns,
                        factor=self.factor)
        return sol.delta, sol.covariance, sol.postfit_s, sol


def _timing_iterations(model, obs, pulse, reference, names, solver, max_iterations,
                       tolerance_sigma, progress, done, evaluation=None):
    """Linearise and solve until the changes fall below tolerance_sigma.
    ``evaluation``: ``model`` already evaluated on ``obs``, used by the first
    iteration (the pre-fit evaluation is not repeated)."""
    converged = False
    iterations = 0
    for iterations in range(1, max_iterations + 1):
        res = compute_residuals(model, obs, pulse, reference, subtract_mean=False,
                                evaluation=evaluation)
        evaluation = None
        ev = res.evaluation
        design = model.design_matrix(ev, names) / ev.spin_frequency_hz[:, None]
        design = np.column_stack([design, 1.0 / ev.spin_frequency_hz])
        # residual = model phase - pulse number: the fit moves the model so it vanishes
        delta, cov, post, _ = solver(design, res.time_s)
        delta = -delta
        for name, d in zip(names, delta[:-1]):
            model.parameter(name).add(d)
        if progress is not None:
            progress(done + iterations)
        sig = np.sqrt(np.diag(cov))
        # the phase offset (last) is not a model parameter: it is re-solved from
        # the same residuals every time and never shrinks, so it is not tested
        if np.all(np.abs(delta[:-1]) <= tolerance_sigma * sig[:-1]):
            converged = True
            break
    return cov, iterations, converged, design, res.time_s


def _apply_noise_estimate(model: TimingModel, estimate: NoiseEstimate) -> float:
    """Store the estimate in the model; returns the largest move in sigma."""
    moved = 0.0
    for name in estimate.names:
        p = model.parameter(name)
        new = estimate.values[name]
        sigma = estimate.uncertainties.get(name)
        scale = sigma if sigma else 1e-3 * max(abs(p.value), 1.0)
        moved = max(moved, abs(new - p.value) / scale)
        p.value = float(new)
        p.value_lo = 0.0
        p.uncertainty = sigma
    return moved


def fit(model: TimingModel, obs: Observations, free: list[str] | None = None,
        max_iterations: int = 20, reference: Observations | None = None,
        tolerance_sigma: float = 1e-3, progress=None) -> FitResult:
    """Fit the free parameters of ``model`` (a copy is fitted) to ``obs``."""
    model = model.copy()
    prefit_model = model.copy()
    if free is not None:
        free = [free] if isinstance(free, str) else list(free)   # a string is one name
        for p in model.parameters():
            p.free = p.name in free
    noise = NoiseModel.from_timing_model(model)
    noise_names = [name for name in model.free_names if noise.owns(name)]
    names = [name for name in model.free_names if name not in noise_names]
    n = len(obs)
    if not names and not noise_names:
        raise FitError("no free parameters: list some in the model's [fit] free, or name "
                       "some to free when fitting "
                       f"(this model has: {', '.join(model.parameter_names())})")
    if n < len(names) + 1:
        raise FitError(f"only {n} TOAs for {len(names)} free parameters plus the phase offset: "
                       "need at least one more TOA than fitted quantities")
    problems = model.unconstrained(obs, names)
    if problems:
        raise FitError("unconstrained parameter(s): " + "; ".join(problems))
    ev0 = model.evaluate(obs, reference)
    pulse = pulse_numbers_from_table(obs, ev0)
    prefit = compute_residuals(model, obs, pulse, reference, evaluation=ev0)
    if pulse is None:
        pulse = prefit.pulse_number
    columns = names + [OFFSET_NAME]
    warnings: list[str] = []
    solver = _Solver(noise, obs, columns)
    iterations = 0
    estimate = None
    noise_rounds = 0
    settled = not noise_names
    evaluation = ev0          # the model is unchanged until the first solve
    while True:
        cov, its, converged, design, resid = _timing_iterations(
            model, obs, pulse, reference, names, solver, max_iterations, tolerance_sigma,
            progress, iterations, evaluation)
        evaluation = None
        iterations += its
        if settled:
            break
        if noise_rounds == MAX_NOISE_ROUNDS:
            warnings.append(f"noise parameters still moving after {MAX_NOISE_ROUNDS} rounds of "
                            "timing fit and noise estimation")
            break
        noise_rounds += 1
        estimate = fit_noise(noise, obs, design, resid, toa_times_s(obs), noise_names)
        settled = _apply_noise_estimate(model, estimate) < NOISE_TOLERANCE_SIGMA
        solver.refresh()
    if estimate is not None:
        warnings.extend(estimate.warnings)
    err_s = solver.err_s
    if not converged:
        warnings.append(f"{NOT_CONVERGED_WARNING} in {max_iterations} iteration"
                        f"{'' if max_iterations == 1 else 's'} (parameter "
                        f"changes still above {tolerance_sigma:g} sigma): the values written are "
                        "not a solution; improve the starting model, fit fewer parameters or "
                        "a shorter span first")
    # uncertainties and the correlations of the fitted parameters (the phase
    # offset is not a model parameter): written with the fitted model
    set_covariance(model, names, cov[:-1, :-1])
    final = compute_residuals(model, obs, pulse, reference, subtract_mean=False)
    # remove the fitted phase offset exactly as the last linear solve placed it
    design = model.design_matrix(final.evaluation, names) / final.evaluation.spin_frequency_hz[:, None]
    design = np.column_stack([design, 1.0 / final.evaluation.spin_frequency_hz])
    _, _, post, gls = solver(design, final.time_s)
    postfit = ResidualSet(phase=post * final.evaluation.spin_frequency_hz, time_s=post,
                        pulse_number=pulse, err_s=err_s, evaluation=final.evaluation)
    chi2 = postfit.chi_square() if gls is None else gls.chi2
    noise_summary = None
    if not noise.empty:
        noise_summary = _noise_summary(solver, gls, design, final.time_s, estimate, noise_rounds)
    dof = n - len(columns)
    pinned = obs.toas.pulse is not None
    warnings.extend(_check_phase_connection(prefit, postfit, chi2, dof, pinned))
    warnings.extend(goodness_warnings(chi2, dof, red_noise=noise.red is not None))
    warnings.extend(_correlation_warnings(cov, names))
    return FitResult(model=model, prefit_model=prefit_model, prefit=prefit, postfit=postfit,
                     free_names=names, covariance=cov, chi2=chi2, dof=dof,
                     iterations=iterations, converged=converged, warnings=warnings,
                     noise=noise_summary)


def _noise_summary(solver: _Solver, gls: GlsSolution | None, design, resid, estimate,
                   rounds) -> NoiseSummary:
    noise = solver.noise
    summary = NoiseSummary(
        method="weighted least squares" if gls is None else "generalised least squares",
        err_s=solver.err_s, group_index=solver.group_index,
        group_counts=[int(np.sum(solver.group_index == g.array_index)) for g in noise.white],
        log_likelihood=(gls.log_likelihood if gls is not None else
                        marginal_log_likelihood(design, resid, solver.err_s)),
        estimate=estimate, rounds=rounds)
    if gls is not None:
        summary.red_realisation_s = gls.red_realisation_s
        summary.red_frequencies_hz = fourier_frequencies_hz(solver.span_s, noise.red.frequencies)
        summary.red_prior_var_s2 = solver.phi
        summary.red_span_s = solver.span_s
        summary.times_s = solver.times_s
    return summary


def goodness_warnings(chi2: float, dof: int, red_noise: bool = False,
                      fitted: bool = True) -> list[str]:
    """A loud warning when the reduced chi-square is far from 1 (beyond
    POOR_FIT_HIGH / POOR_FIT_LOW) and that far by chance less often than
    POOR_FIT_PROBABILITY (chi-square distribution with ``dof``). ``fitted``:
    False for the residuals of a model as given (no fit)."""
    if dof <= 0 or not np.isfinite(chi2):
        return []
    import scipy.stats
    reduced = chi2 / dof
    spread = math.sqrt(2.0 / dof)
    if reduced > POOR_FIT_HIGH and scipy.stats.chi2.sf(chi2, dof) < POOR_FIT_PROBABILITY:
        remedies = ("[[white_noise]] terms (error scale, added error) if the TOA uncertainties "
                    "are underestimated, " + ("" if red_noise else "a [red_noise] section for "
                    "timing noise, ") + "a glitch search (timingkit glitches) when the "
                    "residuals jump or turn, or model terms still missing (ask the fit for "
                    "suggestions)")
        consequence = (", and the parameter uncertainties are too small by about a factor "
                       f"{math.sqrt(reduced):.2g}" if fitted else " (the model as given, no fit)")
        return [f"{POOR_FIT_WARNING}: reduced chi-square {reduced:.4g} for {dof} degrees of "
                f"freedom (expected 1 ± {spread:.2g}): the model and the TOA uncertainties do "
                f"not describe the data{consequence}; consider " + remedies]
    if reduced < POOR_FIT_LOW and scipy.stats.chi2.cdf(chi2, dof) < POOR_FIT_PROBABILITY:
        return [f"{POOR_FIT_WARNING}: reduced chi-square {reduced:.4g} for {dof} degrees of "
                f"freedom (expected 1 ± {spread:.2g}): the TOA uncertainties look overestimated "
                "(or the TOAs are not independent)"
                + (", so the parameter uncertainties are too large" if fitted else "")]
    return []


def _correlation_warnings(cov: np.ndarray, names: list[str]) -> list[str]:
    """Pairs of fitted parameters correlated beyond NEAR_DEGENERATE_CORRELATION."""
    sig = np.sqrt(np.diag(cov))[:len(names)]
    if len(names) < 2 or not np.all(sig > 0):
        return []
    corr = cov[:len(names), :len(names)] / np.outer(sig, sig)
    i, j = np.nonzero(np.triu(np.abs(corr) > NEAR_DEGENERATE_CORRELATION, 1))
    pairs = [f"{names[a]} and {names[b]} ({corr[a, b]:+.5f})" for a, b in zip(i, j)]
    if not pairs:
        return []
    return [f"nearly degenerate fit: {'; '.join(pairs)} are almost fully correlated, so their "
            "values and uncertainties are unreliable; fix one of each pair or add data that "
            "separate them"]


def _check_phase_connection(prefit: ResidualSet, postfit: ResidualSet, chi2: float, dof: int,
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
            "(the starting model is too far off for this span). " + _shorter_span_advice(prefit))
    return []


def _shorter_span_advice(prefit: ResidualSet) -> str:
    """Where the starting model stops counting pulses right, and what to do.
    In time order the count is followed turn by turn; it breaks at the first TOA
    more than a quarter turn from the one before (ambiguous) or where the
    followed phase leaves the half turn around zero (the nearest whole pulse is
    then not the counted one)."""
    ev = prefit.evaluation
    mjd = ev.obs.toas.mjd_day + ev.obs.toas.mjd_frac
    order = np.argsort(mjd, kind="stable")
    frac = ev.phase_frac[order]
    step = np.diff(frac)
    step -= np.round(step)
    followed = frac[0] + np.cumsum(step)
    breaks = np.flatnonzero((np.abs(step) > 0.25) | (np.abs(followed) > 0.5))
    if len(breaks) and breaks[0] >= 2:
        last = f"{np.ceil(float(mjd[order][breaks[0]]) * 1e4) / 1e4:.4f}"   # includes that TOA
        return (f"The starting model keeps count of the pulses up to MJD {last}: fit a "
                f"shorter span first, the TOAs up to there (the selection mjd=..{last}), "
                "then extend it with the improved model; if the pulsar glitched there, "
                "`timingkit glitches` finds and fits the glitch. Or add a 'pulse' column that "
                "pins the pulse numbers")
    return ("Fit a shorter span first (a few days to weeks of TOAs, e.g. the selection "
            "mjd=START..END), then extend it with the improved model; if the phase breaks "
            "after some date because the pulsar glitched, `timingkit glitches` finds and fits "
            "the glitch. Or add a 'pulse' column that pins the pulse numbers")
