"""`convert` carries uncertainties and correlations through the Jacobian of its
transformation and keeps the free list; a round trip returns the input.

Checks: the frame rotation's covariance against a Jacobian taken by central
differences of erfa's own spherical <-> Cartesian position-velocity transforms
(erfa.s2pv / erfa.pv2s, rotation erfa.rx about x by the IERS 2010 obliquity);
the binary Jacobian against central differences of the section conversion.
Invented source."""

import math

import erfa
import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.model import TimingModel
from timingkit.model.astrometry import ECLIPTIC_OBLIQUITY_ARCSEC
from timingkit.model.binary import low_eccentricity_section
from timingkit.model.conversion import (ECCENTRIC_ELEMENTS, LOW_E_ELEMENTS, convert_model,
                                        eccentric_to_low_e_jacobian)
from timingkit.model.correlations import covariance_of

MAS = math.pi / (180 * 3600e3)      # one milliarcsecond in radians
MODEL = """
name = "demo-convert"

[spin]
frequency_hz = "187.654321012345678"
epoch_mjd = "58400"
frequency_derivatives = ["-4.4e-16"]
uncertainty = { frequency_hz = 1e-12 }
[position]
epoch_mjd = "58400"
ra = "22h41m07.031s"
dec = "-33d18m44.52s"
parallax_mas = 0.7
pm_ra_cosdec_mas_per_yr = -6.5
pm_dec_mas_per_yr = 3.25
uncertainty = { ra = 0.8, dec = 2.5, pm_ra_cosdec_mas_per_yr = 0.3, pm_dec_mas_per_yr = 0.9, parallax_mas = 0.2 }
[binary]
model = "relativistic"
orbital_period_days = "1.2345678901"
projected_semi_major_axis_lt_s = 3.5
eccentricity = 0.087
periastron_longitude_deg = 73.2
periastron_epoch_mjd = "58000.4321"
periastron_advance_deg_per_yr = 0.35
eccentricity_derivative_per_s = 1e-15
[binary.uncertainty]
orbital_period_days = 3e-10
projected_semi_major_axis_lt_s = 2e-6
eccentricity = 4e-6
periastron_longitude_deg = 0.003
periastron_epoch_mjd = 1e-5
periastron_advance_deg_per_yr = 0.002
[correlation]
parameters = ["position.ra", "spin.frequency_hz", "binary.eccentricity", "binary.periastron_longitude_deg"]
matrix = [[1.0, 0.4, 0.0, 0.0], [0.4, 1.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.3], [0.0, 0.0, 0.3, 1.0]]
[fit]
free = ["position.ra", "position.dec", "spin.frequency_hz", "binary.eccentricity",
        "binary.periastron_longitude_deg", "binary.periastron_epoch_mjd",
        "binary.orbital_period_days"]
"""
ANGLES_EQ = ["position.ra", "position.dec", "position.pm_ra_cosdec_mas_per_yr",
             "position.pm_dec_mas_per_yr"]
ANGLES_ECL = ["position.ecliptic_longitude_deg", "position.ecliptic_latitude_deg",
              "position.pm_longitude_coslat_mas_per_yr", "position.pm_latitude_mas_per_yr"]


def _erfa_rotate(x):
    """(ra, dec in rad; pm_ra cos dec, pm_dec in mas/yr) -> the same in the ecliptic
    frame, by erfa's spherical position-velocity transforms."""
    lon, lat, pm_l, pm_b = x
    pv = erfa.s2pv(lon, lat, 1.0, pm_l * MAS / math.cos(lat), pm_b * MAS, 0.0)
    rot = erfa.rx(ECLIPTIC_OBLIQUITY_ARCSEC * math.pi / (180 * 3600), np.eye(3))
    turned = np.empty((), dtype=erfa.dt_pv)
    turned["p"], turned["v"] = rot @ pv["p"], rot @ pv["v"]
    theta, phi, _, td, pd, _ = erfa.pv2s(turned)
    return np.array([theta % (2 * math.pi), phi, td * math.cos(phi) / MAS, pd / MAS])


def test_frame_covariance_is_the_jacobian_propagation():
    model = TimingModel.from_text(MODEL)
    ecl = convert_model(model, frame="ecliptic")
    x0 = np.array([model.parameter(n).value for n in ANGLES_EQ])
    steps = np.array([1e-7, 1e-7, 1e-3, 1e-3])
    jac = np.column_stack([(_erfa_rotate(x0 + np.eye(4)[j] * steps[j])
                            - _erfa_rotate(x0 - np.eye(4)[j] * steps[j])) / (2 * steps[j])
                           for j in range(4)])
    expected = jac @ covariance_of(model, ANGLES_EQ) @ jac.T
    to_internal = np.array([180 / math.pi, 180 / math.pi, 1.0, 1.0])    # ecliptic angles in deg
    expected = expected * np.outer(to_internal, to_internal)
    scale = np.sqrt(np.outer(np.diag(expected), np.diag(expected)))
    np.testing.assert_allclose(covariance_of(ecl, ANGLES_ECL) / scale, expected / scale,
                               atol=1e-6)
    # the longitude is correlated with what ra was correlated with (spin frequency)
    cross = covariance_of(ecl, ANGLES_ECL + ["spin.frequency_hz"])[:4, 4]
    assert abs(cross[0]) > 0 and abs(cross[1]) > 0


