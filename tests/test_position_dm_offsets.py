"""Astrometry (equatorial and ecliptic forms), DM offsets over MJD ranges and
per-group time offsets: fits of simulated (invented) data, frame conversion
against erfa/astropy, and the errors the fitter names."""

import math

import erfa
import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import BarycentricMeanEcliptic, SkyCoord

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.least_squares import compute_residuals, fit
from timingkit.model import TimingModel
from timingkit.model.astrometry import (ICRS_TO_ECLIPTIC, ecliptic_to_equatorial,
                                        equatorial_to_ecliptic)
from timingkit.model.conversion import convert_frame
from timingkit.geometry.observations import prepare_observations
from timingkit.model.simulate import simulate_toas
from numdiff import phase_partial

MAS = math.pi / (180 * 3600e3)
SOURCE = '''
name = "sim-astrometric"
[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"
pm_ra_cosdec_mas_per_yr = 12.0
pm_dec_mas_per_yr = -7.0
parallax_mas = 1.5
[spin]
epoch_mjd = "58000"
frequency_hz = "300.123456789012345678"
frequency_derivatives = ["-1.2e-15"]
[dispersion]
dm = 20.0
'''
ASTRO = ["position.ra", "position.dec", "position.pm_ra_cosdec_mas_per_yr",
         "position.pm_dec_mas_per_yr", "position.parallax_mas"]
SPIN = ["spin.frequency_hz", "spin.frequency_derivatives.0"]


@pytest.fixture(scope="module")
def astrometric(sites, ephemeris):
    truth = TimingModel.from_text(SOURCE)
    toas = simulate_toas(truth, 56500, 59500, 300, 0.5, sites, ephemeris,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[800, 1400], seed=1)
    return truth, prepare_observations(toas, sites, ephemeris)


def _pull(res, truth, name):
    p, q = res.model.parameter(name), truth.parameter(name)
    return ((p.value - q.value) + (p.value_lo - q.value_lo)) / p.uncertainty


def test_position_fit_recovers_mas_offsets_proper_motion_and_parallax(astrometric):
    truth, obs = astrometric
    start = truth.copy()
    start.parameter("position.ra").add(3 * MAS / math.cos(start.astrometry.dec.value))
    start.parameter("position.dec").add(-4 * MAS)
    start.parameter("position.pm_ra_cosdec_mas_per_yr").add(2.0)
    start.parameter("position.pm_dec_mas_per_yr").add(-3.0)
    start.parameter("position.parallax_mas").add(-1.0)
    res = fit(start, obs, free=SPIN + ASTRO + ["dispersion.dm"])
    assert res.converged
    for name in ASTRO:
        assert abs(_pull(res, truth, name)) < 4, name
    # the offsets were large against the precision reached, so this is a real recovery
    assert res.model.parameter("position.ra").uncertainty < 0.3 * MAS
    assert res.model.parameter("position.dec").uncertainty < 1.5 * MAS
    parallax = res.model.parameter("position.parallax_mas")
    assert parallax.value > 10 * parallax.uncertainty


def test_obliquity_and_rotation_against_erfa_and_astropy():
    # IERS Conventions 2010 eq. 5.40 / IAU 2006: eps0 = 84381.406 arcsec; erfa's
    # ecliptic matrix at J2000 is R1(eps0) times the frame bias.
    assert erfa.obl06(2451545.0, 0.0) * 180 / math.pi * 3600 == pytest.approx(84381.406, abs=1e-9)
    rb, _, _ = erfa.bp06(2451545.0, 0.0)
    assert np.max(np.abs(ICRS_TO_ECLIPTIC - erfa.ecm06(2451545.0, 0.0) @ rb.T)) < 1e-15
    # astropy's BarycentricMeanEcliptic includes the ~23 mas frame bias on top
    ra, dec = math.radians(78.139403), math.radians(21.036454)
    ours = equatorial_to_ecliptic(ra, dec)
    theirs = SkyCoord(ra=ra * u.rad, dec=dec * u.rad, frame="icrs").transform_to(
        BarycentricMeanEcliptic(equinox="J2000"))
    sep = SkyCoord(ours["lon_rad"] * u.rad, ours["lat_rad"] * u.rad).separation(
        SkyCoord(theirs.lon, theirs.lat))
    assert 1 * u.mas < sep < 40 * u.mas


