"""Outputs of a noise-aware fit: the ``noise`` entry of report.json, the
power spectrum of the post-fit residuals against the fitted noise spectrum,
and the maximum-likelihood red-noise realisation on the residual plot.

Spectrum estimate. Sines and cosines at all the Fourier frequencies
f_j = j/T of the red-noise basis (T its span), plus a constant, are fitted
jointly to the post-fit residuals by weighted least squares with the
white-noise weights 1/sigma'^2 (so the white part is whitened; fitting them
together keeps the strong low-frequency power from leaking into the higher
bins, as a one-frequency-at-a-time periodogram of uneven samples would),
and the power is P_j = T (a_j^2 + b_j^2) / 2, the estimate whose expectation for a stationary
process of one-sided spectral density P(f) is P(f_j) plus the white level
2 T / sum(1/sigma'^2) (the one-sided density of the weighted white noise).
The model curve drawn beside it is exactly that: the fitted power law plus
the white level. The lowest one or two frequencies fall below the model
because the fitted spin frequency and its derivative absorb power there.
"""

from __future__ import annotations

import math
import os

import numpy as np

from timingkit.fit.least_squares import FitResult
from timingkit.model.noise import SECONDS_PER_YEAR, NoiseModel

S3_PER_US2_YR = 1e-12 * SECONDS_PER_YEAR     # one µs^2 yr in s^2/Hz = s^3

NOISE_CAUTION = ("timing-parameter uncertainties with red noise rest on the assumed stationary "
                 "power-law noise model; noise-parameter uncertainties come from the curvature "
                 "of the likelihood at its maximum (a large-sample approximation)")


def _value_entry(p, estimated: dict) -> dict:
    entry = {"value": float(p.value), "uncertainty": p.uncertainty, "free": bool(p.free)}
    if p.free and p.name not in estimated:
        entry["note"] = "held at its value (not estimated)"
    return entry


def noise_report_entry(result: FitResult) -> dict:
    """The ``noise`` entry of report.json (keys: method, log_likelihood,
    white_noise, red_noise, estimation, cautions)."""
    summary = result.noise
    noise = NoiseModel.from_timing_model(result.model)
    est = summary.estimate
    estimated = set(est.names) if est is not None else set()
    entry: dict = {"method": summary.method,
                   "log_likelihood": float(summary.log_likelihood)}
    if summary.method.startswith("generalised"):
        entry["generalised_chi2"] = float(result.chi2)
        entry["method_reference"] = ("Fourier-basis red noise, timing parameters marginalised "
                                     "(van Haasteren & Vallisneri 2014)")
    entry["white_noise"] = [
        {"group": g.array_index, "flag": g.flag, "value": g.value,
         "toas": int(summary.group_counts[i]),
         "error_scale": _value_entry(g.error_scale, estimated),
         "added_error_us": _value_entry(g.added_error, estimated)}
        for i, g in enumerate(noise.white)]
    if noise.red is not None:
        red = noise.red
        entry["red_noise"] = {
            "amplitude_log10": _value_entry(red.amplitude, estimated),
            "spectral_index": _value_entry(red.spectral_index, estimated),
            "corner_frequency_per_yr": float(red.corner_frequency_per_yr),
            "frequencies": int(red.frequencies),
            "span_days": float(summary.red_span_s / 86400.0),
            "realisation_rms_us": float(np.sqrt(np.mean(summary.red_realisation_s ** 2)) * 1e6),
            "spectrum": "one-sided P(f) = A^2/(12 pi^2) f_yr^-3 ((f^2 + f_c^2)/f_yr^2)^(-gamma/2), "
                        "f_yr = 1/yr, A = 10^amplitude_log10",
        }
    if est is not None:
        entry["estimation"] = {
            "free": list(est.names), "rounds": int(summary.rounds),
            "likelihood_evaluations": int(est.evaluations), "success": bool(est.success),
            "method": "maximum marginal likelihood (scipy.optimize L-BFGS-B); uncertainties "
                      "from the inverse Hessian",
        }
        if est.covariance is not None:
            sig = np.sqrt(np.diag(est.covariance))
            corr = est.covariance / np.outer(sig, sig)
            entry["estimation"]["correlation"] = {
                "parameters": list(est.names),
                "matrix": [[round(float(x), 6) for x in row] for row in corr]}
    entry["cautions"] = [NOISE_CAUTION] if (noise.red is not None or est is not None) else []
    return entry


