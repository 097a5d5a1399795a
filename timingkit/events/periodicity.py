"""Periodicity statistics of pulse phases: Z^2_m, the H-test, pulsed fraction,
peak phase and the binned profile.

- Z^2_m = (2/N) sum_{k=1..m} |sum_i exp(2 pi i k phi_i)|^2 (Buccheri et al. 1983,
  A&A 128, 245); for unpulsed phases it follows the chi-square distribution
  with 2m degrees of freedom, whose tail gives its false-alarm probability.
- H = max_{1<=m<=20} (Z^2_m - 4m + 4) (de Jager, Raubenheimer & Swanepoel 1989,
  A&A 221, 180), with false-alarm probability exp(-0.4 H) (de Jager & Büsching
  2010, A&A 517, L9), an approximation fitted to simulations.
- The profile's Fourier series f(phi) = 1 + sum_{k<=m} (a_k cos 2 pi k phi +
  b_k sin 2 pi k phi), normalised to mean 1, with m the H-test's number of
  harmonics, gives the shape: the pulsed fraction is 1 - (unpulsed level),
  the fraction of events above the level of the off-pulse window
  (:func:`pulsed_fraction`, cross-fitted so the noise does not bias it), and
  the peak phase is the maximum of the Fejér-tapered series, its uncertainty
  first order in the Fourier sums (the spread of the per-event terms,
  computed from the sums up to harmonic 2m; no second pass over the events).

Fourier sums over more than 2^17 events are taken from a histogram of 2^16
phase bins, corrected to second order for each event's offset from its bin
centre: the remaining relative error is < 2e-9 per event at harmonic 40.
"""

from __future__ import annotations

import math

import numpy as np

H_TEST_HARMONICS = 20
DIRECT_MAX_EVENTS = 1 << 17
FINE_BINS = 1 << 16
GRID_POINTS = 4096
WINDOW_BINS = 4096


