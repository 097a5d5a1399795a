"""The fitter on simulated data: exactness, statistical calibration, errors.

Simulations (invented sources) are the test data here; the checks are
statistical facts: fitted-minus-true over the reported uncertainty must be a
unit normal and the reduced chi-square near 1 when the TOA errors are right.
"""

import numpy as np
import pytest

from timingkit.formats.errors import FitError
from timingkit.fit.least_squares import compute_residuals, fit
from timingkit.model import TimingModel
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas
from timingkit.formats.toa_table import ToaTable
from numdiff import phase_partial

MSP = '''
name = "sim-msp"
[position]
ra = "13h21m09.4712836s"
dec = "+41d06m38.20419s"
[spin]
epoch_mjd = "58000"
frequency_hz = "700.123456789012345678"
frequency_derivatives = ["-1.2e-15"]
[dispersion]
dm = 20.0
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm"]
'''


def _perturbed(model, **deltas):
    m = model.copy()
    for name, d in deltas.items():
        m.parameter(name).add(d)
    return m


def test_noise_free_30_year_msp_fits_back_below_1ns(sites, ephemeris):
    truth = TimingModel.from_text(MSP)
    toas = simulate_toas(truth, 52500, 52500 + 30 * 365.25, 400, 1.0, sites, ephemeris,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[820, 1400, 2300],
                         seed=3, add_noise=False)
    obs = prepare_observations(toas, sites, ephemeris)
    start = _perturbed(truth, **{"spin.frequency_hz": 2e-13, "dispersion.dm": 3e-3,
                                 "spin.frequency_derivatives.0": 1e-21})
    res = fit(start, obs)
    assert res.converged
    assert res.postfit.rms_us() < 1e-3                      # < 1 ns
    assert abs(res.model.parameter("spin.frequency_hz").value
               - truth.parameter("spin.frequency_hz").value) < 1e-15
    assert res.prefit.rms_us() > 10 * res.postfit.rms_us()


def _calibration_model():
    return TimingModel.from_text(MSP.replace('"700.123456789012345678"', '"123.456789"'))


def test_statistical_calibration_over_60_simulations(ephemeris):
    # Pulls (fitted - true)/sigma must have mean ~0 and std in [0.8, 1.2] for
    # every free parameter, and the reduced chi-square must average ~1.
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = _calibration_model()
    exact = simulate_toas(truth, 57000, 59000, 150, 2.0, sites, ephemeris,
                          site_names=["geocentre"], freqs_mhz=[700, 1400, 3000], seed=1,
                          add_noise=False)
    rng = np.random.default_rng(42)
    names = truth.free_names
    pulls = {n: [] for n in names}
    red = []
    for _ in range(60):
        noise_s = rng.normal(0, 2e-6, len(exact))
        t = exact.times().add_seconds(noise_s)
        toas = ToaTable.from_arrays(t.day, t.frac, exact.err_us, exact.freq_mhz, exact.site)
        obs = prepare_observations(toas, sites, ephemeris)
        res = fit(truth, obs)
        for n in names:
            p = res.model.parameter(n)
            q = truth.parameter(n)
            diff = (p.value - q.value) + (p.value_lo - q.value_lo)
            pulls[n].append(diff / p.uncertainty)
        red.append(res.reduced_chi2)
    for n in names:
        x = np.array(pulls[n])
        assert abs(x.mean()) < 0.45, n          # 3 sigma of the mean of 60 unit normals ~0.39
        assert 0.8 <= x.std(ddof=1) <= 1.2, n
    assert abs(np.mean(red) - 1.0) < 0.05


