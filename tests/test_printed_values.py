"""What the terminal shows: values to the precision their uncertainty supports
(two significant digits of the uncertainty: common practice), units as
physicists write them, the header's count matching the list, `derive` showing
what `fit` shows, no "± 0" for values without a measured input, and no internal
function names in messages. Invented sample sources."""

import json
import os
import re

import pytest

from timingkit.cli.main import main
from timingkit.outputs.numbers import format_value, physics_unit

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")

BINARY = """
name = "demo-binary"
[position]
ra = "16h01m02.5s"
dec = "+12d34m56.7s"
pm_ra_cosdec_mas_per_yr = 5.0
pm_dec_mas_per_yr = -8.0
parallax_mas = 1.2
epoch_mjd = "59000"
[position.uncertainty]
pm_ra_cosdec_mas_per_yr = 0.2
pm_dec_mas_per_yr = 0.3
parallax_mas = 0.1
[spin]
epoch_mjd = "59000"
frequency_hz = "250.123456789"
frequency_derivatives = ["-7.5e-16"]
[spin.uncertainty]
frequency_hz = 1e-12
frequency_derivatives = [2e-20]
[binary]
model = "low_eccentricity"
orbital_period_days = "5.7412345"
projected_semi_major_axis_lt_s = 4.21
e_sin_omega = 1e-5
e_cos_omega = -2e-5
ascending_node_epoch_mjd = "59000.123"
[binary.uncertainty]
orbital_period_days = 2e-9
projected_semi_major_axis_lt_s = 3e-6
"""


@pytest.mark.parametrize("value, sigma, text", [
    ("287.4561238765437620848974", 5.37e-13, "287.45612387654376 ± 5.4e-13"),
    (56.770247608073284, 0.000357, "56.77025 ± 0.00036"),
    (1.234, 0.0996, "1.23 ± 0.10"),                      # 9.96 rounds to 10: one digit less
    (123456.0, 2345.0, "123500 ± 2300"),
    ("-6.123550743630575007134387e-16", 1.34e-20, "-6.12355e-16 ± 1.3e-20"),
    ("0.1234567890123456789012", 1.1e-20, "0.123456789012345678901 ± 1.1e-20"),  # exact text
    (2.5, None, "2.5"), (2.5, 0.0, "2.5"),                # no usable uncertainty: none shown
])
def test_values_are_rounded_to_two_digits_of_their_uncertainty(value, sigma, text):
    assert format_value(value, sigma) == text


def test_units_read_as_physicists_write_them():
    assert physics_unit("Hz/s^1") == "Hz/s"
    assert physics_unit("Hz/s^2") == "Hz/s²"
    assert physics_unit("pc cm^-3") == "pc cm⁻³"
    assert physics_unit("us") == "µs"


def test_fit_summary_precision_units_and_count(tmp_path, capsys):
    toas, model = (os.path.join(SAMPLE, f"demo-young{s}") for s in (".toas", ".toml"))
    assert main(["fit", toas, model, "--no-plot", "-o", str(tmp_path / "out")]) == 0
    text = capsys.readouterr().out
    assert "^1" not in text and "Hz/s^" not in text
    listed = text.split("fitted parameters:")[1].split("derived")[0].strip().splitlines()
    count = int(re.search(r"(\d+) free parameters", text.splitlines()[0]).group(1))
    assert count == len(listed) == 4
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    assert report["parameters"]["spin.frequency_derivatives.0"]["unit"] == "Hz/s"
    for line in listed:
        name, value, pm, sigma = line.split()[:4]
        assert pm == "±"
        # two significant digits of the uncertainty, the value to the same place
        digits = re.sub(r"e[+-]\d+$", "", sigma).replace(".", "").lstrip("0")
        assert len(digits) == 2, line
        exact = report["parameters"][name]
        assert float(sigma) == pytest.approx(exact["uncertainty"], rel=0.05)
        assert abs(float(value) - float(exact["value"])) <= 0.5 * 10 ** (
            _last_place(sigma)) * 1.0001, line
    assert "spin.frequency_derivatives.1" in text and "Hz/s²" in text


def _last_place(text: str) -> int:
    mantissa, _, exp = text.partition("e")
    decimals = len(mantissa.split(".")[1]) if "." in mantissa else 0
    return int(exp or 0) - decimals


def test_derive_shows_binary_and_kinematic_sections_like_fit(tmp_path, capsys):
    path = tmp_path / "binary.toml"
    path.write_text(BINARY)
    assert main(["derive", str(path)]) == 0
    text = capsys.readouterr().out
    assert "derived (binary, low_eccentricity)" in text
    assert "mass_function_msun" in text and "minimum_companion_mass_msun" in text
    assert "derived (kinematic)" in text and "intrinsic_period_derivative" in text
    assert "± 0 " not in text and not re.search(r"± 0\s*$", text, re.M)
    assert main(["derive", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["derived_binary"]["quantities"]["mass_function_msun"]["uncertainty"] > 0
    assert "derived_kinematic" in data


def test_no_plus_minus_zero_for_terms_of_unfitted_parameters(tmp_path, capsys):
    # proper motion held fixed (no uncertainty), position fitted: before the fix the
    # Shklovskii term was printed "± 0"
    toas = os.path.join(SAMPLE, "demo-msp.toas")
    model = os.path.join(SAMPLE, "demo-msp.true.toml")
    assert main(["fit", toas, model, "--no-plot", "--free", "position.ra,position.dec",
                 "-o", str(tmp_path / "out")]) == 0
    text = capsys.readouterr().out
    assert not re.search(r"± 0(\s|$)", text)
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    shk = report["derived_kinematic"]["quantities"]["shklovskii_period_derivative"]
    assert shk["uncertainty"] is None
    # messages name no internal functions
    assert "intrinsic_spin" not in text and "derived_binary." not in text
