"""Flags named like timingkit's own columns (issue 15's leftovers): a TOA-table flag
called ``toa_line``, ``orbital_phase``, ``left_out`` (or another column residuals.csv
writes beside the flags) is refused where it is read, naming file, line and flag,
instead of failing as an internal error once the fit is done.

Sources are the invented slow pulsar of the sample data.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.toa_reader import read_toa_table
from timingkit.formats.toa_table import OUTPUT_COLUMNS, REQUIRED_COLUMNS, ToaTable
from timingkit.outputs.residual_table import CORE_COLUMNS, OPTIONAL_COLUMNS

SAMPLE = Path(__file__).resolve().parents[1] / "timingkit" / "sample_data"


def _with_flag(folder: Path, flag: str) -> Path:
    """The slow demo's TOA table with one more column, ``flag`` (header on line 2)."""
    lines = (SAMPLE / "demo-slow.toas").read_text().splitlines()
    assert lines[1].startswith("mjd")
    lines[1] += f"  {flag}"
    lines[2:] = [line + "  wide-a" for line in lines[2:]]
    path = folder / "flagged.toas"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_the_reserved_names_are_the_columns_residuals_csv_adds():
    # the list the reader checks must follow the writer's own columns
    assert set(OUTPUT_COLUMNS) == set(CORE_COLUMNS + OPTIONAL_COLUMNS) - set(REQUIRED_COLUMNS)


@pytest.mark.parametrize("flag", OUTPUT_COLUMNS)
def test_a_flag_named_like_an_output_column_is_refused_at_its_header_line(tmp_path, flag):
    path = _with_flag(tmp_path, flag)
    with pytest.raises(InputError) as caught:
        read_toa_table(path)
    error = caught.value
    assert (error.path, error.line, error.field) == (str(path), 2, flag)
    assert "residuals.csv" in error.message and "rename the flag" in error.message


def test_fit_exits_2_before_writing_anything(tmp_path, capsys):
    for name in ("demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, tmp_path / name)
    toas = _with_flag(tmp_path, "toa_line")
    status = main(["fit", str(toas), str(tmp_path / "demo-slow.toml"), "-o",
                   str(tmp_path / "out"), "--no-plot"])
    assert status == 2
    assert f"{toas}:2: field 'toa_line': a flag may not be named 'toa_line'" in \
        capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_a_table_made_in_code_refuses_the_name_too():
    with pytest.raises(InputError) as caught:
        ToaTable.from_arrays(np.array([58000.0]), np.array([0.25]), np.array([1.0]),
                             np.array([1400.0]), np.array(["ssb"]),
                             flags={"orbital_phase": ["0.5"]})
    assert caught.value.field == "orbital_phase"
    with pytest.raises(InputError):       # the table's own columns, as before
        ToaTable.from_arrays(np.array([58000.0]), np.array([0.25]), np.array([1.0]),
                             np.array([1400.0]), np.array(["ssb"]), flags={"site": ["x"]})
