"""Noise-aware timing: white-noise scaling, power-law red noise, GLS, ML noise fit.

Simulated (invented) pulsars at the barycentre (site 'ssb': no Earth
rotation, fast). External checks name their sources beside them: the dense
covariance-whitening GLS of Coles et al. 2011 (MNRAS 418, 561) and
scipy.stats.multivariate_normal for the Fourier-basis likelihood of van
Haasteren & Vallisneri 2014 (MNRAS 446, 1170); scipy.integrate for the
spectral normalisation; the statistical facts that fitted-minus-true over a
correct uncertainty is a unit normal (pulls) and that ML estimates lie
within 3 sigma of the truth.
"""

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.stats

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.least_squares import fit
from timingkit.fit.gls import (RedLikelihood, dense_gls, gls_solve, marginal_log_likelihood,
                           red_covariance_dense)
from timingkit.model import TimingModel
from timingkit.model.noise import (ONE_PER_YEAR_HZ, SECONDS_PER_YEAR, NoiseModel,
                                   fourier_basis, fourier_prior_variances, power_law_psd)
from timingkit.formats.model_file import format_model_document
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas

SPIN = '''
name = "sim-noisy"
[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"
[spin]
epoch_mjd = "58000"
frequency_hz = "10.6173"
frequency_derivatives = ["-1.0e-13"]
'''
SPIN_FREE = ["spin.frequency_hz", "spin.frequency_derivatives.0"]


def _red(amplitude_log10=-12.5, spectral_index=4.0, frequencies=20):
    return (f"\n[red_noise]\namplitude_log10 = {amplitude_log10}\n"
            f"spectral_index = {spectral_index}\nfrequencies = {frequencies}\n")


def _white(groups):
    out = ""
    for flag, value, scale, added in groups:
        out += "\n[[white_noise]]\n"
        if flag is not None:
            out += f'flag = "{flag}"\nvalue = "{value}"\n'
        out += f"error_scale = {scale}\nadded_error_us = {added}\n"
    return out


def _free(names):
    return "\n[fit]\nfree = [" + ", ".join(f'"{n}"' for n in names) + "]\n"


def _model(*parts, free=SPIN_FREE):
    return TimingModel.from_text(SPIN + "".join(parts) + _free(free))


def _observations(model, sites, ephemeris, seed, count=200, error_us=1.0, flags=None,
                  noise=None, add_noise=True):
    toas = simulate_toas(model, 57000, 59000, count, error_us, sites, ephemeris,
                         site_names=["ssb"], freqs_mhz=[1400.0], seed=seed, flags=flags,
                         noise=noise, add_noise=add_noise)
    return prepare_observations(toas, sites, ephemeris)


def _pulls(result, truth, names):
    return [(result.model.parameter(n).value - truth.parameter(n).value) / result.uncertainties[n]
            for n in names]


# ------------------------------------------------------------ spectrum and basis

def test_power_law_shape_and_corner():
    # P(f) = A^2/(12 pi^2) f_yr^-3 (f/f_yr)^-gamma: at f = 1/yr it is A^2/(12 pi^2) yr^3
    # (the power-law convention of van Haasteren & Vallisneri 2014)
    p_yr = power_law_psd(ONE_PER_YEAR_HZ, -13.0, 13.0 / 3.0)
    assert p_yr == pytest.approx(1e-26 / (12 * math.pi ** 2) * SECONDS_PER_YEAR ** 3, rel=1e-12)
    # doubling f divides by 2^gamma
    f = np.array([0.3, 0.6]) * ONE_PER_YEAR_HZ
    p = power_law_psd(f, -12.0, 4.5)
    assert p[0] / p[1] == pytest.approx(2 ** 4.5, rel=1e-12)
    # a corner frequency flattens the low end and leaves f >> f_c unchanged
    fc = 0.2 * ONE_PER_YEAR_HZ
    # P(f -> 0) = P_pure(f_c), and at f = f_c the power is 2^(-gamma/2) of P_pure(f_c)
    assert power_law_psd(1e-3 * fc, -12, 4, fc) == pytest.approx(power_law_psd(fc, -12, 4),
                                                                 rel=1e-5)
    assert power_law_psd(fc, -12, 4, fc) == pytest.approx(power_law_psd(fc, -12, 4) * 2 ** -2,
                                                          rel=1e-12)
    assert power_law_psd(100 * fc, -12, 4, fc) == pytest.approx(power_law_psd(100 * fc, -12, 4),
                                                                rel=1e-3)


