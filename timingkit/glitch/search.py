"""Glitch search and glitch-parameter estimation.

The search works on the pulse-phase residuals of a starting timing model
(cycles, at the emission times) in passes of four steps:

1. **Phase tracking** (timingkit.glitch.tracking): pulses are numbered TOA
   by TOA, forward in time and, independently, backward, each TOA from a
   quadratic fitted to the connected TOAs before it; where a glitch unwinds
   the phase (possibly by many turns) the chain restarts from a seed solution
   that enumerates the pulse counts allowed by bounded frequency
   (``max_fractional_step`` of the spin frequency) and frequency-derivative
   offsets and keeps the one the following TOAs confirm uniquely.
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
   for the next pass (there, an unmodelled decay mimics small steps).
3. **Fit**: pulses are numbered across the data (intervals between glitches,
   pieces joined where unambiguous) and held fixed; the model plus one
   glitch component per candidate (phase step, frequency step,
   frequency-derivative step) is fitted with timingkit.fit.fitter. A decaying
   frequency step is kept where it is significant (time-scale grid, then
   fitted). When the model fits, each glitch is tried in the nearby gaps with
   phase continuity required, and the gaps the fit allows (chi-square within
   LOCALISE_DCHI2 of the best) form its reported bracket. Where pulses
   could not be numbered across a gap with no significant candidate, a
   glitch is forced there (forced_by_lost_connection); once the fit holds
   the other glitches' decays and frequency-derivative steps (which a local
   quadratic cannot follow), a forced glitch with an insignificant step is
   dropped if the pulses, re-tracked without it, connect and the fit is not
   significantly worse.
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
timingkit.fit.fitter; noise parameters left free in the model are estimated in
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
from dataclasses import dataclass, field
from decimal import Decimal

import numpy as np
import scipy.special
import scipy.stats

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.fitter import FitResult, fit
from timingkit.glitch.scan import (MIN_GAP_DAYS, GapWindows, NullDistribution, NullNoise,
                                   build_windows, detection_limit, false_alarm_probability,
                                   gap_statistics, null_distribution, local_survival,
                                   gaussian_sigma, threshold_statistic)
from timingkit.glitch.tracking import (MIN_WINDOW_TOAS, SECONDS_PER_DAY, TrackingChain,
                                       _quadratic_fit, number_pulses, solve_seed, track_phases)
from timingkit.model.glitch import (DECAY_AMPLITUDE, DECAY_TIME, Glitch, glitch_section,
                                    model_glitches, set_glitches)
from timingkit.model.noise import NoiseModel, toa_times_s
from timingkit.model.timing_model import TimingModel
from timingkit.geometry.observations import Observations

DEFAULT_WINDOW_TOAS = 10
DEFAULT_MIN_SIGNIFICANCE = 3.0     # sigma (two-sided Gaussian tail of the global FAP)
DEFAULT_NULL_TRIALS = 1000
QUICK_NULL_TRIALS = 250            # first null run; the full one only for borderline cases
DEFAULT_MAX_FRACTIONAL_STEP = 2e-5  # largest reconnectable step, fraction of the frequency
FDOT_FRACTIONAL_RANGE = 0.2        # |frequency-derivative offset| <= this * |fdot| ...
FDOT_RANGE_FLOOR = 1e-14           # ... or this (Hz/s), whichever is larger
DECAY_GRID_DAYS = (10.0, 30.0, 100.0, 300.0)
MAX_PASSES = 12                    # passes of scan + fit until nothing new is found
LOCALISE_GAPS = 2                  # gaps tried on each side of the change point ...
LOCALISE_MAX_GAPS = 6              # ... extended while the best is at the edge
LOCALISE_DCHI2 = 9.0               # gaps this close to the best fit are in the bracket
ADEQUATE_REDUCED_CHI2 = 4.0        # decays and placements only with a model that fits
DEFER_DAYS = 900.0                 # candidates this soon after a glitch accepted in the ...
DEFER_RATIO = 0.1                  # ... same pass and this much smaller wait a pass
MAX_GLITCHES_PER_PASS = 20
FORCED_STEP_Z = 3.0                # a forced glitch with a smaller step (sigma) is re-checked
LOST_CONNECTION_WARNING = ("phase connection was lost in a gap with no significant glitch: a "
                           "glitch was fitted there to keep the solution connected (flagged "
                           "forced_by_lost_connection)")

ASSUMPTIONS = ("false-alarm probabilities assume white TOA noise with the stated uncertainties "
               "and a locally quadratic phase over each window (red timing noise makes them "
               "optimistic); glitch epochs are only known to lie between the bracketing TOAs")
ASSUMPTIONS_WITH_NOISE_MODEL = (
    "false-alarm probabilities assume the noise of the model's noise sections (white-noise "
    "scaling{red}) and a locally quadratic phase over each window; they are only as good as "
    "those noise parameters (noise stronger than stated makes them optimistic); glitch epochs "
    "are only known to lie between the bracketing TOAs")


def search_assumptions(model: TimingModel) -> tuple[str, str]:
    """(assumptions, description of the null noise) for a search with ``model``."""
    noise = NoiseModel.from_timing_model(model)
    if noise.empty:
        return ASSUMPTIONS, "white noise with the TOA uncertainties of the table"
    parts = [f"white noise with the uncertainties scaled by {len(noise.white)} "
             "[[white_noise]] group(s)" if noise.white else
             "white noise with the TOA uncertainties of the table"]
    if noise.red is not None:
        parts.append(f"power-law red noise (amplitude_log10 {noise.red.amplitude.value:g}, "
                     f"spectral_index {noise.red.spectral_index.value:g}, "
                     f"{noise.red.frequencies} Fourier frequencies)")
    red = " and power-law red noise" if noise.red is not None else ""
    return ASSUMPTIONS_WITH_NOISE_MODEL.format(red=red), " plus ".join(parts)


# ============================================================================ settings, results

@dataclass
class GlitchSearchSettings:
    """Search options. ``window_toas`` or ``window_days`` sets the window on each
    side of a gap (default 10 TOAs); ``min_significance`` in Gaussian sigma
    (two-sided) of the global false-alarm probability; ``known_epochs_mjd``
    (TDB at the pulsar) are tested instead of searching."""
    window_toas: int | None = None
    window_days: float | None = None
    min_significance: float = DEFAULT_MIN_SIGNIFICANCE
    known_epochs_mjd: list | None = None
    null_trials: int = DEFAULT_NULL_TRIALS
    max_fractional_step: float = DEFAULT_MAX_FRACTIONAL_STEP
    fit_decays: bool = True
    decay_grid_days: tuple = DECAY_GRID_DAYS
    passes: int = MAX_PASSES
    seed: int = 20240611

    def __post_init__(self):
        if self.window_toas is not None and self.window_days is not None:
            raise InputError("give either a window in TOAs or in days, not both",
                             field="--window-toas/--window-days")
        if self.window_toas is None and self.window_days is None:
            self.window_toas = DEFAULT_WINDOW_TOAS
        if self.window_toas is not None and (int(self.window_toas) != self.window_toas
                                             or self.window_toas < MIN_WINDOW_TOAS):
            raise InputError(f"window must be an integer of at least {MIN_WINDOW_TOAS} TOAs, "
                             f"found {self.window_toas}", field="--window-toas")
        if self.window_days is not None and not (self.window_days > 0 and
                                                 math.isfinite(self.window_days)):
            raise InputError(f"window must be > 0 days, found {self.window_days}",
                             field="--window-days")
        if not (self.min_significance > 0 and math.isfinite(self.min_significance)):
            raise InputError(f"minimum significance must be > 0 sigma, found "
                             f"{self.min_significance}", field="--min-significance")
        if int(self.null_trials) < 100:
            raise InputError("use at least 100 null trials", field="null_trials")
        if not 0 < self.max_fractional_step < 1e-2:
            raise InputError("max_fractional_step must be in (0, 0.01)",
                             field="max_fractional_step")

    @property
    def false_alarm_threshold(self) -> float:
        return float(scipy.special.erfc(self.min_significance / math.sqrt(2.0)))

    def as_dict(self) -> dict:
        return {"window_toas": self.window_toas, "window_days": self.window_days,
                "min_significance_sigma": self.min_significance,
                "false_alarm_threshold": self.false_alarm_threshold,
                "known_epochs_mjd": None if self.known_epochs_mjd is None
                else [float(x) for x in self.known_epochs_mjd],
                "null_trials": int(self.null_trials),
                "max_fractional_step": self.max_fractional_step,
                "fit_decays": self.fit_decays, "decay_grid_days": list(self.decay_grid_days),
                "passes": self.passes, "seed": self.seed}


@dataclass
class GlitchCandidate:
    """One glitch found (or tested) and fitted. Units in the names; the
    frequency-derivative step is in Hz/s and the phase step in cycles."""
    epoch_mjd: Decimal
    epoch_min_mjd: float
    epoch_max_mjd: float
    epoch_uncertainty_days: float
    frequency_step_hz: float
    frequency_step_uncertainty_hz: float        # with the epoch's uncertainty
    frequency_step_fit_uncertainty_hz: float    # with the epoch held where it is
    frequency_derivative_step: float
    frequency_derivative_step_uncertainty: float
    phase_step: float
    phase_step_uncertainty: float
    decaying_terms: list
    fractional_size: float
    permanent_fractional_size: float
    false_alarm_probability: float | None
    significance_sigma: float | None
    detection_chi2: float | None
    window_frequency_step_hz: float | None
    window_frequency_step_uncertainty_hz: float | None
    bracket_toa_mjd: tuple
    epoch_choice: str
    model_index: int
    known: bool = False
    forced: bool = False
    search_pass: int = 1

    def to_json(self) -> dict:
        return {
            "epoch_mjd": float(self.epoch_mjd), "epoch_mjd_text": str(self.epoch_mjd),
            "epoch_min_mjd": self.epoch_min_mjd, "epoch_max_mjd": self.epoch_max_mjd,
            "epoch_uncertainty_days": self.epoch_uncertainty_days,
            "frequency_step_hz": self.frequency_step_hz,
            "frequency_step_uncertainty_hz": self.frequency_step_uncertainty_hz,
            "frequency_step_fit_uncertainty_hz": self.frequency_step_fit_uncertainty_hz,
            "frequency_derivative_step": self.frequency_derivative_step,
            "frequency_derivative_step_uncertainty": self.frequency_derivative_step_uncertainty,
            "fractional_size": self.fractional_size,
            "false_alarm_probability": self.false_alarm_probability,
            "permanent_fractional_size": self.permanent_fractional_size,
            "phase_step": self.phase_step, "phase_step_uncertainty": self.phase_step_uncertainty,
            "decaying_terms": self.decaying_terms,
            "significance_sigma": self.significance_sigma,
            "detection_chi2": self.detection_chi2,
            "window_frequency_step_hz": self.window_frequency_step_hz,
            "window_frequency_step_uncertainty_hz": self.window_frequency_step_uncertainty_hz,
            "bracket_toa_mjd": list(self.bracket_toa_mjd),
            "epoch_choice": self.epoch_choice, "model_glitch_index": self.model_index,
            "known_epoch": self.known, "forced_by_lost_connection": self.forced,
            "search_pass": self.search_pass,
        }


UNITS = {"epoch_mjd": "MJD (TDB at the pulsar)", "frequency_step_hz": "Hz",
         "frequency_derivative_step": "Hz/s", "phase_step": "cycles",
         "fractional_size": "(frequency step incl. decaying terms) / spin frequency",
         "decay_time_days": "days", "false_alarm_probability": "global, for the whole search"}


@dataclass
class FrequencyTrack:
    """Local spin frequency relative to the fitted spin model without glitch
    terms (Hz), and the local frequency derivative (Hz/s), at window centres."""
    mjd: np.ndarray
    frequency_offset_hz: np.ndarray
    frequency_err_hz: np.ndarray
    frequency_derivative: np.ndarray
    frequency_derivative_err: np.ndarray


@dataclass
class GlitchSearchResult:
    candidates: list[GlitchCandidate]
    model: TimingModel                 # fitted model with the glitches
    fit: FitResult | None
    obs: Observations                  # the TOAs used in the final fit
    track: FrequencyTrack
    residual_mjd: np.ndarray           # residuals before glitch terms (emission MJD)
    residual_us: np.ndarray
    residual_err_us: np.ndarray
    detection_limit: dict
    settings: GlitchSearchSettings
    warnings: list[str] = field(default_factory=list)
    dropped_toas: int = 0
    assumptions: str = ASSUMPTIONS
    null_noise: str = "white noise with the TOA uncertainties of the table"

    def to_json(self) -> dict:
        return {"candidates": [c.to_json() for c in self.candidates],
                "units": UNITS, "detection_limit": self.detection_limit,
                "settings": self.settings.as_dict(), "assumptions": self.assumptions,
                "null_noise": self.null_noise,
                "toas_used": int(len(self.obs)), "toas_left_out": int(self.dropped_toas),
                "warnings": list(self.warnings)}


# ============================================================================ the search

@dataclass
class _PhaseData:
    order: np.ndarray       # sorted position -> observation index
    t_s: np.ndarray         # emission time, s since the spin epoch (sorted)
    frac: np.ndarray        # model phase fraction (cycles)
    phase_int: np.ndarray   # model phase integer part
    sigma: np.ndarray       # white TOA uncertainty in cycles (scaled by the noise model)
    frequency_hz: np.ndarray
    spin_epoch_mjd: float
    red: np.ndarray | None = None   # red-noise columns in cycles (see NullNoise), or None

    @property
    def null_noise(self) -> NullNoise:
        return NullNoise(self.sigma, self.red)


def white_errors_us(model: TimingModel, obs: Observations,
                    noise: NoiseModel | None = None) -> np.ndarray:
    """TOA uncertainties the search weights with (µs): the table's, scaled by
    the model's [[white_noise]] groups when it has any."""
    noise = NoiseModel.from_timing_model(model) if noise is None else noise
    return noise.white_errors_us(obs.toas) if noise.white else obs.toas.err_us


