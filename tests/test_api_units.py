"""The Python API takes astropy quantities and times where a user would pass
them, converts them (or refuses them clearly) and never strips their units;
string arguments that name parameters are one name; API errors name Python
arguments, not command-line options."""

import os

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time

from timingkit.cli.main import main
from timingkit.formats.errors import FitError, InputError
from timingkit.formats.toa_table import ToaTable
from timingkit.glitch.results import GlitchSearchSettings
from timingkit.pipeline.inputs import load_model

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


def test_quantities_are_converted_not_stripped():
    toas = ToaTable.from_arrays(np.array([58849.0, 58850.0]), np.array([0.25, 0.5]),
                                1500 * u.ns, 1.4 * u.GHz, "desert-dish")
    np.testing.assert_allclose(toas.err_us, [1.5, 1.5])        # was 1500 (µs)
    np.testing.assert_allclose(toas.freq_mhz, [1400.0, 1400.0])  # was 1.4 (MHz)
    # a wavelength is a frequency: c / 21 cm = 1427.58 MHz (c exact, SI definition)
    toas = ToaTable.from_arrays(np.array([58849.0]), np.array([0.25]), [2 * u.us],
                                21 * u.cm, "desert-dish")
    assert toas.freq_mhz[0] == pytest.approx(299792458.0 / 0.21 / 1e6, rel=1e-12)
    assert toas.err_us[0] == 2.0


@pytest.mark.parametrize("err, freq, field", [(1500 * u.m, 1400.0, "err_us"),
                                              (1.0, 3 * u.s, "freq_mhz"),
                                              (1.0 * u.dimensionless_unscaled, 1400.0, "err_us")])
def test_quantities_of_the_wrong_kind_are_refused(err, freq, field):
    with pytest.raises(InputError) as info:
        ToaTable.from_arrays(np.array([58849.0]), np.array([0.25]), err, freq, "desert-dish")
    assert info.value.field == field


def test_an_astropy_time_gives_the_exact_parts_in_the_table_scale():
    # UTC at a ground site: the same parts as the decimal text
    utc = Time(["2020-01-01T06:00:00"], scale="utc", precision=9)
    toas = ToaTable.from_arrays(utc, err_us=1.0, freq_mhz=1400.0, site="desert-dish")
    assert toas.mjd_day[0] == 58849.0 and toas.mjd_frac[0] == 0.25
    # TT at a ground site becomes UTC: TT - UTC = 69.184 s in 2020 (IERS Bulletin C:
    # TAI - UTC = 37 s; TT - TAI = 32.184 s by definition)
    tt = Time([58849.25], format="mjd", scale="tt")
    toas = ToaTable.from_arrays(tt, err_us=1.0, freq_mhz=1400.0, site="desert-dish")
    assert toas.mjd_frac[0] == pytest.approx(0.25 - 69.184 / 86400.0, abs=1e-14)
    # the geocentre keeps TT, the barycentre TDB
    toas = ToaTable.from_arrays(tt, err_us=1.0, freq_mhz=1400.0, site="geocentre")
    assert toas.mjd_text[0] == "58849.250000000000000"
    tdb = Time([58849.25], format="mjd", scale="tdb")
    toas = ToaTable.from_arrays(tdb, err_us=1.0, freq_mhz=1400.0, site="ssb")
    assert toas.mjd_text[0] == "58849.250000000000000"
    # a leap second keeps the 86401-s day (ERFA convention, as the table reader)
    leap = Time("2016-12-31T23:59:60.5", scale="utc")
    toas = ToaTable.from_arrays(leap, err_us=1.0, freq_mhz=1400.0, site="desert-dish")
    assert toas.mjd_day[0] == 57753.0
    assert toas.mjd_frac[0] == pytest.approx(86400.5 / 86401.0, abs=1e-15)


def test_times_that_need_the_site_position_are_refused():
    tdb = Time([58849.25], format="mjd", scale="tdb")
    with pytest.raises(InputError, match="UTC"):
        ToaTable.from_arrays(tdb, err_us=1.0, freq_mhz=1400.0, site="desert-dish")
    with pytest.raises(InputError, match="ambiguous"):
        ToaTable.from_arrays(58849 * u.day, 0.25, 1.0, 1400.0, "desert-dish")


def test_a_string_is_one_parameter_name():
    model = load_model(os.path.join(SAMPLE, "demo-slow.toml"), free="position.ra",
                       fix="dispersion.dm")
    assert "position.ra" in model.free_names
    assert "dispersion.dm" not in model.free_names


def test_api_errors_name_arguments_and_the_command_line_names_options(tmp_path, capsys):
    with pytest.raises(InputError) as info:
        GlitchSearchSettings(window_toas=3)
    assert info.value.field == "window_toas" and "--" not in str(info.value)
    with pytest.raises(InputError) as info:
        load_model(os.path.join(SAMPLE, "demo-slow.toml"), free=["no.such"])
    assert info.value.field == "free" and "--" not in str(info.value)
    from timingkit.fit.least_squares import fit
    from timingkit.pipeline.inputs import load_inputs
    inputs = load_inputs(os.path.join(SAMPLE, "demo-slow.toas"),
                         os.path.join(SAMPLE, "demo-slow.toml"))
    with pytest.raises(FitError) as info:
        fit(inputs.model, inputs.obs, free=[])
    assert "--" not in str(info.value)
    assert fit(inputs.model, inputs.obs, free="spin.frequency_hz").free_names == [
        "spin.frequency_hz"]
    # the command line still says which option was wrong
    code = main(["fit", os.path.join(SAMPLE, "demo-slow.toas"),
                 os.path.join(SAMPLE, "demo-slow.toml"), "--free", "no.such",
                 "-o", str(tmp_path / "out")])
    assert code == 2
    assert "field '--free'" in capsys.readouterr().err
