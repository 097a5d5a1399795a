"""Fuzz tests of the TOA-table and model readers (issue 15), run in CI with a fixed
seed (hypothesis ``derandomize=True``): 3000 inputs in all, in seconds.

The property: a reader either returns a table/model whose numbers are finite and
in range, or raises InputError naming the file, with a short message. Never any
other exception, never a hang, never a huge message.
"""

from __future__ import annotations

import math
from decimal import Decimal

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import format_model_document
from timingkit.formats.toa_reader import ERR_US_RANGE, FREQ_MHZ_RANGE, read_toa_table

FUZZ = settings(max_examples=1500, derandomize=True, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])
MAX_MESSAGE = 1500

# ----------------------------------------------------------------- TOA tables

COLUMNS = ["mjd", "err_us", "freq_mhz", "site", "pulse", "backend", "note", "MJD", "site"]
# The pieces a TOA file is made of: good values, near misses and hostile ones. Drawing
# indices into this pool keeps each example cheap, so thousands run in seconds.
POOL = ["58849.000142889802083", "58849", "0.5", "1.20", "1400.0", "inf", "-inf", "nan",
        "1e-30", "1e-300", "1e400", "-5", "0", "ssb", "geocentre", "desert-dish", "nowhere",
        "#c", "12345678901234567890", "+3", "-0", "1_000", "0x10", "١٢", "café", "x" * 300,
        "9" * 40, "58849.", ".5", "5e4", "1e6", "1E-3", "0.000001", "1000000000", "99999999",
        "58849.0000000000000000000000000001", "-58849", "58849.5.5", "infinity", "Inf",
        "\u00a0", "\u200b", "\ufeff", "a\x0bb", "\\", "\"q\"", "'", "mjd", "site", "🙂",
        "1" * 19, "-" + "1" * 18, "+", "e", ".", "1.0e", "NaN", "0.0", "1400", "ssb#x"]
LINE_ENDS = st.sampled_from(["\n", "\r\n", "\r"])


@st.composite
def toa_files(draw) -> bytes:
    header = [COLUMNS[i] for i in draw(st.lists(st.integers(0, len(COLUMNS) - 1), max_size=7))]
    width = len(header)
    rows = draw(st.lists(st.lists(st.integers(0, len(POOL) - 1), min_size=max(width - 1, 0),
                                  max_size=width + 1), max_size=5))
    separator = draw(st.sampled_from([" ", "  ", "\t", ",", ", "]))
    lines = ["# a comment", " ".join(header)] if draw(st.booleans()) else [" ".join(header)]
    lines.extend(separator.join(POOL[i] for i in row) for row in rows)
    end = draw(LINE_ENDS)
    raw = (end.join(lines) + end).encode("utf-8")
    extra = draw(st.integers(0, 40))
    if extra == 0:
        raw = b"\xef\xbb\xbf" + raw
    elif extra == 1:
        raw += b"\xff\x00"
    return raw


@FUZZ
@given(toa_files())
def test_toa_reader_returns_a_sound_table_or_an_input_error(tmp_path, raw):
    path = tmp_path / "fuzz.toas"
    path.write_bytes(raw)
    try:
        toas = read_toa_table(path)
    except InputError as error:
        assert error.path == str(path) and len(str(error)) < MAX_MESSAGE
        return
    assert len(toas) >= 1
    assert np.all((toas.err_us >= ERR_US_RANGE[0]) & (toas.err_us <= ERR_US_RANGE[1]))
    frequency_ok = (toas.freq_mhz >= FREQ_MHZ_RANGE[0]) & (toas.freq_mhz <= FREQ_MHZ_RANGE[1])
    assert np.all(frequency_ok | (toas.freq_mhz == np.inf))
    assert np.all(np.isfinite(toas.mjd_day)) and np.all((toas.mjd_frac >= 0) & (toas.mjd_frac < 1))
    for name, column in toas.flags.items():
        assert len(column) == len(toas) and all(isinstance(v, str) for v in column)


