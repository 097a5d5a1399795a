"""The command line as the README documents it: every option of every command says
what it does in --help and is named in the README; list options never take the
positional arguments after them; the sample-data script's commands still parse."""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

import pytest

from timingkit.cli.main import build_parser, main

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")
SAMPLE = ROOT / "timingkit" / "sample_data"


def _commands():
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    seen = {}
    for name, command in sub.choices.items():
        seen.setdefault(id(command), (name, command))      # an alias is the same parser
    return sorted(seen.values(), key=lambda pair: pair[0])


def _options(command):
    return [a for a in command._actions
            if a.option_strings and not isinstance(a, argparse._HelpAction)]


@pytest.mark.parametrize("name, command", _commands(), ids=lambda v: v if isinstance(v, str)
                         else "")
def test_every_option_says_what_it_does(name, command):
    silent = [a.option_strings[-1] for a in _options(command) if not a.help]
    assert silent == [], f"timingkit {name}: options without help text: {silent}"


@pytest.mark.parametrize("name, command", _commands(), ids=lambda v: v if isinstance(v, str)
                         else "")
def test_the_readme_names_every_command_and_option(name, command):
    assert re.search(rf"timingkit {re.escape(name)}\b", README), name
    for action in _options(command):       # -o OUTDIR or --outdir, either will do
        assert any(re.search(rf"(?<![a-z0-9-]){re.escape(option)}(?![a-z0-9-])", README)
                   for option in action.option_strings), \
            f"timingkit {name} {action.option_strings[-1]} is not in the README"


def test_simulate_profiles_frequency_list_never_takes_the_model(tmp_path):
    """--freq-mhz, like every list option, takes one value or a comma list per use
    (README, "Options that take parameter names or lists")."""
    parser = build_parser(["profiles"])
    args = parser.parse_args(["simulate-profiles", "--freq-mhz", "350,1400", "--freq-mhz",
                              "2300", "model.toml", "--site", "desert-dish", "--start", "60000",
                              "--end", "60001", "--count", "2", "-o", str(tmp_path / "out")])
    assert args.freq_mhz == [350.0, 1400.0, 2300.0] and args.model == "model.toml"


def test_a_folding_model_with_offsets_is_refused_before_any_work(tmp_path, capsys):
    model = str(SAMPLE / "demo-slow.toml")
    out = tmp_path / "out"
    assert main(["simulate-profiles", model, "--folding-model", model,
                 "--folding-dm-offset", "0.1", "--site", "desert-dish", "--start", "60000",
                 "--end", "60001", "--count", "2", "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "--folding-dm-offset" in err and "--folding-model" in err and "Traceback" not in err
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_the_sample_data_script_gives_simulate_arguments_it_accepts(tmp_path):
    sys.path.insert(0, str(ROOT / "scripts"))
    try:
        from make_sample_data import SOURCES
    finally:
        sys.path.remove(str(ROOT / "scripts"))
    parser = build_parser(["simulate"])
    for name, spec in SOURCES.items():
        args = parser.parse_args(["simulate", f"{name}.true.toml", *spec["simulate"],
                                  "-o", str(tmp_path / f"{name}.toas")])
        assert args.model == f"{name}.true.toml" and len(args.freq_mhz) >= 2


@pytest.mark.parametrize("command", ["fit", "residuals"])
def test_the_closing_line_names_every_file_written(tmp_path, capsys, command):
    out = tmp_path / "out"
    assert main([command, str(SAMPLE / "demo-msp.toas"), str(SAMPLE / "demo-msp.toml"), "-o",
                 str(out)]) == 0
    last = capsys.readouterr().out.strip().splitlines()[-1]
    written = sorted(p.name for p in out.iterdir() if not p.name.startswith("."))
    if command == "fit":
        assert "residuals_frequency.png" in written and "prefit_residuals.csv" in written
    assert "report.json" in written and "residuals.csv" in written
    assert last == f"wrote {out}/: {', '.join(written)}"


def test_plot_names_its_option_and_quotes_a_bad_colour_column_briefly(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["fit", str(SAMPLE / "demo-slow.toas"), str(SAMPLE / "demo-slow.toml"), "-o",
                 str(out), "--no-plot"]) == 0
    capsys.readouterr()
    assert main(["plot", str(out), "--color-by", "receiver" * 50]) == 2
    err = capsys.readouterr().err
    assert "field '--color-by'" in err and "choose one of site, freq" in err
    assert "receiver" * 5 not in err and "Traceback" not in err
    assert not (out / "residuals.png").exists()


@pytest.mark.parametrize("command, name", [("explore", "page.html"), ("plot", "figure.png")])
def test_explore_and_plot_write_into_a_new_folder_and_never_over_their_inputs(
        tmp_path, capsys, command, name):
    out = tmp_path / "out"
    assert main(["fit", str(SAMPLE / "demo-slow.toas"), str(SAMPLE / "demo-slow.toml"), "-o",
                 str(out), "--no-plot"]) == 0
    target = tmp_path / "pages" / "sub" / name
    assert main([command, str(out), "-o", str(target)]) == 0 and target.is_file()
    report = (out / "report.json").read_bytes()
    assert main([command, str(out), "-o", str(out / "report.json")]) == 2
    assert (out / "report.json").read_bytes() == report
    blocked = tmp_path / "a-file"
    blocked.write_text("not a folder")
    capsys.readouterr()
    assert main([command, str(out), "-o", str(blocked / name)]) == 2   # exit 2, not 1
    err = capsys.readouterr().err
    assert "cannot write the output" in err and "internal error" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file", "out", "pages"]


def test_convert_never_writes_over_a_file_the_model_names(tmp_path, capsys):
    import shutil
    for name in ("demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, tmp_path / name)
    sites = (tmp_path / "sites.toml").read_bytes()
    assert main(["convert", str(tmp_path / "demo-slow.toml"), "--frame", "ecliptic", "-o",
                 str(tmp_path / "sites.toml")]) == 2
    assert "is an input of this command" in capsys.readouterr().err
    assert (tmp_path / "sites.toml").read_bytes() == sites
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo-slow.toml", "sites.toml"]


def test_predict_never_writes_over_a_file_the_model_names(tmp_path, capsys):
    import shutil
    for name in ("demo-slow.toml", "sites.toml"):
        shutil.copy(SAMPLE / name, tmp_path / name)
    sites = (tmp_path / "sites.toml").read_bytes()
    assert main(["predict", str(tmp_path / "demo-slow.toml"), "--site", "desert-dish",
                 "--start", "60000.9", "--end", "60001.0", "--freq-mhz", "1400", "-o",
                 str(tmp_path / "sites.toml")]) == 2
    assert "is an input of this command" in capsys.readouterr().err
    assert (tmp_path / "sites.toml").read_bytes() == sites