def test_frame_round_trip_returns_uncertainties_correlations_and_free_list():
    model = TimingModel.from_text(MODEL)
    back = convert_model(convert_model(model, frame="ecliptic"), frame="equatorial")
    names = ANGLES_EQ + ["position.parallax_mas", "spin.frequency_hz"]
    np.testing.assert_allclose(covariance_of(back, names), covariance_of(model, names),
                               rtol=1e-9, atol=1e-30)
    for n in names:
        assert back.parameter(n).uncertainty == pytest.approx(model.parameter(n).uncertainty,
                                                              rel=1e-9)
    assert set(back.free_names) == set(model.free_names)


def test_binary_jacobian_matches_numerical_differences():
    model = TimingModel.from_text(MODEL)
    binary = next(c for c in model.extra if c.section == "binary")
    x0 = np.array([float(binary.params[k].value + binary.params[k].value_lo)
                   for k in ECCENTRIC_ELEMENTS])

    def forward(x):
        sec = dict(zip(ECCENTRIC_ELEMENTS, x))
        out = low_eccentricity_section(sec)
        return np.array([float(out.get(k, 0.0)) for k in LOW_E_ELEMENTS])

    steps = np.array([1e-6, 1e-5, 1e-4, 1e-4, 1e-17, 1e-4])   # days: above float resolution
    numeric = np.column_stack([(forward(x0 + np.eye(6)[j] * steps[j])
                                - forward(x0 - np.eye(6)[j] * steps[j])) / (2 * steps[j])
                               for j in range(6)])
    analytic = eccentric_to_low_e_jacobian(*x0[:3], x0[4], x0[5])
    row = np.max(np.abs(numeric), axis=1, keepdims=True)
    np.testing.assert_allclose(analytic / row, numeric / row, atol=1e-6)


def test_binary_conversion_keeps_uncertainties_and_free_list_and_round_trips():
    model = TimingModel.from_text(MODEL)
    low = convert_model(model, binary_model="low_eccentricity")
    # every uncertainty of the orbit survives (they were all dropped before)
    for key in ("e_sin_omega", "e_cos_omega", "ascending_node_epoch_mjd",
                "projected_semi_major_axis_lt_s", "orbital_period_days",
                "e_sin_omega_derivative_per_s", "e_cos_omega_derivative_per_s"):
        assert low.parameter(f"binary.{key}").uncertainty, key
    assert {"binary.e_sin_omega", "binary.e_cos_omega", "binary.ascending_node_epoch_mjd",
            "binary.orbital_period_days"} <= set(low.free_names)
    # sigma(e sin w)^2 = sin^2 w s_e^2 + e^2 cos^2 w s_w^2 + 2 e sin w cos w rho s_e s_w
    e, w, se, sw, rho = 0.087, math.radians(73.2), 4e-6, math.radians(0.003), 0.3
    expected = math.sqrt((math.sin(w) * se) ** 2 + (e * math.cos(w) * sw) ** 2
                         + 2 * e * math.sin(w) * math.cos(w) * rho * se * sw)
    assert low.parameter("binary.e_sin_omega").uncertainty == pytest.approx(expected, rel=1e-9)
    back = convert_model(low, binary_model="relativistic")
    names = [f"binary.{k}" for k in ECCENTRIC_ELEMENTS] + ["binary.projected_semi_major_axis_lt_s"]
    np.testing.assert_allclose(covariance_of(back, names), covariance_of(model, names),
                               rtol=1e-8, atol=1e-40)
    for n in names:
        p, q = back.parameter(n), model.parameter(n)
        assert (p.value - q.value) + (p.value_lo - q.value_lo) == pytest.approx(
            0.0, abs=1e-9 * max(abs(q.value), 1e-20) + 1e-25), n
    assert set(back.free_names) == set(model.free_names)


def test_convert_command_round_trip_to_printed_precision(tmp_path):
    src = tmp_path / "m.toml"
    src.write_text(MODEL)
    there, back = tmp_path / "e.toml", tmp_path / "b.toml"
    assert main(["convert", str(src), "--frame", "ecliptic", "--binary-model",
                 "low_eccentricity", "-o", str(there)]) == 0
    assert main(["convert", str(there), "--frame", "equatorial", "--binary-model",
                 "relativistic", "-o", str(back)]) == 0
    a, b = TimingModel.from_file(str(src)), TimingModel.from_file(str(back))
    for p in a.parameters():
        q = b.parameter(p.name)
        if p.uncertainty:
            assert f"{q.uncertainty:.2g}" == f"{p.uncertainty:.2g}", p.name
        assert (q.uncertainty is None) == (p.uncertainty is None), p.name
    assert b.correlations.keys() >= {("position.ra", "spin.frequency_hz")}
