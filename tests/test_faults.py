"""Faults and hostile input for one source (issue 15; issue 14's output points).

Each test reproduces one point of the issue: bad input exits 2 with one message
naming file, line and field; strange files are never read; outputs never replace
inputs, are written as one set with the user's umask, and a fault never leaves
half a set. All sources and sites are the invented ones of the sample data.
"""

from __future__ import annotations

import errno
import json
import os
import re
import shutil
import stat
from pathlib import Path

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.toa_reader import read_toa_table

SAMPLE = Path(__file__).resolve().parents[1] / "timingkit" / "sample_data"
SECRET = "api_key SECRET-TOKEN-123"


@pytest.fixture()
def slow(tmp_path):
    """The invented slow pulsar (150 TOAs) copied into tmp_path/src."""
    src = tmp_path / "src"
    src.mkdir()
    for name in ("demo-slow.toas", "demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, src / name)
    return src


def _run(capsys, *argv) -> tuple[int, str]:
    status = main([str(a) for a in argv])
    return status, capsys.readouterr().err


def _one_message(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    return lines[0]


# ------------------------------------------------------------ outputs never replace inputs

def test_fit_into_the_folder_of_its_model_is_refused(slow, capsys):
    # a refit of a previous output: the model read is DIR/fitted.toml
    out = slow / "out"
    assert _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out,
                "--no-plot")[0] == 0
    model = out / "fitted.toml"
    before = model.read_bytes()
    status, err = _run(capsys, "fit", slow / "demo-slow.toas", model, "-o", out, "--no-plot")
    assert status == 2 and "holds an input" in _one_message(err)
    assert model.read_bytes() == before


def test_barycentre_onto_its_own_toa_table_is_refused(slow, capsys):
    toas = slow / "demo-slow.toas"
    before = toas.read_bytes()
    status, err = _run(capsys, "barycentre", toas, slow / "demo-slow.toml", "-o", toas)
    assert status == 2 and "is an input" in _one_message(err)
    assert toas.read_bytes() == before


def test_simulate_and_convert_never_overwrite_their_model(slow, capsys):
    model = slow / "demo-slow.toml"
    before = model.read_bytes()
    status, err = _run(capsys, "simulate", model, "--start", 58000, "--end", 58100, "--count",
                       3, "--error-us", 1, "--site", "ssb", "-o", model)
    assert status == 2 and "is an input" in _one_message(err)
    link = slow / "same-model.toml"
    link.symlink_to(model)
    status, err = _run(capsys, "convert", model, "--frame", "ecliptic", "-o", link)
    assert status == 2 and model.read_bytes() == before


# ------------------------------------------------------------ regular files only, size limits

@pytest.mark.parametrize("role", ["toas", "clock", "sites", "ephemeris"])
def test_a_device_is_refused_as_any_input(slow, capsys, role):
    model = slow / "demo-slow.toml"
    toas = slow / "demo-slow.toas"
    extra = []
    if role == "toas":
        toas = Path("/dev/zero")
    else:
        extra = [f"--{role}", "/dev/zero"]
    status, err = _run(capsys, "residuals", toas, model, *extra, "-o", slow / "out")
    message = _one_message(err)
    assert status == 2 and "/dev/zero" in message and "not a regular file" in message


def test_a_fifo_as_the_toa_table_is_refused_without_blocking(slow, capsys):
    fifo = slow / "toas.fifo"
    os.mkfifo(fifo)
    status, err = _run(capsys, "residuals", fifo, slow / "demo-slow.toml", "-o", slow / "out")
    assert status == 2 and "FIFO" in _one_message(err)


def test_text_inputs_have_a_size_limit(tmp_path):
    from timingkit.formats.clock_table import read_clock_table
    from timingkit.formats.safe_read import MAX_TEXT_INPUT_BYTES
    huge = tmp_path / "huge.clock"
    with open(huge, "wb") as handle:      # sparse: costs no disk
        handle.truncate(MAX_TEXT_INPUT_BYTES + 1)
    with pytest.raises(InputError) as caught:
        read_clock_table(huge)
    assert "too large" in str(caught.value) and "64 MiB" in str(caught.value)


# ------------------------------------------------------------ flags, long fields, long messages

HEADER = "mjd err_us freq_mhz site note\n"


def _table(tmp_path, rows, header=HEADER, name="t.toas"):
    path = tmp_path / name
    path.write_text(header + "".join(rows), encoding="utf-8")
    return path


def test_flags_are_stored_as_codes_and_distinct_values(tmp_path):
    long_value = "x" * 900
    rows = [f"58849.{i:06d} 1.0 1400 ssb {'short' if i else long_value}\n" for i in range(20000)]
    toas = read_toa_table(_table(tmp_path, rows))
    column = toas.flags["note"]
    assert sorted(column.values) == sorted(["short", long_value])
    assert column.codes.nbytes + sum(len(v) for v in column.values) < 200_000
    assert column[0] == long_value and np.count_nonzero(column == "short") == 19999
    again = toas.select(np.arange(1, 5))
    assert list(again.flags["note"]) == ["short"] * 4


def test_an_absurdly_long_field_is_refused_with_its_line_and_column(tmp_path):
    rows = ["58849.5 1.0 1400 ssb ok\n", f"58849.6 1.0 1400 ssb {'y' * 5_000_000}\n"]
    with pytest.raises(InputError) as caught:
        read_toa_table(_table(tmp_path, rows))
    assert caught.value.line == 3 and caught.value.field == "note"
    assert len(str(caught.value)) < 400


def test_a_header_of_two_million_columns_gives_a_short_message(tmp_path):
    header = "mjd freq_mhz site " + " ".join(f"c{i}" for i in range(2_000_000)) + "\n"
    with pytest.raises(InputError) as caught:
        read_toa_table(_table(tmp_path, ["1 2 3\n"], header=header))
    assert caught.value.line == 1 and len(str(caught.value)) < 1000


@pytest.mark.parametrize("column, text", [("err_us", "1e-30"), ("freq_mhz", "1e-300"),
                                          ("freq_mhz", "-5")])
def test_absurd_errors_and_frequencies_name_line_and_field(tmp_path, column, text):
    row = {"err_us": "1.0", "freq_mhz": "1400"} | {column: text}
    rows = ["58849.5 1.0 1400 ssb a\n", f"58849.6 {row['err_us']} {row['freq_mhz']} ssb a\n"]
    with pytest.raises(InputError) as caught:
        read_toa_table(_table(tmp_path, rows))
    assert (caught.value.line, caught.value.field) == (3, column)


def test_cr_only_line_endings_read_like_newlines(tmp_path):
    rows = ["58849.5 1.0 1400 ssb a\n", "58849.6 2.0 1400 ssb b\n"]
    plain = read_toa_table(_table(tmp_path, rows))
    old_mac = tmp_path / "cr.toas"
    old_mac.write_bytes((HEADER + "".join(rows)).replace("\n", "\r").encode())
    toas = read_toa_table(old_mac)
    assert list(toas.mjd_text) == list(plain.mjd_text) and list(toas.line_numbers) == [2, 3]


# ------------------------------------------------------------ nothing leaked

def test_an_unrelated_file_as_a_clock_table_is_quoted_only_briefly(slow):
    from timingkit.formats.clock_table import read_clock_table
    secret = slow / "credentials.txt"
    secret.write_text(SECRET + " " + "z" * 200 + "\nmore secrets\n")
    with pytest.raises(InputError) as caught:
        read_clock_table(secret)
    text = str(caught.value)
    assert caught.value.line == 1 and len(text) < len(str(secret)) + 160
    assert "more secrets" not in text and "z" * 50 not in text
    assert "SECRET" not in caught.value.public_message


def test_settings_files_outside_the_model_folder_are_listed_in_the_report(slow, tmp_path):
    from timingkit.pipeline.fit_run import residual_files
    shared = tmp_path / "shared"
    shared.mkdir()
    shutil.move(str(slow / "sites.toml"), shared / "sites.toml")
    model = slow / "demo-slow.toml"
    model.write_text(model.read_text().replace('sites = "sites.toml"',
                                               'sites = "../shared/sites.toml"'))
    report = residual_files(slow / "demo-slow.toas", model, slow / "out", make_plots=False)
    listed = report["settings"]["files_outside_model_folder"]
    assert listed == [{"setting": "settings.sites", "path": "../shared/sites.toml",
                       "resolved": str((shared / "sites.toml").resolve())}]
    on_disk = json.loads((slow / "out" / "report.json").read_text())
    assert on_disk["settings"]["files_outside_model_folder"] == listed


# ------------------------------------------------------------ every bad model value is clear

def _base_model() -> str:
    """The sample slow pulsar's model with the values the edits below start from."""
    text = (SAMPLE / "demo-slow.toml").read_text()
    for pattern, value in ((r'frequency_hz = "[^"]+"', 'frequency_hz = "0.712345678900"'),
                           (r"frequency_derivatives = \[[^\]]*\]",
                            'frequency_derivatives = ["-2.30e-15"]'),
                           (r"dm = [0-9.]+", "dm = 112.0"), (r'ra = "[^"]+"', 'ra = "19h03m45.11s"'),
                           (r'dec = "[^"]+"', 'dec = "+44d17m09.8s"')):
        text, count = re.subn(pattern, value, text, count=1)
        assert count == 1, pattern
    return text


BASE = _base_model()
BINARY = """
[binary]
model = "relativistic"
orbital_period_days = "1.5"
projected_semi_major_axis_lt_s = 3.2
eccentricity = 0.1
periastron_longitude_deg = 40.0
periastron_epoch_mjd = "59000.1"
companion_mass_msun = 0.3
sin_inclination = 0.8
"""
GLITCH = """
[[glitch]]
epoch_mjd = "59100"
frequency_step_hz = 1e-7
decaying_frequency_step_hz = 1e-8
decay_time_days = 50.0
"""
RED = "\n[red_noise]\namplitude_log10 = -13.0\nspectral_index = 4.0\nspan_days = 1000.0\n"


def _edit(text, old, new):
    assert old in text, old
    return text.replace(old, new, 1)


BAD_VALUES = [
    (BASE, 'frequency_hz = "0.712345678900"', 'frequency_hz = "inf"', "spin.frequency_hz"),
    (BASE, 'frequency_hz = "0.712345678900"', 'frequency_hz = "1e400"', "spin.frequency_hz"),
    (BASE, '["-2.30e-15"]', '["-inf"]', "spin.frequency_derivatives.0"),
    (BASE, '["-2.30e-15"]', '["-2.30e-15", 1e30]', "spin.frequency_derivatives.1"),
    (BASE, "dm = 112.0", "dm = inf", "dispersion.dm"),
    (BASE, "dm = 112.0", "dm = 1e30", "dispersion.dm"),
    (BASE, 'epoch_mjd = "59000"\n\n[spin]', 'epoch_mjd = "59000"\npm_dec_mas_per_yr = inf\n\n'
     '[spin]', "position.pm_dec_mas_per_yr"),
    (BASE, 'epoch_mjd = "59000"\n\n[spin]', 'epoch_mjd = "59000"\nparallax_mas = inf\n\n[spin]',
     "position.parallax_mas"),
    (BASE, 'ra = "19h03m45.11s"\ndec = "+44d17m09.8s"',
     'frame = "ecliptic"\necliptic_longitude_deg = 10.0\necliptic_latitude_deg = 100.0',
     "position.ecliptic_latitude_deg"),
    (BASE, 'ra = "19h03m45.11s"', 'ra = "25h03m45.11s"', "position.ra"),
    (BASE + BINARY, 'orbital_period_days = "1.5"', 'orbital_period_days = "inf"',
     "binary.orbital_period_days"),
    (BASE + BINARY, "eccentricity = 0.1", "eccentricity = 0.1\norbital_period_derivative = inf",
     "binary.orbital_period_derivative"),
    (BASE + BINARY, "projected_semi_major_axis_lt_s = 3.2", "projected_semi_major_axis_lt_s = inf",
     "binary.projected_semi_major_axis_lt_s"),
    (BASE + BINARY.replace('"1.5"', '"1e-12"'), "projected_semi_major_axis_lt_s = 3.2",
     "projected_semi_major_axis_lt_s = 1e6", "binary.orbital_period_days"),
    (BASE + BINARY, "projected_semi_major_axis_lt_s = 3.2", "projected_semi_major_axis_lt_s = "
     "30000.0", "binary.projected_semi_major_axis_lt_s"),
    (BASE + BINARY, "companion_mass_msun = 0.3", "companion_mass_msun = 1e10",
     "binary.companion_mass_msun"),
    (BASE + BINARY, "eccentricity = 0.1", "eccentricity = 0.1\nperiastron_advance_deg_per_yr = 1e10",
     "binary.periastron_advance_deg_per_yr"),
    (BASE + GLITCH, "decay_time_days = 50.0", "decay_time_days = 0.0", "glitch.0.decay_time_days"),
    (BASE + GLITCH, "decay_time_days = 50.0", "decay_time_days = inf", "glitch.0.decay_time_days"),
    (BASE + GLITCH, "frequency_step_hz = 1e-7", "frequency_step_hz = inf",
     "glitch.0.frequency_step_hz"),
    (BASE + RED, "span_days = 1000.0", "span_days = 1e-300", "red_noise.span_days"),
    (BASE.replace('[settings]\nsites = "sites.toml"', ""), 'name = "demo-slow"',
     'name = "demo-slow"\nsettings = 5', "settings"),
    (BASE, 'name = "demo-slow"', 'name = "demo\\nslow"', "name"),
]


@pytest.mark.parametrize("text, old, new, field", BAD_VALUES,
                         ids=[case[3] + ":" + case[2][:24] for case in BAD_VALUES])
def test_bad_model_values_name_file_line_and_field(tmp_path, text, old, new, field):
    from timingkit.model.timing_model import TimingModel
    path = tmp_path / "bad.toml"
    path.write_text(_edit(text, old, new))
    with pytest.raises(InputError) as caught:
        TimingModel.from_file(path)
    error = caught.value
    assert error.field == field and error.path == str(path)
    first_key = field.split(".")[-1] if not field.split(".")[-1].isdigit() else field.split(".")[-2]
    line = path.read_text().splitlines()[error.line - 1]
    assert first_key in line or line.startswith(f"[{field.split('.')[0]}"), (line, error)


def test_derive_on_an_infinite_frequency_is_bad_input(slow, capsys):
    model = slow / "demo-slow.toml"
    model.write_text(_edit(BASE, '"0.712345678900"', '"inf"'))
    status, err = _run(capsys, "derive", model)
    assert status == 2 and "spin.frequency_hz" in _one_message(err)


@pytest.mark.parametrize("change, field", [
    ('site = "geocentre"', "phase_zero.site"),
    ('mjd = "10"', "phase_zero.mjd"),
    ('freq_mhz = "-5"', "phase_zero.freq_mhz"),
])
def test_phase_zero_errors_name_the_model(slow, change, field):
    from timingkit.pipeline.inputs import load_inputs
    key = change.split(" = ")[0]
    values = {"mjd": 'mjd = "59000.5"', "site": 'site = "geocentre"', "freq_mhz": 'freq_mhz = "inf"'}
    values[key] = change.replace('"geocentre"', '"nowhere-hill"')
    model = slow / "demo-slow.toml"
    model.write_text(BASE + "\n[phase_zero]\n" + "\n".join(values.values()) + "\n")
    with pytest.raises(InputError) as caught:
        load_inputs(slow / "demo-slow.toas", model)
    assert caught.value.path == str(model) and caught.value.field == field
    assert caught.value.line is not None and "np.float64" not in str(caught.value)


def test_a_wild_pulse_number_names_its_line(slow):
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.pipeline.inputs import load_inputs
    inputs = load_inputs(slow / "demo-slow.toas", slow / "demo-slow.toml")
    ev = inputs.model.evaluate(inputs.obs)
    lines = (slow / "demo-slow.toas").read_text().splitlines()
    header = lines.index(next(l for l in lines if l.startswith("mjd")))
    lines[header] += "  pulse"
    for k in range(header + 1, len(lines)):
        lines[k] += f"  {int(ev.phase_int[k - header - 1])}"
    lines[header + 40] = lines[header + 40].rsplit(" ", 1)[0] + " 900000000000000000"
    (slow / "demo-slow.toas").write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError) as caught:
        fit_files(slow / "demo-slow.toas", slow / "demo-slow.toml", slow / "out",
                  make_plots=False)
    assert caught.value.field == "pulse" and caught.value.line == header + 41
    assert not (slow / "out").exists()