def test_frame_conversion_round_trip_with_proper_motion_and_covariance():
    cov = np.diag([(0.1 * MAS) ** 2, (0.3 * MAS) ** 2, 0.01 ** 2, 0.02 ** 2])
    cov[0, 1] = cov[1, 0] = 0.5 * 0.1 * 0.3 * MAS ** 2
    ecl = equatorial_to_ecliptic(1.36, 0.367, 12.0, -7.0, cov)
    back = ecliptic_to_equatorial(ecl["lon_rad"], ecl["lat_rad"], ecl["pm_lon_coslat"],
                                  ecl["pm_lat"], ecl["covariance"])
    assert back["lon_rad"] == pytest.approx(1.36, abs=1e-15)
    assert back["lat_rad"] == pytest.approx(0.367, abs=1e-15)
    assert (back["pm_lon_coslat"], back["pm_lat"]) == pytest.approx((12.0, -7.0), abs=1e-12)
    sig = np.sqrt(np.diag(cov))
    assert np.allclose(back["covariance"] / np.outer(sig, sig), cov / np.outer(sig, sig),
                       rtol=0, atol=1e-12)
    # total proper motion is frame independent
    assert math.hypot(ecl["pm_lon_coslat"], ecl["pm_lat"]) == pytest.approx(math.hypot(12, 7))


def test_ecliptic_and_equatorial_forms_give_the_same_residuals(astrometric):
    truth, obs = astrometric
    ecl = convert_frame(truth, "ecliptic")
    assert ecl.astrometry.frame == "ecliptic"
    text = ecl.to_document()
    assert text["position"]["frame"] == "ecliptic" and "ecliptic_longitude_deg" in text["position"]
    r_eq, r_ecl = compute_residuals(truth, obs), compute_residuals(ecl, obs)
    assert np.max(np.abs(r_eq.time_s - r_ecl.time_s)) < 1e-9
    # both forms fitted: same post-fit residuals, same position
    free_ecl = SPIN + ["position.ecliptic_longitude_deg", "position.ecliptic_latitude_deg",
                       "position.pm_longitude_coslat_mas_per_yr", "position.pm_latitude_mas_per_yr",
                       "position.parallax_mas"]
    f_eq = fit(truth, obs, free=SPIN + ASTRO)
    f_ecl = fit(ecl, obs, free=free_ecl)
    assert np.max(np.abs(f_eq.postfit.time_s - f_ecl.postfit.time_s)) < 1e-9
    assert f_eq.chi2 == pytest.approx(f_ecl.chi2, rel=1e-6)
    back = convert_frame(f_ecl.model, "equatorial")
    ra_err = f_eq.model.parameter("position.ra").uncertainty
    assert abs(back.parameter("position.ra").value
               - f_eq.model.parameter("position.ra").value) < 1e-3 * ra_err
    assert set(back.free_names) == set(SPIN + ASTRO)


def test_position_report_gives_both_frames_in_sexagesimal_degrees_and_mas(astrometric):
    from timingkit.outputs.report import build_report
    truth, obs = astrometric
    ecl = convert_frame(truth, "ecliptic")
    res = fit(ecl, obs, free=SPIN + ["position.ecliptic_longitude_deg",
                                     "position.ecliptic_latitude_deg"])
    rep = build_report(res, obs)
    entry = rep["parameters"]["position.ecliptic_longitude_deg"]
    assert "d" in entry["value"] and "m" in entry["value"] and entry["value"].endswith("s")
    assert entry["degrees"] == pytest.approx(res.model.parameter(
        "position.ecliptic_longitude_deg").value)
    assert entry["uncertainty"] == pytest.approx(
        res.model.parameter("position.ecliptic_longitude_deg").uncertainty * 3600e3)
    pos = rep["position"]
    assert pos["frame_of_model"] == "ecliptic"
    assert pos["equatorial"]["ra"].startswith("07h41m27.39")
    assert pos["equatorial"]["dec_uncertainty_mas"] > 0
    assert pos["ecliptic"]["ecliptic_latitude_uncertainty_mas"] == pytest.approx(
        res.model.parameter("position.ecliptic_latitude_deg").uncertainty * 3600e3, rel=1e-9)


