"""Glitch search and glitch-parameter estimation.

The search works on the pulse-phase residuals of a starting timing model
(cycles, at the emission times) in passes of four steps:

1. **Phase tracking** (timingkit.glitch.tracking): pulses are numbered TOA
   by TOA, forward in time and, independently, backward, each TOA from a
   quadratic fitted to the connected TOAs before it; where a glitch unwinds
   the phase (possibly by many turns) the chain restarts from a seed solution
   that enumerates the pulse counts allowed by bounded frequency
   (``max_fractional_step`` of the spin frequency) and frequency-derivative
   offsets and keeps the one the following TOAs confirm uniquely. Where
   the two numberings share TOAs but count different turns between them, the
   shorter segment is dissolved (timingkit.glitch.tracking.reconcile_chains:
   a seed across a glitch can fit at a false alias frequency).
2. **Frequency track and change points** (timingkit.glitch.scan): for every
   gap between TOAs, windows of TOAs before and after it (``window_toas`` or
   ``window_days``) are fitted with phase, frequency and frequency derivative
   referred to the gap; their differences give a 2-dof chi-square per gap.
   The largest is compared with its distribution for noise sent through the
   same windows (``null_trials`` simulations): white noise with the TOA
   uncertainties or, when the model has noise sections, the noise model
   (next paragraph). A candidate is accepted when this global false-alarm
   probability is below the two-sided Gaussian tail of ``min_significance``
   sigma; windows are then cut at it and the next largest gap is tested.
   Candidates just after a much larger glitch accepted in the same pass wait
   for the next pass (there, an unmodelled decay mimics small steps). TOAs
   that neither numbering connects to a neighbour are left out of the scan
   (they would hide the gap beside them).
3. **Fit**: pulses are numbered across the data (intervals between glitches,
   pieces joined where unambiguous) and held fixed; the model plus one
   [[glitch]] section per candidate (phase step, frequency step,
   frequency-derivative step) is fitted with timingkit.fit.least_squares. A decaying
   frequency step is tried on every new glitch, forced ones too, and kept
   where it is significant (time-scale grid, then fitted). When the model
   fits, each glitch is tried in the nearby gaps with phase continuity
   required, and the gaps the fit allows (chi-square within
   LOCALISE_DCHI2 of the best) form its reported bracket. Where pulses
   could not be numbered across a gap with no significant candidate, a
   glitch is forced there (forced_by_lost_connection); once the fit holds
   the other glitches' decays and frequency-derivative steps (which a local
   quadratic cannot follow), a forced glitch with an insignificant step is
   dropped if the fit without it (the pulses carried and re-tracked, or kept)
   is not significantly worse; scan candidates are tested the same way
   (timingkit.glitch.refine.fit_without). After the last pass, TOAs left out
   while numbering are put back where the fitted model numbers them
   (timingkit.glitch.reinclude).
4. **Epoch**: each epoch moves, inside its gap, to where the phase step
   vanishes (common practice); when several epochs in the gap do so (a glitch
   that unwinds more than a turn there) the one nearest their mean is used and
   their spread enters the epoch uncertainty, which is propagated into the
   steps' uncertainties.

Noise model (timingkit.model.noise). With [[white_noise]] groups every
step weights the TOAs by the scaled uncertainties. With [red_noise] the
null realisations are drawn from the whole noise model (white plus the red
process on its Fourier basis, in cycles, in the search's time order), the
covariance of each gap's steps includes the red noise of both windows
(timingkit.glitch.scan), and every fit is the generalised least squares of
timingkit.fit.least_squares; noise parameters left free in the model are estimated in
those fits and used by the next pass. Without red noise in the model, red
timing noise in the data makes the false-alarm probabilities optimistic
(spurious candidates).

Passes repeat on the residuals of the fitted model until nothing new is
significant. Assumptions stated with the results: the noise (white with
the stated or scaled uncertainties, or the model's noise sections) and a
locally quadratic phase over each window. Glitches within ``MIN_WINDOW_TOAS`` TOAs
of the ends of the data or of another glitch cannot be found by the scan.
Times in this module are TDB seconds at the pulsar since the spin epoch
unless named ``_days`` or ``_mjd``.
"""

from __future__ import annotations

import dataclasses
import math
from decimal import Decimal

import numpy as np
import scipy.special
import scipy.stats

