"""TOAs the glitch search left out while numbering pulses, put back once the final model fits.

While the pulses are numbered (timingkit.glitch.tracking.number_pulses) a TOA that no
chain connects to its neighbours, typically the first after a glitch whose decaying term
no local quadratic follows, is left out of the fit. Once the fitted model holds the
glitch and its decay, that model predicts the phase of such a TOA; when its predicted
phase is known to better than REINCLUDE_MAX_PHASE_SIGMA turns (the fit's covariance,
propagated linearly) and the TOA lies within REINCLUDE_Z sigma of it, its pulse number
is the model's and the fit is repeated with it. Times and phases as in timingkit.glitch.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.stats

from timingkit.fit.least_squares import FitResult
from timingkit.formats.errors import FitError
from timingkit.geometry.observations import Observations
from timingkit.glitch.candidates import AcceptedGlitch, phase_data, sync_gaps
from timingkit.glitch.refine import (
    ADEQUATE_REDUCED_CHI2,
    LOCALISE_GAPS,
    fit_pinned,
    localise,
    refine_epochs,
)

REINCLUDE_MAX_PHASE_SIGMA = 0.05   # turns: the pulse count is then certain (10 sigma to 1/2)
REINCLUDE_Z = 5.0                  # a TOA further from the model than this (sigma) stays out


def phase_sigma_cycles(res: FitResult, obs: Observations, reference=None) -> np.ndarray:
    """1-sigma uncertainty (turns) of the fitted model's phase at each TOA of ``obs``:
    the fit's covariance (free parameters and the phase offset) through the design matrix."""
    ev = res.model.evaluate(obs, reference)
    f = ev.spin_frequency_hz
    design_s = np.column_stack([res.model.design_matrix(ev, res.free_names) / f[:, None],
                                1.0 / f])
    var_s2 = np.einsum("ik,kl,il->i", design_s, res.covariance, design_s)
    return np.sqrt(np.maximum(var_s2, 0.0)) * f


def put_back(res: FitResult, found: list[AcceptedGlitch], obs: Observations, used: np.ndarray,
             pulse: np.ndarray, reference=None, settings=None):
    """(fit, indices into ``obs`` now used, their pulse numbers, number put back).
    ``res`` is the final fit of ``obs[used]`` with pulses ``pulse`` pinned. The TOAs
    left out get the fitted model's pulse numbers where its phase there is known to
    REINCLUDE_MAX_PHASE_SIGMA turns; each glitch is placed again among the gaps
    near it (a TOA put back often lies in a glitch's bracket and moves its epoch)
    and the fit is repeated. The result is kept when it still fits (reduced
    chi-square at most ADEQUATE_REDUCED_CHI2), every TOA put back lies within
    REINCLUDE_Z sigma and the chi-square rose by no more than the search threshold
    allows for that many TOAs; otherwise ``res``, ``used`` and ``pulse`` come back
    unchanged (and ``found`` as it was)."""
    left_out = np.setdiff1d(np.arange(len(obs)), used)
    unchanged = res, used, pulse, 0
    if len(left_out) == 0 or not found or res.reduced_chi2 > ADEQUATE_REDUCED_CHI2:
        return unchanged
    ev = res.model.evaluate(obs, reference)
    count = ev.phase_int.astype(np.int64)            # nearest turn of the fitted model
    shift = count[used] - np.asarray(pulse, dtype=np.int64)
    if np.any(shift != shift[0]):
        return unchanged                             # the pinned numbering is not the model's
    sure = phase_sigma_cycles(res, obs.select(left_out), reference) < REINCLUDE_MAX_PHASE_SIGMA
    if not np.any(sure):
        return unchanged
    back = left_out[sure]
    new_used = np.sort(np.concatenate([used, back]))
    sub = obs.select(new_used)
    new_pulse = count[new_used] - shift[0]
    saved = [dataclasses.replace(a) for a in found]
    try:
        fitted = fit_pinned(res.model, sub, reference, new_pulse)
        data = phase_data(fitted.model, sub, reference)
        barriers = sync_gaps(found, fitted.model, data)
        rank = np.empty(len(data.order), dtype=np.int64)
        rank[data.order] = np.arange(len(data.order))
        near = rank[np.searchsorted(new_used, back)]
        for acc in found:
            if acc.known or np.min(np.abs(near - acc.gap - 0.5)) > LOCALISE_GAPS + 1:
                continue
            before = acc.gap
            fitted, new_pulse = localise(fitted, acc, data, sub, reference, barriers, new_pulse)
            barriers = (barriers - {before}) | {acc.gap}
        sync_gaps(found, fitted.model, data)
        fitted, new_pulse = refine_epochs(fitted, found, sub, reference, new_pulse)
    except FitError:
        fitted = None
    if fitted is not None and fitted.converged and _still_fits(fitted, res, sub, new_used, back,
                                                               settings):
        return fitted, new_used, new_pulse, len(back)
    found[:] = saved
    return unchanged


def _still_fits(fitted: FitResult, res: FitResult, sub, new_used, back, settings) -> bool:
    """Whether the fit with the TOAs put back is as good as the one without them."""
    if fitted.reduced_chi2 > ADEQUATE_REDUCED_CHI2:
        return False
    position = np.searchsorted(new_used, back)
    phase = fitted.postfit.phase[position]
    sigma = sub.toas.err_us[position] * 1e-6 * fitted.postfit.evaluation.spin_frequency_hz[position]
    if np.any(np.abs(phase) > REINCLUDE_Z * sigma):
        return False
    threshold = scipy.stats.chi2.isf(settings.false_alarm_threshold, len(back))
    return (fitted.chi2 - res.chi2) / max(1.0, res.reduced_chi2) < threshold