def test_fourier_prior_sums_to_integral_of_spectrum():
    # phi_j = P(f_j) / T: summed over frequencies j >= 2 (one quadrature) it must
    # approximate int P(f) df over the bins they cover (midpoint rule; the
    # lowest bin is left out because the rule is poor where P is steepest),
    # the integral from scipy.integrate.quad
    span = 8.0 * SECONDS_PER_YEAR
    count = 40
    phi = fourier_prior_variances(span, count, -12.0, 2.0)
    assert np.all(phi[0::2] == phi[1::2])          # sin and cos share the variance
    integral = scipy.integrate.quad(lambda f: power_law_psd(f, -12.0, 2.0), 1.5 / span,
                                    (count + 0.5) / span, limit=200)[0]
    assert np.sum(phi[2::2]) == pytest.approx(integral, rel=0.08)


def test_fourier_basis_columns():
    t = np.linspace(0, 1000.0, 7)
    basis = fourier_basis(t, 1000.0, 3)
    assert basis.shape == (7, 6)
    assert basis[:, 0] == pytest.approx(np.sin(2 * np.pi * t / 1000.0), abs=1e-15)
    assert basis[:, 5] == pytest.approx(np.cos(2 * np.pi * 3 * t / 1000.0), abs=1e-15)


# ------------------------------------------------------------ GLS cross-checks

def _small_problem(seed=1, n=150, count=15):
    rng = np.random.default_rng(seed)
    span = 3e8
    t = np.sort(rng.uniform(0, span, n))
    err = rng.uniform(0.5, 3.0, n) * 1e-6
    design = np.column_stack([np.ones(n), t, t ** 2 / 2])
    basis = fourier_basis(t, span, count)
    phi = fourier_prior_variances(span, count, -12.5, 4.0)
    cov = np.diag(err ** 2) + red_covariance_dense(basis, phi)
    resid = rng.multivariate_normal(np.zeros(n), cov) + design @ [1e-5, 1e-13, 1e-21]
    return design, resid, err, basis, phi, cov


def test_woodbury_gls_matches_dense_covariance_whitening():
    # Coles et al. 2011: Cholesky-whiten with the full N x N covariance, then OLS
    design, resid, err, basis, phi, cov = _small_problem()
    sol = gls_solve(design, resid, err, basis, phi, ["offset", "frequency", "derivative"])
    delta, dcov, chi2, loglike = dense_gls(design, resid, cov)
    assert sol.delta == pytest.approx(delta, rel=1e-8)
    assert sol.covariance == pytest.approx(dcov, rel=1e-8)
    assert sol.chi2 == pytest.approx(chi2, rel=1e-9)
    assert sol.log_likelihood == pytest.approx(loglike, rel=1e-11, abs=1e-7)
    # the ML red-noise realisation is the Wiener filter C_red C^-1 (r - M delta)
    wiener = red_covariance_dense(basis, phi) @ np.linalg.solve(cov, resid - design @ delta)
    assert sol.red_realisation_s == pytest.approx(wiener, rel=1e-7, abs=1e-12 * np.std(wiener))
    # GLS uncertainties are not the WLS ones (red noise inflates them)
    wls = gls_solve(design, resid, err, None, None, ["offset", "frequency", "derivative"])
    assert np.all(np.sqrt(np.diag(sol.covariance)) > 3 * np.sqrt(np.diag(wls.covariance)))


def test_marginal_likelihood_matches_multivariate_normal():
    # independent form: ln L = ln N(r_hat; 0, C) + p/2 ln(2 pi) - 1/2 ln|M^T C^-1 M|
    # with N(.) from scipy.stats.multivariate_normal and r_hat the GLS post-fit residual
    design, resid, err, basis, phi, cov = _small_problem(seed=4)
    sol = gls_solve(design, resid, err, basis, phi, ["a", "b", "c"])
    mcm = design.T @ np.linalg.solve(cov, design)
    expected = (scipy.stats.multivariate_normal(mean=np.zeros(len(resid)), cov=cov)
                .logpdf(sol.postfit_s) + 1.5 * math.log(2 * math.pi)
                - 0.5 * np.linalg.slogdet(mcm)[1])
    assert marginal_log_likelihood(design, resid, err, basis, phi) == pytest.approx(expected,
                                                                                   abs=1e-6)
    # the fixed-white fast path agrees, for other red-noise priors too
    fast = RedLikelihood(design, resid, err, basis)
    for amp in (-13.5, -12.0):
        phi2 = fourier_prior_variances(3e8, 15, amp, 3.0)
        assert fast(phi2) == pytest.approx(marginal_log_likelihood(design, resid, err, basis,
                                                                   phi2), abs=1e-7)


