"""Predictors for an observation with stated flags: the model's [[time_offset]]
groups that select them apply (invented source and sites). The reference is
the full model evaluated on a TOA table whose rows carry the flag, through the
fitter's own path (TimingModel.prepare_observations + evaluate)."""

import json
import os

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.predictor_file import write_predictor_file
from timingkit.formats.toa_table import ToaTable
from timingkit.model import TimingModel
from timingkit.predict import PhaseContext, build_predictor, read_predictor

from test_predict import MSP_700, SAMPLE

TARGET_CYCLES = 1e-9
OFFSET_S = 3.7e-4
SITE_OFFSET_S = -1.1e-5


def _group(flag, value, offset_s):
    """One [[time_offset]] table of a model file."""
    return f'\n[[time_offset]]\nflag = "{flag}"\nvalue = "{value}"\noffset_s = {offset_s}\n'


GROUPS = (_group("backend", "wide-b", OFFSET_S) + _group("backend", "narrow-c", 2.0e-3)
          + _group("site", "desert-dish", SITE_OFFSET_S))
RECEIVER_GROUP = _group("receiver", "low-band", 5e-4)


@pytest.fixture(scope="module")
def context(sites, ephemeris):
    return PhaseContext(sites, ephemeris)


def _toa_phase(model, times_day, times_frac, backend, context):
    """Full-model phase on TOAs (the fitter's path) carrying ``backend``."""
    n = len(times_day)
    toas = ToaTable(mjd_text=np.full(n, ""), mjd_day=times_day, mjd_frac=times_frac,
                    err_us=np.ones(n), freq_mhz=np.full(n, 1400.0),
                    site=np.full(n, "desert-dish"), flags={"backend": backend})
    obs = model.prepare_observations(toas, context.sites, context.ephemeris, exact=True)
    ev = model.evaluate(obs)
    return ev.phase_int, ev.phase_frac, ev


def test_flagged_predictor_equals_the_model_on_flagged_toas(context):
    model = TimingModel.from_text(MSP_700 + GROUPS)
    with_flag = build_predictor(model, "desert-dish", "60000.3", "60000.7", 1400.0, context,
                                flags={"backend": "wide-b"})
    without = build_predictor(model, "desert-dish", "60000.3", "60000.7", 1400.0, context)
    rng = np.random.default_rng(12)
    frac = np.sort(rng.uniform(0.3, 0.7, 400))
    day = np.full(len(frac), 60000.0)
    backend = np.where(np.arange(len(frac)) % 2 == 0, "wide-b", "other")
    mi, mf, ev = _toa_phase(model, day, frac, backend, context)
    wide = backend == "wide-b"
    n, f = with_flag.phase((day[wide], frac[wide]))
    assert np.max(np.abs((n - mi[wide]) + (f - mf[wide]))) < TARGET_CYCLES
    # rows without a group of their backend: the predictor without the flag
    n0, f0 = without.phase((day[~wide], frac[~wide]))
    assert np.max(np.abs((n0 - mi[~wide]) + (f0 - mf[~wide]))) < TARGET_CYCLES
    # with and without differ by the offset times the frequency: the offset
    # delays emission, and with the spin phase phi(t) = phi0 + F (t - t0) + ...
    # (Lorimer & Kramer 2005, Handbook of Pulsar Astronomy, ch. 8; from memory)
    # d(phase) = -F x offset to first order, F the spin frequency at emission;
    # the apparent frequency would differ by the Doppler factor (~1e-4 x 0.26
    # cycles, far above the tolerance)
    n0, f0 = without.phase((day[wide], frac[wide]))
    difference = (n - n0) + (f - f0)
    expected = -OFFSET_S * ev.spin_frequency_hz[wide]
    assert np.max(np.abs(difference - expected)) < 1e-8
    assert abs(float(np.mean(difference))) > 0.25         # 0.26 cycles at 700 Hz
    # the site group applies with or without flags; both are recorded
    applied = {(o["flag"], o["value"]): o["offset_s"] for o in with_flag.data.time_offsets_applied}
    assert applied == {("backend", "wide-b"): OFFSET_S, ("site", "desert-dish"): SITE_OFFSET_S}
    assert [o["flag"] for o in without.data.time_offsets_applied] == ["site"]
    assert with_flag.data.flags == {"backend": "wide-b"}
    assert any("backend" in w and "not applied" in w for w in without.data.warnings)
    assert not any("not applied" in w for w in with_flag.data.warnings)


def test_flags_round_trip_and_cautions(tmp_path, context):
    model = TimingModel.from_text(MSP_700 + GROUPS + RECEIVER_GROUP)
    p = build_predictor(model, "desert-dish", "60000.5", "60000.52", 1400.0, context,
                        flags={"backend": "narrow-c", "bakend": "x"})
    caution = " ".join(p.data.warnings)
    assert "receiver = low-band" in caution and "--flag receiver=VALUE" in caution
    assert "'bakend' is not used by any time-offset group" in caution
    path = tmp_path / "p.json"
    write_predictor_file(p.data, str(path))
    doc = json.loads(path.read_text())
    assert doc["flags"] == {"backend": "narrow-c", "bakend": "x"}
    assert {"flag": "backend", "value": "narrow-c", "offset_s": 2.0e-3} in doc[
        "time_offsets_applied"]
    q = read_predictor(str(path))
    assert q.data.flags == p.data.flags
    assert q.data.time_offsets_applied == p.data.time_offsets_applied
    doc["time_offsets_applied"][0]["offset_s"] = "soon"
    path.write_text(json.dumps(doc))
    with pytest.raises(InputError, match="time_offsets_applied.0.offset_s"):
        read_predictor(str(path))
    with pytest.raises(InputError, match="may not be named 'site'"):
        build_predictor(model, "desert-dish", "60000.5", "60000.52", 1400.0, context,
                        flags={"site": "desert-dish"})


def test_predict_command_flags(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text(MSP_700 + GROUPS)
    out = tmp_path / "p.json"
    base = ["predict", str(model), "--site", "desert-dish", "--start", "60000.5", "--end",
            "60000.52", "--freq-mhz", "1400", "--sites", os.path.join(SAMPLE, "sites.toml")]
    assert main(base + ["--flag", "backend=wide-b", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "applied time offset 0.00037 s of the group backend = wide-b" in text
    assert read_predictor(str(out)).data.flags == {"backend": "wide-b"}
    assert main(base + ["--flag", "backend", "-o", str(tmp_path / "x.json")]) == 2
    assert "expected NAME=VALUE" in capsys.readouterr().err
    assert main(base + ["--flag", "backend=a", "--flag", "backend=b", "-o",
                        str(tmp_path / "x.json")]) == 2
    assert "given twice" in capsys.readouterr().err
    assert main(base + ["--flag", "mjd=1", "-o", str(tmp_path / "x.json")]) == 2
    assert "field '--flag': a flag may not be named 'mjd'" in capsys.readouterr().err
    assert not (tmp_path / "x.json").exists()
    assert main(base + ["-o", str(tmp_path / "y.json")]) == 0
    assert "caution: time-offset group(s) not applied" in capsys.readouterr().err
