"""The solar-wind section: its closed-form line-of-sight integral against
scipy.integrate.quad, its partial derivative against numerical differences,
the model file, and injection by `timingkit simulate`."""

import math
import os

import numpy as np
import pytest
from scipy.integrate import quad

from timingkit.formats.errors import InputError
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry import delays
from timingkit.model.solar_wind import solar_wind_dm_per_density
from timingkit.model.timing_model import TimingModel

from numdiff import phase_partial

AU = delays.AU_M
PC = delays.PARSEC_M


def _quad_dm_per_density(rho: np.ndarray, n: np.ndarray) -> float:
    """Column density of n0 (1 au / r)^2 along x(s) = rho + s n, s from 0 to infinity,
    by adaptive quadrature (scipy.integrate.quad), in pc cm^-3 per cm^-3. Lengths in au;
    s = t / (1 - t) maps the infinite range onto t in [0, 1)."""
    rho_au = rho / AU

    def integrand(t):
        s_au = t / (1.0 - t)
        x = rho_au + s_au * n
        return 1.0 / (x @ x) / (1.0 - t) ** 2

    s_peak = max(-(rho_au @ n), 0.0)                 # the closest approach to the Sun
    t_peak = s_peak / (1.0 + s_peak)
    value = quad(integrand, 0.0, 1.0, points=[t_peak] if t_peak > 0 else None, limit=500,
                 epsabs=0.0, epsrel=1e-12)[0]
    return value * AU / PC


@pytest.mark.parametrize("theta_deg", [0.0, 1e-4, 30.0, 90.0, 150.0, 178.0, 179.7])
@pytest.mark.parametrize("r_au", [0.983, 1.0167])
def test_closed_form_matches_numerical_integration(theta_deg, r_au):
    # theta: angle between Sun -> observer and observer -> pulsar (180 - elongation);
    # 179.7 deg passes ~1.1 solar radii from the Sun's centre
    theta = math.radians(theta_deg)
    rho = np.array([r_au * AU, 0.0, 0.0])
    n = np.array([math.cos(theta), math.sin(theta), 0.0])
    ours = solar_wind_dm_per_density(rho[None, :], n)[0]
    expected = _quad_dm_per_density(rho, n)
    assert abs(ours / expected - 1) < 1e-9
    if theta_deg == 90.0:
        # n0 au (pi/2) / r_au, e.g. 4 cm^-3 -> 3.05e-5 pc cm^-3 at 1 au
        assert abs(ours - (AU / PC) * (math.pi / 2) / r_au) < 1e-15


MODEL = """name = "invented-ecliptic-msp"
[position]
frame = "ecliptic"
ecliptic_longitude_deg = 250.0
ecliptic_latitude_deg = 0.6
epoch_mjd = "59000"
[spin]
epoch_mjd = "59000"
frequency_hz = "412.3456789"
frequency_derivatives = ["-1.1e-15"]
[dispersion]
dm = 12.5
{extra}
[settings]
sites = "{sites}"
"""

SITES = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data", "sites.toml")


def _model(extra: str = "") -> TimingModel:
    return TimingModel.from_text(MODEL.format(extra=extra, sites=os.path.abspath(SITES)))


def _obs(model, ephemeris, sites, n=120):
    mjd = np.linspace(59000.0, 59365.0, n) + 0.3
    day = np.floor(mjd)
    freq = np.where(np.arange(n) % 2 == 0, 820.0, 1400.0)
    toas = ToaTable.from_arrays(day, mjd - day, np.ones(n), freq, np.array(["desert-dish"] * n))
    return model.prepare_observations(toas, sites, ephemeris)


def test_partial_derivative_matches_numerical_differences(ephemeris, sites):
    model = _model("[solar_wind]\nelectron_density_at_1au_cm3 = 6.0")
    obs = _obs(model, ephemeris, sites)
    name = "solar_wind.electron_density_at_1au_cm3"
    ev = model.evaluate(obs)
    analytic = model.design_matrix(ev, [name])[:, 0]
    numeric = phase_partial(model, obs, name, 0.5)
    assert np.max(np.abs(analytic - numeric)) < 1e-6 * np.max(np.abs(numeric))
    # the delay itself: n0 times the closed form at the barycentric frequency
    dm = solar_wind_dm_per_density(obs.sun_to_observer_m, ev.direction)
    no_wind = _model().evaluate(obs)
    expected = 6.0 * delays.dispersion_delay_s(dm, ev.freq_bary_mhz)
    assert np.allclose(ev.dispersion_s - no_wind.dispersion_s, expected, rtol=1e-9, atol=1e-16)
    # an ecliptic source: microseconds near conjunction (~MJD 59185), tens of ns far away
    assert expected.max() > 1e-6 and expected.min() < 1e-7


def test_model_file_section_is_checked_and_written():
    with pytest.raises(InputError) as err:
        _model("[solar_wind]\nelectron_density_at_1au_cm3 = -1.0")
    assert err.value.field == "solar_wind.electron_density_at_1au_cm3"
    with pytest.raises(InputError) as err:
        _model("[solar_wind]\ndensity = 4.0")
    assert "electron_density_at_1au_cm3" in err.value.message
    model = _model("[solar_wind]\nelectron_density_at_1au_cm3 = 4.5\n"
                   "uncertainty = { electron_density_at_1au_cm3 = 0.3 }")
    doc = model.to_document()
    assert doc["solar_wind"]["electron_density_at_1au_cm3"] == 4.5
    assert doc["solar_wind"]["uncertainty"]["electron_density_at_1au_cm3"] == 0.3


def test_unmodelled_solar_wind_is_warned_about(ephemeris, sites):
    model = _model()
    obs = _obs(model, ephemeris, sites)
    warnings = model.data_warnings(obs)
    assert any("solar wind is not modelled" in w for w in warnings)
    with_wind = _model("[solar_wind]\nelectron_density_at_1au_cm3 = 4.0")
    assert not any("solar wind" in w for w in with_wind.data_warnings(obs))


def test_simulate_injects_and_the_fit_recovers_it(tmp_path):
    from timingkit.cli.main import main
    from timingkit.pipeline import fit_files
    plain = tmp_path / "plain.toml"
    plain.write_text(MODEL.format(extra="", sites=os.path.abspath(SITES)))
    toas = tmp_path / "wind.toas"
    code = main(["simulate", str(plain), "--start", "59000", "--end", "59365", "--count", "160",
                 "--error-us", "0.05", "--site", "desert-dish", "--freq-mhz", "820,1400",
                 "--no-noise", "--solar-wind-density-cm3", "7.0", "-o", str(toas)])
    assert code == 0
    fitted = tmp_path / "fitted.toml"
    fitted.write_text(MODEL.format(
        extra="[solar_wind]\nelectron_density_at_1au_cm3 = 4.0\n[fit]\n"
              'free = ["solar_wind.electron_density_at_1au_cm3", "dispersion.dm"]',
        sites=os.path.abspath(SITES)))
    report = fit_files(str(toas), str(fitted), str(tmp_path / "out"), make_plots=False)
    entry = report["parameters"]["solar_wind.electron_density_at_1au_cm3"]
    assert abs(float(entry["value"]) - 7.0) < 1e-3
    assert report["settings"]["solar_wind"]["electron_density_at_1au_cm3"] == pytest.approx(7.0,
                                                                                         abs=1e-3)
    # the same TOAs fitted without the section leave the signal in the residuals
    report = fit_files(str(toas), str(plain), str(tmp_path / "out2"), make_plots=False,
                       free=["dispersion.dm"])
    assert report["rms_us"] > 0.05
    assert report["settings"]["solar_wind"] == "not modelled"