def test_design_matrix_matches_numerical_derivatives(sites, ephemeris):
    truth = TimingModel.from_text(MSP.replace(
        'dec = "+41d06m38.20419s"',
        'dec = "+41d06m38.20419s"\nparallax_mas = 1.0\npm_ra_cosdec_mas_per_yr = 5.0'))
    toas = simulate_toas(truth, 58000, 58800, 60, 1.0, sites, ephemeris,
                         site_names=["desert-dish"], freqs_mhz=[800, 1600], seed=5,
                         add_noise=False)
    obs = prepare_observations(toas, sites, ephemeris)
    names = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm",
             "position.ra", "position.dec", "position.pm_ra_cosdec_mas_per_yr",
             "position.pm_dec_mas_per_yr", "position.parallax_mas"]
    steps = [1e-9, 1e-18, 1e-3, 1e-8, 1e-8, 1.0, 1.0, 1.0]
    ev = truth.evaluate(obs)
    m = truth.design_matrix(ev, names)
    for j, (name, h) in enumerate(zip(names, steps)):
        num = phase_partial(truth, obs, name, h)
        scale = np.max(np.abs(num))
        assert scale > 0, name
        assert np.max(np.abs(m[:, j] - num)) < 1e-4 * scale, name


def test_pulse_column_is_honoured(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = _calibration_model()
    toas = simulate_toas(truth, 58000, 58400, 40, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400], seed=2, add_noise=False)
    obs = prepare_observations(toas, sites, ephemeris)
    ev = truth.evaluate(obs)
    pulse = ev.phase_int.astype(np.int64) + 1000      # any constant shift is absorbed
    pulse[-1] += 1                                   # pin the last TOA one turn later
    pinned = ToaTable.from_arrays(toas.mjd_day, toas.mjd_frac, toas.err_us, toas.freq_mhz,
                              toas.site, pulse=pulse)
    obs2 = prepare_observations(pinned, sites, ephemeris)
    res = compute_residuals(truth, obs2, pulse_number=pulse.astype(float) - 1000,
                            subtract_mean=False)
    assert abs(res.phase[-1] + 1.0) < 1e-6 and np.max(np.abs(res.phase[:-1])) < 1e-6
    fitted = fit(truth, obs2, free=["spin.frequency_hz"])
    assert fitted.postfit.rms_us() > 100                 # the pinned turn cannot be fitted away
    assert any("'pulse' column" in w for w in fitted.warnings)


def test_unconstrained_and_degenerate_parameters_are_named(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = TimingModel.from_text(MSP.replace('["-1.2e-15"]', '["-1.2e-15", "0"]'))
    toas = simulate_toas(truth, 58000, 58300, 30, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400], seed=2)
    obs = prepare_observations(toas, sites, ephemeris)
    # one observing frequency: DM is the same as a phase offset
    with pytest.raises(FitError, match="dispersion.dm"):
        fit(truth, obs, free=["spin.frequency_hz", "dispersion.dm"])
    with pytest.raises(FitError, match="only 3 TOAs"):
        fit(truth, obs.select(slice(0, 3)),
            free=["spin.frequency_hz", "spin.frequency_derivatives.0",
                  "spin.frequency_derivatives.1"])
    with pytest.raises(FitError, match="no free parameters"):
        fit(truth, obs, free=[])


def test_starting_model_too_far_off_is_reported(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = _calibration_model()
    toas = simulate_toas(truth, 57000, 59000, 200, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400, 800], seed=4)
    obs = prepare_observations(toas, sites, ephemeris)
    bad = _perturbed(truth, **{"spin.frequency_hz": 3e-6})   # ~500 turns over the span
    with pytest.raises(FitError, match="cannot number the pulses"):
        fit(bad, obs)


def test_the_prefit_evaluation_serves_the_first_iteration(sites, ephemeris, monkeypatch):
    # One evaluation for the pre-fit residuals and the first linearisation,
    # one per further iteration, one for the final residuals: a fit that
    # evaluated the pre-fit model twice would count one more.
    truth = _calibration_model()
    toas = simulate_toas(truth, 58000, 58400, 60, 1.0, sites, ephemeris,
                         site_names=["desert-dish"], freqs_mhz=[820, 1400], seed=4)
    obs = prepare_observations(toas, sites, ephemeris)
    calls = []
    original = TimingModel.evaluate
    monkeypatch.setattr(TimingModel, "evaluate",
                        lambda self, *a, **k: calls.append(1) or original(self, *a, **k))
    res = fit(_perturbed(truth, **{"spin.frequency_hz": 1e-9}), obs)
    assert res.iterations >= 2
    assert len(calls) == res.iterations + 1