def test_gls_names_degenerate_parameters():
    design, resid, err, basis, phi, _ = _small_problem()
    twin = np.column_stack([design, 2 * design[:, 1]])
    with pytest.raises(FitError, match="frequency.*frequency_again|frequency_again.*frequency"):
        gls_solve(twin, resid, err, basis, phi, ["offset", "frequency", "derivative", "frequency_again"])


# ------------------------------------------------------------ model file

def test_noise_sections_round_trip_with_uncertainties():
    model = _model(_white([("backend", "wide-a", 1.1, 0.3), (None, None, 1.2, 0.0)]), _red(),
                   free=SPIN_FREE + ["white_noise.0.error_scale", "red_noise.amplitude_log10"])
    assert model.free_names[-2:] == ["white_noise.0.error_scale", "red_noise.amplitude_log10"]
    model.parameter("white_noise.0.error_scale").uncertainty = 0.02
    model.parameter("red_noise.spectral_index").uncertainty = 0.4
    again = TimingModel.from_text(format_model_document(model.to_document()))
    assert again.parameter("white_noise.0.error_scale").value == 1.1
    assert again.parameter("white_noise.0.added_error_us").value == 0.3
    assert again.parameter("white_noise.1.error_scale").value == 1.2
    assert again.parameter("white_noise.0.error_scale").uncertainty == 0.02
    assert again.parameter("red_noise.spectral_index").uncertainty == 0.4
    assert again.free_names == model.free_names
    # noise parameters take no part in the timing evaluation
    assert all(c.contribution != "noise" for c in again.sections)


@pytest.mark.parametrize("text, field", [
    (_white([("backend", "wide-a", -1.0, 0.0)]), "white_noise.0.error_scale"),
    (_white([("backend", "wide-a", 1.0, -0.5)]), "white_noise.0.added_error_us"),
    ('\n[[white_noise]]\nflag = "backend"\nerror_scale = 1.0\n', "white_noise.0.flag"),
    (_white([("backend", "x", 1.0, 0.0), ("backend", "x", 2.0, 0.0)]), "white_noise.1"),
    ('\n[[white_noise]]\nerror_factor = 1.0\n', "white_noise.0.error_factor"),
    (_red(frequencies=0), "red_noise.frequencies"),
    (_red(spectral_index=-1.0), "red_noise.spectral_index"),
    ("\n[red_noise]\nspectral_index = 4.0\n", "red_noise.amplitude_log10"),
])
def test_bad_noise_sections_name_the_field(text, field):
    with pytest.raises(InputError) as info:
        TimingModel.from_text(SPIN + text, path="psr.toml")
    assert info.value.field == field
    assert "psr.toml" in str(info.value)


def test_group_selection_errors(sites, ephemeris):
    model = _model(_white([("receiver", "wide-a", 1.5, 0.0)]))
    obs = _observations(TimingModel.from_text(SPIN + _free(SPIN_FREE)), sites, ephemeris, 1,
                        count=20, flags={"backend": ["wide-a", "wide-b"]})
    with pytest.raises(InputError, match="receiver.*site, backend"):
        fit(model, obs)
    # site works as a selector; a TOA in two flagged groups is an error
    two = NoiseModel.from_timing_model(_model(_white([("site", "ssb", 2.0, 0.0),
                                                      ("backend", "wide-a", 1.5, 0.0)])))
    with pytest.raises(InputError, match="two white-noise groups"):
        two.group_index(obs.toas)


# ------------------------------------------------------------ fitting with noise

def test_error_scale_scales_uncertainties_and_chi2(sites, ephemeris):
    # one group for all TOAs with scale 2: every uncertainty doubles, chi2 drops by 4
    plain = _model()
    obs = _observations(plain, sites, ephemeris, 3)
    scaled = _model(_white([(None, None, 2.0, 0.0)]))
    a, b = fit(plain, obs), fit(scaled, obs)
    for n in SPIN_FREE:
        assert b.uncertainties[n] == pytest.approx(2 * a.uncertainties[n], rel=1e-9)
    assert b.chi2 == pytest.approx(a.chi2 / 4, rel=1e-9)
    assert b.noise.method == "weighted least squares" and a.noise is None
    # a quadrature term acts per TOA: only the group with it changes
    obs2 = _observations(plain, sites, ephemeris, 3, flags={"backend": ["wide-a", "wide-b"]})
    part = _model(_white([("backend", "wide-b", 1.0, 3.0)]))
    res = fit(part, obs2)
    is_b = obs2.toas.flags["backend"] == "wide-b"
    assert res.postfit.err_s[~is_b] == pytest.approx(obs2.toas.err_us[~is_b] * 1e-6)
    assert res.postfit.err_s[is_b] == pytest.approx(np.hypot(obs2.toas.err_us[is_b], 3.0) * 1e-6)