# ----------------------------------------------------------------- models

BASE_MODEL = {
    "name": "fuzz-source",
    "position": {"ra": "19h03m45.11s", "dec": "+44d17m09.8s", "epoch_mjd": Decimal("59000"),
                 "pm_ra_cosdec_mas_per_yr": 1.0, "parallax_mas": 0.5},
    "spin": {"epoch_mjd": Decimal("59000"), "frequency_hz": Decimal("0.712345678900"),
             "frequency_derivatives": [Decimal("-2.30e-15")]},
    "dispersion": {"dm": 112.0, "epoch_mjd": Decimal("59000")},
    "binary": {"model": "relativistic", "orbital_period_days": Decimal("1.5"),
               "projected_semi_major_axis_lt_s": 3.2, "eccentricity": 0.1,
               "periastron_longitude_deg": 40.0, "periastron_epoch_mjd": Decimal("59000.1")},
    "glitch": [{"epoch_mjd": Decimal("59100"), "frequency_step_hz": 1e-7,
                "decay_time_days": 50.0, "decaying_frequency_step_hz": 1e-8}],
    "red_noise": {"amplitude_log10": -13.0, "spectral_index": 4.0},
    "fit": {"free": ["spin.frequency_hz"]},
}
VALUES = st.one_of(
    st.sampled_from([math.inf, -math.inf, 1e300, -1e300, 1e-300, 0.0, -1.0, 5, True, "inf",
                     "1e400", "-0", "nan", "25h00m00s", "demo\nname", "", "x" * 200,
                     Decimal("1e-12"), Decimal("1e6"), [], [1.0, "a"], {"a": 1}]),
    st.floats(allow_nan=False, width=64),
    st.integers(-10 ** 20, 10 ** 20),
    st.text(max_size=12),
    st.decimals(allow_nan=False, allow_infinity=False, places=None),
)


def _paths(document, prefix=()):
    for key, value in document.items():
        yield prefix + (key,)
        if isinstance(value, dict):
            yield from _paths(value, prefix + (key,))
        elif isinstance(value, list) and value and isinstance(value[0], dict):
            for item in value:
                yield from _paths(item, prefix + (key,))


@st.composite
def mutated_models(draw) -> str:
    import copy
    document = copy.deepcopy(BASE_MODEL)
    paths = list(_paths(document))
    for _ in range(draw(st.integers(1, 3))):
        path = draw(st.sampled_from(paths))
        table = document
        for key in path[:-1]:
            table = table.get(key) if isinstance(table, dict) else None
            if isinstance(table, list) and table:
                table = table[0]
        if not isinstance(table, dict) or path[-1] not in table:
            continue
        action = draw(st.integers(0, 5))
        if action == 0:
            del table[path[-1]]
        elif action == 1:
            table[f"unknown_{path[-1]}"] = 1.0
        else:
            table[path[-1]] = draw(VALUES)
    try:
        return format_model_document(document)
    except TypeError:
        return format_model_document(BASE_MODEL)


@settings(FUZZ, max_examples=1000)
@given(mutated_models())
def test_model_reader_returns_a_sound_model_or_an_input_error(text):
    from timingkit.model.timing_model import TimingModel
    try:
        model = TimingModel.from_text(text, "fuzz.toml")
    except InputError as error:
        assert error.path == "fuzz.toml" and len(str(error)) < MAX_MESSAGE
        assert error.field or "not valid TOML" in error.message, error
        return
    for parameter in model.parameters():
        assert math.isfinite(parameter.value), parameter.name
    assert model.name.isprintable()


@settings(FUZZ, max_examples=500)
@given(st.text(max_size=200))
def test_model_reader_survives_arbitrary_text(text):
    from timingkit.model.timing_model import TimingModel
    try:
        TimingModel.from_text(text, "fuzz.toml")
    except InputError as error:
        assert error.path == "fuzz.toml" and len(str(error)) < MAX_MESSAGE