from timingkit.fit.least_squares import FitResult
from timingkit.formats.errors import FitError, InputError
from timingkit.geometry.observations import Observations
from timingkit.glitch.candidates import (
    AcceptedGlitch,
    phase_data,
    scan_pass,
    search_ranges,
    select_for_fit,
    sync_gaps,
    white_errors_us,
)
from timingkit.glitch.epochs import (
    emission_mjd,
    epoch_decimal,
    glitch_at,
    glitch_time_s,
    spin_frequency_at,
    spin_frequency_derivative_at,
)
from timingkit.glitch.refine import (
    ADEQUATE_REDUCED_CHI2,
    FORCED_STEP_Z,
    add_decays,
    fit_without,
    fit_pinned,
    free_flags,
    glitch_keys,
    glitch_sections_of,
    glitch_uncertainties,
    localise,
    rebuild_with_glitches,
    refine_epochs,
)
from timingkit.glitch.reinclude import REINCLUDE_MAX_PHASE_SIGMA, put_back
from timingkit.glitch.results import (
    LOST_CONNECTION_WARNING,
    FrequencyTrack,
    GlitchCandidate,
    GlitchSearchResult,
    GlitchSearchSettings,
    search_assumptions,
)
from timingkit.glitch.scan import gaussian_sigma
from timingkit.glitch.tracking import (
    MIN_WINDOW_TOAS,
    SECONDS_PER_DAY,
    _quadratic_fit,
    number_pulses,
    track_both,
)
from timingkit.model.glitch import glitch_section, model_glitches, set_glitches
from timingkit.model.timing_model import TimingModel


def _settle(res: FitResult, found: list[AcceptedGlitch], obs, reference, pulse, settings):
    """After a pass's fit: decaying terms for the glitches new in it; placement
    among nearby gaps for those not yet placed, when the model fits (reduced
    chi-square at most ADEQUATE_REDUCED_CHI2: otherwise glitches not yet
    found, or timing noise, would drive the choice); then epochs where the
    phase steps vanish."""
    data = phase_data(res.model, obs, reference)
    if settings.fit_decays:
        res = add_decays(res, [a for a in found if not a.decay_tried], obs, reference, pulse,
                         settings)
    for acc in found:
        acc.decay_tried = True
    if res.reduced_chi2 <= ADEQUATE_REDUCED_CHI2:
        barriers = sync_gaps(found, res.model, data)
        for acc in found:
            if not (acc.placed or acc.forced or acc.known):
                before = acc.gap
                res, pulse = localise(res, acc, data, obs, reference, barriers, pulse)
                barriers = (barriers - {before}) | {acc.gap}
            acc.placed = True
    else:
        # a glitch put in the wrong gap by the change point spoils the whole fit: a
        # move is kept only when it makes the model fit
        barriers = sync_gaps(found, res.model, data)
        for acc in [a for a in found if not (a.placed or a.forced or a.known)]:
            trial = dataclasses.replace(acc)
            moved, moved_pulse = localise(res, trial, data, obs, reference, barriers, pulse)
            if moved.reduced_chi2 <= ADEQUATE_REDUCED_CHI2:
                barriers = (barriers - {acc.gap}) | {trial.gap}
                acc.__dict__.update(trial.__dict__)
                acc.placed = True
                res, pulse = moved, moved_pulse
    sync_gaps(found, res.model, data)
    res, pulse = refine_epochs(res, found, obs, reference, pulse)
    return res, pulse


def _fit_without_if_no_worse(res: FitResult, acc: AcceptedGlitch, obs, reference, pulse,
                             settings):
    """(fit, pulses, statistic, dof) without ``acc`` when that fit converges and is
    not worse by the search threshold (likelihood ratio, chi-square with the
    glitch's free parameters as degrees of freedom), else None; the statistic is
    recorded on ``acc`` either way."""
    trial = fit_without(res, acc.epoch, obs, reference, pulse, settings)
    if trial is None:
        return None
    fitted, _, statistic, dof = trial
    acc.fit_statistic, acc.fit_dof = statistic, dof
    if not fitted.converged or statistic >= scipy.stats.chi2.isf(
            settings.false_alarm_threshold, dof):
        return None
    return trial


