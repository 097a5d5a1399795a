"""Glitch search regression: a large glitch with a frequency-derivative step
and a decaying term (invented source "demo-young", TOAs at the barycentre).
Before the decaying term is in the model the local quadratic of the pulse
tracking cannot follow the post-glitch recovery, and connection broke about
110 days later; the search then fitted an insignificant second glitch there
(flagged forced_by_lost_connection). Once the real glitch and its decay are
fitted the pulses connect without it, so the search must report one glitch.
Invented data (seeded simulation); the truth is the injected model."""

from timingkit.glitch.search import search_glitches

STEP_HZ, AMPLITUDE_HZ, TAU_DAYS = 2.5e-5, 1.0e-7, 30.0
GLITCH = (59300.4, STEP_HZ, -1.0e-13, AMPLITUDE_HZ, TAU_DAYS)     # glitch_text arguments


def test_no_forced_glitch_in_the_recovery_of_a_decaying_glitch(simulate_young):
    start, obs, _ = simulate_young([GLITCH], 58800, 59800, 120, 50.0, 1,   # seed 1 loses
                                   12.2071, -1.6932e-11, epoch_mjd="59000")   # connection
    result = search_glitches(start, obs)
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
    # the case under test did arise: connection broke before the decay was fitted
    assert any("before the decaying terms" in w for w in result.warnings)
    assert result.fit.reduced_chi2 < 1.5
