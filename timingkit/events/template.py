"""Pulse-profile templates: a density on [0, 1) of pulse phase, mean 1.

A template is tabulated on 2048 phases and evaluated, with its first two
derivatives, by a periodic cubic spline (scipy.interpolate.CubicSpline),
floored at 1e-6 so its logarithm stays finite. Three sources:

- a template file (the project's ``.npz`` template, timingkit.formats.profile_file,
  the same as for folded radio profiles), resampled by periodic linear
  interpolation of its bin centres;
- wrapped Gaussian components ``gauss:CENTRE:FWHM[:AMPLITUDE]`` (phase units;
  for simulations and tests);
- ``auto``: fitted to folded events, a kernel density estimate with a von
  Mises kernel (whose Fourier coefficients are I_k(kappa)/I_0(kappa)), the
  concentration chosen by leave-one-out likelihood cross-validation on up to
  20,000 events (common practice for choosing a kernel width). Being a
  convolution of the events with a positive kernel, it is positive and
  contains the unpulsed level of the data.
"""

from __future__ import annotations

import math

import numpy as np

from timingkit.formats.errors import InputError

GRID = 2048
FLOOR = 1e-6
KDE_HARMONICS = 256
KDE_EVENTS = 20_000
KDE_WIDTHS = np.geomspace(0.3, 0.003, 40)      # kernel sd, cycles


class PulseTemplate:
    """A template (see the module docstring); ``source`` says where it came from."""

    def __init__(self, values: np.ndarray, source: str):
        from scipy.interpolate import CubicSpline
        values = np.asarray(values, dtype=float)
        if values.shape != (GRID,) or not np.all(np.isfinite(values)):
            raise ValueError(f"a template needs {GRID} finite values")
        values = np.maximum(values, 0.0)
        mean = values.mean()
        if not mean > 0:
            raise InputError("the template is zero everywhere", field="template")
        self.values = values / mean
        self.source = source
        x = np.arange(GRID + 1) / GRID
        self._spline = CubicSpline(x, np.append(self.values, self.values[0]), bc_type="periodic")

    def __call__(self, phase, derivative: int = 0) -> np.ndarray:
        out = self._spline(np.mod(phase, 1.0), derivative)
        return np.maximum(out, FLOOR) if derivative == 0 else out

    # ---------------------------------------------------------------- sources
    @classmethod
    def from_table(cls, phase, intensity, source: str) -> "PulseTemplate":
        grid = np.arange(GRID) / GRID
        values = np.interp(grid, np.asarray(phase, dtype=float), np.asarray(intensity, float),
                           period=1.0)
        return cls(values, source)

    @classmethod
    def from_file(cls, path) -> "PulseTemplate":
        """A template file (``.npz``, format "timingkit-template", as for folded
        radio profiles: bin j covers phase [j/N, (j+1)/N)); negative values
        (a baseline below zero) are clipped to zero."""
        from timingkit.formats.profile_file import read_template_file
        profile = read_template_file(path).profile
        centres = (np.arange(len(profile)) + 0.5) / len(profile)
        return cls.from_table(centres, profile, f"template file {path}")

    def write(self, path, bins: int = 512) -> None:
        """Save as a template file (bin means of the tabulated template)."""
        from timingkit.formats.profile_file import Template, write_template_file
        profile = self.values.reshape(bins, GRID // bins).mean(axis=1)
        write_template_file(Template(profile=profile), str(path))

    @classmethod
    def from_gaussians(cls, components, background: float = 0.0) -> "PulseTemplate":
        """Wrapped Gaussians (centre, fwhm, amplitude) on a constant ``background``."""
        grid = np.arange(GRID) / GRID
        values = np.full(GRID, float(background))
        for centre, fwhm, amplitude in components:
            sigma = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
            for wrap in range(-3, 4):
                values += amplitude * np.exp(-0.5 * ((grid - centre - wrap) / sigma) ** 2) / \
                    (sigma * math.sqrt(2 * math.pi))
        text = ", ".join(f"gauss:{c:g}:{w:g}:{a:g}" for c, w, a in components)
        return cls(values, f"Gaussian components {text}")

    @classmethod
    def from_events(cls, phases) -> "PulseTemplate":
        """The ``auto`` template: a von Mises kernel density estimate (module docstring)."""
        from timingkit.events.periodicity import fourier_sums
        phases = np.asarray(phases, dtype=float)
        if len(phases) < 20:
            raise InputError(f"too few events ({len(phases)}) to fit a template",
                             field="template")
        width = _cross_validated_width(phases)
        rho = _von_mises_coefficients(1.0 / (2 * math.pi * width) ** 2, KDE_HARMONICS)
        sums = fourier_sums(phases, KDE_HARMONICS)
        spectrum = np.zeros(GRID // 2 + 1, dtype=complex)
        spectrum[0] = GRID
        spectrum[1:KDE_HARMONICS + 1] = GRID * rho * sums / len(phases)
        values = np.fft.irfft(np.conj(spectrum), n=GRID)
        # irfft of conj(S) gives sum_k s_k e^{-2 pi i k phi}: the density at the grid points
        return cls(values, f"auto: von Mises kernel density of {len(phases)} folded events, "
                           f"kernel sd {width:.4f} cycles (leave-one-out likelihood)")

    @classmethod
    def from_profile_spec(cls, specs) -> "PulseTemplate":
        """``gauss:CENTRE:FWHM[:AMPLITUDE]`` items, or one template file path."""
        specs = list(specs)
        if len(specs) == 1 and not specs[0].lower().startswith("gauss:"):
            return cls.from_file(specs[0])
        components = []
        for spec in specs:
            parts = spec.split(":")
            try:
                if parts[0].lower() != "gauss" or len(parts) not in (3, 4):
                    raise ValueError
                centre, fwhm = float(parts[1]), float(parts[2])
                amplitude = float(parts[3]) if len(parts) == 4 else 1.0
            except ValueError:
                raise InputError(f"expected gauss:CENTRE:FWHM[:AMPLITUDE] or a template file, "
                                 f"found {spec!r}", field="profile") from None
            if not (0 < fwhm <= 1 and amplitude > 0 and math.isfinite(centre)):
                raise InputError(f"{spec!r}: FWHM must lie in (0, 1] cycles and the amplitude "
                                 "be > 0", field="profile")
            components.append((centre % 1.0, fwhm, amplitude))
        return cls.from_gaussians(components)

    # ------------------------------------------------------------------ uses
    def mixed(self, weight: float) -> "PulseTemplate":
        """(1 - weight) + weight * template: the template over a flat background."""
        return PulseTemplate((1.0 - weight) + weight * self.values,
                             f"{self.source}, on a flat level ({1 - weight:.3f} of the events)")

    def sample(self, count: int, rng: np.random.Generator) -> np.ndarray:
        """Phases drawn from the template (inverse of its piecewise-linear CDF)."""
        edges = np.arange(GRID + 1) / GRID
        density = np.append(self.values, self.values[0])
        cdf = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]))])
        cdf /= cdf[-1]
        return np.interp(rng.uniform(0.0, 1.0, count), cdf, edges) % 1.0



