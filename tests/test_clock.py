"""Clock-correction tables: parsing, interpolation, span warnings, bad input."""

import numpy as np
import pytest

from timingkit.formats.clock_table import read_clock_table
from timingkit.formats.errors import InputError

TABLE = """# converts: desert-dish maser -> UTC
# site: desert-dish
mjd offset_us
58000.0 0.5
58100.0 1.5
"""


def test_linear_interpolation_and_warning(tmp_path):
    p = tmp_path / "dd.clock"
    p.write_text(TABLE)
    t = read_clock_table(str(p))
    assert t.applies_to("Desert-Dish") and not t.applies_to("lake-array")
    off, warn = t.offset_s(np.array([58050.0, 58025.0]), "desert-dish")
    assert np.allclose(off, [1.0e-6, 0.75e-6], rtol=0, atol=1e-15)
    assert warn == []
    off, warn = t.offset_s(np.array([58200.0]), "desert-dish")
    assert off[0] == pytest.approx(1.5e-6) and "outside" in warn[0]


@pytest.mark.parametrize("text, message", [
    (TABLE.replace("# converts: desert-dish maser -> UTC\n", ""), "converts"),
    (TABLE.replace("# site: desert-dish\n", ""), "site"),
    (TABLE.replace("58100.0 1.5", "58100.0 x"), "not a number"),
    (TABLE.replace("58100.0 1.5", "57000.0 1.5"), "increase"),
    (TABLE.replace("mjd offset_us", "mjd offset"), "columns"),
])
def test_bad_tables(tmp_path, text, message):
    p = tmp_path / "bad.clock"
    p.write_text(text)
    with pytest.raises(InputError, match=message) as info:
        read_clock_table(str(p))
    assert "bad.clock" in str(info.value)
