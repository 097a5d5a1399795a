#!/usr/bin/env python
"""Reprocess a set of sources through the Python API.

    python scripts/reprocess_all.py [MANIFEST_OR_DIR] [-o OUTDIR] [--own-loop]

With no MANIFEST_OR_DIR, it reprocesses the three invented sample sources
that ship with timingkit, through a manifest written on the fly. By default
the batch engine does the work (all cores, one folder per source, summary
files, ``resume`` so unchanged sources are kept); ``--own-loop`` shows the
same job as a plain loop over ``fit_files`` for people who want full control.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from timingkit.batch import discover_sources, run_batch
from timingkit.cli.demo import SAMPLE_SOURCES, sample_data_dir
from timingkit.formats.errors import FitError, InputError
from timingkit.pipeline import fit_files


def sample_manifest(folder: Path) -> Path:
    """A manifest listing the sample sources (relative paths would be taken
    relative to the manifest; these are absolute)."""
    data = Path(sample_data_dir()).resolve()
    lines = ["[defaults]", "make_plots = true", ""]
    for name in SAMPLE_SOURCES:
        lines += ["[[source]]", f'name = "{name}"', f'toas = "{(data / f"{name}.toas").as_posix()}"',
                  f'model = "{(data / f"{name}.toml").as_posix()}"', ""]
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "manifest.toml"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def with_batch_engine(inputs, outdir: Path) -> int:
    sources = discover_sources(inputs, outdir=outdir)
    # Adjust the list here if you like, e.g. keep only some sources:
    #   sources = [s for s in sources if s.name.startswith("demo-")]
    result = run_batch(sources, outdir, resume=True)
    for row in result.rows:
        if row["status"] == "ok":
            print(f"{row['source']:>16}: P = {row['period_s']:.9g} s, "
                  f"Pdot = {row['period_derivative']:.3e}, rms {row['rms_us']:.3g} us")
        else:
            print(f"{row['source']:>16}: FAILED: {row['message']}")
    print(f"overview: {result.files['overview_html']}")
    return result.exit_status


def with_own_loop(inputs, outdir: Path) -> int:
    failures = 0
    for source in discover_sources(inputs, outdir=outdir):
        try:
            report = fit_files(source.toas_path, source.model_path, outdir / source.name,
                               free=source.free, fix=source.fix, sites_paths=source.sites_paths,
                               ephemeris=source.ephemeris, clock_paths=source.clock_paths)
        except (InputError, FitError) as exc:
            failures += 1
            print(f"{source.name:>16}: FAILED: {exc}")
            continue
        period = report["derived"]["period_s"]["value"]
        print(f"{source.name:>16}: P = {period:.9g} s, reduced chi2 {report['reduced_chi2']:.2f}")
    return 3 if failures else 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("inputs", nargs="?", help="manifest or directory of source folders")
    parser.add_argument("-o", "--outdir", default="reprocessed", help="default: %(default)s")
    parser.add_argument("--own-loop", action="store_true", help="plain loop, no batch engine")
    args = parser.parse_args(argv)
    outdir = Path(args.outdir)
    inputs = args.inputs or sample_manifest(outdir / "inputs")
    try:
        return (with_own_loop if args.own_loop else with_batch_engine)(inputs, outdir)
    except InputError as exc:
        print(f"reprocess_all: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # needed: the worker processes import this file
    sys.exit(main())