def _drop_unneeded_forced(res: FitResult, found: list[AcceptedGlitch], obs, reference, pulse,
                          settings, warnings):
    """Forced glitches (connection lost before the other glitches' decaying terms
    and frequency-derivative steps were in the model: a local quadratic cannot
    follow a post-glitch recovery) re-checked once the fit holds them: one whose
    frequency step is below FORCED_STEP_Z sigma is dropped when the fit without it
    (:func:`timingkit.glitch.refine.fit_without`, as for the candidates of the scan:
    the pulse counts kept or carried, and re-tracked against the fit without it,
    connected across its gap) is not worse by more than the search threshold
    (likelihood ratio, chi-square with its free parameters as degrees of freedom)."""
    for acc in [a for a in found if a.forced and not a.rechecked and a.epoch is not None]:
        acc.rechecked = True
        g = glitch_at(res.model, acc.epoch)
        step, err = g.frequency_step.value, g.frequency_step.uncertainty
        if not err or abs(step) > FORCED_STEP_Z * err:
            continue
        trial = _fit_without_if_no_worse(res, acc, obs, reference, pulse, settings)
        if trial is None:
            continue
        found.remove(acc)
        res, pulse = trial[0], trial[1]
    if not any(a.forced for a in found) and LOST_CONNECTION_WARNING in warnings:
        warnings[:] = [w for w in warnings if w != LOST_CONNECTION_WARNING]
        warnings.append("phase connection was lost in a gap before the decaying terms of the "
                        "glitches were fitted; with them in the model it holds, so no glitch "
                        "was forced there")
    return res, pulse


def _drop_insignificant(res: FitResult, found: list[AcceptedGlitch], obs, reference, pulse,
                        settings, warnings):
    """A candidate is significant only if its own fitted steps are: each new
    candidate found by the scan (not forced, not a known epoch) is kept only when
    the fit without it (:func:`timingkit.glitch.refine.fit_without`: with a
    decaying term tried on the glitch before it) is worse by more than the search
    threshold. A change point in the frequency track just after a glitch is often
    its unmodelled recovery; once the recovery is fitted nothing is left there.
    Returns (fit, pulses, number dropped)."""
    dropped = 0
    for acc in sorted([a for a in found if not (a.forced or a.known or a.steps_checked)
                       and a.epoch is not None], key=lambda a: a.epoch):
        acc.steps_checked = True
        trial = _fit_without_if_no_worse(res, acc, obs, reference, pulse, settings)
        if trial is None:
            continue
        fitted, new_pulse, statistic, dof = trial
        found.remove(acc)
        dropped += 1
        gain = (f"improve the fit by only {statistic:.1f} in chi-square for {dof} parameters"
                if statistic > 0 else "do not improve the fit")
        warnings.append(
            f"a change in the frequency track near MJD {float(acc.epoch):.2f} (global "
            f"false-alarm probability of the scan {_fap_text(acc)}) was not kept as a glitch: "
            f"fitted, its own steps {gain}, below the search threshold (often the "
            "unmodelled recovery of an earlier glitch)")
        res, pulse = fitted, new_pulse
    return res, pulse, dropped


