"""The Sun near the line of sight: the closest approach against astropy's
geometry on the same DE421 file, the per-data-set warning, and the refusal
(exit 2, naming the lines) of lines of sight through the solar disc."""

import math
import os

import numpy as np
import pytest

from timingkit.formats.errors import InputError
from timingkit.formats.toa_reader import read_toa_table
from timingkit.geometry.ephemeris import builtin_ephemeris_path
from timingkit.geometry.solar_approach import SOLAR_RADIUS_M, closest_approach_m
from timingkit.model.timing_model import TimingModel

CONJUNCTION_TT_MJD = 59731.5          # invented epoch: the source sits behind the Sun then
SITES = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", "timingkit",
                                     "sample_data", "sites.toml"))


def _sun_direction_icrs(tt_mjd: float) -> tuple[str, str]:
    """RA/Dec text of the Sun's geometric direction from the geocentre (astropy)."""
    import astropy.units as u
    from astropy.coordinates import CartesianRepresentation, SkyCoord, get_body_barycentric
    from astropy.time import Time
    t = Time(tt_mjd, format="mjd", scale="tt")
    path = builtin_ephemeris_path()
    v = (get_body_barycentric("sun", t, ephemeris=path).xyz
         - get_body_barycentric("earth", t, ephemeris=path).xyz).to_value(u.m)
    sky = SkyCoord(CartesianRepresentation(*v), frame="icrs")
    return (sky.ra.to_string(unit="hourangle", sep="hms", precision=6),
            sky.dec.to_string(unit="deg", sep="dms", precision=5, alwayssign=True))


@pytest.fixture(scope="module")
def model_path(tmp_path_factory):
    ra, dec = _sun_direction_icrs(CONJUNCTION_TT_MJD)
    path = tmp_path_factory.mktemp("sun") / "behind-the-sun.toml"
    path.write_text(f"""name = "invented-behind-the-sun"
[position]
ra = "{ra}"
dec = "{dec}"
epoch_mjd = "{CONJUNCTION_TT_MJD}"
[spin]
epoch_mjd = "{CONJUNCTION_TT_MJD}"
frequency_hz = "123.456"
[settings]
sites = "{SITES}"
""")
    return str(path)


def _table(path, offsets_days):
    lines = ["# invented TOAs around a solar conjunction", "mjd err_us freq_mhz site"]
    for dt in offsets_days:
        lines.append(f"{CONJUNCTION_TT_MJD + dt:.12f} 1.0 1400.0 geocentre")
    path.write_text("\n".join(lines) + "\n")
    return str(path)


def test_closest_approach_matches_astropy(model_path, tmp_path, ephemeris, sites):
    import astropy.units as u
    from astropy.coordinates import SkyCoord, get_body_barycentric
    from astropy.time import Time
    offsets = [-3.0, -1.0, -0.5, 0.5, 2.0]
    model = TimingModel.from_file(model_path)
    toas = read_toa_table(_table(tmp_path / "a.toas", offsets))
    obs = model.prepare_observations(toas, sites, ephemeris)
    from timingkit.model.base import Evaluation
    ev = Evaluation(obs)
    model.astrometry.apply(ev)
    ours = closest_approach_m(obs.sun_to_observer_m, ev.direction)
    # astropy: impact parameter |rho x n| of the Sun (geometric, DE421) from the
    # geocentre, with the direction astropy reads from the same RA/Dec text
    sec = model.astrometry
    n = SkyCoord(sec.longitude.value * u.rad, sec.latitude.value * u.rad).cartesian.xyz.value
    t = Time(CONJUNCTION_TT_MJD + np.array(offsets), format="mjd", scale="tt")
    path = builtin_ephemeris_path()
    rho = (get_body_barycentric("earth", t, ephemeris=path).xyz
           - get_body_barycentric("sun", t, ephemeris=path).xyz).to_value(u.m).T
    theirs = np.linalg.norm(np.cross(rho, n), axis=1)
    # ours takes the Sun where the light passed it (~500 s earlier: < 10 km)
    assert np.max(np.abs(ours - theirs)) < 20e3
    # the Sun moves ~1 degree a day = 3.8 solar radii per day
    assert 1.5 < ours[2] / SOLAR_RADIUS_M < 2.5
    assert ours[0] / SOLAR_RADIUS_M > 10


def test_warning_counts_the_close_passes(model_path, tmp_path, ephemeris, sites):
    model = TimingModel.from_file(model_path)
    toas = read_toa_table(_table(tmp_path / "b.toas", [-3.0, -1.0, -0.5, 0.5, 2.0]))
    obs = model.prepare_observations(toas, sites, ephemeris)
    warnings = [w for w in model.data_warnings(obs) if "solar radii" in w]
    assert len(warnings) == 1
    text = warnings[0]
    assert text.startswith("3 TOA(s)")             # -1.0 (3.8 R_sun), -0.5 and +0.5 days
    assert f"MJD {CONJUNCTION_TT_MJD - 1.0:.3f}-{CONJUNCTION_TT_MJD + 0.5:.3f}" in text
    closest = float(text.split("closest ")[1].split(" solar")[0])
    assert 1.5 < closest < 2.5


def test_lines_of_sight_through_the_disc_are_refused(model_path, tmp_path, capsys):
    from timingkit.cli.main import main
    toas = _table(tmp_path / "c.toas", [-3.0, -0.05, 0.0, 0.04, 2.0])
    code = main(["barycentre", toas, model_path, "-o", str(tmp_path / "out.csv")])
    err = capsys.readouterr().err
    assert code == 2
    assert "c.toas:4" in err                       # the first offending line (header is 2)
    assert "lines 4, 5, 6" in err and "solar disc" in err and "Traceback" not in err
    assert not os.path.exists(tmp_path / "out.csv")
    with pytest.raises(InputError) as exc:
        from timingkit.pipeline.inputs import load_inputs
        load_inputs(toas, model_path)
    assert exc.value.line == 4 and exc.value.field == "mjd"


def test_simulate_leaves_out_arrivals_behind_the_sun(model_path, ephemeris, sites):
    from timingkit.model.simulate import simulate_toas
    model = TimingModel.from_file(model_path)
    day = np.full(5, math.floor(CONJUNCTION_TT_MJD))
    frac = CONJUNCTION_TT_MJD - day + np.array([-3.0, -0.02, 0.0, 0.03, 2.0])
    toas = simulate_toas(model, 0, 0, 5, 1.0, sites, ephemeris, site_names=("geocentre",),
                         times=(day, frac), add_noise=False)
    assert len(toas) == 2
