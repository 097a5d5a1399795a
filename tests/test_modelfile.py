"""Model file: exact decimals, defaults, strict keys, errors naming file and field."""

from decimal import Decimal
from fractions import Fraction

import pytest

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import format_model_document, parse_model_text, read_model_document

pytest.importorskip("timingkit.geometry.sites")
from timingkit.model import TimingModel  # noqa: E402

GOOD = '''
name = "demo-young"

[position]
ra = "07h41m27.392s"
dec = "-03d26m51.48s"

[spin]
epoch_mjd = "59000.123456789012345"
frequency_hz = "18.473162904173582641"
frequency_derivatives = ["-2.2068e-11", 6.2e-23]

[fit]
free = ["spin.frequency_hz", "dispersion.dm"]
'''


def test_high_precision_values_are_exact():
    doc = parse_model_text(GOOD, "m.toml")
    assert doc.data["spin"]["frequency_hz"] == "18.473162904173582641"
    # TOML floats are read as exact decimals, never through a binary float
    assert doc.data["spin"]["frequency_derivatives"][1] == Decimal("6.2e-23")
    m = TimingModel(doc)
    f = m.parameter("spin.frequency_hz")
    exact = Fraction(f.value) + Fraction(f.value_lo)
    assert abs(exact - Fraction("18.473162904173582641")) < Fraction(1, 10 ** 30)
    day, frac = m.spin.epoch_day, m.spin.epoch_frac
    assert day == 59000 and abs(Fraction(frac) - Fraction("0.123456789012345")) < Fraction(1, 10 ** 17)


def test_defaults_and_free_flags():
    m = TimingModel.from_text(GOOD, "m.toml")
    assert m.dispersion.dm.value == 0.0                 # [dispersion] missing -> default
    assert m.settings["ephemeris"] == "builtin"
    assert set(m.free_names) == {"spin.frequency_hz", "dispersion.dm"}
    assert m.astrometry.parallax.value == 0.0


def test_round_trip_through_writer(tmp_path):
    m = TimingModel.from_text(GOOD, "m.toml")
    path = tmp_path / "out.toml"
    m.write(str(path))
    again = TimingModel.from_file(str(path))
    for p in m.parameters():
        q = again.parameter(p.name)
        assert (q.value, q.value_lo) == pytest.approx((p.value, p.value_lo), rel=0, abs=1e-300) \
            or abs(Fraction(q.value) + Fraction(q.value_lo) - Fraction(p.value) - Fraction(p.value_lo)) \
            <= abs(Fraction(p.value)) * Fraction(1, 10 ** 28)
    assert set(again.free_names) == set(m.free_names)


@pytest.mark.parametrize("text, field, message", [
    (GOOD.replace('[fit]', '[fit]\ncolour = 1'), "fit.colour", "unknown key"),
    (GOOD.replace('name = "demo-young"', 'name = "x"\n[telescope]\nx = 1'), "telescope",
     "unknown section"),
    (GOOD.replace('frequency_hz = "18.473162904173582641"', ''), "spin.frequency_hz",
     "missing required key"),
    (GOOD.replace('"18.473162904173582641"', '"18.4x"'), "spin.frequency_hz", "decimal"),
    (GOOD.replace('"spin.frequency_hz", "dispersion.dm"', '"spin.frequency"'), "fit.free",
     "unknown parameter"),
    (GOOD.replace('ra = "07h41m27.392s"', 'ra = "banana"'), "position.ra", "angle"),
    (GOOD.replace('dec = "-03d26m51.48s"', ''), "position.dec", "missing required"),
])
def test_bad_model_files_name_the_field(text, field, message):
    with pytest.raises(InputError) as info:
        TimingModel.from_text(text, "bad.toml")
    assert info.value.field == field
    assert message in str(info.value)
    assert str(info.value).startswith("bad.toml")