# ------------------------------------------------------------ clock tables and warnings

CLOCK = "# converts: desert-dish maser -> UTC\n# site: {site}\nmjd offset_us\n58000 0.5\n60000 0.6\n"


def _with_clock(slow, site, bom=False):
    clock = slow / "dish.clock"
    clock.write_bytes((b"\xef\xbb\xbf" if bom else b"") + CLOCK.format(site=site).encode())
    model = slow / "demo-slow.toml"
    model.write_text(BASE.replace('sites = "sites.toml"', 'sites = "sites.toml"\nclock = '
                                  '["dish.clock"]'))
    return clock, model


def test_a_clock_table_for_another_name_of_a_site_applies_to_it(slow):
    from timingkit.pipeline.inputs import load_inputs
    clock, model = _with_clock(slow, "dd", bom=True)      # 'dd' is desert-dish's other name
    obs = load_inputs(slow / "demo-slow.toas", model).obs
    assert obs.clock_corrections == [f"desert-dish maser -> UTC ({clock})"]
    assert not [w for w in obs.warnings if "no clock corrections" in w]


def test_a_clock_table_for_no_known_site_is_refused(slow):
    from timingkit.pipeline.inputs import load_inputs
    clock, model = _with_clock(slow, "desert-dsh")
    with pytest.raises(InputError) as caught:
        load_inputs(slow / "demo-slow.toas", model)
    assert (caught.value.path, caught.value.line, caught.value.field) == (str(clock), 2, "site")


