"""The glitch search with red timing noise (issue 7's glitch test).

Simulated invented young pulsar "demo-young" (10 Hz) at the barycentre (site
'ssb': fast), a TOA every 14 days for 3 years with 30 µs errors, plus
power-law red noise (log10 amplitude -10.75, spectral index 4, 30 Fourier
frequencies) injected by timingkit.model.simulate: after fitting the spin
frequency and its derivative the residuals are about 130 µs rms, some four
times the white level, the red power on the longest time-scales. The
searches with the noise model start from a model carrying the true
[red_noise] section (parameters fixed); those without it start from the same
model minus that section. Seeded, so every run sees the same data.

Statistical facts checked (common practice): under the null hypothesis a
false-alarm probability is uniform, so at the default 3-sigma threshold
(two-sided Gaussian tail, 0.27 %) at most 5 % of glitch-free data sets may
give a candidate; the sample covariance of many noise draws converges to the
covariance of the process (here drawn by the noise model's own
``NoiseModel.realisations_s``, independently of the search's analytic
red-noise term).
"""

import numpy as np
import pytest

from timingkit.glitch.scan import _red_terms
from timingkit.glitch.candidates import phase_data
from timingkit.glitch.scan import build_windows, false_alarm_probability, gap_statistics, null_distribution
from timingkit.glitch.search import search_glitches
from timingkit.glitch.tracking import track_phases
from timingkit.model import TimingModel
from timingkit.model.glitch import model_glitches
from timingkit.model.noise import NoiseModel, toa_times_s
from conftest import young_pulsar_text

START_MJD = 58000.0
YEARS, CADENCE_DAYS, ERR_US = 3.0, 14.0, 30.0
F_HZ, FDOT = 10.0, -1e-11
REALISATIONS = 40

SPIN = young_pulsar_text(F_HZ, FDOT)
RED = """
[red_noise]
amplitude_log10 = -10.75
spectral_index = 4.0
frequencies = 30
"""


def simulate(simulate_young, seed, glitches=()):
    """The TOAs of the young pulsar with red noise (``simulate_young``: conftest)."""
    days = 365.25 * YEARS
    return simulate_young(glitches, START_MJD, START_MJD + days, int(days / CADENCE_DAYS),
                          ERR_US, seed, F_HZ, FDOT, extra_text=RED)[1]


def with_noise_model():
    return TimingModel.from_text(SPIN + RED)


def without_noise_model():
    return TimingModel.from_text(SPIN)


@pytest.fixture(scope="module")
def glitch_free(simulate_young):
    return [simulate(simulate_young, 6000 + k) for k in range(REALISATIONS)]


def test_red_noise_is_well_above_white_in_these_simulations(glitch_free):
    # the premise of the tests below: a plain weighted fit leaves red residuals
    # several times the TOA errors (else the tests would not be about red noise)
    from timingkit.fit.least_squares import fit
    rms = [fit(without_noise_model(), obs).postfit.rms_us() for obs in glitch_free[:10]]
    assert 2.5 * ERR_US < np.median(rms) < 10 * ERR_US


def test_glitch_free_red_noise_rarely_gives_candidates_with_the_noise_model(glitch_free):
    with_candidates = 0
    for obs in glitch_free:
        result = search_glitches(with_noise_model(), obs)
        with_candidates += len(result.candidates) > 0
        assert result.fit is not None and not model_glitches(result.model)
        assert result.fit.noise.method == "generalised least squares"
        assert "red noise" in result.null_noise
    print(f"glitch-free red-noise runs with a candidate, noise model used: "
          f"{with_candidates}/{REALISATIONS}")
    assert with_candidates <= 2                      # <= 5 % of 40


def test_the_same_data_without_the_noise_model_give_false_candidates(glitch_free):
    # the noise model is what keeps the rate down: searched as white noise, the
    # same data sets (at most 2 of 40 with the noise model, test above) give
    # candidates in a large fraction of runs (27 of 40 when measured)
    with_candidates = sum(len(search_glitches(without_noise_model(), obs).candidates) > 0
                          for obs in glitch_free)
    print(f"glitch-free red-noise runs with a candidate, white-noise search: "
          f"{with_candidates}/{REALISATIONS}")
    assert with_candidates >= 12                     # >= 30 %, against <= 5 %


def found(candidates, epoch, step_hz):
    return [c for c in candidates
            if c.epoch_min_mjd <= epoch <= c.epoch_max_mjd
            and c.epoch_min_mjd <= float(c.epoch_mjd) <= c.epoch_max_mjd
            and abs(c.frequency_step_hz - step_hz) <= 3 * c.frequency_step_uncertainty_hz]


@pytest.mark.parametrize("size", [1e-8, 1e-6])
def test_injected_glitch_is_found_with_red_noise_present(simulate_young, size):
    step = size * F_HZ
    for k in range(10):
        rng = np.random.default_rng(8000 + k)
        days = 365.25 * YEARS
        epoch = round(rng.uniform(START_MJD + 0.3 * days, START_MJD + 0.7 * days), 6)
        obs = simulate(simulate_young, 8000 + k, [(epoch, step, 1e-3 * FDOT)])
        result = search_glitches(with_noise_model(), obs)
        limit = result.detection_limit["fractional_size"]
        assert size >= 30 * limit                    # well above the stated limit
        assert found(result.candidates, epoch, step), (k, epoch, [c.to_json()
                                                                  for c in result.candidates])
        assert len(result.candidates) == 1
        # far beyond every noise simulation: reported as the bound 1/(trials + 1)
        c = result.candidates[0]
        assert c.false_alarm_probability_upper_limit
        assert c.false_alarm_probability == pytest.approx(1 / (result.settings.null_trials + 1))
        assert result.fit.noise.method == "generalised least squares"


