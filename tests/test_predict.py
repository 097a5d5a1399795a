"""Phase predictors against the full timing model at the same topocentric times
(invented sources: a 700 Hz MSP, a young pulsar with a glitch, a 2-hour
binary), the file format, the reader's inputs and errors, and the command."""

import json
import os

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.predictor_file import write_predictor_file
from timingkit.model import TimingModel
from timingkit.numerics.timearray import SplitTime
from timingkit.predict import PhaseContext, build_predictor, model_phase_at, read_predictor

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")
TARGET_CYCLES = 1e-9       # the accuracy target

POSITION = """
[position]
ra = "13h14m15.1617s"
dec = "-21d22m23.456s"
pm_ra_cosdec_mas_per_yr = 5.2
pm_dec_mas_per_yr = -3.3
parallax_mas = 1.4
epoch_mjd = "60000"
"""


def _source(name, frequency_hz, derivatives, dm, extra=""):
    """An invented source's model text: position, spin, dispersion, ``extra``."""
    return (f'name = "{name}"\n{POSITION}\n[spin]\nepoch_mjd = "60000"\n'
            f'frequency_hz = "{frequency_hz}"\nfrequency_derivatives = {derivatives}\n'
            f"[dispersion]\ndm = {dm}\n{extra}")


MSP_700 = _source("invented-700hz", "700.1234567890123456", '["-2.2e-15"]', 31.2)
YOUNG_GLITCH = _source("invented-young", "11.34567890123456", '["-2.1e-11", "3e-22"]', 140.5, """
[[glitch]]
epoch_mjd = "60000.61"
frequency_step_hz = 2.4e-6
frequency_derivative_step = -1.2e-13
decaying_frequency_step_hz = 1.5e-7
decay_time_days = 3.0
""")
BINARY_2H = _source("invented-binary", "245.678901234567", '["-8e-16"]', 12.3, """
[binary]
model = "low_eccentricity"
orbital_period_days = "0.0833333"
projected_semi_major_axis_lt_s = 0.62
e_sin_omega = 2e-5
e_cos_omega = -1e-5
ascending_node_epoch_mjd = "60000.1"
companion_mass_msun = 0.2
sin_inclination = 0.9
""")


@pytest.fixture(scope="module")
def context(sites, ephemeris):
    return PhaseContext(sites, ephemeris)


def _random_times(start, end, n, seed):
    rng = np.random.default_rng(seed)
    mjd = np.sort(rng.uniform(start, end, n))
    day = np.floor(mjd)
    return SplitTime(day, mjd - day, "utc")


def _difference(predictor, model, times, site, freq, context):
    n, f = predictor.phase(times)
    mi, mf = model_phase_at(model, times, site, freq, context)
    return (n - mi) + (f - mf)


@pytest.mark.parametrize("text,start,end,site,freq", [
    (MSP_700, "60000.3", "60001.4", "desert-dish", 1400.0),
    (YOUNG_GLITCH, "60000.2", "60001.1", "lake-array", 610.0),
    (BINARY_2H, "60000.0", "60000.6", "north-ridge", 820.0),
], ids=["msp-700hz", "young-glitch", "binary-2h"])
def test_predictor_matches_the_full_model(text, start, end, site, freq, context):
    model = TimingModel.from_text(text)
    predictor = build_predictor(model, site, start, end, freq, context)
    times = _random_times(float(start), float(end), 3000, seed=5)
    diff = _difference(predictor, model, times, site, freq, context)
    assert np.max(np.abs(diff)) < TARGET_CYCLES
    assert predictor.data.estimated_max_error_cycles <= TARGET_CYCLES


def test_a_glitch_inside_the_span_ends_a_segment(context):
    # The glitch changes the frequency abruptly: a segment across it could not
    # fit, so a segment edge sits where the glitch reaches the site; within
    # seconds of it the predictor still matches the model on both sides.
    model = TimingModel.from_text(YOUNG_GLITCH.replace("frequency_step_hz = 2.4e-6",
                                                       "frequency_step_hz = 2.4e-5"))
    predictor = build_predictor(model, "lake-array", "60000.2", "60001.1", 610.0, context)
    edges = predictor.data.end_day[:-1] + predictor.data.end_frac[:-1]
    near = edges[np.abs(edges - 60000.61) < 0.01]
    assert len(near) == 1 and near[0] != 60000.61     # the arrival at the site, not the epoch
    day = np.floor(near[0])
    around = SplitTime(np.full(400, day), near[0] - day + np.linspace(-3, 3, 400) / 86400, "utc")
    diff = _difference(predictor, model, around, "lake-array", 610.0, context)
    assert np.max(np.abs(diff)) < TARGET_CYCLES
    # a fixed 12-hour, degree-8 predictor cannot follow it: the estimate says so
    coarse = build_predictor(model, "lake-array", "60000.2", "60001.1", 610.0, context,
                             segment_minutes=720, degree=8)
    assert coarse.data.estimated_max_error_cycles > TARGET_CYCLES