def test_sites_without_a_clock_table_are_warned_one_by_one(slow):
    from timingkit.pipeline.inputs import load_inputs
    toas = slow / "demo-slow.toas"
    lines = toas.read_text().splitlines()
    lines[-1] = lines[-1].replace("desert-dish", "lake-array")
    toas.write_text("\n".join(lines) + "\n")
    _, model = _with_clock(slow, "desert-dish")
    warnings = load_inputs(toas, model).obs.warnings
    missing = [w for w in warnings if w.startswith("no clock corrections for site")]
    assert missing == [missing[0]] and "lake-array" in missing[0]


def test_duplicate_toas_and_groups_that_match_nothing_are_warned(slow):
    from timingkit.pipeline.inputs import load_inputs
    toas = slow / "demo-slow.toas"
    toas.write_text(toas.read_text() + "\n".join(toas.read_text().splitlines()[2:5]) + "\n")
    model = slow / "demo-slow.toml"
    model.write_text(BASE + '\n[[time_offset]]\nflag = "site"\nvalue = "lake-array"\n'
                     'offset_s = 0.0\n\n[[white_noise]]\nflag = "site"\nvalue = "north-ridge"\n'
                     'error_scale = 1.2\n')
    warnings = load_inputs(toas, model).obs.warnings
    assert any(w.startswith("3 TOA(s) repeat an earlier one") and "lines 3 and 153" in w
               for w in warnings), warnings
    assert any("[[time_offset]] number 1 (site = lake-array) matches no TOA" in w for w in warnings)
    assert any("[[white_noise]] number 1 (site = north-ridge) matches no TOA" in w
               for w in warnings)