@pytest.mark.slow
def test_gls_pulls_cover_truth_while_wls_pulls_are_too_wide(sites, ephemeris):
    # pulls (fitted - true)/sigma over 60 realisations of power-law red noise
    # (red rms ~ 20x the white level): unit width for GLS, far wider for WLS
    truth = _model(_red(-12.5, 4.0))
    plain = _model()
    gls, wls = [], []
    for seed in range(60):
        obs = _observations(truth, sites, ephemeris, seed)
        g = fit(truth, obs)
        w = fit(plain, obs)
        assert g.converged and g.noise.method == "generalised least squares"
        gls.append(_pulls(g, truth, SPIN_FREE))
        wls.append(_pulls(w, truth, SPIN_FREE))
    gls_std = np.std(gls, axis=0)
    wls_std = np.std(wls, axis=0)
    print("GLS pull std", gls_std, "WLS pull std", wls_std)
    assert np.all((gls_std >= 0.8) & (gls_std <= 1.2)), gls_std
    assert np.all(np.abs(np.mean(gls, axis=0)) < 0.4)
    assert np.all(wls_std > 5.0), wls_std


@pytest.mark.slow
def test_estimated_red_noise_recovers_truth_and_keeps_coverage(sites, ephemeris):
    # amplitude and spectral index by maximum marginal likelihood, starting
    # far off; estimates within 3 sigma of the injected values, and the spin
    # pulls stay near unit width (slightly wider: the noise-parameter
    # uncertainty is not propagated into the timing covariance)
    truth = _model(_red(-12.5, 4.0))
    start = _model(_red(-14.0, 2.5), free=SPIN_FREE + ["red_noise.amplitude_log10",
                                                       "red_noise.spectral_index"])
    within, pulls, noise_pulls = 0, [], []
    trials = 30
    for seed in range(100, 100 + trials):
        obs = _observations(truth, sites, ephemeris, seed)
        r = fit(start, obs)
        est = r.noise.estimate
        z = [(est.values[n] - truth.parameter(n).value) / est.uncertainties[n]
             for n in ("red_noise.amplitude_log10", "red_noise.spectral_index")]
        within += all(abs(x) < 3 for x in z)
        noise_pulls.append(z)
        pulls.append(_pulls(r, truth, SPIN_FREE))
    print("noise pulls std", np.std(noise_pulls, axis=0), "spin pulls std", np.std(pulls, axis=0))
    assert within >= 0.9 * trials
    assert np.all(np.std(noise_pulls, axis=0) < 1.5)
    assert np.all(np.std(pulls, axis=0) < 1.5)
    # the fitted model carries the estimates and their uncertainties
    assert r.model.parameter("red_noise.amplitude_log10").uncertainty == \
        est.uncertainties["red_noise.amplitude_log10"]


def test_estimated_white_noise_recovers_scale_and_quadrature_term(sites, ephemeris):
    # two backends with different scale factors and added errors; the TOA
    # errors span 0.3-6 µs so that the two terms can be told apart
    truth_groups = [("backend", "wide-a", 1.3, 2.0), ("backend", "wide-b", 0.8, 0.5)]
    truth = _model(_white(truth_groups))
    names = [f"white_noise.{i}.{k}" for i in (0, 1) for k in ("error_scale", "added_error_us")]
    start = _model(_white([("backend", "wide-a", 1.0, 0.0), ("backend", "wide-b", 1.0, 0.0)]),
                   free=SPIN_FREE + names)
    all_z = []
    for seed in range(6):
        err = np.exp(np.random.default_rng(seed + 50).uniform(math.log(0.3), math.log(6), 400))
        obs = _observations(truth, sites, ephemeris, seed, count=400, error_us=err,
                            flags={"backend": ["wide-a", "wide-b"]})
        r = fit(start, obs)
        est = r.noise.estimate
        assert est.success and r.noise.rounds >= 2
        z = [(est.values[n] - truth.parameter(n).value) / est.uncertainties[n] for n in names]
        assert np.all(np.abs(z) < 3), (seed, z)
        all_z.extend(z)
        # timing parameters refitted with the estimated errors: reduced chi2 ~ 1
        assert r.reduced_chi2 == pytest.approx(1.0, abs=0.05)
    assert 0.4 < np.std(all_z) < 1.6