def test_broken_toml_names_the_line(tmp_path):
    p = tmp_path / "broken.toml"
    p.write_text('name = "x"\n[spin\nfrequency_hz = "1"\n')
    with pytest.raises(InputError) as info:
        read_model_document(str(p))
    assert info.value.line == 2
    assert "not valid TOML" in str(info.value)


def test_empty_binary_and_missing_files(tmp_path):
    empty = tmp_path / "e.toml"
    empty.write_text("")
    with pytest.raises(InputError, match="empty"):
        read_model_document(str(empty))
    binary = tmp_path / "b.toml"
    binary.write_bytes(b"\x00\x01\x02")
    with pytest.raises(InputError, match="binary"):
        read_model_document(str(binary))
    with pytest.raises(InputError, match="not found"):
        read_model_document(str(tmp_path / "none.toml"))


def test_writer_keeps_decimals_as_strings():
    text = format_model_document({"spin": {"frequency_hz": Decimal("700.1234567890123456789"),
                                           "x": 1.5, "free": ["a"]}})
    assert 'frequency_hz = "700.1234567890123456789"' in text
    assert parse_model_text(text).data["spin"]["x"] == Decimal("1.5")


def test_written_model_still_finds_its_site_and_clock_files(tmp_path):
    # A fitted model saved in another folder must point at the same files.
    src = tmp_path / "in"
    src.mkdir()
    (src / "sites.toml").write_text("[site.x-dish]\nlongitude_deg = 10.0\nlatitude_deg = 20.0\n"
                                    "height_m = 0.0\n")
    text = GOOD + '\n[settings]\nsites = "sites.toml"\nclock = ["clocks/x.clock"]\n'
    (src / "m.toml").write_text(text)
    m = TimingModel.from_file(str(src / "m.toml"))
    out = tmp_path / "deep" / "out"
    out.mkdir(parents=True)
    m.write(str(out / "fitted.toml"))
    again = TimingModel.from_file(str(out / "fitted.toml"))
    import os
    assert os.path.samefile(os.path.join(again.base_dir, again.settings["sites"][0]), src / "sites.toml")
    assert os.path.normpath(os.path.join(again.base_dir, again.settings["clock"][0])) == \
        os.path.normpath(src / "clocks" / "x.clock")
    assert again.settings["ephemeris"] == "builtin"


def test_long_decimals_round_to_the_nearest_kept_value_and_absurd_ones_are_refused():
    # 22 significant digits (more than the whole day + float64 fraction holds) round to
    # the nearest pair; 35 for the spin frequency round to the nearest double-double
    # (correct rounding checked with exact fractions, Python's Fraction -> float).
    long_frequency = "18.47316290417358264101234567890123"
    text = GOOD.replace('"59000.123456789012345"', '"59000.12345678901234567891"').replace(
        '"18.473162904173582641"', f'"{long_frequency}"')
    assert long_frequency in text
    m = TimingModel.from_text(text, "m.toml")
    assert m.spin.epoch_day == 59000
    assert m.spin.epoch_frac == float(Fraction("0.12345678901234567891"))
    f = m.parameter("spin.frequency_hz")
    exact = Fraction(long_frequency)
    assert f.value == float(exact) and f.value_lo == float(exact - Fraction(f.value))
    # over 40 digits is refused, naming the field
    absurd = GOOD.replace('"59000.123456789012345"', '"59000.' + "1" * 36 + '"')
    assert absurd != GOOD
    with pytest.raises(InputError) as err:
        TimingModel.from_text(absurd, "m.toml")
    assert err.value.field == "spin.epoch_mjd" and "at most 40" in err.value.message
    absurd = GOOD.replace("6.2e-23", "6.2" + "0" * 40 + "1e-23")
    assert absurd != GOOD
    with pytest.raises(InputError) as err:
        TimingModel.from_text(absurd, "m.toml")
    assert err.value.field == "spin.frequency_derivatives.1"
