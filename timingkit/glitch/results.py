"""What the glitch search takes and reports: its settings, candidates, frequency track and
result, and the assumptions stated with them (units in ``UNITS``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from decimal import Decimal

import numpy as np
import scipy.special
import scipy.stats

from timingkit.fit.least_squares import FitResult
from timingkit.formats.errors import InputError
from timingkit.geometry.observations import Observations
from timingkit.glitch.tracking import MIN_WINDOW_TOAS
from timingkit.model.noise import NoiseModel
from timingkit.model.timing_model import TimingModel

DECAY_GRID_DAYS = (10.0, 30.0, 100.0, 300.0)
MAX_PASSES = 12                    # passes of scan + fit until nothing new is found
DEFAULT_WINDOW_TOAS = 10
DEFAULT_MIN_SIGNIFICANCE = 3.0     # sigma (two-sided Gaussian tail of the global FAP)
DEFAULT_NULL_TRIALS = 1000
QUICK_NULL_TRIALS = 250            # first null run; the full one only for borderline cases
DEFAULT_MAX_FRACTIONAL_STEP = 2e-5  # largest reconnectable step, fraction of the frequency
LOST_CONNECTION_WARNING = ("phase connection was lost in a gap with no significant glitch: a "
                           "glitch was fitted there to keep the solution connected (flagged "
                           "forced_by_lost_connection)")


NOT_CONVERGED_NOTE = ("NOT CONVERGED: the final fit with these glitches stopped with its "
                      "parameters still moving; the steps and uncertainties are not a solution")


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
                             field="window_toas/window_days")
        if self.window_toas is None and self.window_days is None:
            self.window_toas = DEFAULT_WINDOW_TOAS
        if self.window_toas is not None and (int(self.window_toas) != self.window_toas
                                             or self.window_toas < MIN_WINDOW_TOAS):
            raise InputError(f"window must be an integer of at least {MIN_WINDOW_TOAS} TOAs, "
                             f"found {self.window_toas}", field="window_toas")
        if self.window_days is not None and not (self.window_days > 0 and
                                                 math.isfinite(self.window_days)):
            raise InputError(f"window must be > 0 days, found {self.window_days}",
                             field="window_days")
        if not (self.min_significance > 0 and math.isfinite(self.min_significance)):
            raise InputError(f"minimum significance must be > 0 sigma, found "
                             f"{self.min_significance}", field="min_significance")
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
    false_alarm_probability_upper_limit: bool = False
    false_alarm_probability_method: str | None = None
    fitted_steps_chi2: float | None = None      # likelihood ratio of its own fitted steps
    fitted_steps_dof: int | None = None
    decaying_term_tried: bool = False           # an empty decaying_terms: none significant

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
            "false_alarm_probability_upper_limit": self.false_alarm_probability_upper_limit,
            "false_alarm_probability_method": self.false_alarm_probability_method,
            "fitted_steps_chi2": self.fitted_steps_chi2,
            "fitted_steps_dof": self.fitted_steps_dof,
            "permanent_fractional_size": self.permanent_fractional_size,
            "phase_step": self.phase_step, "phase_step_uncertainty": self.phase_step_uncertainty,
            "decaying_terms": self.decaying_terms,
            "decaying_term_tried": self.decaying_term_tried,
            "significance_sigma": self.significance_sigma,
            "significance_lower_limit": self.false_alarm_probability_upper_limit,
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
         "decay_time_days": "days",
         "false_alarm_probability": "global, for the whole search, from noise simulations "
                                    "(never below 1/(trials + 1); an upper limit when flagged); "
                                    "per gap for a known epoch",
         "fitted_steps_chi2": "chi-square increase without the glitch (scaled by the reduced "
                              "chi-square when above 1), fitted_steps_dof degrees of freedom"}


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

    @property
    def converged(self) -> bool:
        """Whether the final fit converged (no fit: nothing to mark)."""
        return self.fit is None or bool(self.fit.converged)

    def to_json(self) -> dict:
        warnings = list(self.warnings)
        if not self.converged:
            warnings.insert(0, NOT_CONVERGED_NOTE)
        return {"converged": self.converged,
                "candidates": [c.to_json() for c in self.candidates],
                "units": UNITS, "detection_limit": self.detection_limit,
                "settings": self.settings.as_dict(), "assumptions": self.assumptions,
                "null_noise": self.null_noise,
                "toas_used": int(len(self.obs)), "toas_left_out": int(self.dropped_toas),
                "warnings": warnings}