class PhaseHistogram:
    """Phases binned once into 2^16 bins, with the sums of each event's offset
    from its bin centre and of its square: enough for Fourier sums to the
    second order in the offset (relative error < 2e-9 per event at harmonic
    40) and, by adding bins, for the coarser histograms of the profile."""

    def __init__(self, phases: np.ndarray):
        bins = FINE_BINS
        self.index = np.empty(len(phases), dtype=np.int32)
        self.counts = np.zeros(bins)
        self.first = np.zeros(bins)
        self.second = np.zeros(bins)
        for start in range(0, len(phases), 1 << 21):
            part = phases[start:start + (1 << 21)] * bins
            index = np.minimum(part.astype(np.int32), bins - 1)
            self.index[start:start + len(index)] = index
            part -= index
            part -= 0.5
            part *= 1.0 / bins                 # offset from the bin centre, cycles
            self.counts += np.bincount(index, minlength=bins)
            self.first += np.bincount(index, weights=part, minlength=bins)
            part *= part
            self.second += np.bincount(index, weights=part, minlength=bins)

    def fourier_sums(self, harmonics: int) -> np.ndarray:
        k = np.arange(1, harmonics + 1)
        spectra = [np.conj(np.fft.rfft(x)[1:harmonics + 1])
                   for x in (self.counts, self.first, self.second)]
        w = 2j * np.pi * k
        return np.exp(1j * np.pi * k / FINE_BINS) * (spectra[0] + w * spectra[1]
                                                      + 0.5 * w * w * spectra[2])

    def coarse(self, bins: int, every: int = 1) -> np.ndarray | None:
        """Counts in ``bins`` bins (of every ``every``-th event), or None when
        ``bins`` does not divide 2^16."""
        if FINE_BINS % bins:
            return None
        counts = self.counts if every == 1 else \
            np.bincount(self.index[::every], minlength=FINE_BINS).astype(float)
        return counts.reshape(bins, FINE_BINS // bins).sum(axis=1)


def fourier_sums(phases, harmonics: int, histogram: PhaseHistogram | None = None) -> np.ndarray:
    """S_k = sum_i exp(2 pi i k phi_i) for k = 1..harmonics (complex, last axis
    of ``phases`` summed; 2-d input: one row per trial). Over 2^17 events the
    sums come from a :class:`PhaseHistogram`."""
    phases = np.asarray(phases, dtype=float)
    if phases.ndim == 1 and (histogram is not None or len(phases) > DIRECT_MAX_EVENTS):
        return (histogram or PhaseHistogram(phases)).fourier_sums(harmonics)
    z = np.exp(2j * np.pi * phases)
    power = np.ones_like(z)
    out = np.empty(phases.shape[:-1] + (harmonics,), dtype=complex)
    for k in range(harmonics):
        power *= z
        out[..., k] = power.sum(axis=-1)
    return out


def z2_values(sums: np.ndarray, events: int) -> np.ndarray:
    """Z^2_m for m = 1..len(sums) (last axis)."""
    return 2.0 / events * np.cumsum(np.abs(sums) ** 2, axis=-1)


def z2_false_alarm(z2, harmonics) -> np.ndarray:
    """Chi-square tail with 2m degrees of freedom (Buccheri et al. 1983)."""
    from scipy.special import chdtrc
    return chdtrc(2 * np.asarray(harmonics), z2)


def h_test(sums: np.ndarray, events: int):
    """(H, m) from the first 20 Fourier sums (last axis); arrays for 2-d input."""
    z2 = z2_values(sums[..., :H_TEST_HARMONICS], events)
    m = np.arange(1, z2.shape[-1] + 1)
    scores = z2 - 4.0 * m + 4.0
    best = np.argmax(scores, axis=-1)
    return np.take_along_axis(scores, best[..., None], -1)[..., 0], best + 1


def h_false_alarm(h) -> np.ndarray:
    """exp(-0.4 H) (de Jager & Büsching 2010)."""
    return np.exp(-0.4 * np.asarray(h, dtype=float))


# ------------------------------------------------------------------ profile shape

def _moments(sums: np.ndarray, events: int) -> np.ndarray:
    """s_l = S_l / N for l = -L..L (index l + L), s_0 = 1."""
    s = sums / events
    return np.concatenate([np.conj(s[::-1]), [1.0 + 0j], s])


def fejer_weights(harmonics: int) -> np.ndarray:
    """1 - k/(m+1), k = 1..m: the Fejér taper (a non-negative smoothing kernel)."""
    return 1.0 - np.arange(1, harmonics + 1) / (harmonics + 1.0)


def series(sums: np.ndarray, events: int, harmonics: int, phase, weights=None) -> np.ndarray:
    """The normalised Fourier series f(phi) of the first ``harmonics`` sums
    (optionally tapered by ``weights``)."""
    phase = np.asarray(phase, dtype=float)
    k = np.arange(1, harmonics + 1)
    coefficients = np.conj(sums[:harmonics]) * (1.0 if weights is None else weights)
    terms = coefficients[None, :] * np.exp(2j * np.pi * np.outer(phase.ravel(), k))
    return (1.0 + 2.0 / events * terms.sum(axis=1).real).reshape(phase.shape)


def _spread(alpha: np.ndarray, moments: np.ndarray, phase0: float, events: int) -> float:
    """Standard error of the mean over events of u(phi) = sum_k alpha_k
    exp(2 pi i k (phi - phase0)) (k = -m..m, real u), from the moments s_l."""
    m = (len(alpha) - 1) // 2
    big = (len(moments) - 1) // 2
    l1 = np.arange(-m, m + 1)
    l2 = np.arange(-2 * m, 2 * m + 1)
    s1 = moments[big + l1] * np.exp(-2j * np.pi * l1 * phase0)
    s2 = moments[big + l2] * np.exp(-2j * np.pi * l2 * phase0)
    mean = np.sum(alpha * s1).real
    square = np.sum(np.convolve(alpha, alpha) * s2).real
    return math.sqrt(max(square - mean * mean, 0.0) / events)


def peak_phase(sums: np.ndarray, events: int, harmonics: int) -> tuple[float, float]:
    """Phase of the maximum of the Fejér-tapered series and its first-order
    uncertainty -delta f'/f'' (``sums`` must reach harmonic 2m). The taper keeps
    noise harmonics from making false peaks on a broad pulse (plain series:
    pulls with sd up to 1.3 in our simulations; tapered: 1.0-1.1)."""
    m = int(harmonics)
    weights = fejer_weights(m)
    grid = (np.arange(GRID_POINTS) + 0.5) / GRID_POINTS
    values = series(sums, events, m, grid, weights)
    i = int(np.argmax(values))
    left, mid, right = values[i - 1], values[i], values[(i + 1) % GRID_POINTS]
    curvature = left - 2.0 * mid + right
    shift = 0.0 if curvature == 0 else 0.5 * (left - right) / curvature
    peak = float((grid[i] + np.clip(shift, -1, 1) / GRID_POINTS) % 1.0)
    moments = _moments(sums[:2 * m], events)
    k = np.arange(-m, m + 1)
    w = np.concatenate([weights[::-1], [1.0], weights])
    slope_error = _spread(-2j * np.pi * k * w, moments, peak, events)
    second = float(np.sum(-(2 * np.pi * k) ** 2 * w * moments[len(moments) // 2 + k]
                          * np.exp(-2j * np.pi * k * peak)).real)
    error = slope_error / abs(second) if second != 0 else 0.5
    return peak, min(error, 0.5)


def pulsed_fraction(phases: np.ndarray, harmonics: int, bins: int = WINDOW_BINS,
                    histogram: PhaseHistogram | None = None) -> dict:
    """Unpulsed level and pulsed fraction from an off-pulse window chosen on
    one third of the events (every third) and measured on the other two thirds.

    The window is where the first third's Fejér-tapered Fourier series
    (``harmonics`` terms) lies within one noise sigma, sqrt((1 + 2 sum w_k^2)/N),
    of its minimum (at most half the cycle). Counting the other events in it
    gives the unpulsed level without the downward bias of a minimum picked
    from the same noisy data (which overstates the pulsed fraction by ~2 sigma),
    and a binomial uncertainty. Pulsed fraction = 1 - level (level: density /
    mean density). Simulations (tests/test_periodicity.py): pulls N(0, 1) for
    pulses with an off-pulse region; for a profile with no flat part (a pure
    sinusoid) the window's mean lies above the minimum and the fraction comes
    out low by about half its uncertainty.
    """
    m = int(harmonics)
    if histogram is not None and histogram.coarse(bins) is not None:
        chooser = histogram.coarse(bins, every=3)
        measured = histogram.coarse(bins) - chooser
    else:
        phases = np.asarray(phases, dtype=float)
        index = np.minimum((phases * bins).astype(np.int64), bins - 1)
        chooser = np.bincount(index[::3], minlength=bins).astype(float)
        measured = np.bincount(index, minlength=bins) - chooser
    taper = np.zeros(bins // 2 + 1)
    taper[0] = 1.0
    taper[1:m + 1] = fejer_weights(m)
    chosen_events = chooser.sum()
    smooth = np.fft.irfft(np.fft.rfft(chooser) * taper, n=bins) * bins / chosen_events
    noise = math.sqrt((1.0 + 2.0 * np.sum(taper[1:] ** 2)) / chosen_events)
    window = smooth < min(smooth.min() + noise, float(np.median(smooth)))
    width = window.mean()
    total = measured.sum()
    inside = measured[window].sum() / total
    level = inside / width
    error = math.sqrt(inside * (1.0 - inside) / total) / width
    return {"harmonics": m, "unpulsed_level": level, "unpulsed_level_uncertainty": error,
            "pulsed_fraction": 1.0 - level, "pulsed_fraction_uncertainty": error,
            "off_pulse_window_fraction": float(width),
            "off_pulse_window": _intervals(window, bins)}


def _intervals(mask: np.ndarray, bins: int) -> list[list[float]]:
    """[start, end) phase intervals of the True runs of a circular bin mask."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], mask.astype(int), [0]])))
    runs = [[a / bins, b / bins] for a, b in zip(edges[::2], edges[1::2])]
    if len(runs) > 1 and runs[0][0] == 0.0 and runs[-1][1] == 1.0:
        runs[0][0] = runs.pop()[0] - 1.0
    return runs


def binned_profile(phases: np.ndarray, bins: int,
                   histogram: PhaseHistogram | None = None) -> np.ndarray:
    """Counts in ``bins`` equal phase bins of [0, 1)."""
    if histogram is not None and histogram.coarse(bins) is not None:
        return np.rint(histogram.coarse(bins)).astype(np.int64)
    index = np.minimum((np.asarray(phases) * bins).astype(np.int64), bins - 1)
    return np.bincount(index, minlength=bins)