def _phase_data(model: TimingModel, obs: Observations, reference) -> _PhaseData:
    ev = model.evaluate(obs, reference)
    t = ev.extra["spin_dt_s"]
    order = np.argsort(t, kind="stable")
    noise = NoiseModel.from_timing_model(model)
    sigma = white_errors_us(model, obs, noise) * 1e-6 * ev.spin_frequency_hz
    red = None
    if noise.red is not None:
        # the red process on its Fourier basis, each column times the square root
        # of its coefficient's prior variance, in cycles (seconds x spin frequency)
        basis, span_s = noise.red_basis(toa_times_s(obs))
        red = (basis * np.sqrt(noise.red_prior(span_s))[None, :]
               * ev.spin_frequency_hz[:, None])[order]
    return _PhaseData(order=order, t_s=t[order], frac=ev.phase_frac[order],
                      phase_int=ev.phase_int[order], sigma=sigma[order],
                      frequency_hz=ev.spin_frequency_hz[order],
                      spin_epoch_mjd=model.spin.epoch_day + model.spin.epoch_frac, red=red)


def _ranges(model: TimingModel, settings: GlitchSearchSettings):
    f0 = model.spin.frequency.value
    fdot = model.spin.derivatives[0].value if model.spin.derivatives else 0.0
    return (settings.max_fractional_step * f0,
            max(FDOT_FRACTIONAL_RANGE * abs(fdot), FDOT_RANGE_FLOOR))