def test_duplicates_are_found_among_equal_times_at_several_sites():
    # Copies are found even when another TOA at the same time (another site or
    # frequency) sorts between them; equal times that differ otherwise are no copies.
    from timingkit.formats.toa_table import ToaTable
    from timingkit.pipeline.inputs import duplicate_toa_warnings
    day = [59000.0, 59000.0, 59000.0, 59000.0, 59001.0]
    frac = [0.25, 0.25, 0.25, 0.25, 0.5]
    sites = ["north-ridge", "lake-array", "north-ridge", "lake-array", "lake-array"]
    freq = [1400.0, 1400.0, 1400.0, 820.0, 1400.0]
    table = ToaTable.from_arrays(day, frac, [1.0] * 5, freq, sites)
    [warning] = duplicate_toa_warnings(table)
    assert warning.startswith("1 TOA(s) repeat an earlier one") and "rows 0 and 2" in warning
    table = ToaTable.from_arrays(day, frac, [1.0] * 5, [1400.0, 1400.0, 820.0, 820.0, 1400.0],
                                 sites)
    assert duplicate_toa_warnings(table) == []

# ------------------------------------------------------------ options and output folders

def test_color_by_an_unknown_column_fails_before_any_work(slow, capsys):
    out = slow / "out"
    status, err = _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out,
                       "--color-by", "nosuchflag")
    assert status == 2 and "--color-by" in _one_message(err) and not out.exists()


