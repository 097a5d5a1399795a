"""The [[glitch]] model component: keys, the published phase formula, the
frequency bookkeeping, analytic partials against numerical differences,
writing and reading back, clear errors, and a fit that recovers every
glitch parameter from simulated TOAs (invented source "demo-young", TOAs at
the barycentre so no Earth rotation is needed)."""

import math
from fractions import Fraction

import numpy as np
import pytest

from timingkit.formats.errors import InputError
from timingkit.fit.least_squares import fit
from timingkit.model import TimingModel
from timingkit.model.glitch import Glitch, glitch_phase, model_glitches
from timingkit.formats.model_file import format_model_document
from timingkit.geometry.observations import prepare_observations
from timingkit.formats.toa_table import ToaTable
from conftest import young_pulsar_text

DAY = 86400.0

BASE = young_pulsar_text(9.54321012345678, -1.2e-11, free=())

ONE_GLITCH = BASE + """
[[glitch]]
epoch_mjd = "58400.3"
phase_step = 0.1
frequency_step_hz = 1e-6
frequency_derivative_step = -1e-14
decaying_frequency_step_hz = 2e-7
decay_time_days = 100.0
"""

TWO_DECAYS = BASE + """
[[glitch]]
epoch_mjd = "58100"
frequency_step_hz = 3e-8

[[glitch]]
epoch_mjd = "58400.3"
phase_step = -0.2
frequency_step_hz = 1e-6
frequency_derivative_step = -1e-14
decaying_frequency_step_hz = [2e-7, 5e-8]
decay_time_days = [100.0, 12.5]
"""

ALL_FREE = ["spin.frequency_hz", "spin.frequency_derivatives.0", "glitch.0.phase_step",
            "glitch.0.frequency_step_hz", "glitch.0.frequency_derivative_step",
            "glitch.0.decaying_frequency_step_hz", "glitch.0.decay_time_days"]


def barycentric_obs(mjd, sites, ephemeris):
    mjd = np.asarray(mjd, float)
    day = np.floor(mjd)
    toas = ToaTable.from_arrays(day, mjd - day, np.full(len(mjd), 10.0), np.full(len(mjd), np.inf),
                            np.array(["ssb"] * len(mjd)))
    return prepare_observations(toas, sites, ephemeris)


def total_phase(ev, ref):
    """Phase relative to a reference evaluation, keeping all digits."""
    return (ev.phase_int - ref.phase_int) + (ev.phase_frac - ref.phase_frac)


def test_keys_and_parameter_names():
    model = TimingModel.from_text(TWO_DECAYS)
    names = model.parameter_names()
    for name in ["glitch.0.phase_step", "glitch.0.frequency_step_hz",
                 "glitch.0.frequency_derivative_step", "glitch.1.phase_step",
                 "glitch.1.decaying_frequency_step_hz.0", "glitch.1.decaying_frequency_step_hz.1",
                 "glitch.1.decay_time_days.0", "glitch.1.decay_time_days.1"]:
        assert name in names
    assert "glitch.0.decaying_frequency_step_hz" not in names   # no decay given for glitch 0
    g = model_glitches(model)[1]
    assert g.decays == [(2e-7, 100.0), (5e-8, 12.5)]
    assert model.parameter("glitch.1.frequency_derivative_step").unit == "Hz/s"
    assert model.parameter("glitch.1.decay_time_days.1").unit == "days"
    assert model.parameter("glitch.1.phase_step").unit == "cycles"