@dataclass
class _Accepted:
    gap: int
    fap: float | None
    stat: float | None
    df_hz: float | None
    df_err_hz: float | None
    dfdot: float | None
    known: bool = False
    forced: bool = False
    search_pass: int = 1
    epoch: Decimal | None = None          # set when the glitch is placed / refined
    n_roots: int = 1                      # epochs in the bracket with a zero phase step
    bracket: tuple | None = None          # (t_a s, t_b s, mjd text a, mjd text b)
    gap_width_s: float = 0.0              # width of the gap holding the epoch
    consistent_gaps: tuple | None = None  # first and last gap the fit allows
    epoch_variance: float = 0.0           # s^2, over the consistent gaps (mixture)
    root_spread: float = 0.0              # s^2, of the zero-phase-step epochs in the gap
    decay_tried: bool = False             # decaying terms tried
    placed: bool = False                  # placement among nearby gaps done (or not needed)
    rechecked: bool = False               # forced: re-tracked without it after a fit


def _scan(data: _PhaseData, chains, barriers, settings, rng, known_gaps=None,
          search_pass=1) -> tuple[list[_Accepted], dict, list[str]]:
    """Steps 2-3: accept gaps one at a time until none is significant."""
    fwd, bwd = chains
    r_fwd = data.frac + fwd.offsets     # residual phases numbered by each chain
    r_bwd = data.frac + bwd.offsets
    accepted: list[_Accepted] = []
    barriers = set(barriers)
    threshold = settings.false_alarm_threshold
    limit = {}
    notes: list[str] = []
    f_ref = float(np.median(data.frequency_hz))

    def estimate(win, k, stat_value, fap, known=False):
        stat, d, c, _, _ = gap_statistics(win, r_fwd, r_bwd)
        return _Accepted(gap=int(win.gaps[k]), fap=fap, stat=float(stat_value),
                         df_hz=float(-d[k, 0] / SECONDS_PER_DAY),
                         df_err_hz=float(math.sqrt(c[k, 0, 0]) / SECONDS_PER_DAY),
                         dfdot=float(-d[k, 1] / SECONDS_PER_DAY ** 2), known=known,
                         search_pass=search_pass)

    if known_gaps is not None:
        for gap in known_gaps:
            others = barriers | (set(known_gaps) - {gap})
            win = build_windows(data.t_s, data.sigma, chains, others,
                                settings.window_toas, settings.window_days, data.red)
            hit = np.nonzero(win.gaps == gap)[0]
            if len(hit) == 0:
                mjd = data.spin_epoch_mjd + data.t_s[gap] / SECONDS_PER_DAY
                notes.append(f"known glitch after MJD {mjd:.4f}: too few TOAs on one side to "
                             "measure it from the windows; fitted without a false-alarm "
                             "probability")
                accepted.append(_Accepted(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, dfdot=None, known=True,
                                          search_pass=search_pass))
                continue
            k = int(hit[0])
            stat, *_ = gap_statistics(win, r_fwd, r_bwd)
            null = null_distribution(win, data.null_noise, int(settings.null_trials), rng)
            local = local_survival(null.pooled, float(stat[k]))
            accepted.append(estimate(win, k, stat[k], float(local), known=True))
            if not limit:
                limit = detection_limit(win, threshold_statistic(null, threshold), f_ref)
        return accepted, limit, notes

    for _ in range(MAX_GLITCHES_PER_PASS):
        win = build_windows(data.t_s, data.sigma, chains, barriers,
                            settings.window_toas, settings.window_days, data.red)
        if len(win.gaps) == 0:
            break
        stat, *_ = gap_statistics(win, r_fwd, r_bwd)
        k = int(np.argmax(stat))
        # a short null run settles clear cases; borderline ones get the full run
        trials = int(settings.null_trials)
        null = null_distribution(win, data.null_noise, min(trials, QUICK_NULL_TRIALS), rng)
        fap = false_alarm_probability(null, float(stat[k]))
        if trials > QUICK_NULL_TRIALS and threshold / 30 < fap < min(0.5, 30 * threshold):
            null = null_distribution(win, data.null_noise, trials, rng)
            fap = false_alarm_probability(null, float(stat[k]))
        if not limit:
            limit = detection_limit(win, threshold_statistic(null, threshold), f_ref)
        if fap > threshold:
            break
        accepted.append(estimate(win, k, stat[k], fap))
        barriers.add(int(win.gaps[k]))
    return accepted, limit, notes


