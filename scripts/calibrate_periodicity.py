#!/usr/bin/env python
"""Calibration of the H-test and Z^2 false-alarm probabilities on simulated
unpulsed events: the figures behind the accuracy statements that
``timingkit events`` prints beside each probability (timingkit.events.folding).

For each probability p the script prints the simulated fraction of trials whose
formula probability is below p, as a ratio to p (1 = calibrated), with its
binomial error:

- the large-sample limit of the H-test: the Fourier powers 2|S_k|^2/N are then
  independent chi^2 variables with 2 degrees of freedom (Buccheri et al. 1983),
  drawn directly (10^7 trials; fast);
- finite event sets of 20, 50, 100 and 1000 uniform phases (2x10^5 trials each,
  4x10^4 for 1000 events), for the H-test (exp(-0.4 H), de Jager & Büsching
  2010) and Z^2_m for m = 1, 2, 5, 10, 20 (chi-square with 2m degrees of freedom).

Deterministic (fixed seeds). ``--quick`` uses a tenth of the trials. Run:
``python scripts/calibrate_periodicity.py``.
"""

from __future__ import annotations

import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from timingkit.events import periodicity as stats  # noqa: E402

LEVELS = (0.5, 0.1, 0.01, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 3e-6)
Z2_HARMONICS = (1, 2, 5, 10, 20)


def _ratio(fap: np.ndarray, p: float) -> str:
    trials = len(fap)
    below = np.count_nonzero(fap < p)
    if p * trials < 5:
        return "      --     "
    error = np.sqrt(p * (1 - p) / trials) / p
    return f"{below / trials / p:6.3f}±{error:5.3f}"


def large_sample_limit(trials: int) -> None:
    rng = np.random.default_rng(20100)
    m = np.arange(1, 21)
    parts = []
    for start in range(0, trials, 200_000):
        power = rng.exponential(2.0, (min(200_000, trials - start), 20))
        parts.append(np.max(np.cumsum(power, axis=1) - 4 * m + 4, axis=1))
    fap = stats.h_false_alarm(np.concatenate(parts))
    print(f"H-test, large-sample limit ({trials:,} trials): simulated / exp(-0.4 H)")
    print("  " + "  ".join(f"p={p:<9.0e}" for p in LEVELS))
    print("  " + "  ".join(_ratio(fap, p) for p in LEVELS))


def finite_sets(events: int, trials: int) -> None:
    rng = np.random.default_rng(events)
    h_parts, z_parts = [], []
    for start in range(0, trials, 2000):
        sums = stats.fourier_sums(rng.uniform(0, 1, (min(2000, trials - start), events)), 20)
        h, _ = stats.h_test(sums, events)
        h_parts.append(stats.h_false_alarm(h))
        z2 = stats.z2_values(sums, events)
        z_parts.append(np.stack([stats.z2_false_alarm(z2[:, k - 1], k) for k in Z2_HARMONICS],
                                axis=1))
    h_fap, z_fap = np.concatenate(h_parts), np.concatenate(z_parts)
    print(f"{events} events ({trials:,} trials): simulated fraction below p, divided by p")
    print("  statistic " + "  ".join(f"p={p:<9.0e}" for p in LEVELS))
    print("  H-test    " + "  ".join(_ratio(h_fap, p) for p in LEVELS))
    for j, k in enumerate(Z2_HARMONICS):
        print(f"  Z^2_{k:<5d} " + "  ".join(_ratio(z_fap[:, j], p) for p in LEVELS))


def main() -> int:
    scale = 10 if "--quick" in sys.argv else 1
    large_sample_limit(10_000_000 // scale)
    for events in (20, 50, 100, 1000):
        finite_sets(events, (200_000 if events <= 100 else 40_000) // scale)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
