"""explorer.html without a browser: the page's data against the fit's files, the
glitch marks, and a page that names nothing outside itself."""

import base64
import csv
import json
import os
import re
import shutil

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.outputs.explorer_page import explorer_data
from timingkit.outputs.residual_table import ResidualTable

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


def decode(text, dtype):
    return np.frombuffer(base64.b64decode(text), dtype=dtype)


def levels_of(entry):
    return np.array(entry["levels"])[decode(entry["codes"], "<u2")]


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """demo-msp fitted with two lines left out, with --explore."""
    folder = tmp_path_factory.mktemp("explorer")
    for name in ("demo-msp.toas", "demo-msp.toml", "sites.toml"):
        shutil.copy(os.path.join(SAMPLE, name), folder / name)
    (folder / "out.txt").write_text("# rules\nline=20..21 receiver <b>fault</b>\n")
    assert main(["fit", str(folder / "demo-msp.toas"), str(folder / "demo-msp.toml"), "-o",
                 str(folder / "out"), "--no-plot", "--exclude", str(folder / "out.txt"),
                 "--explore"]) == 0
    return folder / "out"


def test_page_data_are_the_fit_outputs(fitted):
    data = explorer_data(str(fitted))
    post = ResidualTable.read_csv(fitted / "residuals.csv")
    pre = ResidualTable.read_csv(fitted / "prefit_residuals.csv")
    c = data["columns"]
    assert data["source"] == "demo-msp" and data["count"] == len(post) == 360
    assert c["mjd_text"].split(" ") == list(post.mjd_text)          # exact, as read
    assert decode(c["line"], "<i4").tolist() == post.toa_line.tolist()
    assert np.array_equal(decode(c["post_us"], "<f4"), post.residual_us.astype(np.float32))
    assert np.array_equal(decode(c["pre_us"], "<f4"), pre.residual_us.astype(np.float32))
    assert np.array_equal(decode(c["err_us"], "<f4"), post.err_us.astype(np.float32))
    assert decode(c["pulse"], "<f8").tolist() == post.pulse_number.tolist()
    assert levels_of(c["site"]).tolist() == list(post.site)
    assert levels_of(c["flags"]["backend"]).tolist() == list(post.flags["backend"])
    reasons = levels_of(c["left_out"])
    assert [i for i, r in enumerate(reasons) if r] == [17, 18]       # table lines 20 and 21
    assert set(reasons[[17, 18]]) == {"receiver <b>fault</b>"}
    # the spin frequency from the residuals (phase / time): the fitted one to 1e-6
    report = json.loads((fitted / "report.json").read_text())
    assert data["frequency_hz"] == pytest.approx(
        float(report["parameters"]["spin.frequency_hz"]["value"]), rel=1e-6)
    assert "orbital_phase" not in c and data["epochs"] == []


def test_page_is_self_contained_and_escapes_text(fitted):
    text = (fitted / "explorer.html").read_text(encoding="utf-8")
    assert not re.search(r"<script[^>]+src=", text) and not re.search(r"<link[^>]+href=", text)
    assert "@import" not in text
    payload = re.search(r'<script type="application/json" id="timingkit-data">(.*?)</script>',
                        text, re.S).group(1)
    assert json.loads(payload)["count"] == 360
    assert "<b>fault</b>" not in text          # the reason is data, never markup
    # Bokeh's own library and the page's script are inline
    assert "Bokeh" in text and "window.timingkitExplorer" in text


def test_glitch_marks_come_from_the_model_and_the_search(tmp_path, fitted):
    for name in ("residuals.csv", "report.json"):
        shutil.copy(fitted / name, tmp_path / name)
    (tmp_path / "fitted.toml").write_text(
        'name = "x"\n[spin]\nepoch_mjd = "59000"\nfrequency_hz = "1"\n'
        '[[glitch]]\nepoch_mjd = "59100.25"\n[[glitch]]\nepoch_mjd = "59800.5"\n')
    (tmp_path / "glitches.json").write_text(json.dumps({
        "settings": {"null_trials": 1000},
        "candidates": [
            {"epoch_mjd": 59100.3, "epoch_min_mjd": 59099.0, "epoch_max_mjd": 59101.0,
             "false_alarm_probability": 0.0, "model_glitch_index": 0},
            {"epoch_mjd": 59500.0, "epoch_min_mjd": 59490.0, "epoch_max_mjd": 59510.0,
             "false_alarm_probability": 0.0123, "model_glitch_index": None},
            {"epoch_mjd": 59600.0, "false_alarm_probability": 1 / 1001,
             "false_alarm_probability_upper_limit": True}]}))
    marks = explorer_data(str(tmp_path))["epochs"]
    assert marks == [
        {"kind": "model", "mjd": 59100.25, "low": 59099.0, "high": 59101.0, "short": "glitch 1",
         "label": "glitch 1 (model; search candidate 1, FAP < 1/1000)"},
        {"kind": "model", "mjd": 59800.5, "short": "glitch 2", "label": "glitch 2 (model)"},
        {"kind": "candidate", "mjd": 59500.0, "low": 59490.0, "high": 59510.0,
         "short": "candidate 2", "label": "search candidate 2, FAP 0.012"},
        {"kind": "candidate", "mjd": 59600.0, "low": None, "high": None,
         "short": "candidate 3", "label": "search candidate 3, FAP < 0.001"}]
    assert "prefit_residuals.csv" not in os.listdir(tmp_path)
    assert "pre_us" not in explorer_data(str(tmp_path))["columns"]


def test_explore_command_and_errors(tmp_path, fitted, capsys):
    assert main(["explore", str(fitted), "-o", str(tmp_path / "page.html")]) == 0
    assert (tmp_path / "page.html").stat().st_size > 1_000_000       # Bokeh is inside
    assert main(["explore", str(tmp_path / "nothing")]) == 2
    assert "no residuals.csv here" in capsys.readouterr().err


def test_binary_fit_carries_orbital_phase(tmp_path):
    # residuals.csv of a binary holds the orbital phase, and the page offers it
    binary = open(os.path.join(SAMPLE, "demo-msp.toml")).read() + (
        '\n[binary]\nmodel = "low_eccentricity"\norbital_period_days = 5.74\n'
        'projected_semi_major_axis_lt_s = 3.37\ne_sin_omega = 0.0\ne_cos_omega = 0.0\n'
        'ascending_node_epoch_mjd = "59000.125"\n')
    for name in ("demo-msp.toas", "sites.toml"):
        shutil.copy(os.path.join(SAMPLE, name), tmp_path / name)
    (tmp_path / "binary.toml").write_text(binary)
    assert main(["residuals", str(tmp_path / "demo-msp.toas"), str(tmp_path / "binary.toml"),
                 "-o", str(tmp_path / "r")]) == 0
    with open(tmp_path / "r" / "residuals.csv") as fh:
        rows = list(csv.DictReader(fh))
    phases = np.array([float(r["orbital_phase"]) for r in rows])
    mjd = np.array([float(r["mjd"]) for r in rows])
    # mean orbital phase advances by one turn per 5.74 days (to the ~500 s
    # light travel across the orbit of the Earth, 0.001 of a turn)
    expected = np.mod((mjd - 59000.125) / 5.74, 1.0)
    wrapped = np.abs(((phases - expected) + 0.5) % 1.0 - 0.5)
    assert wrapped.max() < 0.002
    data = explorer_data(str(tmp_path / "r"))
    assert np.allclose(decode(data["columns"]["orbital_phase"], "<f4"), phases, atol=1e-6)
