"""Model selection: F-test for nested weighted fits, delta AIC/BIC, suggestions.

External checks: critical values of Fisher's F distribution from standard
statistical tables (from memory; they agree with scipy.stats.f to the 3-4
figures tabulated), scipy.stats.f itself, and numpy's weighted polynomial
fit (numpy.polynomial) for the chi-squares of a nested worked example.
Simulations are invented pulsars at the barycentre (site 'ssb').
"""

import json
import math

import numpy as np
import pytest
import scipy.stats

from timingkit.cli.main import main
from timingkit.fit.least_squares import fit
from timingkit.model import OPTIONAL_SECTIONS, TimingModel
from timingkit.fit.model_selection import (compare_fits, f_test, information_criteria_change,
                                       next_derivative_candidate, suggest)
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas

SPIN = '''
name = "sim-select"
[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"
[spin]
epoch_mjd = "58000"
frequency_hz = "10.6173"
frequency_derivatives = [{derivs}]
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0"]
'''
RED = '''
[red_noise]
amplitude_log10 = -12.5
spectral_index = 4.0
frequencies = 20
'''
SECOND_DERIVATIVE = 2.5e-28     # Hz/s^2: about 5.7 sigma for 200 TOAs of 1 µs over 2000 d


def _model(second=None, extra=""):
    derivs = '"-1.0e-13"' + ("" if second is None else f', "{second!r}"')
    return TimingModel.from_text(SPIN.format(derivs=derivs) + extra)


def _obs(model, sites, ephemeris, seed, count=200):
    toas = simulate_toas(model, 57000, 59000, count, 1.0, sites, ephemeris, site_names=["ssb"],
                         freqs_mhz=[1400.0], seed=seed)
    return prepare_observations(toas, sites, ephemeris)


@pytest.mark.parametrize("level, dk, dof, critical", [
    # upper critical values F_level(dk, dof), standard F tables (from memory)
    (0.05, 1, 10, 4.96), (0.01, 1, 10, 10.04), (0.05, 2, 20, 3.49), (0.01, 2, 20, 5.85),
    (0.05, 3, 30, 2.92), (0.01, 1, 20, 8.10),
])
def test_f_test_probability_at_table_critical_values(level, dk, dof, critical):
    # choose chi-squares that give exactly the tabulated F
    chi2_ext = float(dof)
    chi2_base = chi2_ext + critical * dk
    f_stat, prob = f_test(chi2_base, dof + dk, chi2_ext, dof)
    assert f_stat == pytest.approx(critical, rel=1e-12)
    assert prob == pytest.approx(level, rel=0.02)      # tables give 3-4 figures
    assert prob == pytest.approx(scipy.stats.f.sf(critical, dk, dof), rel=1e-12)


def test_f_test_edge_cases():
    assert f_test(10.0, 10, 12.0, 9)[1] == 1.0          # extension fitted worse: no evidence
    with pytest.raises(ValueError):
        f_test(10.0, 9, 9.0, 9)


def test_worked_example_nested_polynomials_match_numpy_and_scipy():
    # weighted straight line vs parabola through 20 invented points: chi-squares
    # from numpy.polynomial, F and its tail from scipy.stats.f, against ours
    x = np.arange(20.0)
    y = 0.5 + 0.3 * x + 0.004 * x ** 2 + np.array(
        [0.3, -0.5, 0.1, 0.8, -0.2, -0.9, 0.4, 0.0, 0.6, -0.4,
         0.2, -0.7, 0.9, -0.1, 0.3, -0.6, 0.5, -0.3, 0.1, 0.2])
    sigma = np.full(20, 0.5)
    chi2 = []
    for degree in (1, 2):
        coef = np.polynomial.polynomial.polyfit(x, y, degree, w=1 / sigma)
        chi2.append(float(np.sum(((y - np.polynomial.polynomial.polyval(x, coef)) / sigma) ** 2)))
    f_ref = (chi2[0] - chi2[1]) / (chi2[1] / 17)
    f_stat, prob = f_test(chi2[0], 18, chi2[1], 17)
    assert f_stat == pytest.approx(f_ref, rel=1e-12)
    assert prob == pytest.approx(scipy.stats.f.sf(f_ref, 1, 17), rel=1e-12)
    d_aic, d_bic = information_criteria_change(chi2[0], 2, chi2[1], 3, 20)
    # Akaike 1974: AIC = -2 ln L + 2k; Schwarz 1978: BIC = -2 ln L + k ln N
    assert d_aic == pytest.approx(chi2[1] - chi2[0] + 2, rel=1e-12)
    assert d_bic == pytest.approx(chi2[1] - chi2[0] + math.log(20), rel=1e-12)


