"""`fit --suggest` also tries the astrometric terms and DM derivatives, and
starts a trial parameter from a value the data can move. Invented sources and
sites (seeded simulations); the truth is the simulated model. The F-test
itself is checked in test_model_selection.py."""


from timingkit.fit.least_squares import fit
from timingkit.fit.model_selection import suggest
from timingkit.geometry.observations import prepare_observations
from timingkit.model import TimingModel
from timingkit.model.simulate import simulate_toas

ASTRO = """
name = "demo-suggest"
[position]
ra = "05h12m33.4567s"
dec = "+21d02m11.234s"
epoch_mjd = "58000"
pm_ra_cosdec_mas_per_yr = {pm_ra}
pm_dec_mas_per_yr = {pm_dec}
[dispersion]
epoch_mjd = "58000"
dm = 31.5
derivatives = [{dm_rate}]
[spin]
frequency_hz = "412.0987654321"
frequency_derivatives = ["-2.1e-15"]
epoch_mjd = "58000"
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm",
        "position.ra", "position.dec"]
"""


def _pull(comparison, name, truth):
    value = comparison.values[name]
    return (float(value["value"]) - truth) / value["uncertainty"]


def test_proper_motion_and_a_dm_derivative_are_suggested(sites, ephemeris):
    truth = TimingModel.from_text(ASTRO.format(pm_ra=15.0, pm_dec=-9.0, dm_rate=-2e-3))
    toas = simulate_toas(truth, 57000, 58800, 240, 0.5, sites, ephemeris,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[800, 1400],
                         seed=4)
    obs = prepare_observations(toas, sites, ephemeris)
    # the proper motion missing (held at zero)
    start = TimingModel.from_text(ASTRO.format(pm_ra=0.0, pm_dec=0.0, dm_rate=-2e-3))
    comparisons = {c.addition: c for c in suggest(fit(start, obs), obs)}
    pm = comparisons["astrometric term: proper motion"]
    assert pm.supported
    assert abs(_pull(pm, "position.pm_ra_cosdec_mas_per_yr", 15.0)) < 4
    assert abs(_pull(pm, "position.pm_dec_mas_per_yr", -9.0)) < 4
    assert not comparisons["astrometric term: parallax"].supported     # tried, not needed
    # the DM derivative missing
    start = TimingModel.from_text(ASTRO.format(pm_ra=15.0, pm_dec=-9.0, dm_rate="")
                                  .replace("derivatives = []\n", ""))
    comparisons = {c.addition: c for c in suggest(fit(start, obs), obs)}
    dm = comparisons["first dispersion-measure derivative"]
    assert dm.supported
    assert abs(_pull(dm, "dispersion.derivatives.0", -2e-3)) < 4
    assert not comparisons["astrometric term: proper motion"].supported


BINARY = """
name = "demo-shapiro"
[position]
ra = "16h01m02.5s"
dec = "+12d34m56.7s"
[spin]
epoch_mjd = "58000"
frequency_hz = "250.123456789"
frequency_derivatives = ["-7.5e-16"]
[binary]
model = "relativistic"
orbital_period_days = "1.5"
projected_semi_major_axis_lt_s = 4.0
eccentricity = 0.01
periastron_longitude_deg = 30.0
periastron_epoch_mjd = "58000.1"
{shapiro}
[fit]
free = ["spin.frequency_hz", "spin.frequency_derivatives.0", "binary.orbital_period_days",
        "binary.projected_semi_major_axis_lt_s", "binary.eccentricity",
        "binary.periastron_longitude_deg", "binary.periastron_epoch_mjd"]
"""


def test_a_shapiro_delay_held_at_zero_is_tried_from_a_movable_start(sites, ephemeris):
    # both Shapiro parameters at zero have no effect on the TOAs: freed alone from
    # there, neither could be fitted ("unconstrained"); tried together from
    # sin i = 0.866 and the median companion mass, the data move them to the truth
    truth = TimingModel.from_text(BINARY.format(
        shapiro="shapiro_range_s = 2.0e-6\nshapiro_shape = 0.97"))
    start = TimingModel.from_text(BINARY.format(shapiro=""))
    toas = simulate_toas(truth, 57500, 58500, 600, 0.3, sites, ephemeris, site_names=["ssb"],
                         freqs_mhz=[1400.0], seed=2)
    obs = prepare_observations(toas, sites, ephemeris)
    comparisons = suggest(fit(start, obs), obs)
    (shapiro,) = [c for c in comparisons if "binary.shapiro_shape" in c.parameters]
    assert set(shapiro.parameters) == {"binary.shapiro_shape", "binary.shapiro_range_s"}
    assert shapiro.f_probability is not None, shapiro.note
    assert shapiro.supported
    assert abs(_pull(shapiro, "binary.shapiro_shape", 0.97)) < 4
    assert abs(_pull(shapiro, "binary.shapiro_range_s", 2.0e-6)) < 4