# ---------------------------------------------------------------------------- numbering

def _emission_mjd(model: TimingModel, t_s):
    return model.spin.epoch_day + model.spin.epoch_frac + np.asarray(t_s) / SECONDS_PER_DAY


def _epoch_decimal(model: TimingModel, t_s: float) -> Decimal:
    """Spin epoch + t_s as an exact-enough decimal MJD (1e-12 day = 86 ns)."""
    value = (Decimal(int(model.spin.epoch_day)) + Decimal(repr(model.spin.epoch_frac))
             + Decimal(repr(float(t_s))) / Decimal(86400))
    return value.quantize(Decimal("1e-12"))


def _glitch_t_s(model: TimingModel, g: Glitch) -> float:
    return ((g.epoch_day - model.spin.epoch_day) * SECONDS_PER_DAY
            + (g.epoch_frac - model.spin.epoch_frac) * SECONDS_PER_DAY)


def _spin_frequency_at(model: TimingModel, t_s):
    """Spin frequency (Hz) of the model's Taylor series t_s seconds from its epoch."""
    f = model.spin.frequency.value
    term = 1.0
    for k, p in enumerate(model.spin.derivatives, start=1):
        term = term * t_s / k
        f = f + p.value * term
    return f


def _spin_fdot_at(model: TimingModel, t_s):
    out = 0.0
    term = 1.0
    for k, p in enumerate(model.spin.derivatives):
        if k > 0:
            term = term * t_s / k
        out = out + p.value * term
    return out


