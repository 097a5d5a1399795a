"""The periodicity part of events_report.json from folded phases: H-test, Z^2
for each number of harmonics, pulsed fraction, peak phase and the binned
profile, with the false-alarm probabilities printed no more precisely than
our simulations of unpulsed events support (scripts/calibrate_periodicity.py,
tests/test_periodicity.py).

What those simulations show (scripts/calibrate_periodicity.py: 10^7 trials of
the large-sample limit, 2x10^5 trials of 20, 50 and 100 events, 4x10^4 of 1000),
as the ratio of the true chance probability to the printed one:

- H-test, exp(-0.4 H): 1.00-1.02 from 0.5 to 3e-4 and 0.93-0.95 (+-0.03-0.10)
  from 1e-4 to 1e-5 in the large-sample limit; 1.0-1.2 at 1e-3 for 100-1000
  events; for 100 events 1.3 at 1e-4 and 2.8 at 3e-5, for 50 events 1.3 at
  3e-4 and 1.8 at 1e-4, for 20 events 1.25 at 1e-3 and 2.3 at 1e-4. At p >= 0.01
  it is within 6% for 20 events or more.
- Z^2_m, chi-square with 2m degrees of freedom: within 10% at p >= 0.01
  (20 events: up to 1.33 for m = 20); for 100 events within 20% down to 1e-4
  for m <= 5, but 1.3-2 at 1e-3 to 1e-4 for m = 10-20; fewer events and more
  harmonics drift further (20 events, m = 20: 5 at 1e-4).
- Below 1e-5 neither is checked: 1e-5 is printed as an upper limit
  (``false_alarm_probability_upper_limit``, as the glitch search does).

The H-test probability is printed to one significant figure, Z^2 to two where
it is good to 10%, with the accuracy for this number of events beside it.
"""

from __future__ import annotations

import numpy as np

from timingkit.events import periodicity as stats

FALSE_ALARM_FLOOR = 1e-5
H_TEST_SOURCE = "exp(-0.4 H): de Jager & Büsching 2010, A&A 517, L9"
Z2_SOURCE = "chi-square tail with 2m degrees of freedom: Buccheri et al. 1983, A&A 128, 245"


def _round(value: float, digits: int) -> float:
    if value <= 0:
        return 0.0
    return float(f"{value:.{digits - 1}e}")


def _accuracy(events: int, probability: float, kind: str, harmonics: int = 20) -> str:
    """How far the printed probability may be from the true one (module docstring)."""
    checked = " (simulations of unpulsed events)"
    if probability >= 0.01 and (events >= 50 or kind == "h" or harmonics <= 10):
        return "within 10%" + checked
    if events >= 1000:
        return "within 20%" + checked
    good = (kind == "h" and (probability >= 1e-3 or (events >= 100 and probability >= 1e-4))) \
        or (kind == "z2" and harmonics <= 5 and events >= 50 and probability >= 1e-4)
    if good and events >= 50:
        return "within 30%" + checked
    factor = 3 if events >= 50 else 10
    return (f"the true chance probability may be up to {factor}x higher for {events} events"
            + checked)


def false_alarm_entry(probability: float, events: int, kind: str, harmonics: int = 20) -> dict:
    """The printed form of a false-alarm probability (module docstring)."""
    if probability < FALSE_ALARM_FLOOR:
        return {"false_alarm_probability": FALSE_ALARM_FLOOR,
                "false_alarm_probability_upper_limit": True,
                "false_alarm_probability_accuracy": "not checked below 1e-5 by our simulations"}
    accuracy = _accuracy(events, probability, kind, harmonics)
    digits = 2 if kind == "z2" and accuracy.startswith("within 10%") else 1
    return {"false_alarm_probability": _round(probability, digits),
            "false_alarm_probability_upper_limit": False,
            "false_alarm_probability_accuracy": accuracy}


def fold_summary(phases: np.ndarray, harmonics: int = stats.H_TEST_HARMONICS,
                 bins: int = 32) -> dict:
    """(entries, sums): the h_test, z2, pulsed_fraction, peak_phase, profile and
    cautions entries of the report, and the Fourier sums they came from."""
    phases = np.asarray(phases, dtype=float)
    n = len(phases)
    reach = max(harmonics, stats.H_TEST_HARMONICS)
    histogram = stats.PhaseHistogram(phases) if n > stats.DIRECT_MAX_EVENTS else None
    sums = stats.fourier_sums(phases, 2 * reach, histogram)
    h, best = stats.h_test(sums, n)
    h, best = float(h), int(best)
    z2 = stats.z2_values(sums[:harmonics], n)
    z2_fap = stats.z2_false_alarm(z2, np.arange(1, harmonics + 1))
    shape = stats.pulsed_fraction(phases, best, histogram=histogram)
    peak, peak_error = stats.peak_phase(sums, n, best)
    counts = stats.binned_profile(phases, bins, histogram)
    out = {
        "h_test": {"value": h, "harmonics": best, "largest_harmonic_tried": 20,
                   **false_alarm_entry(float(stats.h_false_alarm(h)), n, "h"),
                   "method": H_TEST_SOURCE},
        "z2": [{"harmonics": m, "value": float(z2[m - 1]),
                **false_alarm_entry(float(z2_fap[m - 1]), n, "z2", m)}
               for m in range(1, harmonics + 1)],
        "z2_method": Z2_SOURCE + "; each m is one trial (the H-test accounts for choosing m)",
        "pulsed_fraction": {
            "value": shape["pulsed_fraction"], "uncertainty": shape["pulsed_fraction_uncertainty"],
            "harmonics": best, "off_pulse_window": shape["off_pulse_window"],
            "off_pulse_window_fraction": shape["off_pulse_window_fraction"],
            "method": ("1 - unpulsed level / mean; the level is the event density in the "
                       "off-pulse window, chosen on every third event (where their "
                       f"{best}-harmonic Fejér-tapered Fourier series lies within its noise "
                       "of its minimum) and measured on the others; binomial uncertainty; "
                       "biased low (by about half the uncertainty for a pure sinusoid) when "
                       "the profile has no flat off-pulse part")},
        "peak_phase": {"value": peak, "uncertainty": peak_error, "harmonics": best,
                       "method": "maximum of the Fejér-tapered Fourier series; first-order "
                                 "uncertainty"},
        "profile": {"bins": bins,
                    "phase_bin_centres": ((np.arange(bins) + 0.5) / bins).tolist(),
                    "counts": counts.tolist(),
                    "unpulsed_level_counts_per_bin": shape["unpulsed_level"] * n / bins,
                    "unpulsed_level_uncertainty": shape["unpulsed_level_uncertainty"] * n / bins,
                    "smooth_harmonics": best},
    }
    cautions = []
    if n < 100:
        cautions.append(f"only {n} events: the false-alarm probabilities are approximate "
                        "(see false_alarm_probability_accuracy)")
    if h < 10:
        cautions.append("no significant pulsation (H < 10): the pulsed fraction is an estimate "
                        "of noise, and the peak phase means little")
    out["cautions"] = cautions
    return out, sums


def smooth_profile(fold: dict, sums: np.ndarray, events: int, points: int = 512):
    """(phase, counts per bin) of the H-test's Fourier series, for the figure."""
    m = fold["h_test"]["harmonics"]
    phase = (np.arange(points) + 0.5) / points
    values = stats.series(sums, events, m, phase)
    return phase, values * events / fold["profile"]["bins"]