def test_nested_timing_fits_match_polynomial_fits(sites, ephemeris):
    # at the barycentre the spin model is a polynomial in time: the chi-squares
    # of the fits with and without a second derivative equal those of weighted
    # cubic / quadratic polynomial fits of the residuals (numpy.polynomial)
    base = _model()
    obs = _obs(_model(SECOND_DERIVATIVE), sites, ephemeris, seed=5)
    r_base = fit(base, obs)
    cand = next_derivative_candidate(base)
    r_ext = fit(cand.build(base), obs)
    cmp_ = compare_fits(r_base, r_ext, cand.addition, cand.parameters)
    t = (obs.tdb.day - 58000 + obs.tdb.frac) / 1000.0
    resid = r_base.prefit.time_s * 1e6
    w = 1 / obs.toas.err_us
    chi2 = []
    for degree in (2, 3):
        coef = np.polynomial.polynomial.polyfit(t, resid, degree, w=w)
        chi2.append(float(np.sum(((resid - np.polynomial.polynomial.polyval(t, coef)) * w) ** 2)))
    assert cmp_.chi2_base == pytest.approx(chi2[0], rel=1e-6)
    assert cmp_.chi2_extended == pytest.approx(chi2[1], rel=1e-6)
    assert cmp_.dof_base - cmp_.dof_extended == 1
    assert cmp_.f_probability == pytest.approx(
        scipy.stats.f.sf((chi2[0] - chi2[1]) / (chi2[1] / cmp_.dof_extended), 1,
                         cmp_.dof_extended), rel=1e-5)
    assert cmp_.parameters == ["spin.frequency_derivatives.1"]
    assert cmp_.supported


@pytest.mark.slow
def test_f_test_finds_a_real_second_derivative_and_no_false_one(sites, ephemeris):
    # 1 % level: with a 5.7-sigma second derivative >= 95 % of simulations
    # prefer it, without one >= 95 % do not
    trials = 60
    found, false = 0, 0
    base = _model()
    cand = next_derivative_candidate(base)
    for seed in range(trials):
        for truth, is_real in ((_model(SECOND_DERIVATIVE), True), (base, False)):
            obs = _obs(truth, sites, ephemeris, seed=1000 + seed)
            c = compare_fits(fit(base, obs), fit(cand.build(base), obs), cand.addition,
                             cand.parameters, level=0.01)
            if is_real:
                found += c.supported
            else:
                false += c.supported
    print(f"second derivative found in {found}/{trials}, falsely in {false}/{trials}")
    assert found >= 0.95 * trials
    assert trials - false >= 0.95 * trials


@pytest.mark.slow
def test_red_noise_fakes_a_second_derivative_only_without_the_noise_model(sites, ephemeris):
    # red noise and no real second derivative: the white-noise F-test is fooled
    # most of the time; with the (known) noise model in the GLS it is not
    trials = 30
    truth = _model(extra=RED)
    white = _model()
    fooled_wls, fooled_gls = 0, 0
    for seed in range(trials):
        obs = _obs(truth, sites, ephemeris, seed=2000 + seed)
        for model in (white, truth):
            cand = next_derivative_candidate(model)
            c = compare_fits(fit(model, obs), fit(cand.build(model), obs), cand.addition,
                             cand.parameters, level=0.01)
            if model is white:
                fooled_wls += c.supported
            else:
                fooled_gls += c.supported
    print(f"false second derivative: WLS {fooled_wls}/{trials}, GLS {fooled_gls}/{trials}")
    assert fooled_wls >= 0.5 * trials
    assert fooled_gls <= 0.1 * trials


