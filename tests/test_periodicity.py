"""Periodicity statistics: definitions, false-alarm probabilities calibrated on
simulated unpulsed events, and the pulsed fraction and peak phase recovered
with N(0, 1) pulls from simulated pulsed events."""

import numpy as np
import pytest

from timingkit.events import periodicity as stats
from timingkit.events.folding import false_alarm_entry, fold_summary

PROBABILITIES = (0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 0.5)


def _within_binomial(fraction, p, trials, sigmas=3.5):
    return abs(fraction - p) <= sigmas * np.sqrt(p * (1 - p) / trials) + 1.0 / trials


def test_definitions_on_hand_made_phases():
    # Z^2_m (Buccheri et al. 1983): all phases equal -> 2 N m; evenly spaced
    # phases k/N -> 0 for m < N. H = max(Z^2_m - 4m + 4) (de Jager et al. 1989).
    n = 50
    same = np.full(n, 0.3)
    sums = stats.fourier_sums(same, 20)
    assert np.allclose(stats.z2_values(sums, n), 2 * n * np.arange(1, 21))
    h, m = stats.h_test(sums, n)
    assert m == 20 and h == pytest.approx(2 * n * 20 - 80 + 4)
    even = np.arange(n) / n
    assert np.allclose(stats.z2_values(stats.fourier_sums(even, 20), n), 0.0, atol=1e-9)
    # a pure first harmonic: Z^2_1 carries it all, and H picks m = 1
    phases = np.array([0.0, 0.0, 0.5, 0.25, 0.25, 0.25])
    sums = stats.fourier_sums(phases, 20)
    by_hand = 2 / 6 * (abs(sum(np.exp(2j * np.pi * phases))) ** 2)
    assert stats.z2_values(sums, 6)[0] == pytest.approx(by_hand)
    assert stats.h_false_alarm(10.0) == pytest.approx(np.exp(-4.0))


def test_histogram_sums_match_direct_sums():
    rng = np.random.default_rng(1)
    phases = np.concatenate([rng.uniform(0, 1, 200_000), rng.normal(0.4, 0.03, 50_000) % 1])
    binned = stats.PhaseHistogram(phases).fourier_sums(40)
    direct = np.array([np.exp(2j * np.pi * k * phases).sum() for k in range(1, 41)])
    assert np.max(np.abs(binned - direct)) < 2e-9 * len(phases)


def test_false_alarm_probabilities_are_calibrated_on_unpulsed_events():
    # 4000 trials of 100 unpulsed events (fixed seed): the fraction of trials
    # whose false-alarm probability is below p must be p within binomial error.
    rng = np.random.default_rng(2024)
    trials, n = 4000, 100
    sums = stats.fourier_sums(rng.uniform(0, 1, (trials, n)), 20)
    h, _ = stats.h_test(sums, n)
    h_fap = stats.h_false_alarm(h)
    z2 = stats.z2_values(sums, n)
    for p in PROBABILITIES:
        assert _within_binomial(np.mean(h_fap < p), p, trials), ("H", p)
        for m in (1, 2, 5, 10):
            fap = stats.z2_false_alarm(z2[:, m - 1], m)
            assert _within_binomial(np.mean(fap < p), p, trials), ("Z2", m, p)


def test_h_test_formula_in_the_large_sample_limit():
    # For many events the Fourier powers 2|S_k|^2/N are independent chi^2_2
    # variables (Buccheri et al. 1983); 4x10^6 draws of that limit check the
    # "within 10%" statement of the report down to p = 1e-4.
    rng = np.random.default_rng(7)
    m = np.arange(1, 21)
    h = np.concatenate([np.max(np.cumsum(rng.exponential(2.0, (400_000, 20)), axis=1)
                               - 4 * m + 4, axis=1) for _ in range(10)])
    for value in (5.8, 11.5, 17.3, 23.0):
        ratio = np.mean(h > value) / np.exp(-0.4 * value)
        assert 0.95 < ratio < 1.12, (value, ratio)


def test_printed_false_alarm_probabilities_are_rounded_and_floored():
    # the statements follow scripts/calibrate_periodicity.py (see timingkit.events.folding)
    entry = false_alarm_entry(3.4567e-2, 5000, "h")
    assert entry["false_alarm_probability"] == 3e-2
    assert entry["false_alarm_probability_accuracy"].startswith("within 10%")
    assert false_alarm_entry(3.4567e-2, 5000, "z2", 2)["false_alarm_probability"] == 3.5e-2
    assert false_alarm_entry(3.4567e-3, 5000, "h")["false_alarm_probability_accuracy"] \
        .startswith("within 20%")
    assert false_alarm_entry(3.4567e-4, 200, "h")["false_alarm_probability_accuracy"] \
        .startswith("within 30%")
    assert "3x higher" in false_alarm_entry(3e-5, 200, "h")["false_alarm_probability_accuracy"]
    assert "10x higher" in false_alarm_entry(3e-4, 20, "z2", 20)[
        "false_alarm_probability_accuracy"]
    low = false_alarm_entry(1e-9, 5000, "h")
    assert low["false_alarm_probability"] == 1e-5 and low["false_alarm_probability_upper_limit"]


def _pulsed(rng, n, fraction, centre, fwhm, shape="gauss"):
    phases = rng.uniform(0, 1, n)
    pulsed = rng.random(n) < fraction
    if shape == "gauss":
        phases[pulsed] = (centre + rng.normal(0, fwhm / 2.3548, pulsed.sum())) % 1
    else:   # two peaks of unequal width, a flat bridge between them
        second = rng.random(pulsed.sum()) < 0.4
        one = rng.normal(centre, fwhm / 2.3548, pulsed.sum())
        two = rng.normal(centre + 0.4, 2 * fwhm / 2.3548, pulsed.sum())
        phases[pulsed] = np.where(second, two, one) % 1
    return phases


@pytest.mark.parametrize("fraction, fwhm, n, shape", [
    (0.3, 0.1, 20_000, "gauss"), (0.05, 0.08, 100_000, "gauss"), (0.5, 0.05, 5_000, "gauss"),
    (0.25, 0.06, 30_000, "two peaks")])
def test_pulsed_fraction_and_peak_phase_are_recovered(fraction, fwhm, n, shape):
    rng = np.random.default_rng(int(fraction * 1000) + n)
    pf_pulls, peak_pulls = [], []
    for _ in range(150):
        phases = _pulsed(rng, n, fraction, 0.37, fwhm, shape)
        sums = stats.fourier_sums(phases, 40)
        _, m = stats.h_test(sums, n)
        result = stats.pulsed_fraction(phases, int(m))
        pf_pulls.append((result["pulsed_fraction"] - fraction)
                        / result["pulsed_fraction_uncertainty"])
        peak, error = stats.peak_phase(sums, n, int(m))
        peak_pulls.append(((peak - 0.37 + 0.5) % 1 - 0.5) / error)
    for pulls in (np.array(pf_pulls), np.array(peak_pulls)):
        assert abs(pulls.mean()) < 0.35
        assert 0.8 < pulls.std() < 1.2


def test_unpulsed_events_give_a_pulsed_fraction_near_zero():
    rng = np.random.default_rng(5)
    pulls = []
    for _ in range(100):
        phases = rng.uniform(0, 1, 20_000)
        fold, _ = fold_summary(phases, harmonics=4, bins=16)
        pulls.append(fold["pulsed_fraction"]["value"] / fold["pulsed_fraction"]["uncertainty"])
    assert abs(np.mean(pulls)) < 0.4 and 0.75 < np.std(pulls) < 1.25
    assert any("no significant pulsation" in c for c in fold["cautions"])