def test_phase_after_the_epoch_matches_the_published_formula(sites, ephemeris):
    # Glitch phase model as given in Lorimer & Kramer 2005, Handbook of Pulsar Astronomy,
    # timing chapter (section from memory): for dt > 0
    # phase = phase_step + df dt + derivative_step dt^2 / 2 + df_d tau (1 - exp(-dt / tau)),
    # and nothing before the epoch. The polynomial part is evaluated here in exact
    # rational arithmetic, the decay with math.exp.
    with_glitch = TimingModel.from_text(ONE_GLITCH)
    without = TimingModel.from_text(BASE)
    mjd = [58100.0, 58400.2999, 58400.31, 58420.0, 58650.5, 59300.25]
    obs = barycentric_obs(mjd, sites, ephemeris)
    diff = total_phase(with_glitch.evaluate(obs), without.evaluate(obs))
    epoch = Fraction("58400.3")
    for k, m in enumerate(mjd):
        dt = (Fraction(obs.tdb.day[k]) + Fraction(obs.tdb.frac[k]) - epoch) * 86400
        if dt <= 0:
            expected = 0.0
        else:
            poly = (Fraction("0.1") + Fraction("1e-6") * dt
                    + Fraction("-1e-14") * dt * dt / 2)
            tau = 100.0 * DAY
            expected = float(poly) + 2e-7 * tau * (1.0 - math.exp(-float(dt) / tau))
        assert diff[k] == pytest.approx(expected, abs=1e-9)


def test_frequency_is_the_derivative_of_the_phase(sites, ephemeris):
    # consistency: the glitch frequency the model reports (used for residuals in
    # seconds) must be d(phase)/dt of the glitch phase it adds (central differences)
    with_glitch = TimingModel.from_text(TWO_DECAYS)
    without = TimingModel.from_text(BASE)
    mjd = np.array([58150.0, 58410.0, 58500.0, 58900.0])
    h = 20.0 / DAY   # 20 s
    obs = [barycentric_obs(mjd + s, sites, ephemeris) for s in (-h, 0.0, h)]
    ev = [with_glitch.evaluate(o) for o in obs]
    ev0 = [without.evaluate(o) for o in obs]
    glitch_phase_ = [total_phase(a, b) for a, b in zip(ev, ev0)]
    numeric = (glitch_phase_[2] - glitch_phase_[0]) / (2 * 20.0)
    reported = ev[1].spin_frequency_hz - ev0[1].spin_frequency_hz
    np.testing.assert_allclose(reported, numeric, rtol=1e-6, atol=1e-13)
    assert np.all(reported > 2.9e-8)   # every time is after the first glitch


def test_analytic_partials_match_numerical_differences(sites, ephemeris):
    model = TimingModel.from_text(TWO_DECAYS)
    mjd = np.linspace(58010.0, 59100.0, 80)
    obs = barycentric_obs(mjd, sites, ephemeris)
    names = [n for n in model.parameter_names() if n.startswith("glitch.")]
    ev = model.evaluate(obs)
    design = model.design_matrix(ev, names)
    steps = {"phase_step": 1e-3, "frequency_step_hz": 1e-10,
             "frequency_derivative_step": 1e-18, "decaying_frequency_step_hz": 1e-10,
             "decay_time_days": 1e-2}
    for j, name in enumerate(names):
        key = model.parameter(name).key
        h = steps[key]
        up, down = model.copy(), model.copy()
        up.parameter(name).add(h)
        down.parameter(name).add(-h)
        numeric = (total_phase(up.evaluate(obs), ev) - total_phase(down.evaluate(obs), ev)) / (2 * h)
        scale = np.max(np.abs(numeric))
        assert scale > 0, name
        np.testing.assert_allclose(design[:, j], numeric, rtol=0, atol=1e-6 * scale,
                                   err_msg=name)