def test_quadrature_term_at_zero_is_reported_without_uncertainty(sites, ephemeris):
    truth = _model()
    obs = _observations(truth, sites, ephemeris, 8, count=200,
                        error_us=np.linspace(0.5, 5.0, 200))
    start = _model(_white([(None, None, 1.0, 0.0)]),
                   free=SPIN_FREE + ["white_noise.0.error_scale", "white_noise.0.added_error_us"])
    r = fit(start, obs)
    est = r.noise.estimate
    q = est.values["white_noise.0.added_error_us"]
    assert abs(est.values["white_noise.0.error_scale"] - 1.0) < 3 * \
        est.uncertainties["white_noise.0.error_scale"]
    if q < 0.05:   # at the bound: no Hessian uncertainty, a warning instead
        assert est.uncertainties["white_noise.0.added_error_us"] is None
        assert any("added_error_us" in w for w in r.warnings)
    else:
        assert q < 3 * est.uncertainties["white_noise.0.added_error_us"]


def test_simulated_white_scaling_and_red_noise_have_the_stated_variance(sites, ephemeris):
    plain = _model()
    exact = _observations(plain, sites, ephemeris, 2, count=400, add_noise=False)
    noise = NoiseModel.from_values(error_scale=1.5, added_error_us=2.0)
    noisy = _observations(plain, sites, ephemeris, 2, count=400, noise=noise)
    # same seed, same arrival slots: the difference is the injected noise
    d_us = ((noisy.toas.mjd_day - exact.toas.mjd_day)
            + (noisy.toas.mjd_frac - exact.toas.mjd_frac)) * 86400e6
    sigma = math.hypot(1.5 * 1.0, 2.0)
    # the sample variance of 400 normals is within ~4 sigma of its expectation
    assert np.var(d_us) == pytest.approx(sigma ** 2, rel=4 * math.sqrt(2 / 400))
    assert np.all(noisy.toas.err_us == 1.0)       # the table keeps the stated error
    # red realisations: the variance averaged over draws and times is
    # sum_k phi_k <basis_k^2> = sum(phi) / 2 (sin^2 and cos^2 average 1/2)
    red = NoiseModel.from_values(amplitude_log10=-12.0, spectral_index=3.0, frequencies=10)
    t = np.linspace(0, 6 * SECONDS_PER_YEAR, 300)
    rng = np.random.default_rng(0)
    draws = np.array([red.red_realisation_s(t, rng) for _ in range(400)])
    phi = red.red_prior(6 * SECONDS_PER_YEAR)
    assert np.mean(draws ** 2) == pytest.approx(np.sum(phi) / 2, rel=0.15)


def test_noise_only_fit_and_report_entry(sites, ephemeris):
    from timingkit.outputs.report import build_report
    truth = _model(_red(-12.5, 4.0))
    obs = _observations(truth, sites, ephemeris, 5)
    start = _model(_red(-13.0, 4.0), free=["spin.frequency_hz", "red_noise.amplitude_log10"])
    r = fit(start, obs)
    rep = build_report(r, obs)
    noise = rep["noise"]
    assert noise["method"] == "generalised least squares"
    red = noise["red_noise"]
    assert red["amplitude_log10"]["free"] and red["amplitude_log10"]["uncertainty"] > 0
    assert red["spectral_index"]["free"] is False
    assert red["frequencies"] == 20
    assert red["span_days"] == pytest.approx(2000, rel=0.02)
    assert rep["parameters"]["red_noise.amplitude_log10"]["uncertainty"] == \
        red["amplitude_log10"]["uncertainty"]
    assert any("power-law" in c for c in rep["cautions"])
    # the header's count matches the list of fitted parameters (timing and noise)
    assert rep["free_parameters"] == 2 and rep["free_timing_parameters"] == 1
    from timingkit.outputs.report import summary_text
    text = summary_text(rep)
    assert "2 free parameters (1 timing, 1 noise)" in text.splitlines()[0]
    listed = text.split("fitted parameters:")[1].split("derived")[0].strip().splitlines()
    assert [line.split()[0] for line in listed] == ["spin.frequency_hz",
                                                    "red_noise.amplitude_log10"]