def _fap_text(acc: AcceptedGlitch) -> str:
    if acc.fap is None:
        return "n/a"
    return ("< " if acc.fap_upper_limit else "") + f"{acc.fap:.2g}"


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
    f_range, derivative_range_hz_per_s = search_ranges(model, settings)
    current = model.copy()
    use_obs = obs
    used = np.arange(len(obs))             # indices into obs of the TOAs in use_obs
    spin_epoch = current.spin.epoch_day + current.spin.epoch_frac
    known_t = None
    if settings.known_epochs_mjd:
        known_t = sorted((float(Decimal(str(e))) - spin_epoch) * SECONDS_PER_DAY
                         for e in settings.known_epochs_mjd)
    found: list[AcceptedGlitch] = []
    detection: dict = {}
    result_fit: FitResult | None = None
    dropped = 0
    for search_pass in range(1, max(1, int(settings.passes)) + 1):
        data = phase_data(current, use_obs, reference)
        n = len(data.t_s)
        existing = [int(np.searchsorted(data.t_s, glitch_time_s(current, g)) - 1)
                    for g in model_glitches(current)]
        existing = [b for b in existing if 0 <= b < n - 1]
        chains = track_both(data, f_range, derivative_range_hz_per_s)
        for chain in chains:
            for pos in chain.ambiguous_at:
                mjd = data.spin_epoch_mjd + data.t_s[pos] / SECONDS_PER_DAY
                warnings.append(f"pulse numbering near MJD {mjd:.2f} is ambiguous (several "
                                "pulse counts fit the TOAs after a break): results there may "
                                "be off by whole turns; more TOAs close together would help")
        known_gaps = None
        if known_t is not None:
            known_gaps = []
            for e in known_t:
                j = int(np.searchsorted(data.t_s, e) - 1)
                if j < 0 or j >= n - 1:
                    raise InputError(f"known glitch epoch MJD {spin_epoch + e / SECONDS_PER_DAY:.6f}"
                                     " is outside the span of the TOAs", field="known_epochs_mjd")
                known_gaps.append(j)
            known_gaps = sorted(set(known_gaps))
        accepted, limit, notes = scan_pass(data, chains, existing, settings, rng, known_gaps,
                                       search_pass)
        warnings.extend(notes)
        detection = detection or limit
        if not accepted:
            if result_fit is None:
                # nothing found: fit the starting model with the tracked pulse numbers
                offsets, keep, forced = number_pulses(data, chains, set(existing), warnings)
                if not forced and np.all(keep):
                    pulse = np.empty(len(use_obs), dtype=np.int64)
                    pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
                    try:
                        result_fit = fit_pinned(current, use_obs, reference, pulse)
                        current = result_fit.model
                    except FitError:
                        result_fit = None
            break
        # The most significant candidate is accepted, and with it every other one
        # except those just after a much larger glitch accepted now: there, unmodelled
        # decaying terms mimic small steps, so they wait until the larger glitch's
        # decay has been fitted. Pulses that cannot be numbered across a waiting
        # candidate promote it (a hard sign of a large glitch).
        accepted, pending = select_for_fit(accepted, data, known_t is not None)
        barriers = set(existing) | {a.gap for a in accepted}
        failed_before: set[int] = set()
        while True:
            offsets, keep, forced = number_pulses(data, chains, barriers, warnings)
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
                accepted.append(AcceptedGlitch(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, derivative_step=None, forced=True,
                                          search_pass=search_pass))
                barriers.add(gap)
                warnings.append(LOST_CONNECTION_WARNING)
            failed_before.add(gap)
        sections = glitch_sections_of(current)
        free = free_flags(current)
        for acc in accepted:
            t_mid = 0.5 * (data.t_s[acc.gap] + data.t_s[acc.gap + 1])
            acc.epoch = epoch_decimal(current, t_mid)
            sections.append(glitch_section(acc.epoch, 0.0, acc.df_hz or 0.0, acc.derivative_step or 0.0))
            free[acc.epoch] = glitch_keys(0)
        trial = rebuild_with_glitches(current, sections, free)
        pulse = np.empty(len(use_obs), dtype=np.int64)
        pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
        if not np.all(keep):
            kept = np.sort(data.order[keep])
            dropped += len(use_obs) - len(kept)
            use_obs, pulse, used = use_obs.select(kept), pulse[kept], used[kept]
            data = phase_data(current, use_obs, reference)
        found.extend(accepted)
        res = fit_pinned(trial, use_obs, reference, pulse)
        res, pulse = _settle(res, found, use_obs, reference, pulse, settings)
        res, pulse = _drop_unneeded_forced(res, found, use_obs, reference, pulse, settings,
                                           warnings)
        res, pulse, _ = _drop_insignificant(res, found, use_obs, reference, pulse, settings,
                                            warnings)
        current, result_fit = res.model, res
        if known_t is not None or not any(a.search_pass == search_pass for a in found):
            break       # nothing new is significant
    if dropped and result_fit is not None:
        result_fit, used, pulse, restored = put_back(result_fit, found, obs, used, pulse,
                                                     reference, settings)
        if restored:
            use_obs, current, dropped = obs.select(used), result_fit.model, dropped - restored
            warnings.append(f"{restored} TOA(s) left out while the pulses were numbered "
                            "were put back: the fitted model predicts their phase to "
                            f"better than {REINCLUDE_MAX_PHASE_SIGMA:g} turns (1 sigma)")
            if not dropped:
                warnings[:] = [w for w in warnings if not w.endswith("left out of the fit")]
    if result_fit is None:
        try:
            result_fit = fit_pinned(current, use_obs, reference)
            current = result_fit.model
        except FitError as exc:
            warnings.append(f"no glitch found, and the starting model could not be fitted: {exc}")
    if result_fit is not None:   # the fitter's words assume the user pinned the pulses
        result_fit.warnings = [
            w.replace("with the pulse numbers of the table's 'pulse' column: check those numbers",
                      "with the pulse numbering of the glitch search: phase connection is "
                      "doubtful (timing noise, or glitches the search did not find?)")
            for w in result_fit.warnings]
    if any(not a.placed for a in found):
        warnings.append(f"the fit with the glitches has reduced chi-square "
                        f"{result_fit.reduced_chi2:.2f} (> {ADEQUATE_REDUCED_CHI2:g}): epochs "
                        "were left in the gaps the frequency track points to, not compared "
                        "with nearby gaps (timing noise or unmodelled structure?)")
    candidates = _candidates(current, result_fit, found, settings.fit_decays)
    if any(c.epoch_choice.startswith("ambiguous") for c in candidates):
        warnings.append("some glitches unwound the phase by more than one turn between the "
                        "bracketing TOAs: their epochs are uncertain over the whole gap")
    track, before = _track_and_residuals(current, use_obs, reference, settings, result_fit)
    assumptions, null_noise = search_assumptions(current)
    return GlitchSearchResult(
        candidates=candidates, model=current, fit=result_fit, obs=use_obs, track=track,
        residual_mjd=before[0], residual_us=before[1], residual_err_us=before[2],
        detection_limit=detection, settings=settings, warnings=list(dict.fromkeys(warnings)),
        dropped_toas=dropped, assumptions=assumptions, null_noise=null_noise)