def test_plot_of_a_folder_with_a_corrupt_report_is_bad_input(slow, capsys):
    out = slow / "out"
    assert _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out,
                "--no-plot")[0] == 0
    (out / "report.json").write_text('{"source": "demo-slow", "parameters": {')
    status, err = _run(capsys, "plot", out, "-o", slow / "again.png")
    assert status == 2 and "report.json" in _one_message(err)


@pytest.mark.parametrize("frequency", ["0", "-5", "1e-300"])
def test_simulate_refuses_impossible_frequencies(slow, capsys, frequency):
    status, err = _run(capsys, "simulate", slow / "demo-slow.toml", "--start", 58000, "--end",
                       58100, "--count", 3, "--error-us", 1, "--site", "ssb", "--freq-mhz",
                       frequency, "-o", slow / "sim.toas")
    assert status == 2 and "freq_mhz" in _one_message(err) and not (slow / "sim.toas").exists()


def test_a_full_disk_leaves_no_lone_fitted_model(slow, capsys, monkeypatch):
    from timingkit.outputs.residual_table import ResidualTable

    def disk_full(self, path):
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(ResidualTable, "write_csv", disk_full)
    out = slow / "out"
    status, err = _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out,
                       "--no-plot")
    assert status == 2 and "no space left" in _one_message(err)
    assert not out.exists() and not list(slow.glob(".tmp-*"))