def test_noise_realisations_have_the_model_covariance(sites, ephemeris):
    # draws of white (scaled, per group) + red noise: their sample covariance
    # must match diag(sigma'^2) + F Phi F^T built independently here
    plain = _model()
    obs = _observations(plain, sites, ephemeris, 1, count=12, add_noise=False,
                        flags={"backend": ["wide-a", "wide-b"]})
    noise = NoiseModel.from_timing_model(_model(_white([("backend", "wide-b", 2.0, 1.0)]),
                                                _red(-13.0, 3.0, frequencies=5)))
    t = np.linspace(0.0, 5e7, 12)
    draws = noise.realisations_s(obs.toas, t, np.random.default_rng(1), 40000)
    sigma = np.where(obs.toas.flags["backend"] == "wide-b", math.hypot(2.0, 1.0), 1.0) * 1e-6
    basis = fourier_basis(t, 5e7, 5)
    expected = np.diag(sigma ** 2) + red_covariance_dense(
        basis, fourier_prior_variances(5e7, 5, -13.0, 3.0))
    sample = np.cov(draws, rowvar=False)
    scale = np.sqrt(np.outer(np.diag(expected), np.diag(expected)))
    assert np.max(np.abs(sample - expected) / scale) < 0.04     # ~5 sigma of 40000 draws


def test_white_noise_group_without_toas_is_held_with_a_warning(sites, ephemeris):
    obs = _observations(_model(), sites, ephemeris, 2, count=60,
                        flags={"backend": ["wide-a"]})
    start = _model(_white([("backend", "wide-a", 1.0, 0.0), ("backend", "absent", 1.0, 0.0)]),
                   free=SPIN_FREE + ["white_noise.0.error_scale", "white_noise.1.error_scale"])
    r = fit(start, obs)
    assert r.noise.estimate.names == ["white_noise.0.error_scale"]
    assert any("white_noise.1.error_scale: no TOAs" in w for w in r.warnings)
    assert r.noise.group_counts == [60, 0]


def test_residual_spectrum_estimate_follows_the_noise_model(sites, ephemeris):
    # averaged over realisations, the white-weighted spectrum of the post-fit
    # residuals must equal the injected power law plus the white level at the
    # basis frequencies above the lowest two (which the spin terms absorb)
    from timingkit.outputs.noise_outputs import residual_power_spectrum
    truth = _model(_red(-12.5, 4.0))
    ratios = []
    for seed in range(20):
        r = fit(truth, _observations(truth, sites, ephemeris, 500 + seed))
        freqs, power, model = residual_power_spectrum(r)
        ratios.append(power / model)
    mean_ratio = np.mean(ratios, axis=0)
    assert freqs[0] == pytest.approx(SECONDS_PER_YEAR / r.noise.red_span_s, rel=1e-12)
    # each bin: mean of 20 chi-square(2)/2 variables, relative sd ~ 0.22
    assert np.all(np.abs(mean_ratio[2:] - 1) < 0.7)
    # (the fitted timing model removes some power in every bin: ~10 % on average
    # here; a wrong normalisation would be off by a factor of 2 or more)
    assert np.mean(mean_ratio[2:]) == pytest.approx(1.0, abs=0.2)
    print("mean measured/model power per bin", np.round(mean_ratio, 2))


def test_residual_figure_carries_the_red_noise_curve(sites, ephemeris, tmp_path):
    from timingkit.outputs.noise_outputs import add_red_noise_curve, write_noise_figures
    from timingkit.outputs.plotting import plot_residuals
    from timingkit.outputs.report import residual_table
    truth = _model(_red(-12.5, 4.0))
    obs = _observations(truth, sites, ephemeris, 7)
    r = fit(truth, obs)
    fig = plot_residuals(residual_table(obs, r.postfit), prefit=residual_table(obs, r.prefit))
    mjd = obs.toas.mjd_day + obs.toas.mjd_frac
    add_red_noise_curve(fig, mjd, r.noise.red_realisation_s * 1e6)
    lines = [ln for ax in fig.axes for ln in ax.get_lines()
             if ln.get_gid() == "red_noise_realisation"]
    assert len(lines) == 1
    ax = lines[0].axes
    assert ax.get_title(loc="left") == "post-fit"
    y = lines[0].get_ydata()
    assert np.max(np.abs(np.sort(y) - np.sort(r.noise.red_realisation_s * 1e6))) < 1e-9
    written = write_noise_figures(r, obs, str(tmp_path))
    assert written == [str(tmp_path / "power_spectrum.png")]