def test_700hz_precision_needs_the_split_reference_phase(context):
    # The phase here is ~1e11 cycles: in one float64 it resolves only ~1.5e-5
    # cycles; the integer + fraction + relative series keeps 1e-9.
    model = TimingModel.from_text(MSP_700.replace('epoch_mjd = "60000"\nfrequency_hz',
                                                  'epoch_mjd = "58000"\nfrequency_hz'))
    assert model.spin.epoch_day == 58000
    predictor = build_predictor(model, "desert-dish", "60000.3", "60000.6", 1400.0, context)
    times = _random_times(60000.3, 60000.6, 1000, seed=9)
    n, f = predictor.phase(times)
    assert n.min() > 1e11
    mi, mf = model_phase_at(model, times, "desert-dish", 1400.0, context)
    assert np.max(np.abs((n - mi) + (f - mf))) < TARGET_CYCLES
    as_one_float = n.astype(float) + f
    assert np.max(np.abs((as_one_float - n) - f)) > 1e-6     # the fraction is lost


def test_frequency_is_the_phase_rate_at_the_site(context):
    # five-point central differences of the full model's phase (step 0.5 s;
    # truncation error ~h^4, Abramowitz & Stegun 25.3.6)
    model = TimingModel.from_text(BINARY_2H)
    predictor = build_predictor(model, "north-ridge", "60000.0", "60000.3", 820.0, context)
    t = _random_times(60000.01, 60000.29, 50, seed=3)

    def phase(seconds):
        n, f = model_phase_at(model, t.add_seconds(seconds), "north-ridge", 820.0, context)
        return n, f

    def delta(a, b):
        return (a[0] - b[0]) + (a[1] - b[1])
    h = 0.5
    rate = (8 * delta(phase(h), phase(-h)) - delta(phase(2 * h), phase(-2 * h))) / (12 * h)
    got = predictor.frequency_hz(t)
    assert np.max(np.abs(got - rate)) < 2e-9        # 1e-11 relative
    # the binary's Doppler shift is visible (a 2-hour orbit, 0.62 lt-s: ~3e-4 relative)
    assert np.ptp(got) / np.mean(got) > 1e-4


def test_leap_second_day(context):
    # A leap second ended MJD 57753 (2016 December 31; IERS Bulletin C 52): that
    # UTC day has 86401 s, so its segments say so and phase and frequency stay
    # right on both sides of midnight.
    model = TimingModel.from_text(MSP_700)
    predictor = build_predictor(model, "desert-dish", "57753.8", "57754.2", 1400.0, context)
    days = {int(d): s for d, s in zip(predictor.data.start_day, predictor.data.seconds_per_day)}
    assert days == {57753: 86401.0, 57754: 86400.0}
    times = _random_times(57753.8, 57754.2, 1000, seed=4)
    diff = _difference(predictor, model, times, "desert-dish", 1400.0, context)
    assert np.max(np.abs(diff)) < TARGET_CYCLES
    edge = ["57753.999999", "57754.000001"]
    f = predictor.frequency_hz(edge)
    assert abs(f[1] - f[0]) < 1e-9 * f[0]
    # at the geocentre times are TT: no leap seconds there
    geocentric = build_predictor(model, "geocentre", "57753.8", "57754.2", 1400.0, context)
    assert set(geocentric.data.seconds_per_day.tolist()) == {86400.0}
    assert geocentric.data.time_scale.startswith("TT")
    diff = _difference(geocentric, model, times, "geocentre", 1400.0, context)
    assert np.max(np.abs(diff)) < TARGET_CYCLES


def test_fixed_segments_and_degree(context):
    model = TimingModel.from_text(MSP_700)
    p = build_predictor(model, "desert-dish", "60000.5", "60000.6", 1400.0, context,
                        segment_minutes=30, degree=9)
    minutes = p.length_days * 1440
    assert np.allclose(minutes[:-1], 30) and minutes[-1] <= 30
    assert set(p.data.degrees.tolist()) == {9}
    assert p.data.coefficients.shape[1] == 10