def test_bad_position_sections_name_the_field():
    with pytest.raises(InputError) as info:
        TimingModel.from_text(SOURCE.replace('ra = "07h41m27.392s"', 'frame = "galactic"\nra = "05h"'))
    assert info.value.field == "position.frame" and "ecliptic" in str(info.value)
    with pytest.raises(InputError) as info:
        TimingModel.from_text(SOURCE.replace('ra = "07h41m27.392s"',
                                             'frame = "ecliptic"\nra = "07h41m27.392s"'))
    assert "unknown key" in str(info.value)
    ecl = SOURCE.replace('ra = "07h41m27.392s"\ndec = "-03d26m51.48s"\n'
                         'pm_ra_cosdec_mas_per_yr = 12.0\npm_dec_mas_per_yr = -7.0',
                         'frame = "ecliptic"\necliptic_longitude_deg = 117.4\n'
                         'ecliptic_latitude_deg = 95.0')
    with pytest.raises(InputError) as info:
        TimingModel.from_text(ecl)
    assert info.value.field == "position.ecliptic_latitude_deg"


# ------------------------------------------------------------ DM offsets

NO_DM = SOURCE.replace("[dispersion]\ndm = 20.0\n", "")
DM_RANGES = NO_DM + '''
[dispersion]
dm = 20.0
dm_offset_ranges_mjd = [[57000, 57500], [58000, 58600]]
dm_offsets = [0.0, 0.0]
'''


