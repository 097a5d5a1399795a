"""Predictors for a list of observing windows (invented source and site): the
segments cover the windows and nothing else, the phase matches the full model
inside them, a time outside every window is refused naming the nearest one,
and the window file's errors name its line."""

import os

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.window_file import read_window_file
from timingkit.model import TimingModel
from timingkit.numerics.timearray import SplitTime
from timingkit.predict import PhaseContext, build_window_predictor, model_phase_at, read_predictor

from test_predict import BINARY_2H, SAMPLE

TARGET_CYCLES = 1e-9
# given out of order; the second and third touch (they show as one span)
WINDOWS = [("60001.40", "60001.45"), ("60000.10", "60000.1625"),
           ("60000.1625", "60000.20"), ("60002.95", "60003.05")]


@pytest.fixture(scope="module")
def context(sites, ephemeris):
    return PhaseContext(sites, ephemeris)


@pytest.fixture(scope="module")
def predictor(context):
    return build_window_predictor(TimingModel.from_text(BINARY_2H), "north-ridge", WINDOWS,
                                  820.0, context)


def _covered_days(p, lo, hi):
    d = p.data
    start, end = d.start_day + d.start_frac, d.end_day + d.end_frac
    return np.sum(np.clip(np.minimum(end, hi) - np.maximum(start, lo), 0, None))


def test_segments_cover_the_windows_only(predictor, context):
    d = predictor.data
    assert predictor.windows() == [("60000.10", "60000.20"), ("60001.40", "60001.45"),
                                   ("60002.95", "60003.05")]
    # every segment lies in one window, and the windows are covered whole
    # (the last one crosses 0h UTC, where a segment must end)
    for lo, hi in [(60000.10, 60000.20), (60001.40, 60001.45), (60002.95, 60003.05)]:
        assert _covered_days(predictor, lo, hi) == pytest.approx(hi - lo, abs=1e-12)
    assert np.sum(predictor.length_days) == pytest.approx(0.1 + 0.05 + 0.1, abs=1e-12)
    assert "60003.000000000000000" in d.start_text
    model = TimingModel.from_text(BINARY_2H)
    rng = np.random.default_rng(3)
    for lo, hi in [(0.10, 0.20), (1.40, 1.45), (2.95, 3.05)]:
        mjd = 60000.0 + np.sort(rng.uniform(lo, hi, 300))
        day = np.floor(mjd)
        times = SplitTime(day, mjd - day, "utc")
        n, f = predictor.phase(times)
        mi, mf = model_phase_at(model, times, "north-ridge", 820.0, context)
        assert np.max(np.abs((n - mi) + (f - mf))) < TARGET_CYCLES


def test_a_time_between_windows_names_the_nearest(predictor):
    with pytest.raises(InputError) as err:
        predictor.phase(["60000.15", "60001.3"])
    message = str(err.value)
    assert "MJD 60001.3 is outside every observing window" in message
    assert "nearest window is MJD 60001.40 to 60001.45" in message
    with pytest.raises(InputError, match="nearest window is MJD 60000.10 to 60000.20"):
        predictor.phase("60000.5")
    with pytest.raises(InputError, match="nearest window is MJD 60002.95 to 60003.05"):
        predictor.frequency_hz(["60004.0"])


def test_window_errors(tmp_path, context):
    model = TimingModel.from_text(BINARY_2H)
    with pytest.raises(InputError, match="overlaps the one from 60000.1 to 60000.3") as err:
        build_window_predictor(model, "north-ridge", [("60000.1", "60000.3"),
                                                      ("60000.2", "60000.4")], 820.0, context)
    assert err.value.field == "windows.1.start_mjd"
    path = tmp_path / "w.txt"
    path.write_text("# start end\n60000.1 60000.2  # first\n\n60000.5 60000.4\n")
    with pytest.raises(InputError) as err:
        read_window_file(str(path))
    assert err.value.line == 4 and err.value.field == "end_mjd"
    path.write_text("60000.1 60000.2\n60000.3 6e4\n")
    with pytest.raises(InputError, match="scientific notation") as err:
        read_window_file(str(path))
    assert err.value.line == 2
    path.write_text("60000.1 60000.2 60000.3\n")
    with pytest.raises(InputError, match="found 3 value"):
        read_window_file(str(path))


def test_predict_command_windows(tmp_path, capsys):
    windows = tmp_path / "windows.txt"
    windows.write_text("# two sessions\n60001.40 60001.45\n60000.10 60000.20\n")
    out = tmp_path / "p.json"
    model = os.path.join(SAMPLE, "demo-msp.toml")
    base = ["predict", model, "--site", "desert-dish", "--freq-mhz", "1400"]
    assert main(base + ["--windows", str(windows), "-o", str(out)]) == 0
    assert "in 2 windows" in capsys.readouterr().out
    assert read_predictor(str(out)).windows() == [("60000.10", "60000.20"),
                                                  ("60001.40", "60001.45")]
    windows.write_text("60000.1 60000.3\n60000.2 60000.4\n")
    assert main(base + ["--windows", str(windows), "-o", str(tmp_path / "x.json")]) == 2
    assert "windows.txt:2: field 'start_mjd': window 60000.2 to 60000.4 overlaps" in (
        capsys.readouterr().err)
    assert main(base + ["--windows", str(windows), "--start", "60000", "-o",
                        str(tmp_path / "x.json")]) == 2
    assert "not both" in capsys.readouterr().err
    assert not (tmp_path / "x.json").exists()