def _free_names(model: TimingModel):
    names = list(model.free_names)
    for p in [model.spin.frequency, *model.spin.derivatives[:1]]:
        if p.name not in names:
            names.append(p.name)
    for g in model_glitches(model):
        for p in g.parameters():
            if p.free and p.name not in names:
                names.append(p.name)
    return names


def _sections_of(model: TimingModel) -> list[dict]:
    out = []
    for g in model_glitches(model):
        out.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                  g.frequency_derivative_step.value, g.decays))
    return out


def _rebuild(model: TimingModel, sections: list[dict], free_by_epoch: dict) -> TimingModel:
    """Copy of ``model`` with glitches ``sections``; free flags per glitch
    epoch (Decimal) -> set of keys."""
    new = model.copy()
    set_glitches(new, sections)
    for g in model_glitches(new):
        keys = free_by_epoch.get(g.epoch, set())
        for p in g.parameters():
            p.free = p.key in keys
    return new


def _glitch_keys(decays: int) -> set:
    keys = {"phase_step", "frequency_step_hz", "frequency_derivative_step"}
    if decays:
        keys |= {DECAY_AMPLITUDE, DECAY_TIME}
    return keys


def _carry_pulses(old: TimingModel, new: TimingModel, obs, reference, pulse):
    """Pulse numbers for ``new`` from those pinned for ``old``: the counts are
    data, but a glitch moved across TOAs (or a phase step changed by whole
    turns) changes how many turns the model gives them; the integers follow
    the change of the model phase, the fractions stay for the fit to judge."""
    a = old.evaluate(obs, reference)
    b = new.evaluate(obs, reference)
    change = (b.phase_int - a.phase_int) + (b.phase_frac - a.phase_frac)
    return np.asarray(pulse, dtype=np.int64) + np.round(change).astype(np.int64)


def _fit(model, obs, reference, pulse=None) -> FitResult:
    """Fit with the search's free parameters; ``pulse`` pins pulse numbers
    (None: numbered from the model, ignoring any table column)."""
    toas = dataclasses.replace(obs.toas, pulse=None if pulse is None
                               else np.asarray(pulse, dtype=np.int64))
    return fit(model, dataclasses.replace(obs, toas=toas), free=_free_names(model),
               reference=reference)


def _glitch_at(model: TimingModel, epoch: Decimal) -> Glitch:
    return next(g for g in model_glitches(model) if g.epoch == epoch)


def _free_flags(model: TimingModel) -> dict:
    return {g.epoch: {p.key for p in g.parameters() if p.free} for g in model_glitches(model)}


def _try_decay(res: FitResult, obs, reference, pulse, epoch, settings, span_after_days):
    """The fit with one more decaying term on the glitch at ``epoch`` when it
    is significant (likelihood ratio above the search threshold, divided over
    the time-scale grid; amplitude > 3 sigma; time-scale bounded), else None."""
    base = res
    best = None
    for days in settings.decay_grid_days:
        if days > 3 * span_after_days:
            continue
        sections = _sections_of(base.model)
        i = model_glitches(base.model).index(_glitch_at(base.model, epoch))
        g = _glitch_at(base.model, epoch)
        sections[i] = glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                     g.frequency_derivative_step.value,
                                     list(g.decays) + [(0.0, days)])
        free = _free_flags(base.model)
        free[epoch] = _glitch_keys(0) | {DECAY_AMPLITUDE}
        trial = _rebuild(base.model, sections, free)
        _hold_decay_times(trial, epoch)
        try:
            fitted = _fit(trial, obs, reference, pulse)
        except FitError:
            continue
        if best is None or fitted.chi2 < best.chi2:
            best = fitted
    if best is None:
        return None
    free = _free_flags(best.model)
    free[epoch] = _glitch_keys(1)
    trial = _rebuild(best.model, _sections_of(best.model), free)
    try:
        fitted = _fit(trial, obs, reference, pulse)
    except FitError:
        return None
    g = _glitch_at(fitted.model, epoch)
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


def _hold_decay_times(model, epoch):
    """Time-scales of the glitch at ``epoch`` held fixed (the grid step)."""
    g = _glitch_at(model, epoch)
    for p in g.decay_times:
        p.free = False


def _add_decays(res, accepted, obs, reference, pulse, settings):
    """One decaying term tried on each glitch in ``accepted`` (in turn)."""
    for acc in accepted:
        if acc.forced:
            continue
        t_g = _glitch_t_s(res.model, _glitch_at(res.model, acc.epoch))
        later = [_glitch_t_s(res.model, g) for g in model_glitches(res.model)]
        later = [t for t in later if t > t_g + 1.0]
        end = min(later) if later else float(np.max(_phase_data(res.model, obs, reference).t_s))
        better = _try_decay(res, obs, reference, pulse, acc.epoch, settings,
                            (end - t_g) / SECONDS_PER_DAY)
        if better is not None:
            res = better
    return res