def test_dm_offsets_are_recovered(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = TimingModel.from_text(DM_RANGES.replace("dm_offsets = [0.0, 0.0]",
                                                    "dm_offsets = [2e-3, -3e-3]"))
    toas = simulate_toas(truth, 56800, 58800, 300, 0.5, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[700, 1400, 3000], seed=3)
    obs = prepare_observations(toas, sites, ephemeris)
    start = TimingModel.from_text(DM_RANGES)
    names = SPIN + ["dispersion.dm", "dispersion.dm_offsets.0", "dispersion.dm_offsets.1"]
    res = fit(start, obs, free=names)
    for k, value in enumerate((2e-3, -3e-3)):
        p = res.model.parameter(f"dispersion.dm_offsets.{k}")
        assert abs(p.value - value) < 4 * p.uncertainty
        assert abs(p.value) > 10 * p.uncertainty
    assert res.reduced_chi2 < 1.3
    doc = res.model.to_document()
    assert doc["dispersion"]["dm_offset_ranges_mjd"] == [[57000.0, 57500.0], [58000.0, 58600.0]]
    assert len(doc["dispersion"]["uncertainty"]["dm_offsets"]) == 2


def test_dm_offset_with_one_frequency_in_its_range_is_named(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    truth = TimingModel.from_text(DM_RANGES)
    two = simulate_toas(truth, 56800, 57900, 100, 1.0, sites, ephemeris,
                        site_names=["geocentre"], freqs_mhz=[800, 1400], seed=4)
    one = simulate_toas(truth, 57950, 58700, 60, 1.0, sites, ephemeris,
                        site_names=["geocentre"], freqs_mhz=[1400], seed=5)
    from timingkit.formats.toa_table import ToaTable
    toas = ToaTable.from_arrays(np.concatenate([two.mjd_day, one.mjd_day]),
                            np.concatenate([two.mjd_frac, one.mjd_frac]), 1.0,
                            np.concatenate([two.freq_mhz, one.freq_mhz]), "geocentre")
    obs = prepare_observations(toas, sites, ephemeris)
    with pytest.raises(FitError) as info:
        fit(truth, obs, free=SPIN + ["dispersion.dm_offsets.0", "dispersion.dm_offsets.1"])
    assert "dispersion.dm_offsets.1" in str(info.value)
    assert "dispersion.dm_offsets.0" not in str(info.value)
    fit(truth, obs, free=SPIN + ["dispersion.dm_offsets.0"])      # the measurable one fits


@pytest.mark.parametrize("ranges, offsets, message", [
    ("[[57000, 57500], [57400, 58000]]", "[0.0, 0.0]", "overlap"),
    ("[[57500, 57000]]", "[0.0]", "end > start"),
    ("[[57000, 57500]]", "[0.0, 1.0]", "2 values for 1 ranges"),
])
def test_bad_dm_offset_ranges_are_reported(ranges, offsets, message):
    text = NO_DM + f"[dispersion]\ndm_offset_ranges_mjd = {ranges}\ndm_offsets = {offsets}\n"
    with pytest.raises(InputError, match=message):
        TimingModel.from_text(text)


# ------------------------------------------------------- group offsets

GROUPS = SOURCE + '''
[[time_offset]]
flag = "backend"
value = "wide-b"
offset_s = 0.0

[[time_offset]]
flag = "site"
value = "lake-array"
offset_s = 0.0
'''


def test_group_offsets_are_recovered_and_written_back(sites, ephemeris):
    truth = TimingModel.from_text(GROUPS.replace("offset_s = 0.0", "offset_s = 3.2e-6", 1)
                                  .replace("offset_s = 0.0", "offset_s = -1.5e-6", 1))
    toas = simulate_toas(truth, 57000, 58000, 240, 0.5, sites, ephemeris,
                         site_names=["desert-dish", "lake-array", "desert-dish"],
                         freqs_mhz=[1400], seed=7, flags={"backend": ["wide-a", "wide-b"]})
    obs = prepare_observations(toas, sites, ephemeris)
    start = TimingModel.from_text(GROUPS)
    names = SPIN + ["time_offset.0.offset_s", "time_offset.1.offset_s"]
    res = fit(start, obs, free=names)
    for name, value in (("time_offset.0.offset_s", 3.2e-6), ("time_offset.1.offset_s", -1.5e-6)):
        p = res.model.parameter(name)
        assert abs(p.value - value) < 4 * p.uncertainty, name
        assert abs(p.value) > 10 * p.uncertainty, name
    doc = res.model.to_document()
    assert doc["time_offset"][1]["flag"] == "site"
    assert doc["time_offset"][0]["uncertainty"]["offset_s"] > 0
    again = TimingModel.from_text(format_text(doc))
    assert again.parameter("time_offset.0.offset_s").value == res.model.parameter(
        "time_offset.0.offset_s").value


def format_text(doc):
    from timingkit.formats.model_file import format_model_document
    return format_model_document(doc)


def test_group_offsets_that_cannot_be_measured_are_named(ephemeris):
    from timingkit.geometry.sites import SiteTable
    sites = SiteTable.with_files([])
    model = TimingModel.from_text(GROUPS.replace('value = "lake-array"', 'value = "geocentre"'))
    toas = simulate_toas(model, 57000, 57300, 40, 1.0, sites, ephemeris,
                         site_names=["geocentre"], freqs_mhz=[1400], seed=2,
                         flags={"backend": "wide-a"})
    obs = prepare_observations(toas, sites, ephemeris)
    with pytest.raises(FitError, match=r"time_offset.0.offset_s: no TOA has backend = wide-b"):
        fit(model, obs, free=SPIN + ["time_offset.0.offset_s"])
    with pytest.raises(FitError, match=r"time_offset.1.offset_s: every TOA"):
        fit(model, obs, free=SPIN + ["time_offset.1.offset_s"])
    with pytest.raises(InputError, match="two \\[\\[time_offset\\]\\] tables"):
        TimingModel.from_text(GROUPS.replace('value = "lake-array"', 'value = "wide-b"')
                              .replace('flag = "site"', 'flag = "backend"'))


def test_convert_command_round_trips_frame_and_binary_form(tmp_path, capsys):
    from timingkit.cli.main import main
    src = tmp_path / "m.toml"
    src.write_text(SOURCE + '''
[binary]
model = "keplerian"
orbital_period_days = "0.2"
projected_semi_major_axis_lt_s = 1.5
eccentricity = 1e-5
periastron_longitude_deg = 40.0
periastron_epoch_mjd = "58000.3"
[fit]
free = ["position.ra", "binary.eccentricity", "binary.projected_semi_major_axis_lt_s"]
''')
    before = src.read_text()
    assert main(["convert", str(src), "--frame", "ecliptic", "--binary-model",
                 "low_eccentricity", "-o", str(tmp_path / "e.toml")]) == 0
    assert src.read_text() == before                          # input untouched
    e = TimingModel.from_file(str(tmp_path / "e.toml"))
    assert e.astrometry.frame == "ecliptic"
    # the free list is kept: the eccentricity is carried by e sin w and e cos w
    assert set(e.free_names) == {"position.ecliptic_longitude_deg",
                                 "binary.projected_semi_major_axis_lt_s",
                                 "binary.e_sin_omega", "binary.e_cos_omega"}
    assert main(["convert", str(tmp_path / "e.toml"), "--frame", "equatorial", "--binary-model",
                 "keplerian", "-o", str(tmp_path / "b.toml")]) == 0
    b = TimingModel.from_file(str(tmp_path / "b.toml"))
    a = TimingModel.from_file(str(src))
    assert abs(b.parameter("position.ra").value - a.parameter("position.ra").value) < 1e-14
    assert abs(b.parameter("position.dec").value - a.parameter("position.dec").value) < 1e-14
    assert b.parameter("binary.eccentricity").value == pytest.approx(1e-5, rel=1e-12)
    assert main(["convert", str(src), "-o", str(tmp_path / "x.toml")]) == 2
    assert "nothing to do" in capsys.readouterr().err


def test_new_design_matrix_columns_match_numerical_derivatives(sites, ephemeris):
    text = convert_frame(TimingModel.from_text(DM_RANGES + GROUPS.split(SOURCE)[1]),
                               "ecliptic")
    model = TimingModel.from_text(format_text(text.to_document()))
    toas = simulate_toas(model, 56900, 58700, 90, 1.0, sites, ephemeris,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[800, 1600], seed=9,
                         add_noise=False, flags={"backend": ["wide-a", "wide-b", "wide-a"]})
    obs = prepare_observations(toas, sites, ephemeris)
    steps = {"position.ecliptic_longitude_deg": 1e-7, "position.ecliptic_latitude_deg": 1e-7,
             "position.pm_longitude_coslat_mas_per_yr": 1.0,
             "position.pm_latitude_mas_per_yr": 1.0, "dispersion.dm_offsets.0": 1e-3,
             "dispersion.dm_offsets.1": 1e-3, "time_offset.0.offset_s": 1e-6,
             "time_offset.1.offset_s": 1e-6}
    names = list(steps)
    ev = model.evaluate(obs)
    design = model.design_matrix(ev, names)
    for j, name in enumerate(names):
        num = phase_partial(model, obs, name, steps[name])
        scale = np.max(np.abs(num))
        assert scale > 0, name
        assert np.max(np.abs(design[:, j] - num)) < 1e-4 * scale, name


def test_sexagesimal_reader_agrees_with_astropy_angle():
    # The exact fast path for 'HHhMMmSS.s' / 'DDdMMmSS.s' / colon forms must
    # give astropy.coordinates.Angle's value (an independent parser) to 1e-15 rad.
    from astropy.coordinates import Angle
    from timingkit.model.astrometry import parse_angle
    for text, unit in [("07h41m27.392s", "hourangle"), ("17:53:20.1234567", "hourangle"),
                       ("23h59m59.999999s", "hourangle"), ("-03d26m51.48s", "deg"),
                       ("+41d06m38.20419s", "deg"), ("-00:30:00.5", "deg"),
                       ("89d59m59.9999s", "deg")]:
        assert abs(parse_angle(text, unit, "f", None) - Angle(text, unit=unit).radian) < 1e-15
    import pytest
    from timingkit.formats.errors import InputError
    with pytest.raises(InputError):
        parse_angle("05h61m00s", "hourangle", "position.ra", "m.toml")
