"""Glitch search regression: a large glitch with a frequency-derivative step
and a decaying term (invented source "demo-young", TOAs at the barycentre).
Before the decaying term is in the model the local quadratic of the pulse
tracking cannot follow the post-glitch recovery, and connection broke about
110 days later; the search then fitted an insignificant second glitch there
(flagged forced_by_lost_connection). Once the real glitch and its decay are
fitted the pulses connect without it, so the search must report one glitch.
Invented data (seeded simulation); the truth is the injected model."""

from timingkit.glitch.search import search_glitches
from timingkit.model import TimingModel
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas

START = """
name = "demo-young"
[position]
ra = "08h35m20.6s"
dec = "-45d10m34.9s"
[spin]
epoch_mjd = "59000"
frequency_hz = "11.19451234"
frequency_derivatives = ["-1.5666e-11"]
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0"]
"""
STEP_HZ, AMPLITUDE_HZ, TAU_DAYS = 2.5e-5, 1.0e-7, 30.0
GLITCH = f"""
[[glitch]]
epoch_mjd = "59300.4"
frequency_step_hz = {STEP_HZ!r}
frequency_derivative_step = -1.0e-13
decaying_frequency_step_hz = {AMPLITUDE_HZ!r}
decay_time_days = {TAU_DAYS!r}
"""


def test_no_forced_glitch_in_the_recovery_of_a_decaying_glitch(sites, ephemeris):
    truth = TimingModel.from_text(START + GLITCH)
    toas = simulate_toas(truth, 58800, 59800, 120, 50.0, sites, ephemeris, site_names=["ssb"],
                         freqs_mhz=[1400.0], seed=1)   # seed 1 broke connection at MJD 59411.9
    result = search_glitches(TimingModel.from_text(START), prepare_observations(toas, sites,
                                                                               ephemeris))
    assert len(result.candidates) == 1
    (c,) = result.candidates
    assert not c.forced
    assert c.epoch_min_mjd <= 59300.4 <= c.epoch_max_mjd
    assert abs(c.frequency_step_hz - STEP_HZ) <= 3 * c.frequency_step_uncertainty_hz
    (term,) = c.decaying_terms
    assert abs(term["decaying_frequency_step_hz"] - AMPLITUDE_HZ) \
        <= 3 * term["decaying_frequency_step_uncertainty_hz"]
    assert abs(term["decay_time_days"] - TAU_DAYS) <= 3 * term["decay_time_uncertainty_days"]
    assert not any("forced_by_lost_connection" in w for w in result.warnings)
    assert result.fit.reduced_chi2 < 1.5
