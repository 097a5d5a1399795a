"""The orbit table's stated interpolation error, per region (interior, table
ends, gaps), against the true error on an eccentric Keplerian orbit whose
positions are computed here analytically."""

import json

import numpy as np
import pytest

from events_support import TT_KEYWORDS, ogip_events, write_inputs
from timingkit.cli.main import main
from timingkit.formats.orbit_table import OrbitTable, write_orbit_text
from timingkit.geometry.spacecraft import END_INTERVALS, SpacecraftTrajectory
from timingkit.numerics.timearray import SplitTime

GM_EARTH_M3_S2 = 3.986004418e14        # IERS Conventions 2010, Table 1.1
START = 58000.0


def kepler_state(seconds, semi_major_axis_m=12.0e6, eccentricity=0.4, inclination_deg=50.0):
    """Position and velocity (m, m/s) on an invented Keplerian orbit about a
    point-mass Earth: Kepler's equation M = E - e sin E solved by Newton's method
    to machine precision, then x = a (cos E - e), y = a sqrt(1 - e^2) sin E and
    their time derivatives (dE/dt = n / (1 - e cos E)); perigee at t = 0."""
    n = np.sqrt(GM_EARTH_M3_S2 / semi_major_axis_m ** 3)
    mean = n * np.asarray(seconds, dtype=float)
    ecc = eccentricity
    anomaly = mean.copy()
    for _ in range(40):
        anomaly -= (anomaly - ecc * np.sin(anomaly) - mean) / (1.0 - ecc * np.cos(anomaly))
    a, b = semi_major_axis_m, semi_major_axis_m * np.sqrt(1.0 - ecc ** 2)
    rate = n / (1.0 - ecc * np.cos(anomaly))
    x, y = a * (np.cos(anomaly) - ecc), b * np.sin(anomaly)
    vx, vy = -a * np.sin(anomaly) * rate, b * np.cos(anomaly) * rate
    inc = np.radians(inclination_deg)
    pos = np.stack([x, y * np.cos(inc), y * np.sin(inc)], axis=1)
    vel = np.stack([vx, vy * np.cos(inc), vy * np.sin(inc)], axis=1)
    return pos, vel


def _table(seconds, velocities):
    pos, vel = kepler_state(seconds)
    times = SplitTime(np.full(len(seconds), START), seconds / 86400.0, "tt")
    return OrbitTable("kepler.txt", times, pos, vel if velocities else None)


def _true_errors(trajectory, rows_s, samples=200_000):
    """Largest true position error per region, from dense samples."""
    seconds = np.linspace(rows_s[0], rows_s[-1], samples)
    pos, _ = trajectory.posvel(SplitTime(np.full(samples, START), seconds / 86400.0, "tt"))
    error = np.linalg.norm(pos - kepler_state(seconds)[0], axis=1)
    spacing = np.diff(rows_s)
    interval = np.clip(np.searchsorted(rows_s, seconds, side="right") - 1, 0, len(spacing) - 1)
    gap = spacing[interval] > 2.0 * np.median(spacing)
    end = (interval < END_INTERVALS) | (interval >= len(spacing) - END_INTERVALS)
    return {"interior": np.max(error[~gap & ~end]), "table_ends": np.max(error[end]),
            "gap": np.max(error[gap]) if np.any(gap) else None}


@pytest.mark.parametrize("velocities, step_s", [(True, 60.0), (True, 120.0), (False, 60.0)])
def test_stated_error_bounds_the_true_error_per_region(velocities, step_s):
    rows = np.arange(0.0, 0.5 * 86400.0, step_s)
    rows = rows[(rows < 20000.0) | (rows > 20000.0 + 6 * step_s)]      # one gap of 7 steps
    trajectory = SpacecraftTrajectory(_table(rows, velocities))
    stated = trajectory.regions
    true = _true_errors(trajectory, rows)
    # bounds: the stated figure is never below the true error in its region
    assert true["interior"] <= stated["interior"]["error_m"]
    assert true["table_ends"] <= stated["table_ends"]["error_m"]
    assert stated["gaps_in_table"] == 1
    gap = stated["gaps"][0]
    assert gap["width_s"] == pytest.approx(7 * step_s)
    assert true["gap"] <= gap["error_m"]
    # and not grossly pessimistic in the interior (the issue asks within ~10x)
    assert stated["interior"]["error_m"] < 10 * true["interior"]
    # the gap is far worse than the interior, so one worst-case figure would mislead
    assert gap["error_m"] > 10 * stated["interior"]["error_m"]
    assert trajectory.interpolation_error_m == gap["error_m"]
    assert stated["interior"]["error_ns"] == pytest.approx(
        stated["interior"]["error_m"] / 299792458.0 * 1e9)


def test_report_states_the_error_per_region_and_warns_about_a_bad_gap(tmp_path):
    rows = np.arange(0.0, 0.3 * 86400.0, 60.0)
    rows = rows[(rows < 10000.0) | (rows > 10000.0 + 1200.0)]         # a 21-minute gap
    pos, vel = kepler_state(rows)
    orbit = tmp_path / "orbit.txt"
    write_orbit_text(orbit, SplitTime(np.full(len(rows), START), rows / 86400.0, "tt"), pos, vel)
    events = ogip_events(tmp_path / "events.fits", np.linspace(100.0, 25000.0, 2000),
                         {**TT_KEYWORDS, "CLOCKAPP": True})
    model, _ = write_inputs(tmp_path)
    assert main(["events", str(events), str(model), "--orbit", str(orbit), "--harmonics", "2",
                 "--no-plot", "-o", str(tmp_path / "out")]) == 0
    report = json.loads((tmp_path / "out" / "events_report.json").read_text())
    regions = report["settings"]["observer"]["interpolation_error_by_region"]
    assert set(regions) >= {"interior", "table_ends", "gaps"}
    assert regions["gaps"][0]["start_mjd"] == pytest.approx(START + 9960.0 / 86400.0)
    assert regions["gaps"][0]["error_m"] > 30.0 > regions["interior"]["error_m"]
    assert any("gap(s) in the orbit table" in w for w in report["warnings"])
    # events that all lie before the gap: no warning about it
    early = ogip_events(tmp_path / "early.fits", np.linspace(100.0, 9000.0, 2000),
                        {**TT_KEYWORDS, "CLOCKAPP": True})
    assert main(["events", str(early), str(model), "--orbit", str(orbit), "--harmonics", "2",
                 "--no-plot", "-o", str(tmp_path / "early")]) == 0
    report = json.loads((tmp_path / "early" / "events_report.json").read_text())
    assert not any("gap(s) in the orbit table" in w for w in report["warnings"])