def test_stated_detection_limit_includes_the_red_noise(glitch_free):
    obs = glitch_free[0]
    red = search_glitches(with_noise_model(), obs).detection_limit
    white = search_glitches(without_noise_model(), obs).detection_limit
    # same TOAs and windows: the red noise adds to the steps' covariance
    assert red["fractional_size"] > 1.2 * white["fractional_size"]
    assert "red noise" in red["note"] and "red noise" not in white["note"]


def _windows(model, obs):
    data = phase_data(model, obs, None)
    chains = (track_phases(data.t_s, data.frac, data.sigma, 2e-4, 2e-12),
              track_phases(data.t_s, data.frac, data.sigma, 2e-4, 2e-12, backward=True))
    win = build_windows(data.t_s, data.sigma, chains, set(), 10, None, data.red)
    return data, chains, win


def test_step_covariance_matches_draws_of_the_noise_model(glitch_free):
    # the analytic covariance of each gap's frequency and frequency-derivative
    # steps (white part of both windows + the red term with the windows'
    # correlation) against the sample covariance of the same steps measured on
    # draws made by NoiseModel.realisations_s (seconds, TOA-table order),
    # converted here to cycles and to the search's time order
    model, obs = with_noise_model(), glitch_free[0]
    data, _, win = _windows(model, obs)
    draws_s = NoiseModel.from_timing_model(model).realisations_s(
        obs.toas, toa_times_s(obs), np.random.default_rng(3), 6000)
    f_hz = model.evaluate(obs).spin_frequency_hz
    draws = (draws_s * f_hz[None, :])[:, data.order]
    _, steps, *_ = gap_statistics(win, draws)                 # (M, G, 2)
    sample = np.einsum("mgi,mgj->gij", steps, steps) / len(steps)
    analytic = win.cov_left[:, 1:, 1:] + win.cov_right[:, 1:, 1:] + win.red_cov
    for i, j in ((0, 0), (1, 1)):
        ratio = sample[:, i, j] / analytic[:, i, j]
        # sampling error of a variance from 6000 draws: sqrt(2/6000) = 1.8 %
        assert np.all(np.abs(ratio - 1) < 0.08), (i, j, ratio.min(), ratio.max())
    corr = sample[:, 0, 1] / np.sqrt(sample[:, 0, 0] * sample[:, 1, 1])
    corr_model = analytic[:, 0, 1] / np.sqrt(analytic[:, 0, 0] * analytic[:, 1, 1])
    assert np.all(np.abs(corr - corr_model) < 0.06)
    # the red term matters here: without it, or with the two windows' red noise
    # taken as independent, the variances would be far off the sample's
    assert np.median(win.red_cov[:, 0, 0] / analytic[:, 0, 0]) > 0.3
    resp_l, _ = _red_terms(win.left, _offsets(data, win, win.left), win.e_left, win.w_left,
                           data.red)
    resp_r, _ = _red_terms(win.right, _offsets(data, win, win.right), win.e_right,
                           win.w_right, data.red)
    independent = (win.cov_left[:, 1:, 1:] + win.cov_right[:, 1:, 1:]
                   + np.einsum("gik,gjk->gij", resp_l[:, 1:], resp_l[:, 1:])
                   + np.einsum("gik,gjk->gij", resp_r[:, 1:], resp_r[:, 1:]))
    assert np.median(np.abs(sample[:, 0, 0] / independent[:, 0, 0] - 1)) > 0.15


def _offsets(data, win, idx):
    """Window abscissae (days from the gap's middle) as build_windows makes them."""
    t_days = data.t_s / 86400.0
    mid = 0.5 * (t_days[win.gaps] + t_days[win.gaps + 1])
    return np.where(idx >= 0, t_days[np.maximum(idx, 0)] - mid[:, None], 0.0)


def test_scaled_white_errors_weight_the_search(observe_at_ssb):
    # [[white_noise]] groups scale the uncertainties the search weights with:
    # the gap statistic is invariant to a common error scale and the null draws
    # use the same random numbers, so the stated detection limit grows by
    # exactly the scale factor (white noise only: no red section)
    truth = TimingModel.from_text(SPIN)
    obs = observe_at_ssb(truth, START_MJD, START_MJD + 700.0, 50, ERR_US, 11)
    scaled = TimingModel.from_text(SPIN + "\n[[white_noise]]\nerror_scale = 2.5\n")
    plain = search_glitches(truth, obs).detection_limit["frequency_step_hz"]
    wide = search_glitches(scaled, obs).detection_limit["frequency_step_hz"]
    assert wide == pytest.approx(2.5 * plain, rel=1e-6)
    assert "scaled" in search_glitches(scaled, obs).null_noise


def test_false_alarm_probability_is_calibrated_under_red_noise(simulate_young):
    # uniform false-alarm probability of the largest gap statistic on glitch-free
    # red-noise data with the noise model's null (binomial bounds, 100 data sets)
    faps = []
    for k in range(100):
        obs = simulate(simulate_young, 9000 + k)
        data, chains, win = _windows(with_noise_model(), obs)
        stat, *_ = gap_statistics(win, data.frac + chains[0].offsets,
                                  data.frac + chains[1].offsets)
        null = null_distribution(win, data.null_noise, 300, np.random.default_rng(k))
        faps.append(false_alarm_probability(null, float(np.max(stat))))
    faps = np.array(faps)
    print("P(FAP < 0.5, 0.1, 0.01):", [float(np.mean(faps < q)) for q in (0.5, 0.1, 0.01)])
    assert 0.36 <= np.mean(faps < 0.5) <= 0.64
    assert 0.03 <= np.mean(faps < 0.1) <= 0.19
    assert np.mean(faps < 0.01) <= 0.04
