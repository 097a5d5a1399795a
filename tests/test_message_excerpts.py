"""Messages about predictor files, event-list keywords and columns, orbit tables and
`simulate --flag` quote what they could not read only as a short, sanitised excerpt
(issue 15): a 5,000-character hostile value never appears whole, neither in the
message nor in its public form (batch summaries), and the message still names the
file and the field."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from events_support import TT_KEYWORDS, ogip_events
from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.event_fits import read_fits_events
from timingkit.formats.event_list import pick_energy_column
from timingkit.formats.event_text import read_text_events
from timingkit.formats.orbit_table import read_orbit_table
from timingkit.formats.predictor_file import parse_predictor_text

HOSTILE = "api_key=SECRET-TOKEN-" + "Z" * 4979
assert len(HOSTILE) == 5000
SAMPLE = Path(__file__).resolve().parent.parent / "timingkit" / "sample_data"


def _assert_excerpted(error: InputError, field: str | None = None) -> None:
    for text in (str(error).lower(), error.public_message.lower()):    # readers may fold case
        assert HOSTILE.lower() not in text and "z" * 100 not in text
    assert "z" * 100 not in (error.field or "").lower()
    assert "secret-token" not in error.public_message.lower()   # the quoted piece is left out
    if field is not None:
        assert error.field == field


@pytest.fixture(scope="module")
def predictor_doc(tmp_path_factory):
    """A real predictor file (written by `timingkit predict`), as a JSON object."""
    out = tmp_path_factory.mktemp("predictor") / "pred.json"
    assert main(["predict", str(SAMPLE / "demo-msp.toml"), "--site", "desert-dish", "--start",
                 "60000.9", "--end", "60000.95", "--freq-mhz", "1400", "-o", str(out)]) == 0
    return json.loads(out.read_text())


@pytest.mark.parametrize("where, key, field", [
    ("header", "version", "version"),
    ("header", "freq_mhz", "freq_mhz"),
    ("header", "accuracy_cycles", "accuracy_cycles"),
    ("segment", "seconds_per_day", "segments.0.seconds_per_day"),
    ("segment", "phase_fraction", "segments.0.phase_fraction"),
])
def test_predictor_file_values(predictor_doc, where, key, field):
    doc = json.loads(json.dumps(predictor_doc))
    (doc if where == "header" else doc["segments"][0])[key] = HOSTILE
    with pytest.raises(InputError) as caught:
        parse_predictor_text(json.dumps(doc), path="pred.json")
    _assert_excerpted(caught.value, field)
    assert "pred.json" in str(caught.value) and "'api_key=SECRET-TOKEN" in str(caught.value)


def test_predictor_file_unknown_key(predictor_doc):
    doc = dict(predictor_doc, **{HOSTILE: 1})
    with pytest.raises(InputError) as caught:
        parse_predictor_text(json.dumps(doc), path="pred.json")
    _assert_excerpted(caught.value)
    assert "unknown key" in str(caught.value)


@pytest.mark.parametrize("keyword, value", [
    ("TIMESYS", HOSTILE), ("TIMEUNIT", HOSTILE), ("TIMEREF", HOSTILE),
    ("MJDREFF", HOSTILE), ("TIMEPIXR", HOSTILE), ("TIMEDEL", HOSTILE),
])
def test_event_fits_keywords(tmp_path, keyword, value):
    path = ogip_events(tmp_path / "e.fits", [1.0, 2.0], {**TT_KEYWORDS, keyword: value})
    with pytest.raises(InputError) as caught:
        read_fits_events(str(path))
    _assert_excerpted(caught.value, keyword)
    assert keyword in caught.value.message and str(path) in str(caught.value)


def test_event_list_columns_asked_for(tmp_path):
    path = ogip_events(tmp_path / "e.fits", [1.0, 2.0], TT_KEYWORDS)
    with pytest.raises(InputError) as caught:
        pick_energy_column(["TIME", "PI"], HOSTILE, str(path))
    _assert_excerpted(caught.value, "energy_column")
    with pytest.raises(InputError) as caught:
        read_fits_events(str(path)).column(HOSTILE)
    _assert_excerpted(caught.value)


def test_event_text_scale(tmp_path):
    path = tmp_path / "events.txt"
    path.write_text(f"# scale: {HOSTILE}\nmjd\n58849.1\n")
    with pytest.raises(InputError) as caught:
        read_text_events(str(path))
    _assert_excerpted(caught.value, "scale")
    assert caught.value.line == 1


@pytest.mark.parametrize("header, row, field", [
    (f"# scale: {HOSTILE}", "58849.0 1 2 3", "scale"),
    ("# scale: tt", f"58849.0 {HOSTILE} 2 3", "x_m"),
])
def test_orbit_table_values(tmp_path, header, row, field):
    path = tmp_path / "orbit.txt"
    path.write_text(f"{header}\nmjd x_m y_m z_m\n{row}\n58849.1 1 2 3\n")
    with pytest.raises(InputError) as caught:
        read_orbit_table(str(path))
    _assert_excerpted(caught.value, field)


def test_simulate_flag_option(tmp_path, capsys):
    model = SAMPLE / "demo-slow.toml"
    hostile = HOSTILE.replace("=", ":")              # no NAME=VALUES: refused
    status = main(["simulate", str(model), "--start", "60000", "--end", "60010", "--count", "3",
                   "--error-us", "1", "--site", "desert-dish", "--flag", hostile,
                   "-o", str(tmp_path / "sim.toas")])
    err = capsys.readouterr().err
    assert status == 2 and "--flag" in err and "'api_key:SECRET-TOKEN" in err
    assert hostile not in err and "Z" * 100 not in err
    assert not (tmp_path / "sim.toas").exists()


@pytest.mark.parametrize("flag", [HOSTILE.replace("=", ":") + "=a,b",    # a name with no '='
                                  "backend=a," + HOSTILE.replace("=", ":"),
                                  "backend=a," + "Z" * 5000,           # readable, but too long
                                  "backend=a,api key " + "Z" * 900,    # short enough, a space
                                  "api key " + "Z" * 900 + "=a,b"])
def test_simulate_flag_names_and_values_the_table_could_not_hold(tmp_path, capsys, flag):
    status = main(["simulate", str(SAMPLE / "demo-slow.toml"), "--start", "60000", "--end",
                   "60010", "--count", "3", "--error-us", "1", "--site", "desert-dish",
                   "--flag", flag, "-o", str(tmp_path / "sim.toas")])
    err = capsys.readouterr().err
    assert status == 2 and "Z" * 100 not in err and "Traceback" not in err
    assert not (tmp_path / "sim.toas").exists()