def test_suggest_holds_noise_fixed_and_lists_the_derivative(sites, ephemeris):
    model = TimingModel.from_text(
        SPIN.format(derivs='"-1.0e-13"').replace(
            '"spin.frequency_derivatives.0"]', '"spin.frequency_derivatives.0", '
            '"white_noise.0.error_scale"]') + '\n[[white_noise]]\nerror_scale = 1.0\n')
    obs = _obs(_model(SECOND_DERIVATIVE), sites, ephemeris, seed=9)
    result = fit(model, obs)
    comparisons = suggest(result, obs)
    # TOAs at the barycentre, one frequency: DM and astrometric terms are not measurable
    measurable = [c for c in comparisons if not c.note.startswith("not measurable")]
    assert [c.addition for c in measurable] == ["second spin-frequency derivative"]
    assert {c.addition for c in comparisons} >= {"first dispersion-measure derivative",
                                                 "astrometric term: parallax"}
    c = measurable[0]
    assert c.supported and c.f_probability < 1e-6 and c.delta_aic < 0 and c.delta_bic < 0
    if "glitch" in OPTIONAL_SECTIONS:      # a glitch epoch to try, by the same route
        more = [m for m in suggest(result, obs, glitch_epochs_mjd=["58000.5"])
                if not m.note.startswith("not measurable")]
        assert [m.addition for m in more] == ["second spin-frequency derivative",
                                              "glitch at MJD 58000.5"]
        # (the unmodelled cubic makes a mid-span glitch look useful too: the
        # comparisons are each against the same base)
        assert more[1].dof_base - more[1].dof_extended == 3
        assert more[1].chi2_base == pytest.approx(c.chi2_base)
    fitted = float(c.values["spin.frequency_derivatives.1"]["value"])
    assert abs(fitted - SECOND_DERIVATIVE) < 4 * c.values["spin.frequency_derivatives.1"][
        "uncertainty"]


BINARY = '''
[binary]
model = "keplerian"
orbital_period_days = "1.5"
projected_semi_major_axis_lt_s = 2.0
eccentricity = 0.1
periastron_longitude_deg = 30.0
periastron_epoch_mjd = "58000.1"
periastron_advance_deg_per_yr = {advance}
'''
BINARY_FREE = ["spin.frequency_hz", "spin.frequency_derivatives.0", "binary.orbital_period_days",
               "binary.projected_semi_major_axis_lt_s", "binary.eccentricity",
               "binary.periastron_longitude_deg", "binary.periastron_epoch_mjd"]


def test_suggest_frees_the_binary_term_the_data_need(sites, ephemeris):
    # an orbit whose periastron advances by 0.002 deg/yr, fitted with the
    # advance held at zero: of the fixed binary terms, freeing the advance is
    # the one supported, and its fitted value recovers the truth
    if "binary" not in OPTIONAL_SECTIONS:
        pytest.skip("the binary component is not in this installation")
    body = SPIN.format(derivs='"-1.0e-13"').split("[fit]")[0]
    free = "\n[fit]\nfree = [" + ", ".join(f'"{n}"' for n in BINARY_FREE) + "]\n"
    truth = TimingModel.from_text(body + BINARY.format(advance="0.002") + free)
    start = TimingModel.from_text(body + BINARY.format(advance="0.0") + free)
    obs = _obs(truth, sites, ephemeris, seed=1)
    comparisons = suggest(fit(start, obs), obs)
    binary = [c for c in comparisons if c.addition.startswith("binary term")]
    assert len(binary) >= 4            # every fixed binary parameter was tried
    supported = [c for c in comparisons if c.supported]
    assert [c.parameters for c in supported] == [["binary.periastron_advance_deg_per_yr"]]
    value = supported[0].values["binary.periastron_advance_deg_per_yr"]
    assert abs(float(value["value"]) - 0.002) < 4 * value["uncertainty"]


