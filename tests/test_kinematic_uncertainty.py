"""The kinematic correction of the orbital period derivative: the Shklovskii
and Galactic terms share the distance, so its error is propagated jointly.
Checked by Monte Carlo propagation of the distance (JCGM 101:2008, GUM
Supplement 1) with the Shklovskii term computed here from its formula."""

import numpy as np

from timingkit.model.timing_model import TimingModel
from timingkit.physics import binary as dbin
from timingkit.physics.binary_report import extra_report_sections

DISTANCE_KPC, DISTANCE_ERR_KPC = 1.2, 0.05
ORBITAL_PERIOD_DAYS = 0.38
ORBITAL_PERIOD_DERIVATIVE, ORBITAL_PERIOD_DERIVATIVE_ERR = -2.0e-14, 1.0e-16
PM_RA, PM_DEC = 3.0, -4.0                       # mas/yr: 5 mas/yr in all


def _icrs_of_galactic(l_deg, b_deg):
    import astropy.units as u
    from astropy.coordinates import SkyCoord
    c = SkyCoord(l=l_deg * u.deg, b=b_deg * u.deg, frame="galactic").icrs
    return (c.ra.to_string(unit="hourangle", sep="hms", precision=6),
            c.dec.to_string(unit="deg", sep="dms", precision=5, alwayssign=True))


def _model() -> TimingModel:
    # an invented binary towards l = 90 deg, where the Galactic term is negative and
    # falls with distance while the Shklovskii term rises: the two nearly cancel
    ra, dec = _icrs_of_galactic(90.0, 0.5)
    return TimingModel.from_text(f"""name = "invented-decaying-binary"
[position]
ra = "{ra}"
dec = "{dec}"
pm_ra_cosdec_mas_per_yr = {PM_RA}
pm_dec_mas_per_yr = {PM_DEC}
distance_kpc = {DISTANCE_KPC}
uncertainty = {{ distance_kpc = {DISTANCE_ERR_KPC} }}
[spin]
epoch_mjd = "59200"
frequency_hz = "250.0"
[binary]
model = "low_eccentricity"
orbital_period_days = {ORBITAL_PERIOD_DAYS}
projected_semi_major_axis_lt_s = 1.1
ascending_node_epoch_mjd = "59200.1"
orbital_period_derivative = {ORBITAL_PERIOD_DERIVATIVE}
uncertainty = {{ orbital_period_derivative = {ORBITAL_PERIOD_DERIVATIVE_ERR} }}
""")


def test_intrinsic_orbital_period_derivative_error_is_joint():
    import astropy.constants as const
    import astropy.units as u
    model = _model()
    q = extra_report_sections(model, None)["derived_binary"]["quantities"]
    reported = q["orbital_period_derivative_intrinsic"]["uncertainty"]
    l_deg, b_deg = dbin.galactic_from_icrs(np.degrees(model.astrometry.longitude.value),
                                           np.degrees(model.astrometry.latitude.value))
    rng = np.random.default_rng(2024)
    n = 40000
    d = rng.normal(DISTANCE_KPC, DISTANCE_ERR_KPC, n)
    observed = rng.normal(ORBITAL_PERIOD_DERIVATIVE, ORBITAL_PERIOD_DERIVATIVE_ERR, n)
    pb = (ORBITAL_PERIOD_DAYS * u.day).to(u.s)
    mu = (np.hypot(PM_RA, PM_DEC) * u.mas / u.yr).to(u.rad / u.s).value / u.s
    # Shklovskii (1970): Pb mu^2 d / c, in astropy units
    shk = (pb * mu ** 2 * (d * u.kpc) / const.c).decompose().value
    gal = np.array([dbin.galactic_period_derivative(pb.value, l_deg, b_deg, x)["value"]
                    for x in d])
    simulated = np.std(observed - shk - gal)
    assert abs(reported / simulated - 1) < 0.03
    # adding the two terms' errors in quadrature would be far off here
    shk_err = q["orbital_period_derivative_shklovskii"]["uncertainty"]
    gal_err = q["orbital_period_derivative_galactic"]["uncertainty"]
    quadrature = np.sqrt(shk_err ** 2 + gal_err ** 2 + ORBITAL_PERIOD_DERIVATIVE_ERR ** 2)
    assert quadrature / simulated > 1.5


def test_spin_side_uses_the_same_joint_propagation():
    # intrinsic_spin and the orbital correction share remove_kinematic_terms
    res = dbin.intrinsic_spin(0.004, 1e-20, proper_motion_mas_per_yr=5.0, distance_kpc=1.2,
                              galactic_longitude_deg=90.0, galactic_latitude_deg=0.5,
                              distance_err_kpc=0.05)
    _, _, value, unc = dbin.remove_kinematic_terms(0.004, 1e-20, 5.0, 1.2, 90.0, 0.5,
                                                   distance_err_kpc=0.05)
    assert res["intrinsic_period_derivative"]["value"] == value
    assert res["intrinsic_period_derivative"]["uncertainty"] == unc