def test_written_model_reads_back_with_uncertainties_in_the_right_glitch():
    model = TimingModel.from_text(TWO_DECAYS)
    model.parameter("glitch.0.frequency_step_hz").uncertainty = 1.5e-11
    model.parameter("glitch.1.decay_time_days.1").uncertainty = 0.75
    model.parameter("glitch.1.frequency_step_hz").free = True
    text = format_model_document(model.to_document())
    again = TimingModel.from_text(text)
    assert again.parameter_names() == model.parameter_names()
    for p, q in zip(model.parameters(), again.parameters()):
        assert q.value == p.value, p.name
    assert again.parameter("glitch.0.frequency_step_hz").uncertainty == 1.5e-11
    assert again.parameter("glitch.1.frequency_step_hz").uncertainty is None
    assert again.parameter("glitch.1.decay_time_days.1").uncertainty == 0.75
    assert again.parameter("glitch.1.decay_time_days.0").uncertainty is None
    assert again.free_names == ["glitch.1.frequency_step_hz"]
    g = model_glitches(again)[1]
    assert str(g.epoch) == "58400.3"       # the epoch is written exactly as read
    assert g.decay_as_list


@pytest.mark.parametrize("extra, field, words", [
    ("decaying_frequency_step_hz = 1e-7\n", "glitch.0.decay_time_days", "decay_time_days"),
    ("decay_time_days = -5.0\n", "glitch.0.decay_time_days", "> 0"),
    ("decaying_frequency_step_hz = [1e-7, 2e-8]\ndecay_time_days = [10.0]\n",
     "glitch.0.decay_time_days", "one time-scale per term"),
    ("frequency_jump = 1e-7\n", "glitch.0.frequency_jump", "legal keys"),
    ("frequency_step_hz = \"lots\"\n", "glitch.0.frequency_step_hz", "number"),
])
def test_bad_glitch_sections_name_the_field(extra, field, words):
    text = BASE + '\n[[glitch]]\nepoch_mjd = "58400"\n' + extra
    with pytest.raises(InputError) as info:
        TimingModel.from_text(text, path="bad.toml")
    assert info.value.field == field
    assert words in str(info.value)
    assert "bad.toml" in str(info.value)


def test_single_table_instead_of_array_is_explained():
    with pytest.raises(InputError, match=r"\[\[glitch\]\]"):
        TimingModel.from_text(BASE + '\n[glitch]\nepoch_mjd = "58400"\n')
    with pytest.raises(InputError) as info:
        TimingModel.from_text(BASE + '\n[[glitch]]\nphase_step = 0.1\n')
    assert info.value.field == "glitch.0.epoch_mjd"


def test_fit_recovers_every_glitch_parameter_within_3_sigma(observe_at_ssb):
    truth = TimingModel.from_text(ONE_GLITCH)
    obs = observe_at_ssb(truth, 58000, 59100, 160, 50.0, 11)
    start = truth.copy()
    start.parameter("glitch.0.decay_time_days").add(15.0)
    start.parameter("glitch.0.decaying_frequency_step_hz").add(-3e-8)
    start.parameter("glitch.0.frequency_step_hz").add(2e-9)
    start.parameter("glitch.0.phase_step").add(0.05)
    result = fit(start, obs, free=ALL_FREE)
    assert result.converged
    assert result.reduced_chi2 == pytest.approx(1.0, abs=0.35)
    for name in ALL_FREE:
        got = result.model.parameter(name)
        pull = (got.value - truth.parameter(name).value) / got.uncertainty
        assert abs(pull) < 3.0, (name, pull)
    # the phase step is in cycles: 0.1 cycles, not radians or seconds
    assert result.model.parameter("glitch.0.phase_step").value == pytest.approx(0.1, abs=0.01)


def test_glitch_phase_function_cut_and_continuation():
    # glitch_phase is the analytic formula for any dt (used to move epochs); the
    # component applies it only after the epoch
    dt = np.array([-1e6, 0.0, 1e6])
    values = glitch_phase(dt, 0.25, 1e-6, -1e-14, [(2e-7, 100.0)])
    assert values[1] == pytest.approx(0.25)
    tau = 100 * DAY
    assert values[2] == pytest.approx(0.25 + 1.0 - 0.5e-14 * 1e12
                                      + 2e-7 * tau * (1 - math.exp(-1e6 / tau)), rel=1e-12)
    assert isinstance(model_glitches(TimingModel.from_text(ONE_GLITCH))[0], Glitch)