def _candidates(model, res, found: list[AcceptedGlitch],
                fit_decays: bool) -> list[GlitchCandidate]:
    if res is None or not found:
        return []
    out = []
    for acc in found:
        g = next((g for g in model_glitches(model) if g.epoch == acc.epoch), None)
        if g is None or acc.bracket is None:
            continue
        t_a, t_b, text_a, text_b = acc.bracket
        unc = glitch_uncertainties(res, g, acc)
        t_g = glitch_time_s(model, g)
        f_here = float(spin_frequency_at(model, t_g))
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
            epoch_min_mjd=float(emission_mjd(model, t_a)),
            epoch_max_mjd=float(emission_mjd(model, t_b)),
            epoch_uncertainty_days=float(unc["epoch_s"] / SECONDS_PER_DAY),
            frequency_step_hz=g.frequency_step.value,
            frequency_step_uncertainty_hz=float(unc["frequency_step"]),
            frequency_step_fit_uncertainty_hz=float(g.frequency_step.uncertainty or float("nan")),
            frequency_derivative_step=g.frequency_derivative_step.value,
            frequency_derivative_step_uncertainty=float(unc["frequency_derivative_step"]),
            phase_step=g.phase_step.value,
            phase_step_uncertainty=float(g.phase_step.uncertainty or float("nan")),
            decaying_terms=decays,
            fractional_size=df_total / f_here,
            permanent_fractional_size=g.frequency_step.value / f_here,
            false_alarm_probability=acc.fap,
            significance_sigma=None if acc.fap is None else gaussian_sigma(acc.fap),
            detection_chi2=acc.stat,
            window_frequency_step_hz=acc.df_hz,
            window_frequency_step_uncertainty_hz=acc.df_err_hz,
            bracket_toa_mjd=(text_a, text_b), epoch_choice=choice, model_index=g.array_index,
            known=acc.known, forced=acc.forced, search_pass=acc.search_pass,
            false_alarm_probability_upper_limit=acc.fap_upper_limit,
            false_alarm_probability_method=acc.fap_method,
            fitted_steps_chi2=acc.fit_statistic, fitted_steps_dof=acc.fit_dof,
            decaying_term_tried=fit_decays and acc.decay_tried))
    out.sort(key=lambda c: c.epoch_mjd)
    return out


def _track_and_residuals(model, obs, reference, settings, res):
    """ResidualSet of the fitted model without its glitch terms (µs, with the
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
    err_us = white_errors_us(model, obs)
    w = 1.0 / err_us ** 2
    resid_us = phase / f * 1e6
    resid_us = resid_us - np.sum(w * resid_us) / np.sum(w)
    mjd = emission_mjd(model, t)
    # the track: windows inside the intervals between glitches
    ts = t[order]
    r = phase[order]
    sigma = (err_us * 1e-6 * f)[order]
    glitch_t = sorted(glitch_time_s(model, g) for g in model_glitches(model))
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
                         spin_frequency_derivative_at(bare, tc) - params[2] / SECONDS_PER_DAY ** 2,
                         math.sqrt(cov[2, 2]) / SECONDS_PER_DAY ** 2))
    rows = np.array(rows) if rows else np.zeros((0, 5))
    track = FrequencyTrack(mjd=emission_mjd(model, rows[:, 0]), frequency_offset_hz=rows[:, 1],
                           frequency_err_hz=rows[:, 2], frequency_derivative=rows[:, 3],
                           frequency_derivative_err=rows[:, 4])
    return track, (mjd, resid_us, err_us)


__all__ = ["search_glitches"]