@pytest.mark.slow
def test_glitch_f_test_with_red_noise_needs_the_noise_model(sites, ephemeris):
    # red noise and no glitch: testing a glitch at mid-span (phase, frequency and
    # frequency-derivative steps) at the 1 % level is fooled almost always with
    # white-noise weights, at most 5 % of the time with the noise model; a real
    # frequency step of 1e-10 Hz is preferred with the noise model
    if "glitch" not in OPTIONAL_SECTIONS:
        pytest.skip("the glitch component ([[glitch]]) is not in this installation")
    from timingkit.fit.model_selection import glitch_candidate
    trials = 30
    truth = _model(extra=RED)
    white = _model()
    false_wls, false_gls, found = 0, 0, 0
    glitched = _model(extra=RED + '\n[[glitch]]\nepoch_mjd = "58100.3"\n'
                      'frequency_step_hz = 1e-10\n')
    for seed in range(trials):
        obs = _obs(truth, sites, ephemeris, seed=3000 + seed)
        for model in (white, truth):
            cand = glitch_candidate(model, "58000.5")
            c = compare_fits(fit(model, obs), fit(cand.build(model), obs), cand.addition,
                             cand.parameters, level=0.01)
            assert c.dof_base - c.dof_extended == 3
            if model is white:
                false_wls += c.supported
            else:
                false_gls += c.supported
        if seed < 10:
            obs = _obs(glitched, sites, ephemeris, seed=3000 + seed)
            cand = glitch_candidate(truth, "58100.3")
            c = compare_fits(fit(truth, obs), fit(cand.build(truth), obs), cand.addition,
                             cand.parameters, level=0.01)
            found += c.supported
    print(f"false glitch: WLS {false_wls}/{trials}, GLS {false_gls}/{trials}; real found {found}/10")
    assert false_wls >= 0.5 * trials
    assert false_gls <= 0.05 * trials
    assert found == 10


def _simulate_cli(model_path, toas_path, *options):
    return main(["simulate", str(model_path), "--start", "57000", "--end", "59000", "--count",
                 "200", "--error-us", "1.0", "--site", "ssb", "--seed", "3", *options,
                 "-o", str(toas_path)])


def _fit_model_text(free_noise, noise_sections):
    return SPIN.format(derivs='"-1.0e-13"').replace(
        '"spin.frequency_derivatives.0"]',
        '"spin.frequency_derivatives.0", ' + ", ".join(f'"{n}"' for n in free_noise) + "]"
    ) + noise_sections