def test_file_round_trip_and_inputs(tmp_path, context):
    model = TimingModel.from_text(BINARY_2H)
    p = build_predictor(model, "north-ridge", "60000.0", "60000.2", 820.0, context)
    path = tmp_path / "p.json"
    write_predictor_file(p.data, str(path))
    doc = json.loads(path.read_text())
    assert doc["format"] == "timingkit-phase-predictor" and doc["version"] == 1
    q = read_predictor(str(path))
    texts = ["60000.0123456789", "60000.1987654321"]
    day, frac = np.array([60000.0, 60000.0]), np.array([0.0123456789, 0.1987654321])
    by_text, by_parts, by_split = (q.phase(texts), q.phase((day, frac)),
                                   q.phase(SplitTime(day, frac, "utc")))
    assert np.array_equal(by_text[0], by_parts[0]) and np.array_equal(by_parts[0], by_split[0])
    assert np.allclose(by_text[1], by_parts[1], atol=1e-12)
    assert np.array_equal(p.phase(texts)[0], by_text[0])
    assert np.all((by_text[1] >= 0) & (by_text[1] < 1))
    with pytest.raises(TypeError, match="float MJD"):
        q.phase(60000.1)
    with pytest.raises(InputError, match="MJD 60000.3 is outside") as err:
        q.phase(["60000.1", "60000.3"])
    assert "p.json" in str(err.value)


def test_bad_predictor_files_name_line_and_field(tmp_path, context):
    model = TimingModel.from_text(MSP_700)
    p = build_predictor(model, "desert-dish", "60000.5", "60000.6", 1400.0, context)
    path = tmp_path / "p.json"
    write_predictor_file(p.data, str(path))
    lines = path.read_text().splitlines()
    row = next(i for i, line in enumerate(lines) if '"start_mjd"' in line)
    bad = tmp_path / "bad.json"
    bad.write_text("\n".join(lines[:row] + [lines[row].replace('"seconds_per_day": 86400',
                                                                '"seconds_per_day": 3')]
                             + lines[row + 1:]))
    with pytest.raises(InputError) as err:
        read_predictor(str(bad))
    assert f"bad.json:{row + 1}:" in str(err.value) and "segments.0.seconds_per_day" in str(
        err.value)
    bad.write_text(path.read_text().replace("timingkit-phase-predictor", "something-else"))
    with pytest.raises(InputError, match="not a phase-predictor file"):
        read_predictor(str(bad))


def test_model_phase_does_not_depend_on_the_other_times(context):
    # exact evaluation: the same time gives the same phase alone or in a crowd,
    # and the phase is smooth at the 1e-10-cycle level (the two-part TDB's
    # rounding, ~5 ps = 3.5e-9 cycles at 700 Hz, is added back)
    model = TimingModel.from_text(MSP_700)
    crowd = SplitTime(np.full(3000, 60000.0), 0.6 + np.linspace(0, 20, 3000) / 86400, "utc")
    n1, f1 = model_phase_at(model, crowd, "desert-dish", 1400.0, context)
    n2, f2 = model_phase_at(model, crowd[::300], "desert-dish", 1400.0, context)
    assert np.max(np.abs((n1[::300] - n2) + (f1[::300] - f2))) < 1e-12
    seconds = (crowd.frac - crowd.frac[0]) * 86400.0     # exact differences of the inputs
    phase = (n1 - n1[0]) + (f1 - f1[0])
    smooth = np.polynomial.polynomial.Polynomial.fit(seconds, phase, 4)
    assert np.max(np.abs(phase - smooth(seconds))) < 3e-10


def test_predict_command(tmp_path, capsys):
    out = tmp_path / "pred.json"
    model = os.path.join(SAMPLE, "demo-msp.toml")
    assert main(["predict", model, "--site", "desert-dish", "--start", "60000.9", "--end",
                 "60001.05", "--freq-mhz", "1400", "-o", str(out), "--table"]) == 0
    text = capsys.readouterr().out
    assert "wrote" in text and "frequency (Hz)" in text and "period (s)" in text
    p = read_predictor(str(out))
    assert p.site == "desert-dish" and p.data.source == "demo-msp"
    assert main(["predict", str(out), "--table"]) == 0
    assert "60001.000000000000000" in capsys.readouterr().out     # a segment starts at 0h UTC
    assert main(["predict", model, "--site", "desert-dish", "--start", "60001", "--end",
                 "60000", "--freq-mhz", "1400", "-o", str(tmp_path / "x.json")]) == 2
    assert "later than start" in capsys.readouterr().err
    assert not (tmp_path / "x.json").exists()
    assert main(["predict", model, "--start", "60000", "--end", "60001", "-o",
                 str(tmp_path / "x.json")]) == 2
    assert "--site" in capsys.readouterr().err