def residual_power_spectrum(result: FitResult, count: int | None = None):
    """(frequencies in 1/yr, measured power, model power), powers in µs^2 yr,
    at the red-noise basis frequencies (module docstring). Needs a fit with
    a [red_noise] section."""
    summary = result.noise
    if summary is None or summary.red_frequencies_hz is None:
        raise ValueError("the power spectrum needs a fit with a [red_noise] section")
    freqs = summary.red_frequencies_hz if count is None else summary.red_frequencies_hz[:count]
    t = summary.times_s
    w = 1.0 / summary.err_s ** 2
    r = result.postfit.time_s
    span = summary.red_span_s
    sw = np.sqrt(w)
    if 2 * len(freqs) + 1 < len(t) // 2:
        arg = 2.0 * math.pi * np.outer(t, freqs)
        a = np.column_stack([np.sin(arg), np.cos(arg), np.ones_like(t)]) * sw[:, None]
        coef = np.linalg.lstsq(a, r * sw, rcond=None)[0]
        power = span * (coef[:len(freqs)] ** 2 + coef[len(freqs):2 * len(freqs)] ** 2) / 2.0
    else:   # too few TOAs for a joint fit: one frequency at a time
        power = np.empty(len(freqs))
        for j, f in enumerate(freqs):
            arg = 2.0 * math.pi * f * t
            a = np.column_stack([np.sin(arg), np.cos(arg), np.ones_like(t)]) * sw[:, None]
            coef = np.linalg.lstsq(a, r * sw, rcond=None)[0]
            power[j] = span * (coef[0] ** 2 + coef[1] ** 2) / 2.0
    noise = NoiseModel.from_timing_model(result.model)
    model = noise.red.psd(freqs) + 2.0 * span / np.sum(w)
    return freqs * SECONDS_PER_YEAR, power / S3_PER_US2_YR, model / S3_PER_US2_YR


def add_red_noise_curve(figure, mjd: np.ndarray, red_us: np.ndarray) -> None:
    """Draw the ML red-noise realisation (µs) on the post-fit residual panel, in that
    panel's unit, and name it in the figure's key."""
    from timingkit.outputs.plotting import add_key_entry
    panels = [ax for ax in figure.axes if hasattr(ax, "residual_us_per_unit")]
    if not panels:
        return
    ax = panels[-1]
    order = np.argsort(mjd)
    (line,) = ax.plot(np.asarray(mjd)[order], np.asarray(red_us)[order] / ax.residual_us_per_unit,
                      color="C3", linewidth=1.2, zorder=3, label="ML red-noise realisation",
                      gid="red_noise_realisation")
    add_key_entry(figure, line, "ML red-noise realisation")


def write_noise_figures(result: FitResult, obs, outdir: str, residual_figure=None,
                        residual_path: str | None = None) -> list[str]:
    """Save the residual figure with the red-noise curve (when given) and
    power_spectrum.png; returns the files written."""
    from timingkit.outputs.plotting import plot_power_spectrum, save_figure
    written = []
    summary = result.noise
    if summary is None or summary.red_realisation_s is None:
        return written
    if residual_figure is not None and residual_path is not None:
        mjd = obs.toas.mjd_day + obs.toas.mjd_frac
        add_red_noise_curve(residual_figure, mjd, summary.red_realisation_s * 1e6)
        save_figure(residual_figure, residual_path)
        written.append(residual_path)
    freqs, power, model = residual_power_spectrum(result)
    path = os.path.join(outdir, "power_spectrum.png")
    plot_power_spectrum(freqs, power, model_power=model, path=path,
                        power_label="power spectral density (µs² yr)",
                        title=f"{result.model.name}: post-fit residuals (white-noise weighted) "
                              "vs fitted noise")
    written.append(path)
    return written
