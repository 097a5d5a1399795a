"""Fitting candidate glitches into the model: decaying terms, placement among nearby gaps,
epochs where the phase step vanishes, and the step uncertainties with the epoch's spread.
Times are TDB seconds at the pulsar since the spin epoch unless named ``_days``/``_mjd``.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import scipy.special
import scipy.stats

from timingkit.fit.least_squares import FitResult, fit
from timingkit.formats.errors import FitError
from timingkit.glitch.candidates import AcceptedGlitch, PhaseData, phase_data, search_ranges
from timingkit.glitch.epochs import epoch_decimal, glitch_at, glitch_time_s
from timingkit.glitch.scan import MIN_GAP_DAYS
from timingkit.glitch.tracking import SECONDS_PER_DAY, number_pulses, track_both
from timingkit.model.glitch import (
    DECAY_AMPLITUDE,
    DECAY_TIME,
    Glitch,
    glitch_section,
    model_glitches,
    set_glitches,
)
from timingkit.model.timing_model import TimingModel

LOCALISE_GAPS = 2                  # gaps tried on each side of the change point ...
LOCALISE_MAX_GAPS = 6              # ... extended while the best is at the edge
LOCALISE_DCHI2 = 9.0               # gaps this close to the best fit are in the bracket
ADEQUATE_REDUCED_CHI2 = 4.0        # decays and placements only with a model that fits
FORCED_STEP_Z = 3.0                # a glitch with a smaller frequency step (sigma) is re-checked


def search_free_names(model: TimingModel):
    names = list(model.free_names)
    for p in [model.spin.frequency, *model.spin.derivatives[:1]]:
        if p.name not in names:
            names.append(p.name)
    for g in model_glitches(model):
        for p in g.parameters():
            if p.free and p.name not in names:
                names.append(p.name)
    return names


def glitch_sections_of(model: TimingModel) -> list[dict]:
    out = []
    for g in model_glitches(model):
        out.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                  g.frequency_derivative_step.value, g.decays))
    return out


def rebuild_with_glitches(model: TimingModel, sections: list[dict], free_by_epoch: dict) -> TimingModel:
    """Copy of ``model`` with glitches ``sections``; free flags per glitch
    epoch (Decimal) -> set of keys."""
    new = model.copy()
    set_glitches(new, sections)
    for g in model_glitches(new):
        keys = free_by_epoch.get(g.epoch, set())
        for p in g.parameters():
            p.free = p.key in keys
    return new


def glitch_keys(decays: int) -> set:
    keys = {"phase_step", "frequency_step_hz", "frequency_derivative_step"}
    if decays:
        keys |= {DECAY_AMPLITUDE, DECAY_TIME}
    return keys


def carry_pulses(old: TimingModel, new: TimingModel, obs, reference, pulse):
    """Pulse numbers for ``new`` from those pinned for ``old``: the counts are
    data, but a glitch moved across TOAs (or a phase step changed by whole
    turns) changes how many turns the model gives them; the integers follow
    the change of the model phase, the fractions stay for the fit to judge."""
    a = old.evaluate(obs, reference)
    b = new.evaluate(obs, reference)
    change = (b.phase_int - a.phase_int) + (b.phase_frac - a.phase_frac)
    return np.asarray(pulse, dtype=np.int64) + np.round(change).astype(np.int64)


def fit_pinned(model, obs, reference, pulse=None) -> FitResult:
    """Fit with the search's free parameters; ``pulse`` pins pulse numbers
    (None: numbered from the model, ignoring any table column)."""
    toas = dataclasses.replace(obs.toas, pulse=None if pulse is None
                               else np.asarray(pulse, dtype=np.int64))
    return fit(model, dataclasses.replace(obs, toas=toas), free=search_free_names(model),
               reference=reference)


def free_flags(model: TimingModel) -> dict:
    return {g.epoch: {p.key for p in g.parameters() if p.free} for g in model_glitches(model)}


def try_decay(res: FitResult, obs, reference, pulse, epoch, settings, span_after_days):
    """The fit with one more decaying term on the glitch at ``epoch`` when it
    is significant (likelihood ratio above the search threshold, divided over
    the time-scale grid; amplitude > 3 sigma; time-scale bounded), else None."""
    base = res
    best = None
    for days in settings.decay_grid_days:
        if days > 3 * span_after_days:
            continue
        sections = glitch_sections_of(base.model)
        i = model_glitches(base.model).index(glitch_at(base.model, epoch))
        g = glitch_at(base.model, epoch)
        sections[i] = glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                     g.frequency_derivative_step.value,
                                     list(g.decays) + [(0.0, days)])
        free = free_flags(base.model)
        free[epoch] = glitch_keys(0) | {DECAY_AMPLITUDE}
        trial = rebuild_with_glitches(base.model, sections, free)
        hold_decay_times(trial, epoch)
        try:
            fitted = fit_pinned(trial, obs, reference, pulse)
        except FitError:
            continue
        if best is None or fitted.chi2 < best.chi2:
            best = fitted
    if best is None:
        return None
    free = free_flags(best.model)
    free[epoch] = glitch_keys(1)
    trial = rebuild_with_glitches(best.model, glitch_sections_of(best.model), free)
    try:
        fitted = fit_pinned(trial, obs, reference, pulse)
    except FitError:
        return None
    g = glitch_at(fitted.model, epoch)
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


def hold_decay_times(model, epoch):
    """Time-scales of the glitch at ``epoch`` held fixed (the grid step)."""
    g = glitch_at(model, epoch)
    for p in g.decay_times:
        p.free = False


def decay_or_none(res, epoch, obs, reference, pulse, settings):
    """:func:`try_decay` on the glitch at ``epoch``, over the span up to the next
    glitch (or the last TOA)."""
    t_g = glitch_time_s(res.model, glitch_at(res.model, epoch))
    later = [glitch_time_s(res.model, g) for g in model_glitches(res.model)]
    later = [t for t in later if t > t_g + 1.0]
    end = min(later) if later else float(np.max(phase_data(res.model, obs, reference).t_s))
    return try_decay(res, obs, reference, pulse, epoch, settings, (end - t_g) / SECONDS_PER_DAY)


def add_decays(res, accepted, obs, reference, pulse, settings):
    """One decaying term tried on each glitch in ``accepted`` (in turn), forced ones
    too (kept only where significant, :func:`try_decay`)."""
    for acc in accepted:
        better = decay_or_none(res, acc.epoch, obs, reference, pulse, settings)
        if better is not None:
            res = better
    return res


def without_glitch(model: TimingModel, epoch) -> TimingModel:
    """Copy of ``model`` without the glitch at ``epoch`` (the others' free flags kept)."""
    sections = [s for s, h in zip(glitch_sections_of(model), model_glitches(model))
                if h.epoch != epoch]
    free = free_flags(model)
    free.pop(epoch, None)
    return rebuild_with_glitches(model, sections, free)


def renumbered_fit(first: FitResult, obs, reference, settings):
    """(fit, pulses) of ``first.model`` with the pulses numbered afresh against it
    (both tracking chains, every glitch of the model a barrier), or None when
    that numbering does not connect every TOA: the counts across a gap are data
    only where the tracking connects them."""
    data = phase_data(first.model, obs, reference)
    chains = track_both(data, *search_ranges(first.model, settings))
    barriers = {int(np.searchsorted(data.t_s, glitch_time_s(first.model, h)) - 1)
                for h in model_glitches(first.model)}
    offsets, keep, forced = number_pulses(data, chains, barriers, [])
    if forced or not np.all(keep):
        return None
    pulse = np.empty(len(obs), dtype=np.int64)
    pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
    try:
        return fit_pinned(first.model, obs, reference, pulse), pulse
    except FitError:
        return None


def fit_without(res: FitResult, epoch, obs, reference, pulse, settings):
    """The fit without the glitch at ``epoch`` and the likelihood-ratio statistic
    of the glitch's own fitted steps: (chi-square without it - with it) / max(1,
    reduced chi-square), against a chi-square with the glitch's free parameters as
    degrees of freedom. The fit without it is the best (least chi-square) of those
    from two numberings: the same pulse counts (data where the tracking joined them
    across the gap), and the counts carried from ``res`` (:func:`carry_pulses`: a
    forced glitch's gap was only ever joined through the glitch, whose turns the
    other terms cannot make up), and each numbered afresh against its own fit
    (:func:`renumbered_fit`, which must connect across the gap). These cost fits
    and tracking, so they are tried in that order only while the answer is open:
    the carried and fresh numberings only for a glitch whose frequency step is below
    FORCED_STEP_Z sigma (the kept counts already show a larger one to matter), and
    none once one numbering makes the glitch insignificant. Returns (fit, pulses,
    statistic, degrees of freedom), or None when no fit without it succeeds."""
    g = glitch_at(res.model, epoch)
    dof = max(1, sum(1 for p in g.parameters() if p.free))
    threshold = scipy.stats.chi2.isf(settings.false_alarm_threshold, dof)
    trial = without_glitch(res.model, epoch)
    t_g = glitch_time_s(res.model, g)

    def statistic(option):
        return (option[0].chi2 - res.chi2) / max(1.0, res.reduced_chi2)

    def best(options):
        return min(options, key=lambda o: (not o[0].converged, o[0].chi2))

    def settled(options):
        return options and best(options)[0].converged and statistic(best(options)) < threshold

    step, err = g.frequency_step.value, g.frequency_step.uncertainty
    small = bool(err) and abs(step) <= FORCED_STEP_Z * err
    options = []
    for counts in (np.asarray(pulse, dtype=np.int64),
                   carry_pulses(res.model, trial, obs, reference, pulse)):
        first = _fit_with_counts(trial, obs, reference, counts, t_g, settings)
        if first is not None:
            options.append((first, counts))
        if settled(options) or not small:
            break
    if not settled(options) and small:
        for first, _ in list(options):
            renumbered = renumbered_fit(first, obs, reference, settings)
            if renumbered is not None:
                options.append(renumbered)
    if not options:
        return None
    chosen = best(options)
    return chosen[0], chosen[1], float(statistic(chosen)), dof


def _fit_with_counts(trial: TimingModel, obs, reference, pulse, t_g: float, settings):
    """:func:`fit_without`'s fit of ``trial`` with ``pulse`` pinned: decay time-scales
    held first (a linear fit), then freed; when the glitch before ``t_g`` has no
    decaying term, one is tried there (its recovery is what a spurious glitch just
    after it mimics). None when the fit fails."""
    trial = trial.copy()
    free_times = [p for h in model_glitches(trial) for p in h.decay_times if p.free]
    for p in free_times:
        p.free = False
    try:
        fitted = fit_pinned(trial, obs, reference, pulse)
    except FitError:
        return None
    if free_times:
        released = fitted.model.copy()
        names = {p.name for p in free_times}
        for p in released.parameters():
            p.free = p.free or p.name in names
        try:
            fitted = fit_pinned(released, obs, reference, pulse)
        except FitError:
            pass              # the held time-scales' fit: chi-square an upper bound
    before = [h for h in model_glitches(fitted.model) if glitch_time_s(fitted.model, h) < t_g]
    if settings.fit_decays and before:
        previous = max(before, key=lambda h: glitch_time_s(fitted.model, h))
        if not previous.decays:
            better = decay_or_none(fitted, previous.epoch, obs, reference, pulse, settings)
            fitted = better if better is not None else fitted
    return fitted


def placement_fit(res: FitResult, epoch, gap: int, data: PhaseData, obs, reference, pulse):
    """The fit with the glitch at ``epoch`` moved to the middle of ``gap``
    (pulse numbers pinned): (fit, chi2 with the phase-continuity penalty,
    zero-phase-step epoch (s), its variance (s^2), new epoch) or None."""
    model = res.model
    g = glitch_at(model, epoch)
    t_a, t_b = float(data.t_s[gap]), float(data.t_s[gap + 1])
    t_mid = 0.5 * (t_a + t_b)
    sections = glitch_sections_of(model)
    # carry the glitch to the new epoch unchanged in its predictions after it; the
    # pulse counts of the TOAs that change sides follow the carried model
    new_sec = transported(model, g, t_mid, None)
    new_epoch = new_sec["epoch_mjd"]
    sections[model_glitches(model).index(g)] = new_sec
    free = free_flags(model)
    free[new_epoch] = free.pop(epoch)
    trial = rebuild_with_glitches(model, sections, free)
    moved_pulse = carry_pulses(model, trial, obs, reference, pulse)
    try:
        fitted = fit_pinned(trial, obs, reference, moved_pulse)
    except FitError:
        return None
    h = glitch_at(fitted.model, new_epoch)
    t_new, step, n_roots, spread, _ = refine_epoch(fitted.model, h, t_a, t_b)
    sig = h.phase_step.uncertainty
    penalty = (step / sig) ** 2 if sig else 0.0
    df_inst = h.frequency_step.value + sum(a for a, _ in h.decays)
    uniform = (t_b - t_a) ** 2 / 12.0
    fitted_var = (sig / df_inst) ** 2 if (sig and df_inst) else uniform
    var = (min(fitted_var, uniform) + spread) if n_roots else uniform
    return fitted, fitted.chi2 + penalty, t_new, var, new_epoch, moved_pulse


def localise(res: FitResult, acc: AcceptedGlitch, data: PhaseData, obs, reference,
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
        tried[j] = placement_fit(res, acc.epoch, j, data, obs, reference, pulse)

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


def refine_epochs(res: FitResult, accepted, obs, reference, pulse):
    """Move each new glitch to the epoch in its bracket that zeroes the phase
    step (module docstring), then refit with pulses numbered by that model."""
    data = phase_data(res.model, obs, reference)
    sections = []
    moved = {}
    for g in model_glitches(res.model):
        acc = next((a for a in accepted if a.epoch == g.epoch), None)
        if acc is None:
            sections.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                           g.frequency_derivative_step.value, g.decays))
            continue
        j = int(np.searchsorted(data.t_s, glitch_time_s(res.model, g)) - 1)
        t_a, t_b = float(data.t_s[j]), float(data.t_s[j + 1])
        _, _, n_roots, spread, sec = refine_epoch(res.model, g, t_a, t_b)
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
    free = {moved.get(e, e): keys for e, keys in free_flags(res.model).items()}
    for acc in accepted:
        acc.epoch = moved.get(acc.epoch, acc.epoch)
    refined = rebuild_with_glitches(res.model, sections, free)
    pulse = carry_pulses(res.model, refined, obs, reference, pulse)
    return fit_pinned(refined, obs, reference, pulse), pulse