def _placement_fit(res: FitResult, epoch, gap: int, data: _PhaseData, obs, reference, pulse):
    """The fit with the glitch at ``epoch`` moved to the middle of ``gap``
    (pulse numbers pinned): (fit, chi2 with the phase-continuity penalty,
    zero-phase-step epoch (s), its variance (s^2), new epoch) or None."""
    model = res.model
    g = _glitch_at(model, epoch)
    t_a, t_b = float(data.t_s[gap]), float(data.t_s[gap + 1])
    t_mid = 0.5 * (t_a + t_b)
    sections = _sections_of(model)
    # carry the glitch to the new epoch unchanged in its predictions after it; the
    # pulse counts of the TOAs that change sides follow the carried model
    new_sec = _transported(model, g, t_mid, None)
    new_epoch = new_sec["epoch_mjd"]
    sections[model_glitches(model).index(g)] = new_sec
    free = _free_flags(model)
    free[new_epoch] = free.pop(epoch)
    trial = _rebuild(model, sections, free)
    moved_pulse = _carry_pulses(model, trial, obs, reference, pulse)
    try:
        fitted = _fit(trial, obs, reference, moved_pulse)
    except FitError:
        return None
    h = _glitch_at(fitted.model, new_epoch)
    t_new, step, n_roots, spread, _ = _refine_epoch(fitted.model, h, t_a, t_b)
    sig = h.phase_step.uncertainty
    penalty = (step / sig) ** 2 if sig else 0.0
    df_inst = h.frequency_step.value + sum(a for a, _ in h.decays)
    uniform = (t_b - t_a) ** 2 / 12.0
    fitted_var = (sig / df_inst) ** 2 if (sig and df_inst) else uniform
    var = (min(fitted_var, uniform) + spread) if n_roots else uniform
    return fitted, fitted.chi2 + penalty, t_new, var, new_epoch, moved_pulse


