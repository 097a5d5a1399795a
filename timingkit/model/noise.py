"""Noise sections of the timing model: white-noise scaling per TOA group and
stationary power-law red timing noise on a Fourier basis.

Model-file sections (all optional)::

    [[white_noise]]                 # one table per group of TOAs
    flag = "backend"                # a TOA flag column, or "site"; omit for "all other TOAs"
    value = "wide-a"
    error_scale = 1.1               # multiplies the TOA uncertainty
    added_error_us = 0.3            # added in quadrature, µs

    [red_noise]
    amplitude_log10 = -12.5         # log10 of the dimensionless amplitude A
    spectral_index = 4.0            # gamma
    corner_frequency_per_yr = 0.0   # optional low-frequency turnover (0 = pure power law)
    frequencies = 30                # Fourier frequencies j / span, j = 1..frequencies
    span_days = 3650.0              # optional: span of the basis (default: the data span)

White noise: ``sigma' = sqrt((error_scale * sigma)^2 + added_error_us^2)``.

Red noise: one-sided power spectral density of the timing residual (s^2/Hz)

    P(f) = A^2 / (12 pi^2) * f_yr^-3 * ((f^2 + f_c^2) / f_yr^2)^(-gamma/2),   f_yr = 1/yr,

the power-law convention of the pulsar-timing literature for a residual
spectrum (e.g. van Haasteren & Vallisneri 2014, MNRAS 446, 1170, which also
gives the Fourier-basis representation used here); with f_c = 0 it is the
pure power law A^2/(12 pi^2) f_yr^(gamma-3) f^-gamma. The process is
represented by sine and cosine columns at f_j = j/T (T = span) whose
coefficients are independent, zero-mean Gaussians of variance
phi_j = P(f_j) / T (s^2), so that sum_j phi_j approximates the integral of
P over f >= 1/T. Power below 1/T is absorbed by the spin frequency and its
derivative, which every fit of a spinning-down pulsar includes.

These sections contribute "noise": they contribute parameters (dotted names
``white_noise.<i>.error_scale``, ``white_noise.<i>.added_error_us``,
``red_noise.amplitude_log10``, ``red_noise.spectral_index``) but no delay or
phase; :class:`NoiseModel` collects them for the fitter and the simulator.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.model.base import ModelSection
from timingkit.model.flag_groups import SITE_FLAG, group_mask, toa_table_of
from timingkit.model.parameters import Parameter
from timingkit.model.timing_model import OPTIONAL_SECTIONS
from timingkit.formats.model_file import Key, reject_repeated_groups, table_list, take_section

SECONDS_PER_YEAR = 365.25 * 86400.0        # Julian year
ONE_PER_YEAR_HZ = 1.0 / SECONDS_PER_YEAR
MAX_FREQUENCIES = 1000

WHITE_NOISE_KEYS = {
    "flag": Key("text", default=None),
    "value": Key("text", default=None),
    "error_scale": Key("number", default=1.0),
    "added_error_us": Key("number", default=0.0, unit="us"),
}

RED_NOISE_KEYS = {
    "amplitude_log10": Key("number", required=True),
    "spectral_index": Key("number", required=True),
    "corner_frequency_per_yr": Key("number", default=0.0, unit="1/yr", high=1e3),
    "frequencies": Key("integer", default=30),
    # a span below a day cannot hold a red-noise basis of TOAs (common practice: years)
    "span_days": Key("number", default=None, unit="d", low=1.0, high=1e6),
}

# legal ranges (used to validate model files and as the search bounds of the
# maximum-likelihood noise fit)
BOUNDS = {
    "error_scale": (1e-3, 1e3),
    "added_error_us": (0.0, 1e7),
    "amplitude_log10": (-30.0, 0.0),
    "spectral_index": (0.0, 15.0),
}


# ------------------------------------------------------------- the physics

def power_law_psd(freq_hz, amplitude_log10: float, spectral_index: float,
                  corner_frequency_hz: float = 0.0) -> np.ndarray:
    """One-sided power spectral density of the residual, s^2/Hz, at ``freq_hz``
    (module docstring)."""
    f = np.asarray(freq_hz, dtype=float)
    amp2 = 10.0 ** (2.0 * amplitude_log10)
    x2 = (f ** 2 + corner_frequency_hz ** 2) / ONE_PER_YEAR_HZ ** 2
    return amp2 / (12.0 * math.pi ** 2) * ONE_PER_YEAR_HZ ** -3 * x2 ** (-0.5 * spectral_index)


def fourier_frequencies_hz(span_s: float, count: int) -> np.ndarray:
    """f_j = j / span, j = 1..count (Hz)."""
    return np.arange(1, count + 1) / span_s


def fourier_basis(times_s: np.ndarray, span_s: float, count: int) -> np.ndarray:
    """(N, 2*count) columns sin(2 pi f_j t), cos(2 pi f_j t), interleaved per
    frequency; ``times_s`` from any fixed origin (the first TOA)."""
    # harmonics as powers of exp(i 2 pi t / span): one complex exponential per
    # TOA instead of 2 * count sines and cosines; the rounding error grows
    # like j * 1e-16, far below anything that matters for a noise basis
    t = np.asarray(times_s, dtype=float)
    fundamental = np.exp(2j * math.pi * (t / span_s))
    powers = np.cumprod(np.broadcast_to(fundamental[:, None], (len(t), count)), axis=1)
    basis = np.empty((len(t), 2 * count))
    basis[:, 0::2] = powers.imag
    basis[:, 1::2] = powers.real
    return basis


def fourier_prior_variances(span_s: float, count: int, amplitude_log10: float,
                            spectral_index: float, corner_frequency_hz: float = 0.0) -> np.ndarray:
    """Variance (s^2) of each Fourier coefficient, phi_j = P(f_j) / span, in the
    column order of :func:`fourier_basis`."""
    freqs = fourier_frequencies_hz(span_s, count)
    phi = power_law_psd(freqs, amplitude_log10, spectral_index, corner_frequency_hz) / span_s
    return np.repeat(phi, 2)


def scaled_errors_us(err_us: np.ndarray, group_index: np.ndarray, error_scales,
                     added_errors_us) -> np.ndarray:
    """sigma' = sqrt((scale_g sigma)^2 + added_g^2) for each TOA's group g
    (group index -1: unchanged)."""
    err_us = np.asarray(err_us, dtype=float)
    scale = np.append(np.asarray(error_scales, dtype=float), 1.0)[group_index]
    added = np.append(np.asarray(added_errors_us, dtype=float), 0.0)[group_index]
    return np.sqrt((scale * err_us) ** 2 + added ** 2)


# ------------------------------------------------------------- sections

class WhiteNoiseGroup(ModelSection):
    """Error scale factor and quadrature term for TOAs whose ``flag`` equals ``value``."""

    section = "white_noise"
    contribution = "noise"
    array_section = True

    def __init__(self, section: dict, path: str | None, index: int):
        where = f"white_noise.{index}"
        s = take_section(section, where, WHITE_NOISE_KEYS, path)
        unc = s.get("uncertainty", {})
        self.array_index = index
        self.flag = s["flag"]
        self.value = s["value"]
        if (self.flag is None) != (self.value is None):
            raise InputError("give both 'flag' and 'value' (or neither, for all TOAs not in "
                             "another group)", path=path, field=f"{where}.flag")
        for key in ("error_scale", "added_error_us"):
            lo, hi = BOUNDS[key]
            if not lo <= s[key] <= hi:
                raise InputError(f"{key} must lie in [{lo:g}, {hi:g}], found {s[key]!r}",
                                 path=path, field=f"{where}.{key}")
        self.error_scale = Parameter(f"{where}.error_scale", s["error_scale"], "",
                                     uncertainty=unc.get("error_scale"), key="error_scale",
                                     description=f"error scale factor ({self.label})")
        self.added_error = Parameter(f"{where}.added_error_us", s["added_error_us"], "us",
                                     uncertainty=unc.get("added_error_us"), key="added_error_us",
                                     description=f"error added in quadrature ({self.label})")

    @property
    def label(self) -> str:
        return "all other TOAs" if self.flag is None else f"{self.flag} = {self.value}"

    def parameters(self):
        return [self.error_scale, self.added_error]

    def apply(self, ev) -> None:   # noise adds no delay
        return None

    def to_section(self) -> dict:
        out = {}
        if self.flag is not None:
            out["flag"] = self.flag
            out["value"] = self.value
        out["error_scale"] = float(self.error_scale.value)
        out["added_error_us"] = float(self.added_error.value)
        return out


class RedNoise(ModelSection):
    """Stationary power-law red timing noise (module docstring)."""

    section = "red_noise"
    contribution = "noise"

    def __init__(self, section: dict, path: str | None):
        s = take_section(section, "red_noise", RED_NOISE_KEYS, path)
        unc = s.get("uncertainty", {})
        for key in ("amplitude_log10", "spectral_index"):
            lo, hi = BOUNDS[key]
            if not lo <= s[key] <= hi:
                raise InputError(f"{key} must lie in [{lo:g}, {hi:g}], found {s[key]!r}",
                                 path=path, field=f"red_noise.{key}")
        if not 1 <= s["frequencies"] <= MAX_FREQUENCIES:
            raise InputError(f"frequencies must be 1..{MAX_FREQUENCIES}, found {s['frequencies']}",
                             path=path, field="red_noise.frequencies")
        if not (math.isfinite(s["corner_frequency_per_yr"]) and s["corner_frequency_per_yr"] >= 0):
            raise InputError("corner_frequency_per_yr must be >= 0", path=path,
                             field="red_noise.corner_frequency_per_yr")
        if s["span_days"] is not None and not (math.isfinite(s["span_days"]) and s["span_days"] > 0):
            raise InputError("span_days must be > 0", path=path, field="red_noise.span_days")
        self.amplitude = Parameter("red_noise.amplitude_log10", s["amplitude_log10"], "",
                                   uncertainty=unc.get("amplitude_log10"),
                                   description="log10 red-noise amplitude (dimensionless)")
        self.spectral_index = Parameter("red_noise.spectral_index", s["spectral_index"], "",
                                        uncertainty=unc.get("spectral_index"),
                                        description="red-noise spectral index")
        self.corner_frequency_per_yr = s["corner_frequency_per_yr"]
        self.frequencies = s["frequencies"]
        self.span_days = s["span_days"]

    def parameters(self):
        return [self.amplitude, self.spectral_index]

    def apply(self, ev) -> None:   # noise adds no delay
        return None

    @property
    def corner_frequency_hz(self) -> float:
        return self.corner_frequency_per_yr * ONE_PER_YEAR_HZ

    def span_s(self, data_span_s: float) -> float:
        return data_span_s if self.span_days is None else self.span_days * 86400.0

    def prior_variances(self, span_s: float, amplitude_log10: float | None = None,
                        spectral_index: float | None = None) -> np.ndarray:
        a = self.amplitude.value if amplitude_log10 is None else amplitude_log10
        g = self.spectral_index.value if spectral_index is None else spectral_index
        return fourier_prior_variances(span_s, self.frequencies, a, g, self.corner_frequency_hz)

    def psd(self, freq_hz) -> np.ndarray:
        return power_law_psd(freq_hz, self.amplitude.value, self.spectral_index.value,
                             self.corner_frequency_hz)

    def to_section(self) -> dict:
        out = {"amplitude_log10": float(self.amplitude.value),
               "spectral_index": float(self.spectral_index.value)}
        if self.corner_frequency_per_yr:
            out["corner_frequency_per_yr"] = float(self.corner_frequency_per_yr)
        out["frequencies"] = int(self.frequencies)
        if self.span_days is not None:
            out["span_days"] = float(self.span_days)
        return out


def _build_white_noise(value, path, model) -> list[ModelSection]:
    groups = [WhiteNoiseGroup(item, path, i)
              for i, item in enumerate(table_list(value, "white_noise", path))]
    reject_repeated_groups(groups, "white_noise", "groups", path)
    return groups


def _build_red_noise(value, path, model) -> list[ModelSection]:
    return [RedNoise(value, path)]


OPTIONAL_SECTIONS["white_noise"] = _build_white_noise
OPTIONAL_SECTIONS["red_noise"] = _build_red_noise


# ------------------------------------------------------------- the collection

def toa_times_s(obs) -> np.ndarray:
    """TDB seconds of each TOA since the earliest one (the Fourier-basis clock)."""
    mjd = obs.tdb.day + obs.tdb.frac
    first = int(np.argmin(mjd))
    hi, lo = obs.tdb.seconds_since(float(obs.tdb.day[first]), float(obs.tdb.frac[first]))
    return np.asarray(hi, dtype=float) + np.asarray(lo, dtype=float)


@dataclass
class NoiseModel:
    """The noise sections of a timing model, for the fitter and simulator."""

    white: list[WhiteNoiseGroup]
    red: RedNoise | None
    path: str | None = None

    @classmethod
    def from_timing_model(cls, model) -> "NoiseModel":
        comps = model.noise_sections()
        return cls(white=[c for c in comps if isinstance(c, WhiteNoiseGroup)],
                   red=next((c for c in comps if isinstance(c, RedNoise)), None),
                   path=model.path)

    @classmethod
    def from_values(cls, error_scale: float = 1.0, added_error_us: float = 0.0,
                    amplitude_log10: float | None = None, spectral_index: float | None = None,
                    frequencies: int = 30, corner_frequency_per_yr: float = 0.0,
                    span_days: float | None = None) -> "NoiseModel":
        """A noise model for all TOAs from plain numbers (the simulator's options)."""
        white = []
        if error_scale != 1.0 or added_error_us != 0.0:
            white = [WhiteNoiseGroup({"error_scale": _dec(error_scale),
                                      "added_error_us": _dec(added_error_us)}, None, 0)]
        red = None
        if amplitude_log10 is not None:
            if spectral_index is None:
                raise InputError("red noise needs a spectral index as well as an amplitude",
                                 field="spectral_index")
            sec = {"amplitude_log10": _dec(amplitude_log10), "spectral_index": _dec(spectral_index),
                   "frequencies": int(frequencies),
                   "corner_frequency_per_yr": _dec(corner_frequency_per_yr)}
            if span_days is not None:
                sec["span_days"] = _dec(span_days)
            red = RedNoise(sec, None)
        return cls(white=white, red=red)

    @property
    def empty(self) -> bool:
        return not self.white and self.red is None

    def parameters(self) -> list[Parameter]:
        out = []
        for g in self.white:
            out.extend(g.parameters())
        if self.red is not None:
            out.extend(self.red.parameters())
        return out

    def owns(self, name: str) -> bool:
        return any(p.name == name for p in self.parameters())

    def group_index(self, toas) -> np.ndarray:
        """Group number of every TOA (-1: in no group). A TOA matched by two
        flagged groups is an input error; the group without a flag takes every
        TOA no flagged group claims. ``toas``: Observations (a site group then
        takes every name of its site) or a bare ToaTable (timingkit.model.flag_groups)."""
        n = len(toas)
        index = np.full(n, -1, dtype=int)
        default = None
        for g in self.white:
            if g.flag is None:
                default = g.array_index
                continue
            hit = _group_mask(toas, g.flag, g.value, self.path, g.array_index)
            clash = hit & (index >= 0)
            if np.any(clash):
                other = self.white[int(index[clash][0])]
                raise InputError(f"TOAs belong to two white-noise groups ({other.label} and "
                                 f"{g.label}); make the groups disjoint", path=self.path,
                                 field=f"white_noise.{g.array_index}",
                                 quoted=(other.value, g.value))
            index[hit] = g.array_index
        if default is not None:
            index[index < 0] = default
        return index

    def group_counts(self, toas) -> list[int]:
        idx = self.group_index(toas)
        return [int(np.sum(idx == g.array_index)) for g in self.white]

    def white_errors_us(self, toas, group_index: np.ndarray | None = None,
                        values: dict | None = None) -> np.ndarray:
        """Scaled TOA uncertainties (µs); ``values`` overrides parameters by name."""
        values = values or {}
        if group_index is None:
            group_index = self.group_index(toas)
        order = sorted(self.white, key=lambda g: g.array_index)
        scales = [values.get(g.error_scale.name, g.error_scale.value) for g in order]
        added = [values.get(g.added_error.name, g.added_error.value) for g in order]
        # group numbers are array indices 0..k-1 in file order
        return scaled_errors_us(toa_table_of(toas).err_us, group_index, scales, added)

    def red_prior(self, span_s: float, values: dict | None = None) -> np.ndarray:
        values = values or {}
        r = self.red
        return r.prior_variances(span_s, values.get(r.amplitude.name, r.amplitude.value),
                                 values.get(r.spectral_index.name, r.spectral_index.value))

    def red_basis(self, times_s: np.ndarray) -> tuple[np.ndarray, float]:
        """(basis (N, 2m), span_s) for TOAs at ``times_s`` (from the first TOA)."""
        data_span = float(np.max(times_s) - np.min(times_s)) if len(times_s) else 0.0
        span = self.red.span_s(data_span)
        if not span > 0:
            raise InputError("red noise needs TOAs spread over time: the data span is zero",
                             path=self.path, field="red_noise")
        return fourier_basis(times_s, span, self.red.frequencies), span

    def red_realisation_s(self, times_s: np.ndarray, rng: np.random.Generator,
                          span_s: float | None = None) -> np.ndarray:
        """One random realisation of the red process at ``times_s`` (seconds)."""
        if span_s is None:
            basis, span_s = self.red_basis(times_s)
        else:
            basis = fourier_basis(times_s, span_s, self.red.frequencies)
        phi = self.red_prior(span_s)
        return basis @ (rng.normal(0.0, 1.0, len(phi)) * np.sqrt(phi))


    def realisations_s(self, toas, times_s: np.ndarray, rng: np.random.Generator,
                       count: int) -> np.ndarray:
        """``count`` random draws, shape (count, N) in seconds, of the whole
        noise model at these TOAs: white noise of the scaled errors plus the
        red process on its basis (for null distributions under the noise
        model, e.g. of a search statistic)."""
        sigma_s = self.white_errors_us(toas) * 1e-6
        out = rng.standard_normal((count, len(sigma_s))) * sigma_s[None, :]
        if self.red is not None:
            basis, span = self.red_basis(times_s)
            phi = self.red_prior(span)
            out += (rng.standard_normal((count, len(phi))) * np.sqrt(phi)[None, :]) @ basis.T
        return out


def _dec(x: float):
    from decimal import Decimal
    return Decimal(repr(float(x)))


def _group_mask(toas, flag: str, value: str, path, index: int) -> np.ndarray:
    mask = group_mask(toas, flag, value)
    if mask is not None:
        return mask
    legal = [SITE_FLAG, *toa_table_of(toas).flags]
    raise InputError(f"white-noise group selects TOAs by flag {excerpt(flag)}, which the TOA "
                     f"table does not have; columns to choose from: {', '.join(legal)}",
                     path=path, field=f"white_noise.{index}.flag", quoted=(flag,))
