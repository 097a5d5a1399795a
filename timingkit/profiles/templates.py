"""Pulse templates: von Mises components, the built-in invented template, and
``auto`` templates built from the data themselves.

A component with centre mu (cycles), full width at half maximum w (cycles)
and amplitude A is A exp(kappa (cos 2 pi (phi - mu) - 1)), with
kappa = ln 2 / (1 - cos(pi w)) so that it falls to A/2 at mu +- w/2. Templates
are evaluated at bin centres; bin n covers phases [n/N, (n+1)/N).

The auto template: every observation's profiles are summed, the sums aligned
on the brightest one and averaged with signal-to-noise weights (b / sigma^2),
aligned again on that average (three rounds), and the average is then fitted
with up to six components (scipy.optimize.least_squares), a component being
added while it lowers chi^2 by more than the Bayesian information criterion's
penalty (3 ln N). The fitted components, free of noise, are the template,
turned so that its highest point is at phase 0.
"""

from __future__ import annotations

import numpy as np
import scipy.optimize

from timingkit.formats.profile_file import Template
from timingkit.profiles.phase_gradient import fit_shifts, shift_profiles

MAX_COMPONENTS = 6
ALIGN_ROUNDS = 3
FINE_GRID = 1 << 14        # points used to find the template's peak
# The built-in template (invented): a main pulse, a trailing shoulder and a weak
# interpulse; rows of (centre phase, FWHM, amplitude).
BUILTIN_COMPONENTS = np.array([[0.0, 0.025, 1.0], [0.03, 0.05, 0.35], [0.52, 0.04, 0.15]])


def concentration(fwhm_cycles) -> np.ndarray:
    """von Mises concentration kappa for a full width at half maximum (cycles)."""
    return np.log(2.0) / (1.0 - np.cos(np.pi * np.asarray(fwhm_cycles, dtype=float)))


def components_profile(components, bins: int | None = None, phases=None) -> np.ndarray:
    """Sum of von Mises components at bin centres (or at ``phases``)."""
    if phases is None:
        phases = (np.arange(bins) + 0.5) / bins
    out = np.zeros(len(phases))
    for centre, fwhm, amplitude in np.atleast_2d(components):
        out += amplitude * np.exp(concentration(fwhm) * (np.cos(2 * np.pi * (phases - centre))
                                                         - 1.0))
    return out


def builtin_template(bins: int) -> Template:
    """The built-in invented template at ``bins`` bins."""
    return Template(profile=components_profile(BUILTIN_COMPONENTS, bins),
                    components=BUILTIN_COMPONENTS.copy())


def resample(profile: np.ndarray, bins: int) -> np.ndarray:
    """A profile at another number of bins (Fourier: harmonics kept or zero-padded)."""
    spectrum = np.fft.rfft(profile, norm="forward")
    keep = min(len(spectrum), bins // 2 + 1)
    out = np.zeros(bins // 2 + 1, dtype=complex)
    out[:keep] = spectrum[:keep]
    return np.fft.irfft(out, n=bins, norm="forward")


def _align(profiles: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Weighted average of ``profiles`` (M, N) after turning each onto ``reference``."""
    fit = fit_shifts(profiles, reference)
    aligned = shift_profiles(profiles, -fit.shift_cycles)
    aligned -= aligned.mean(axis=1, keepdims=True)
    weight = np.where(fit.amplitude > 0, fit.amplitude / fit.noise_sigma ** 2, 0.0)
    if not np.any(weight > 0):
        return aligned.mean(axis=0)
    return weight @ aligned / np.sum(weight * fit.amplitude)      # in units of the reference


def noise_per_bin(profile: np.ndarray) -> float:
    """White-noise sigma per bin from the upper half of the harmonics, where a
    pulse wider than a few bins has no power: E|P_k|^2 = sigma^2 / N."""
    high = np.fft.rfft(profile, norm="forward")[len(profile) // 4 + 1:-1]
    sigma = float(np.sqrt(len(profile) * np.mean(np.abs(high) ** 2)))
    return sigma if sigma > 0 else 1e-9 * float(np.ptp(profile) or 1.0)


def _model(params: np.ndarray, phases: np.ndarray) -> np.ndarray:
    base, rest = params[0], params[1:].reshape(-1, 3)
    comps = np.column_stack([rest[:, 0], np.exp(rest[:, 1]), rest[:, 2]])
    return base + components_profile(comps, phases=phases)


def _fit_components(average: np.ndarray, sigma: float) -> tuple[np.ndarray, float]:
    """Greedy von Mises fit (module docstring); returns (components, chi^2)."""
    n = len(average)
    phases = (np.arange(n) + 0.5) / n
    params = np.array([np.median(average)])
    chi2 = float(np.sum((average - params[0]) ** 2) / sigma ** 2)
    penalty = 3 * np.log(n)
    width = max(4.0 / n, 0.02)
    kernel = np.fft.rfft(components_profile([[0.5 / n, width, 1.0]], n))
    for _ in range(MAX_COMPONENTS):
        residual = average - _model(params, phases)
        # the next component where the residual, smoothed to a typical width, peaks
        smoothed = np.fft.irfft(np.fft.rfft(residual) * np.conj(kernel), n=n)
        j = int(np.argmax(smoothed))
        guess = np.r_[params, phases[j], np.log(width), max(residual[j], 0.0)]
        lower = np.r_[-np.inf, np.tile([-np.inf, np.log(1.0 / n), 0.0], len(guess) // 3)]
        upper = np.r_[np.inf, np.tile([np.inf, np.log(0.5), np.inf], len(guess) // 3)]
        fit = scipy.optimize.least_squares(
            lambda q: (average - _model(q, phases)) / sigma, guess, bounds=(lower, upper))
        new_chi2 = float(np.sum(fit.fun ** 2))
        if chi2 - new_chi2 < penalty:
            break
        params, chi2 = fit.x, new_chi2
    rest = params[1:].reshape(-1, 3)
    comps = np.column_stack([np.mod(rest[:, 0], 1.0), np.exp(rest[:, 1]), rest[:, 2]])
    return comps, chi2


def auto_template(observations: list[np.ndarray], bins: int) -> Template:
    """A noise-free template from summed profiles (one per observation, all
    resampled to ``bins``), as the module docstring describes."""
    stack = np.array([resample(p, bins) for p in observations])
    first = stack[int(np.argmax(np.ptp(stack, axis=1) / np.std(np.diff(stack, axis=1),
                                                              axis=1)))]
    reference = first - first.mean()
    for _ in range(ALIGN_ROUNDS):
        reference = _align(stack, reference)
    comps, _ = _fit_components(reference, noise_per_bin(reference))
    fine = (np.arange(FINE_GRID) + 0.5) / FINE_GRID
    peak = fine[int(np.argmax(components_profile(comps, phases=fine)))]
    comps[:, 0] = np.mod(comps[:, 0] - peak, 1.0)
    comps = comps[np.argsort(-comps[:, 2])]
    return Template(profile=components_profile(comps, bins), components=comps)