def test_cli_fit_suggest_with_white_noise_scaling(tmp_path, capsys):
    truth = tmp_path / "psr.toml"
    truth.write_text(SPIN.format(derivs=f'"-1.0e-13", "{5 * SECOND_DERIVATIVE!r}"'))
    toas = tmp_path / "psr.toas"
    assert _simulate_cli(truth, toas, "--error-scale", "1.5", "--added-error-us", "0.5") == 0
    fit_model = tmp_path / "fit.toml"
    fit_model.write_text(_fit_model_text(["white_noise.0.error_scale"],
                                         "\n[[white_noise]]\nerror_scale = 1.0\n"))
    out = tmp_path / "out"
    capsys.readouterr()
    assert main(["fit", str(toas), str(fit_model), "-o", str(out), "--suggest"]) == 0
    text = capsys.readouterr().out
    assert "SUPPORTED" in text and "second spin-frequency derivative" in text
    assert "noise model (weighted least squares" in text
    report = json.loads((out / "report.json").read_text())
    assert report["suggestions"]["supported"] == ["second spin-frequency derivative"]
    tried = report["suggestions"]["tried"][0]
    assert tried["f_probability"] < 1e-6 and tried["delta_bic"] < 0
    # the missing term inflates the fitted error scale; with the second
    # derivative fitted the scale is recovered and a third is not needed
    with_second = tmp_path / "fit2.toml"
    with_second.write_text(_fit_model_text(["white_noise.0.error_scale",
                                            "spin.frequency_derivatives.1"],
                                           "\n[[white_noise]]\nerror_scale = 1.0\n").replace(
        '["-1.0e-13"]', '["-1.0e-13", "0"]'))
    out2 = tmp_path / "out2"
    assert main(["fit", str(toas), str(with_second), "-o", str(out2), "--suggest"]) == 0
    report = json.loads((out2 / "report.json").read_text())
    assert report["suggestions"]["supported"] == []
    assert report["suggestions"]["tried"][0]["addition"] == "third spin-frequency derivative"
    scale = report["noise"]["white_noise"][0]["error_scale"]
    # all errors are 1 µs here, so the fitted scale absorbs the quadrature term
    assert abs(scale["value"] - math.hypot(1.5, 0.5)) < 3 * scale["uncertainty"]
    assert not (out2 / "power_spectrum.png").exists()      # no red noise: no spectrum
    again = TimingModel.from_file(str(out2 / "fitted.toml"))
    assert again.parameter("white_noise.0.error_scale").uncertainty == scale["uncertainty"]


def test_cli_red_noise_simulation_fit_and_figures(tmp_path, capsys):
    truth = tmp_path / "psr.toml"
    truth.write_text(SPIN.format(derivs='"-1.0e-13"'))
    toas = tmp_path / "psr.toas"
    assert _simulate_cli(truth, toas, "--red-amplitude-log10", "-12.5", "--red-spectral-index",
                         "4", "--red-frequencies", "10") == 0
    fit_model = tmp_path / "fit.toml"
    fit_model.write_text(_fit_model_text(
        ["red_noise.amplitude_log10"],
        "\n[red_noise]\namplitude_log10 = -14.0\nspectral_index = 4.0\nfrequencies = 10\n"))
    out = tmp_path / "out"
    capsys.readouterr()
    assert main(["fit", str(toas), str(fit_model), "-o", str(out)]) == 0
    assert "power_spectrum.png" in capsys.readouterr().out
    report = json.loads((out / "report.json").read_text())
    amp = report["noise"]["red_noise"]["amplitude_log10"]
    assert abs(amp["value"] + 12.5) < 3 * amp["uncertainty"]
    assert report["noise"]["method"] == "generalised least squares"
    for name in ("fitted.toml", "residuals.png", "power_spectrum.png"):
        with open(out / name, "rb") as fh:
            head = fh.read(8)
        assert head == b"\x89PNG\r\n\x1a\n" or name.endswith(".toml")
    again = TimingModel.from_file(str(out / "fitted.toml"))
    assert again.parameter("red_noise.amplitude_log10").uncertainty == amp["uncertainty"]


def test_cli_bad_noise_options_are_input_errors(tmp_path, capsys):
    truth = tmp_path / "psr.toml"
    truth.write_text(SPIN.format(derivs='"-1.0e-13"'))
    toas = tmp_path / "psr.toas"
    assert _simulate_cli(truth, toas, "--red-amplitude-log10", "-13") == 2
    assert "--red-spectral-index" in capsys.readouterr().err
    assert _simulate_cli(truth, toas) == 0
    assert main(["fit", str(toas), str(truth), "-o", str(tmp_path / "o"),
                 "--glitch-candidate", "58000"]) == 2
    assert "needs --suggest" in capsys.readouterr().err
    assert main(["fit", str(toas), str(truth), "-o", str(tmp_path / "o"), "--suggest",
                 "--suggest-level", "2"]) == 2