def _localise(res: FitResult, acc: _Accepted, data: _PhaseData, obs, reference,
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
        tried[j] = _placement_fit(res, acc.epoch, j, data, obs, reference, pulse)

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


def _refine_epochs(res: FitResult, accepted, obs, reference, pulse):
    """Move each new glitch to the epoch in its bracket that zeroes the phase
    step (module docstring), then refit with pulses numbered by that model."""
    data = _phase_data(res.model, obs, reference)
    sections = []
    moved = {}
    for g in model_glitches(res.model):
        acc = next((a for a in accepted if a.epoch == g.epoch), None)
        if acc is None:
            sections.append(glitch_section(g.epoch, g.phase_step.value, g.frequency_step.value,
                                           g.frequency_derivative_step.value, g.decays))
            continue
        j = int(np.searchsorted(data.t_s, _glitch_t_s(res.model, g)) - 1)
        t_a, t_b = float(data.t_s[j]), float(data.t_s[j + 1])
        _, _, n_roots, spread, sec = _refine_epoch(res.model, g, t_a, t_b)
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
    free = {moved.get(e, e): keys for e, keys in _free_flags(res.model).items()}
    for acc in accepted:
        acc.epoch = moved.get(acc.epoch, acc.epoch)
    refined = _rebuild(res.model, sections, free)
    pulse = _carry_pulses(res.model, refined, obs, reference, pulse)
    return _fit(refined, obs, reference, pulse), pulse


def _refine_epoch(model: TimingModel, g: Glitch, t_a: float, t_b: float):
    """Epoch in [t_a, t_b] (s since the spin epoch) where the glitch phase
    step vanishes modulo whole turns. Moving the epoch within the bracket
    changes no prediction when the phase step becomes the glitch phase there
    and the steps are carried along (df' = df + dfdot d, decaying amplitude
    times exp(-d/tau)). Returns (t_new, phase_step_new, number of such
    epochs in the gap, their mean square distance from t_new (s^2; the gap's
    uniform variance when there is none), section at the new epoch)."""
    t_e = _glitch_t_s(model, g)
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
    return t_new, step, len(distinct), spread, _transported(model, g, t_new, step)


def _transported(model: TimingModel, g: Glitch, t_new: float, phase_step: float | None) -> dict:
    """Section of glitch ``g`` moved to ``t_new`` (s since the spin epoch) with
    the same predictions after both epochs: df' = df + dfdot d, decaying
    amplitudes times exp(-d/tau), phase step = the glitch phase at t_new
    (or ``phase_step``, which differs from it by whole turns)."""
    delta = t_new - _glitch_t_s(model, g)
    df = g.frequency_step.value + g.frequency_derivative_step.value * delta
    decays = [(a * math.exp(-delta / (d * SECONDS_PER_DAY)), d) for a, d in g.decays]
    step = float(g.phase_after(delta)) if phase_step is None else phase_step
    return glitch_section(_epoch_decimal(model, t_new), step, df,
                          g.frequency_derivative_step.value, decays)


def _glitch_uncertainties(res: FitResult, g: Glitch, acc: _Accepted) -> dict:
    """Uncertainties of the steps with the epoch's propagated: the fit holds
    the epoch fixed and frees the phase step; equivalently the phase step is
    zero and the epoch moves by d = -phase_step / (glitch frequency change at
    the epoch), which carries df by dfdot d and each decaying amplitude by
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
    m = 3 + len(g.decays)      # rows: df, dfdot, epoch, decaying amplitudes
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


def _select(candidates: list[_Accepted], data: _PhaseData, everything: bool):
    """(accepted now, waiting): see the comment in :func:`search_glitches`."""
    if everything or not candidates:
        return list(candidates), []
    accepted, waiting = [candidates[0]], []
    for cand in candidates[1:]:
        t = data.t_s[cand.gap]
        shadowed = any(
            0 < t - data.t_s[a.gap] < DEFER_DAYS * SECONDS_PER_DAY
            and a.df_hz is not None and cand.df_hz is not None
            and abs(cand.df_hz) < DEFER_RATIO * abs(a.df_hz) for a in accepted)
        (waiting if shadowed else accepted).append(cand)
    return accepted, waiting


def _sync_gaps(found: list[_Accepted], model: TimingModel, data: _PhaseData) -> set[int]:
    """Each glitch's gap in ``data`` from its model epoch; the set of all
    glitch gaps of the model."""
    for acc in found:
        if acc.epoch is not None:
            acc.gap = int(np.searchsorted(data.t_s, _glitch_t_s(model, _glitch_at(model,
                                                                               acc.epoch))) - 1)
    return {int(np.searchsorted(data.t_s, _glitch_t_s(model, g)) - 1)
            for g in model_glitches(model)}


def _settle(res: FitResult, found: list[_Accepted], obs, reference, pulse, settings):
    """After a pass's fit: decaying terms for the glitches new in it; placement
    among nearby gaps for those not yet placed, when the model fits (reduced
    chi-square at most ADEQUATE_REDUCED_CHI2: otherwise glitches not yet
    found, or timing noise, would drive the choice); then epochs where the
    phase steps vanish."""
    data = _phase_data(res.model, obs, reference)
    if settings.fit_decays:
        res = _add_decays(res, [a for a in found if not (a.decay_tried or a.forced)], obs,
                          reference, pulse, settings)
    for acc in found:
        acc.decay_tried = True
    if res.reduced_chi2 <= ADEQUATE_REDUCED_CHI2:
        barriers = _sync_gaps(found, res.model, data)
        for acc in found:
            if not (acc.placed or acc.forced or acc.known):
                before = acc.gap
                res, pulse = _localise(res, acc, data, obs, reference, barriers, pulse)
                barriers = (barriers - {before}) | {acc.gap}
            acc.placed = True
    _sync_gaps(found, res.model, data)
    res, pulse = _refine_epochs(res, found, obs, reference, pulse)
    return res, pulse


def _drop_unneeded_forced(res: FitResult, found: list[_Accepted], obs, reference, pulse,
                          settings, ranges, warnings):
    """Forced glitches (connection lost before the other glitches' decaying terms
    and frequency-derivative steps were in the model: a local quadratic cannot
    follow a post-glitch recovery) re-checked once the fit holds them: one whose
    frequency step is below FORCED_STEP_Z sigma is dropped when the pulses,
    re-tracked against the fitted model without it, connect across its gap and
    the fit without it is not worse by more than the search threshold
    (likelihood ratio, chi-square with its free parameters as degrees of freedom)."""
    for acc in [a for a in found if a.forced and not a.rechecked and a.epoch is not None]:
        acc.rechecked = True
        g = _glitch_at(res.model, acc.epoch)
        step, err = g.frequency_step.value, g.frequency_step.uncertainty
        if not err or abs(step) > FORCED_STEP_Z * err:
            continue
        n_free = sum(1 for p in g.parameters() if p.free)
        sections = [s for s, h in zip(_sections_of(res.model), model_glitches(res.model))
                    if h.epoch != acc.epoch]
        free = _free_flags(res.model)
        free.pop(acc.epoch, None)
        trial = _rebuild(res.model, sections, free)
        try:
            # the same counts first (the fit moves the other terms into place), then a
            # fresh numbering against that fit, which must connect across the gap
            first = _fit(trial, obs, reference, _carry_pulses(res.model, trial, obs,
                                                              reference, pulse))
            data = _phase_data(first.model, obs, reference)
            f_range, fdot_range = ranges
            chains = (track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range),
                      track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range,
                                   backward=True))
            barriers = {int(np.searchsorted(data.t_s, _glitch_t_s(first.model, h)) - 1)
                        for h in model_glitches(first.model)}
            offsets, keep, forced = number_pulses(data, chains, barriers, [])
            if forced or not np.all(keep):
                continue
            new_pulse = np.empty(len(obs), dtype=np.int64)
            new_pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
            fitted = _fit(first.model, obs, reference, new_pulse)
        except FitError:
            continue
        threshold = scipy.stats.chi2.isf(settings.false_alarm_threshold, max(n_free, 1))
        scale = max(1.0, res.reduced_chi2)
        if not fitted.converged or (fitted.chi2 - res.chi2) / scale >= threshold:
            continue
        found.remove(acc)
        res, pulse = fitted, new_pulse
    if not any(a.forced for a in found) and LOST_CONNECTION_WARNING in warnings:
        warnings[:] = [w for w in warnings if w != LOST_CONNECTION_WARNING]
        warnings.append("phase connection was lost in a gap before the decaying terms of the "
                        "glitches were fitted; with them in the model it holds, so no glitch "
                        "was forced there")
    return res, pulse


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
    f_range, fdot_range = _ranges(model, settings)
    current = model.copy()
    use_obs = obs
    spin_epoch = current.spin.epoch_day + current.spin.epoch_frac
    known_t = None
    if settings.known_epochs_mjd:
        known_t = sorted((float(Decimal(str(e))) - spin_epoch) * SECONDS_PER_DAY
                         for e in settings.known_epochs_mjd)
    found: list[_Accepted] = []
    detection: dict = {}
    result_fit: FitResult | None = None
    dropped = 0
    for search_pass in range(1, max(1, int(settings.passes)) + 1):
        data = _phase_data(current, use_obs, reference)
        n = len(data.t_s)
        existing = [int(np.searchsorted(data.t_s, _glitch_t_s(current, g)) - 1)
                    for g in model_glitches(current)]
        existing = [b for b in existing if 0 <= b < n - 1]
        chains = (track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range),
                  track_phases(data.t_s, data.frac, data.sigma, f_range, fdot_range,
                               backward=True))
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
                                     " is outside the span of the TOAs", field="--known-epochs")
                known_gaps.append(j)
            known_gaps = sorted(set(known_gaps))
        accepted, limit, notes = _scan(data, chains, existing, settings, rng, known_gaps,
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
                        result_fit = _fit(current, use_obs, reference, pulse)
                        current = result_fit.model
                    except FitError:
                        result_fit = None
            break
        # The most significant candidate is accepted, and with it every other one
        # except those just after a much larger glitch accepted now: there, unmodelled
        # decaying terms mimic small steps, so they wait until the larger glitch's
        # decay has been fitted. Pulses that cannot be numbered across a waiting
        # candidate promote it (a hard sign of a large glitch).
        accepted, pending = _select(accepted, data, known_t is not None)
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
                accepted.append(_Accepted(gap=gap, fap=None, stat=None, df_hz=None,
                                          df_err_hz=None, dfdot=None, forced=True,
                                          search_pass=search_pass))
                barriers.add(gap)
                warnings.append(LOST_CONNECTION_WARNING)
            failed_before.add(gap)
        sections = _sections_of(current)
        free = _free_flags(current)
        for acc in accepted:
            t_mid = 0.5 * (data.t_s[acc.gap] + data.t_s[acc.gap + 1])
            acc.epoch = _epoch_decimal(current, t_mid)
            sections.append(glitch_section(acc.epoch, 0.0, acc.df_hz or 0.0, acc.dfdot or 0.0))
            free[acc.epoch] = _glitch_keys(0)
        trial = _rebuild(current, sections, free)
        pulse = np.empty(len(use_obs), dtype=np.int64)
        pulse[data.order] = (data.phase_int - offsets).astype(np.int64)
        if not np.all(keep):
            kept = np.sort(data.order[keep])
            dropped += len(use_obs) - len(kept)
            use_obs, pulse = use_obs.select(kept), pulse[kept]
            data = _phase_data(current, use_obs, reference)
        found.extend(accepted)
        res = _fit(trial, use_obs, reference, pulse)
        res, pulse = _settle(res, found, use_obs, reference, pulse, settings)
        res, pulse = _drop_unneeded_forced(res, found, use_obs, reference, pulse, settings,
                                           (f_range, fdot_range), warnings)
        current, result_fit = res.model, res
        if known_t is not None:
            break
    if result_fit is None:
        try:
            result_fit = _fit(current, use_obs, reference)
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
    candidates = _candidates(current, result_fit, found)
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


def _candidates(model, res, found: list[_Accepted]) -> list[GlitchCandidate]:
    if res is None or not found:
        return []
    out = []
    for acc in found:
        g = next((g for g in model_glitches(model) if g.epoch == acc.epoch), None)
        if g is None or acc.bracket is None:
            continue
        t_a, t_b, text_a, text_b = acc.bracket
        unc = _glitch_uncertainties(res, g, acc)
        t_g = _glitch_t_s(model, g)
        f_here = float(_spin_frequency_at(model, t_g))
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
            epoch_min_mjd=float(_emission_mjd(model, t_a)),
            epoch_max_mjd=float(_emission_mjd(model, t_b)),
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
            known=acc.known, forced=acc.forced, search_pass=acc.search_pass))
    out.sort(key=lambda c: c.epoch_mjd)
    return out


def _track_and_residuals(model, obs, reference, settings, res):
    """Residuals of the fitted model without its glitch terms (µs, with the
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
    mjd = _emission_mjd(model, t)
    # the track: windows inside the intervals between glitches
    ts = t[order]
    r = phase[order]
    sigma = (err_us * 1e-6 * f)[order]
    glitch_t = sorted(_glitch_t_s(model, g) for g in model_glitches(model))
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
                         _spin_fdot_at(bare, tc) - params[2] / SECONDS_PER_DAY ** 2,
                         math.sqrt(cov[2, 2]) / SECONDS_PER_DAY ** 2))
    rows = np.array(rows) if rows else np.zeros((0, 5))
    track = FrequencyTrack(mjd=_emission_mjd(model, rows[:, 0]), frequency_offset_hz=rows[:, 1],
                           frequency_err_hz=rows[:, 2], frequency_derivative=rows[:, 3],
                           frequency_derivative_err=rows[:, 4])
    return track, (mjd, resid_us, err_us)


__all__ = ["GlitchSearchSettings", "GlitchCandidate", "GlitchSearchResult", "FrequencyTrack",
           "search_glitches", "track_phases", "solve_seed", "number_pulses", "TrackingChain",
           "build_windows", "gap_statistics", "GapWindows", "null_distribution",
           "NullDistribution", "NullNoise", "false_alarm_probability", "detection_limit",
           "search_assumptions", "white_errors_us",
           "DEFAULT_WINDOW_TOAS", "DEFAULT_MIN_SIGNIFICANCE", "ASSUMPTIONS"]
