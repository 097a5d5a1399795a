"""Inputs as a first-time user gives them: --free/--fix never swallow the
positional arguments (comma lists, repeatable); the same site file named by the
model and again on the command line (or in a manifest's defaults) is read once;
a site's other names are merged into its name in every output. Invented sample
sources and sites."""

import csv
import json
import os
import shutil

import pytest

from timingkit.batch.runner import run_batch
from timingkit.cli.main import build_parser, main
from timingkit.geometry.sites import SiteTable
from timingkit.outputs.residual_table import ResidualTable

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


@pytest.fixture()
def data(tmp_path):
    dst = tmp_path / "data"
    shutil.copytree(SAMPLE, dst)
    return dst


def test_free_and_fix_take_comma_lists_and_repeat_without_eating_positionals(data, tmp_path):
    toas, model = str(data / "demo-msp.toas"), str(data / "demo-msp.toml")
    out = tmp_path / "out"
    # the options first, the positionals after them: once swallowed by --free
    assert main(["fit", "--free", "position.ra,position.dec", "--fix", "dispersion.dm",
                 "--free", "spin.frequency_hz", toas, model, "--no-plot", "-o", str(out)]) == 0
    report = json.loads((out / "report.json").read_text())
    free = {n for n, e in report["parameters"].items() if e["free"]}
    assert free == {"position.ra", "position.dec", "spin.frequency_hz",
                    "spin.frequency_derivatives.0"}
    # one value per option: a second bare name is a positional, not a parameter
    with pytest.raises(SystemExit):
        main(["fit", "--free", "position.ra", "position.dec", toas, model])


@pytest.mark.parametrize("command", ["fit", "glitches"])
def test_help_shows_the_option_syntax(command, capsys):
    with pytest.raises(SystemExit):
        build_parser().parse_args([command, "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--free P[,P...]" in text and "--fix P[,P...]" in text
    assert "comma list" in text


def test_known_epochs_are_a_comma_list(tmp_path):
    args = build_parser().parse_args(["glitches", "--known-epochs", "58400.5,58500",
                                      "--known-epochs", "58600", "t.toas", "m.toml"])
    assert args.known_epochs == ["58400.5", "58500", "58600"]
    assert (args.toas, args.model) == ("t.toas", "m.toml")


def test_the_same_site_file_twice_is_read_once(data, tmp_path):
    toas, model = str(data / "demo-msp.toas"), str(data / "demo-msp.toml")
    # the model names sites.toml; give it again, by another path, and a copy
    copy = tmp_path / "copy-of-sites.toml"
    shutil.copy(data / "sites.toml", copy)
    again = os.path.join(str(data), ".", "sites.toml")
    assert main(["fit", toas, model, "--sites", again, "--sites", str(copy), "--no-plot",
                 "-o", str(tmp_path / "out")]) == 0
    table = SiteTable.with_files([data / "sites.toml", again, copy])
    assert table.names.count("desert-dish") == 1
    # a different site under a taken name is still an error
    clash = tmp_path / "clash.toml"
    clash.write_text("[site.desert-dish]\nlongitude_deg = 10.0\nlatitude_deg = 50.0\n"
                     "height_m = 100.0\n")
    assert main(["fit", toas, model, "--sites", str(clash), "--no-plot",
                 "-o", str(tmp_path / "bad")]) == 2


def test_manifest_defaults_naming_the_models_site_file(data, tmp_path):
    (data / "manifest.toml").write_text(
        '[defaults]\nsites = "sites.toml"\nmake_plots = false\n'
        '[[source]]\nname = "demo-slow"\ntoas = "demo-slow.toas"\nmodel = "demo-slow.toml"\n')
    result = run_batch(data / "manifest.toml", tmp_path / "out", workers=1, progress=False)
    assert result.succeeded == ["demo-slow"], [o.message for o in result.outcomes]


def test_other_names_are_merged_into_the_site_name_in_outputs(data, tmp_path):
    # half the TOAs of a site written with its other name ("dd" for desert-dish)
    path = data / "demo-msp.toas"
    lines = path.read_text().splitlines()
    changed, seen = [], 0
    for line in lines:
        if " desert-dish " in line:
            seen += 1
            if seen % 2:
                line = line.replace(" desert-dish ", " dd ", 1)
        changed.append(line)
    assert seen > 10
    path.write_text("\n".join(changed) + "\n")
    out = tmp_path / "out"
    assert main(["fit", str(path), str(data / "demo-msp.toml"), "-o", str(out)]) == 0
    table = ResidualTable.read_csv(out / "residuals.csv")
    assert "dd" not in set(table.site) and "desert-dish" in set(table.site)
    csv_path = tmp_path / "bary.csv"
    assert main(["barycentre", str(path), str(data / "demo-msp.toml"), "-o",
                 str(csv_path)]) == 0
    with open(csv_path) as fh:
        assert "dd" not in {row["site"] for row in csv.DictReader(fh)}
    # one legend entry per site in the residual plot
    from timingkit.outputs.plotting import plot_residuals
    fig = plot_residuals(table, color_by="site")
    labels = [t.get_text() for legend in fig.legends for t in legend.get_texts()]
    assert labels.count("desert-dish") == 1 and not any(t == "dd" for t in labels)
