import os

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")

# The tests compare with astropy's own paths, offline: astropy must never try to
# download IERS tables during them (timingkit itself only opens astropy.utils.iers
# with downloads off; see timingkit.geometry.earth_orientation.astropy_iers).
from astropy.utils import iers as _astropy_iers  # noqa: E402

_astropy_iers.conf.auto_download = False

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


@pytest.fixture(scope="session")
def ephemeris():
    from timingkit.geometry.ephemeris import load_ephemeris
    return load_ephemeris()


@pytest.fixture(scope="session")
def sites():
    from timingkit.geometry.sites import SiteTable
    return SiteTable.with_files([os.path.join(SAMPLE, "sites.toml")])


# --- the glitch tests' simulation set-up (test_glitch_*.py, test_glitches_cli.py) ---------
# An invented young pulsar, "demo-young", observed at the barycentre (site 'ssb': no
# Earth rotation, so each simulated data set is fast). Tests import the two text
# builders (``from conftest import ...``) and take the simulation as a fixture:
# ``observe_at_ssb`` (TOAs of a given model) or ``simulate_young`` (the young pulsar with
# glitches: starting model, TOAs and truth).

def young_pulsar_text(frequency_hz=10.0, frequency_derivative=-1e-11, epoch_mjd="58000",
                      free=("spin.frequency_hz", "spin.frequency_derivatives.0")) -> str:
    """Model text of the invented young pulsar with the given spin; ``free``
    (parameter names) becomes its [fit] list, none when empty."""
    text = f"""
name = "demo-young"
[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"
[spin]
epoch_mjd = "{epoch_mjd}"
frequency_hz = "{frequency_hz!r}"
frequency_derivatives = ["{frequency_derivative!r}"]
"""
    if free:
        text += "[fit]\nfree = [" + ", ".join(f'"{name}"' for name in free) + "]\n"
    return text


def glitch_text(epoch_mjd, frequency_step_hz, frequency_derivative_step,
                decaying_step_hz=None, decay_time_days=None) -> str:
    """One [[glitch]] table (a decaying part when ``decaying_step_hz`` is given)."""
    text = (f'\n[[glitch]]\nepoch_mjd = "{epoch_mjd:.6f}"\n'
            f"frequency_step_hz = {frequency_step_hz!r}\n"
            f"frequency_derivative_step = {frequency_derivative_step!r}\n")
    if decaying_step_hz is not None:
        text += (f"decaying_frequency_step_hz = {decaying_step_hz!r}\n"
                 f"decay_time_days = {decay_time_days!r}\n")
    return text


@pytest.fixture(scope="session")
def observe_at_ssb(sites, ephemeris):
    """Factory: ``observe(truth, start_mjd, end_mjd, count, err_us, seed)`` simulates
    TOAs of the model ``truth`` at the barycentre at 1400 MHz (seeded) and returns
    the observations ready for a fit or a search."""
    from timingkit.geometry.observations import prepare_observations
    from timingkit.model.simulate import simulate_toas

    def observe(truth, start_mjd, end_mjd, count, err_us, seed):
        toas = simulate_toas(truth, start_mjd, end_mjd, count, err_us, sites, ephemeris,
                             site_names=["ssb"], freqs_mhz=[1400.0], seed=seed)
        return prepare_observations(toas, sites, ephemeris)

    return observe


@pytest.fixture(scope="session")
def simulate_young(observe_at_ssb):
    """Factory: ``simulate(glitches, start_mjd, end_mjd, count, err_us, seed,
    frequency_hz=10.0, frequency_derivative=-1e-11, epoch_mjd="58000", extra_text="")``
    simulates the invented young pulsar with ``glitches`` (argument tuples of
    :func:`glitch_text`) and ``extra_text`` (more model sections, e.g. noise) and
    returns (the starting model: the same without the glitches, the observations,
    the truth model)."""
    from timingkit.model import TimingModel

    def simulate(glitches, start_mjd, end_mjd, count, err_us, seed, frequency_hz=10.0,
                 frequency_derivative=-1e-11, epoch_mjd="58000", extra_text=""):
        spin = young_pulsar_text(frequency_hz, frequency_derivative, epoch_mjd) + extra_text
        truth = TimingModel.from_text(spin + "".join(glitch_text(*g) for g in glitches))
        obs = observe_at_ssb(truth, start_mjd, end_mjd, count, err_us, seed)
        return TimingModel.from_text(spin), obs, truth

    return simulate
