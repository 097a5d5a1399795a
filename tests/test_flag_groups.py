"""[[time_offset]] and [[white_noise]] groups with flag = "site" take the TOAs of that
site under any of its names (issue 15's leftovers): its name or one of its other_names,
in any case, whichever way the TOA table writes the site.

The sources and sites are the invented ones of the sample data (desert-dish, also
"dd"; lake-array, also "la").
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from timingkit.fit.least_squares import fit
from timingkit.model.noise import NoiseModel
from timingkit.pipeline.inputs import load_inputs

SAMPLE = Path(__file__).resolve().parents[1] / "timingkit" / "sample_data"
OFFSET_S = 0.002


@pytest.fixture()
def two_sites(tmp_path):
    """The slow demo pulsar with its later half of TOAs moved to lake-array (written by
    its name); the model shifts that site by "LA" and scales desert-dish's errors by "dd"."""
    for name in ("demo-slow.toas", "demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, tmp_path / name)
    toas = tmp_path / "demo-slow.toas"
    lines = toas.read_text().splitlines()
    lines[2 + 75:] = [line.replace("desert-dish", "lake-array") for line in lines[2 + 75:]]
    toas.write_text("\n".join(lines) + "\n")
    model = tmp_path / "demo-slow.toml"
    model.write_text(model.read_text()
                     + f'\n[[time_offset]]\nflag = "site"\nvalue = "LA"\noffset_s = {OFFSET_S}\n'
                     '\n[[white_noise]]\nflag = "site"\nvalue = "dd"\nerror_scale = 2.0\n')
    return load_inputs(toas, model)


def test_site_groups_match_the_other_names_of_the_site(two_sites):
    obs, model = two_sites.obs, two_sites.model
    at_lake = np.asarray(obs.toas.site) == "lake-array"
    assert at_lake.sum() == 75
    offset = next(c for c in model.extra if c.section == "time_offset")
    assert np.array_equal(offset.mask(obs), at_lake)
    # the delay enters only the lake-array TOAs, by exactly the offset
    delay_s = model.evaluate(obs).other_delay_s
    assert np.array_equal(delay_s, np.where(at_lake, OFFSET_S, 0.0))
    noise = NoiseModel.from_timing_model(model)
    assert noise.group_counts(obs) == [75]
    errors_us = noise.white_errors_us(obs)
    assert np.allclose(errors_us, np.where(at_lake, 1.0, 2.0) * obs.toas.err_us, rtol=1e-15)
    assert not [w for w in obs.warnings if "matches no TOA" in w]


def test_the_fit_measures_the_offset_of_the_site_named_by_an_other_name(tmp_path):
    # TOAs simulated from the true demo model at two sites; the lake-array ones are then
    # delayed by hand by OFFSET_S (not through the group code), and desert-dish is
    # written "DD". Fitted from zero, the offset named "LA" comes back within 4 sigma.
    from timingkit.formats.toa_table import ToaTable
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.model.simulate import simulate_toas
    from timingkit.numerics.timearray import SplitTime
    from timingkit.pipeline.inputs import load_context, load_model
    shutil.copy(SAMPLE / "sites.toml", tmp_path / "sites.toml")
    truth = load_model(SAMPLE / "demo-slow.true.toml")
    sites, ephemeris, _ = load_context(truth)
    toas = simulate_toas(truth, 58300, 59700, 160, 100.0, sites, ephemeris,
                         site_names=["desert-dish", "lake-array"], freqs_mhz=[350.0, 820.0, 1400.0], seed=15)
    at_lake = np.asarray(toas.site) == "lake-array"
    assert 40 < at_lake.sum() < 120
    late = SplitTime(toas.mjd_day, toas.mjd_frac, "utc").add_seconds(np.where(at_lake, OFFSET_S,
                                                                              0.0))
    written = np.where(at_lake, "lake-array", "DD")
    write_toa_table(ToaTable.from_arrays(late.day, late.frac, toas.err_us, toas.freq_mhz,
                                         written), tmp_path / "two.toas")
    model = tmp_path / "two.toml"
    model.write_text((SAMPLE / "demo-slow.true.toml").read_text()
                     + '\n[[time_offset]]\nflag = "site"\nvalue = "LA"\noffset_s = 0.0\n'
                     '\n[[white_noise]]\nflag = "site"\nvalue = "dd"\nerror_scale = 1.0\n')
    inputs = load_inputs(tmp_path / "two.toas", model, free=["time_offset.0.offset_s"])
    result = fit(inputs.model, inputs.obs)
    assert result.noise.group_counts == [int((~at_lake).sum())]
    fitted = result.model.parameter("time_offset.0.offset_s")
    assert 0 < fitted.uncertainty < OFFSET_S / 10
    assert abs(fitted.value - OFFSET_S) < 4 * fitted.uncertainty


def test_a_bare_toa_table_matches_the_site_as_written(two_sites):
    # without the prepared observations there is no site table: only the name as written
    noise = NoiseModel.from_timing_model(two_sites.model)
    assert noise.group_counts(two_sites.obs.toas) == [0]