def refine_epoch(model: TimingModel, g: Glitch, t_a: float, t_b: float):
    """Epoch in [t_a, t_b] (s since the spin epoch) where the glitch phase
    step vanishes modulo whole turns. Moving the epoch within the bracket
    changes no prediction when the phase step becomes the glitch phase there
    and the steps are carried along (df' = df + derivative_step d, decaying amplitude
    times exp(-d/tau)). Returns (t_new, phase_step_new, number of such
    epochs in the gap, their mean square distance from t_new (s^2; the gap's
    uniform variance when there is none), section at the new epoch)."""
    t_e = glitch_time_s(model, g)
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
    return t_new, step, len(distinct), spread, transported(model, g, t_new, step)


def transported(model: TimingModel, g: Glitch, t_new: float, phase_step: float | None) -> dict:
    """Section of glitch ``g`` moved to ``t_new`` (s since the spin epoch) with
    the same predictions after both epochs: df' = df + derivative_step d, decaying
    amplitudes times exp(-d/tau), phase step = the glitch phase at t_new
    (or ``phase_step``, which differs from it by whole turns)."""
    delta = t_new - glitch_time_s(model, g)
    df = g.frequency_step.value + g.frequency_derivative_step.value * delta
    decays = [(a * math.exp(-delta / (d * SECONDS_PER_DAY)), d) for a, d in g.decays]
    step = float(g.phase_after(delta)) if phase_step is None else phase_step
    return glitch_section(epoch_decimal(model, t_new), step, df,
                          g.frequency_derivative_step.value, decays)


