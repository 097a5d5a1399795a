"""What a batch's shared outputs may say about a failed source (issue 15, "nothing leaked").

summary.csv, summary.json, overview.html and each source's error.txt are meant for
sharing: a hostile value in a source's inputs (a long, secret-looking string as a key,
a site name, a parameter name) must show up in none of them, while error.txt still
names the file, line and field at fault. An internal error names its exception's class
and the source's traceback.txt, never the exception's text.

The sources are the invented slow pulsar of the sample data with one hostile edit each.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from timingkit.batch.runner import run_batch
from timingkit.formats.errors import InputError

SAMPLE = Path(__file__).resolve().parents[1] / "timingkit" / "sample_data"
HOSTILE = "api_key SECRET-TOKEN-123-" + "q" * 60
HOSTILE_NAME = "secret-token-123-" + "q" * 20          # a plain site name
MARKS = ("SECRET", "secret-token", "qqqqqqqqqq")       # no piece of either may appear


def _edit(text: str, old: str, new: str) -> str:
    assert old in text
    return text.replace(old, new, 1)


def _hostile_sources(root: Path) -> dict[str, tuple[str, str]]:
    """One source folder per hostile edit; returns name -> (file, field prefix) that
    its error.txt must name."""
    model = (SAMPLE / "demo-slow.toml").read_text()
    toas = (SAMPLE / "demo-slow.toas").read_text()
    sites = (SAMPLE / "sites.toml").read_text()
    rows = toas.splitlines()
    rows[6] = _edit(rows[6], "desert-dish", HOSTILE_NAME)
    edits = {
        "unknown-key": ({"model.toml": _edit(model, "[spin]\n", f'[spin]\n"{HOSTILE}" = 1\n')},
                        ("model.toml:10:", "field 'spin.")),
        "unknown-site": ({"toas.txt": "\n".join(rows) + "\n"}, ("toas.txt:7:", "field 'site'")),
        "unknown-parameter": ({"model.toml": _edit(model, "free = [", f'free = ["{HOSTILE}", ')},
                              ("model.toml:19:", "field 'fit.free'")),
        "bad-site-name": ({"sites.toml": _edit(sites, 'other_names = ["dd"]',
                                               f'other_names = ["dd", "{HOSTILE}"]')},
                          ("sites.toml:5:", "field 'site.desert-dish.other_names'")),
    }
    for name, (files, _) in edits.items():
        folder = root / name
        folder.mkdir(parents=True)
        (folder / "toas.txt").write_text(toas)
        (folder / "model.toml").write_text(model)
        (folder / "sites.toml").write_text(sites)
        for file, text in files.items():
            (folder / file).write_text(text)
    return {name: where for name, (_, where) in edits.items()}


def _shared_outputs(outdir: Path, names) -> list[Path]:
    return [outdir / "summary.csv", outdir / "summary.json", outdir / "overview.html",
            *(outdir / name / "error.txt" for name in names)]


def _assert_no_marks(paths) -> None:
    for path in paths:
        text = path.read_text(encoding="utf-8")
        for mark in MARKS:
            assert mark not in text, (path, mark)


def test_hostile_values_reach_no_shared_output_but_the_place_is_named(tmp_path):
    expected = _hostile_sources(tmp_path / "sources")
    outdir = tmp_path / "out"
    result = run_batch(tmp_path / "sources", outdir, workers=1, progress=False)
    assert sorted(result.failed) == sorted(expected)
    _assert_no_marks(_shared_outputs(outdir, expected))
    for name, (place, field) in expected.items():
        reason = (outdir / name / "error.txt").read_text().splitlines()[0]
        assert place in reason and field in reason, (name, reason)


def test_the_full_message_for_the_terminal_still_quotes_a_short_excerpt(tmp_path):
    # the per-source error raised to a single-source command keeps the excerpt (the
    # user sees what is wrong in their own terminal); only the shared form hides it
    from timingkit.pipeline.inputs import load_inputs
    _hostile_sources(tmp_path)
    folder = tmp_path / "unknown-site"
    with pytest.raises(InputError) as caught:
        load_inputs(folder / "toas.txt", folder / "model.toml")
    assert HOSTILE_NAME in str(caught.value)
    assert HOSTILE_NAME not in caught.value.public_message
    assert caught.value.public_message.startswith(f"{folder / 'toas.txt'}:7: field 'site': ")


def test_a_long_hostile_field_is_hidden_even_where_the_field_is_cut_short():
    error = InputError(f"unknown key {HOSTILE!r}", path="m.toml", line=3,
                       field="spin." + HOSTILE * 3, quoted=(HOSTILE * 3, HOSTILE))
    assert "SECRET" in str(error)                      # the terminal form names it
    assert not any(mark in error.public_message for mark in MARKS), error.public_message
    assert error.public_message.startswith("m.toml:3: field 'spin....': ")


def fit_that_breaks(toas_path, model_path, outdir, **options):
    """Stand-in fit: an internal error whose text quotes its input."""
    raise RuntimeError(f"could not handle {HOSTILE} from {toas_path}")


def test_an_internal_error_is_named_by_its_class_and_its_traceback_kept_apart(tmp_path):
    root = tmp_path / "sources"
    _hostile_sources(root)
    for name in ("unknown-key", "unknown-parameter", "bad-site-name"):
        shutil.rmtree(root / name)
    outdir = tmp_path / "out"
    result = run_batch(root, outdir, workers=1, progress=False, fit_function=fit_that_breaks)
    assert result.failed == ["unknown-site"]
    message = result.outcomes[0].message
    assert message == ("internal error, please report it (RuntimeError); the details are in "
                       "unknown-site/traceback.txt")
    _assert_no_marks(_shared_outputs(outdir, ["unknown-site"]))
    details = (outdir / "unknown-site" / "traceback.txt").read_text()
    assert "RuntimeError: could not handle api_key SECRET-TOKEN-123" in details
    assert "Traceback" in details


@pytest.mark.parametrize("body, line, field", [
    ("line mjd reason\n7 58000.5 fine\n{h} 58001.5 bad\n", 3, "line"),
    ("line mjd reason\n7 {h} bad\n", 2, "mjd"),
    ("# rules\nerr_us>5 noisy\n{h}>5 noisy\n", 3, None),
    ("# rules\nerr_us>{h}\n", 2, None),
])
def test_an_exclusion_list_quotes_its_lines_only_for_the_terminal(tmp_path, body, line, field):
    # exclusion lists go with batch sources (the manifest's exclude): what their
    # messages quote of a line is left out of the shared form, the place is not
    from timingkit.formats.exclusion_list import read_exclusion_list
    path = tmp_path / "left-out.txt"
    path.write_text(body.format(h=HOSTILE_NAME))
    with pytest.raises(InputError) as caught:
        read_exclusion_list(path)
    error = caught.value
    assert (error.line, error.field) == (line, field)
    assert HOSTILE_NAME[:20] in str(error)
    assert not any(mark in error.public_message for mark in MARKS), error.public_message
    assert error.public_message.startswith(f"{path}:{line}: ")