def test_a_read_only_output_location_is_bad_input(slow, capsys, tmp_path):
    if os.geteuid() == 0:
        target = Path("/sys/timingkit-test-out")      # sysfs refuses new folders, even to root
        try:
            target.mkdir()
        except OSError:
            pass
        else:
            target.rmdir()
            pytest.skip("no read-only location available to root here")
    else:
        locked = tmp_path / "locked"
        locked.mkdir(mode=0o555)
        target = locked / "out"
    status, err = _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o",
                       target, "--no-plot")
    assert status == 2 and "cannot write the output" in _one_message(err)


def test_every_output_honours_the_umask(slow, capsys):
    old = os.umask(0o027)
    try:
        out = slow / "out"
        assert _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out)[0] == 0
        assert _run(capsys, "barycentre", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o",
                    slow / "bary.csv")[0] == 0
        assert _run(capsys, "convert", slow / "demo-slow.toml", "--frame", "ecliptic", "-o",
                    slow / "ecliptic.toml")[0] == 0
    finally:
        os.umask(old)
    written = [*out.iterdir(), slow / "bary.csv", slow / "ecliptic.toml"]
    modes = {p.name: stat.S_IMODE(p.stat().st_mode) for p in written}
    assert "fitted.toml" in modes and "report.json" in modes
    assert set(modes.values()) == {0o640}, modes


def test_a_reused_output_folder_holds_only_the_new_set(slow, capsys):
    out = slow / "out"
    assert _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out)[0] == 0
    assert (out / "residuals.png").exists()
    assert _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o", out,
                "--no-plot")[0] == 0
    assert not list(out.glob("*.png")) and (out / "fitted.toml").exists()
    # a folder holding files timingkit did not write is never replaced
    mine = slow / "mine"
    mine.mkdir()
    (mine / "notes.md").write_text("my notes\n")
    status, err = _run(capsys, "fit", slow / "demo-slow.toas", slow / "demo-slow.toml", "-o",
                       mine, "--no-plot")
    assert status == 2 and "did not write" in _one_message(err)
    assert (mine / "notes.md").read_text() == "my notes\n"


def test_default_output_folders_are_named_after_the_source(slow, capsys, monkeypatch):
    monkeypatch.chdir(slow)
    assert _run(capsys, "fit", "demo-slow.toas", "demo-slow.toml", "--no-plot")[0] == 0
    assert (slow / "demo-slow-fit" / "fitted.toml").exists()
    assert _run(capsys, "residuals", "demo-slow.toas", "demo-slow.toml")[0] == 0
    assert (slow / "demo-slow-residuals" / "residuals.csv").exists()