def _von_mises_coefficients(kappa: float, harmonics: int) -> np.ndarray:
    from scipy.special import ive
    k = np.arange(1, harmonics + 1)
    return ive(k, kappa) / ive(0, kappa)


def _cross_validated_width(phases: np.ndarray) -> float:
    """Kernel sd (cycles) maximising the leave-one-out log-likelihood."""
    from timingkit.events.periodicity import fourier_sums
    stride = max(1, len(phases) // KDE_EVENTS)
    sample = phases[::stride]
    n = len(sample)
    sums = fourier_sums(sample, KDE_HARMONICS)
    # real[k-1, i] = Re(exp(2 pi i k phi_i) conj(S_k)), powers by repeated products
    z = np.exp(2j * np.pi * sample)
    power = z.copy()
    real = np.empty((KDE_HARMONICS, n))
    for k in range(KDE_HARMONICS):
        real[k] = (power * np.conj(sums[k])).real
        power *= z
    rho = np.stack([_von_mises_coefficients(1.0 / (2 * math.pi * w) ** 2, KDE_HARMONICS)
                    for w in KDE_WIDTHS], axis=1)                  # (harmonics, widths)
    loo = (n + 2.0 * (rho.T @ real) - (1.0 + 2.0 * rho.sum(axis=0))[:, None]) / (n - 1)
    scores = np.sum(np.log(np.maximum(loo, FLOOR)), axis=1)
    return float(KDE_WIDTHS[int(np.argmax(scores))])