def glitch_uncertainties(res: FitResult, g: Glitch, acc: AcceptedGlitch) -> dict:
    """Uncertainties of the steps with the epoch's propagated: the fit holds
    the epoch fixed and frees the phase step; equivalently the phase step is
    zero and the epoch moves by d = -phase_step / (glitch frequency change at
    the epoch), which carries df by derivative_step d and each decaying amplitude by
    -A d / tau. When several epochs in the gap zero the phase step (a glitch
    that unwinds more than a turn there) their spread is added; with none,
    the epoch variance is that of a uniform spread over the gap; and it is at
    least the spread over all gaps the fit allows (``acc.epoch_variance``).
    A larger epoch variance than the fit's is added along the shift; a
    smaller one (the gap confines the epoch) shrinks the parts of the steps
    correlated with the epoch, which keeps every variance >= 0."""
    names = res.free_names
    cov = res.covariance[:len(names), :len(names)]
    idx = {p.name: names.index(p.name) for p in g.parameters() if p.name in names}
    df_inst = g.frequency_step.value + sum(a for a, _ in g.decays)
    m = 3 + len(g.decays)      # rows: df, derivative_step, epoch, decaying amplitudes
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
    if target >= out[2, 2]:
        # more epoch spread than the fit's (independent of it): added along the shift
        out = out + (target - out[2, 2]) * np.outer(shift, shift)
    elif out[2, 2] > 0:
        # less (the epoch is confined to the gap): the rows' parts correlated with
        # the epoch shrink with it (regression on the epoch row), so the
        # covariance stays positive semi-definite
        along = out[:, 2] / out[2, 2]
        out = out - (out[2, 2] - target) * np.outer(along, along)
    sig = np.sqrt(np.maximum(np.diag(out), 0.0))
    return {"frequency_step": float(sig[0]), "frequency_derivative_step": float(sig[1]),
            "epoch_s": float(sig[2]), "decay_amplitudes": [float(x) for x in sig[3:]]}
