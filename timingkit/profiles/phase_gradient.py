"""Phase shift of a profile against a template by the Fourier-domain
phase-gradient method (Taylor 1992, Phil. Trans. R. Soc. A 341, 117).

With P_k, T_k the harmonics (numpy.fft.rfft, norm="forward") of profile and
template, k = 1..K (no constant term, no Nyquist term), the model
P_k = b T_k exp(-2 pi i k tau) + noise is fitted by least squares: tau
maximises C(tau) = Re sum P_k conj(T_k) exp(2 pi i k tau), found from the
peak of the cross-correlation (numpy.fft.irfft, 2x oversampled, parabola) and refined
by Newton steps on C'(tau) = 0 for blocks of profiles at once
(scipy.optimize.newton); b = C(tau) / sum |T_k|^2.

Noise: white, sigma per bin; each harmonic's real and imaginary parts then
have variance sigma^2 / (2N) (N bins). sigma is estimated from the fit's
residual, sum |P_k - b T_k e^{...}|^2 = (2K - 2) sigma^2 / (2N) on average.
Uncertainties from the curvature of chi^2 (Taylor 1992, appendix; tau and b
are uncorrelated at the optimum):

    sigma_tau^2 = sigma^2 / (2N b sum (2 pi k)^2 |P_k||T_k| cos(phi_k - theta_k + 2 pi k tau))
    sigma_b^2   = sigma^2 / (2N sum |T_k|^2)

For a perfect template this is the Cramér-Rao bound
sigma^2 / (2N b^2 sum (2 pi k)^2 |T_k|^2) (:func:`cramer_rao_shift_cycles`).
S/N (matched filter) = b sqrt(2N sum |T_k|^2) / sigma. A profile shifted later
by tau cycles gives +tau.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.optimize

OVERSAMPLE = 2
BLOCK = 256            # profiles fitted together (bounds the memory)


@dataclass
class ShiftFit:
    """Per profile: ``shift_cycles`` in [-0.5, 0.5), ``shift_err_cycles``,
    ``amplitude`` (b, template units) and ``amplitude_err``, ``noise_sigma``
    per bin, ``snr`` (matched filter)."""

    shift_cycles: np.ndarray
    shift_err_cycles: np.ndarray
    amplitude: np.ndarray
    amplitude_err: np.ndarray
    noise_sigma: np.ndarray
    snr: np.ndarray


def harmonics(profiles: np.ndarray, count: int | None = None) -> np.ndarray:
    """Harmonics 1..K of each profile (last axis = bins), K = (bins - 1) // 2
    or ``count`` if smaller."""
    spectrum = np.fft.rfft(np.asarray(profiles, dtype=float), axis=-1, norm="forward")
    k = (np.shape(profiles)[-1] - 1) // 2
    return spectrum[..., 1:1 + min(k, count or k)]


def shift_profiles(profiles: np.ndarray, shift_cycles) -> np.ndarray:
    """Profiles rotated later by ``shift_cycles`` (band-limited Fourier shift;
    one shift per profile or one for all)."""
    profiles = np.asarray(profiles, dtype=float)
    n = profiles.shape[-1]
    spectrum = np.fft.rfft(profiles, axis=-1)
    k = np.arange(spectrum.shape[-1])
    shift = np.asarray(shift_cycles, dtype=float)[..., None]
    return np.fft.irfft(spectrum * np.exp(-2j * np.pi * k * shift), n=n, axis=-1)


def cramer_rao_shift_cycles(template: np.ndarray, amplitude: float, sigma: float,
                            bins: int | None = None) -> float:
    """Cramér-Rao bound on the shift (cycles) for a profile b x template plus
    white noise sigma per bin, from the harmonics the fit uses."""
    n = bins or len(template)
    t = harmonics(template)
    k = np.arange(1, t.shape[-1] + 1)
    fisher = 2 * n * amplitude ** 2 * np.sum((2 * np.pi * k) ** 2 * np.abs(t) ** 2) / sigma ** 2
    return float(1.0 / np.sqrt(fisher))


def _rotation(tau: np.ndarray, count: int) -> np.ndarray:
    """exp(2 pi i k tau) for k = 1..count, (M, count), as powers of
    exp(2 pi i tau) (numpy.cumprod; ~1e-13 rad off at k = 500, far below any
    shift uncertainty, and ~10x cheaper than an exponential per element)."""
    z = np.exp(2j * np.pi * tau)[:, None]
    return np.cumprod(np.broadcast_to(z, (len(tau), count)), axis=1)


def fit_shifts(profiles: np.ndarray, template: np.ndarray) -> ShiftFit:
    """Phase-gradient fit of each profile (rows of ``profiles``, (M, N) or (N,))
    against ``template`` (any number of bins; the common harmonics are used)."""
    profiles = np.atleast_2d(np.asarray(profiles, dtype=float))
    if len(profiles) == 1:      # scipy.optimize.newton is vectorised for 2+ starting points
        one = fit_shifts(np.repeat(profiles, 2, axis=0), template)
        return ShiftFit(*(getattr(one, name)[:1] for name in ShiftFit.__dataclass_fields__))
    if len(profiles) > BLOCK:      # blocks of nearly equal size, each of 2 or more
        parts = [fit_shifts(block, template)
                 for block in np.array_split(profiles, -(-len(profiles) // BLOCK))]
        return ShiftFit(*(np.concatenate([getattr(part, name) for part in parts])
                          for name in ShiftFit.__dataclass_fields__))
    n = profiles.shape[-1]
    t = harmonics(template)
    p = harmonics(profiles, t.shape[-1])
    t = t[:p.shape[-1]]
    count = p.shape[-1]
    k = np.arange(1, count + 1)
    cross = p * np.conj(t)                                   # (M, K)
    # coarse: the oversampled cross-correlation's peak
    size = OVERSAMPLE * n
    padded = np.zeros((len(profiles), size // 2 + 1), dtype=complex)
    padded[:, 1:count + 1] = cross
    ccf = np.fft.irfft(padded, n=size, axis=-1)
    peak = np.argmax(ccf, axis=-1)
    rows = np.arange(len(ccf))
    left, mid, right = ccf[rows, peak - 1], ccf[rows, peak], ccf[rows, (peak + 1) % size]
    with np.errstate(divide="ignore", invalid="ignore"):      # parabola through the peak
        step = np.nan_to_num(0.5 * (left - right) / (left - 2 * mid + right))
    tau0 = (peak + np.clip(step, -0.5, 0.5)) / size
    two_pi_k = 2 * np.pi * k
    memo = {}

    def terms(tau):      # newton asks for the gradient and curvature at the same tau
        if "tau" not in memo or not np.array_equal(memo["tau"], tau):
            memo["tau"], memo["terms"] = np.array(tau), cross * _rotation(tau, count)
        return memo["terms"]

    def gradient(tau):
        return -np.imag(terms(tau)) @ two_pi_k

    def curvature(tau):
        return -np.real(terms(tau)) @ two_pi_k ** 2

    with warnings.catch_warnings():    # the few that stall near 1e-11 cycles are kept
        warnings.simplefilter("ignore", RuntimeWarning)
        tau, _, _ = scipy.optimize.newton(gradient, tau0, fprime=curvature, tol=1e-11,
                                          maxiter=50, full_output=True)
    tau = np.where(np.abs(tau - tau0) < 2.0 / size, tau, tau0)   # never jump to another peak
    rotation = _rotation(tau, count)
    template_power = np.sum(np.abs(t) ** 2)
    amplitude = np.real(cross * rotation).sum(axis=1) / template_power
    residual = p - amplitude[:, None] * t[None, :] * np.conj(rotation)
    sigma2 = 2 * n * np.sum(np.abs(residual) ** 2, axis=1) / (2 * count - 2)
    bend = np.real(cross * rotation) @ two_pi_k ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        shift_err = np.sqrt(sigma2 / (2 * n * amplitude * bend))
        shift_err = np.where((amplitude > 0) & (bend > 0), shift_err, np.inf)
    wrapped = tau - np.floor(tau + 0.5)
    return ShiftFit(shift_cycles=wrapped, shift_err_cycles=shift_err, amplitude=amplitude,
                    amplitude_err=np.sqrt(sigma2 / (2 * n * template_power)),
                    noise_sigma=np.sqrt(sigma2),
                    snr=amplitude * np.sqrt(2 * n * template_power / sigma2))
