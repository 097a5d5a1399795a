import os

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


@pytest.fixture(scope="session")
def ephemeris():
    from timingkit.geometry.ephemeris import load_ephemeris
    return load_ephemeris()


@pytest.fixture(scope="session")
def sites():
    from timingkit.geometry.sites import SiteTable
    return SiteTable.with_files([os.path.join(SAMPLE, "sites.toml")])
