"""``timingkit batch``: reprocess many sources (see timingkit.batch)."""

from __future__ import annotations

import sys

from timingkit.formats.errors import InputError
from timingkit.batch.outcomes import STATUS_FAILED, STATUS_NOT_CONVERGED
from timingkit.batch.runner import run_batch


def add_parsers(subparsers):
    """Add ``timingkit batch MANIFEST_OR_DIR [-o OUTDIR] [--workers N]
    [--cluster ADDRESS|local] [--resume] [--wait] [--glitches]``; the handler is ``args.func``."""
    parser = subparsers.add_parser(
        "batch", help="fit many sources (process pool or Dask cluster)",
        description="Fit every source of a manifest or of a directory of source folders; "
                    "write one folder per source plus summary.csv, summary.json, ppdot.png "
                    "and overview.html. Exit 0: all fitted; 3: some failed; 4: none failed but "
                    "some fits did not converge; 2: bad input.")
    parser.add_argument("inputs", metavar="MANIFEST_OR_DIR",
                        help="TOML manifest ([defaults], [[source]] name/toas/model) or a "
                             "directory whose subfolders each hold a TOA table and a model")
    parser.add_argument("-o", "--outdir", default="batch_out",
                        help="output folder (default: %(default)s)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes (default: number of cores)")
    parser.add_argument("--cluster", default=None, metavar="ADDRESS|local",
                        help="'local' for a Dask LocalCluster, or a Dask scheduler address "
                             "tcp://HOST:PORT (needs the cluster extra)")
    parser.add_argument("--resume", action="store_true",
                        help="skip sources whose inputs and settings are unchanged since their "
                             "last successful run")
    parser.add_argument("--wait", action="store_true",
                        help="when another run is writing into OUTDIR, wait for it to finish "
                             "instead of refusing (exit 2)")
    parser.add_argument("--glitches", action="store_true",
                        help="also search every source for glitches (as 'timingkit glitches'; "
                             "fills the glitch_candidates column)")
    parser.set_defaults(func=run_batch_command)
    return parser


def run_batch_command(args) -> int:
    """Run ``timingkit batch``; print a short summary. Exit 0 / 3 / 2 (see parser)."""
    fit_function = None
    if getattr(args, "glitches", False):
        from timingkit.pipeline.glitch_run import glitch_files as fit_function
    try:
        result = run_batch(args.inputs, args.outdir, workers=args.workers, cluster=args.cluster,
                           resume=args.resume, progress=None, fit_function=fit_function,
                           wait=args.wait)
    except InputError as exc:
        if getattr(args, "debug", False):
            raise
        print(f"timingkit batch: error: {exc}", file=sys.stderr)
        return 2
    reused = sum(o.reused for o in result.outcomes)
    print(f"{len(result.succeeded)} of {len(result.outcomes)} source(s) fitted"
          + (f" ({reused} unchanged, kept)" if reused else "")
          + (f", {len(result.not_converged)} did NOT converge" if result.not_converged else "")
          + f", {len(result.failed)} failed, in {result.elapsed_s:.1f} s"
          + (f" on {result.engine}" if result.refitted else ""))
    for outcome in result.outcomes:
        if outcome.status == STATUS_FAILED:
            print(f"  failed: {outcome.name}: {outcome.message}")
        elif outcome.status == STATUS_NOT_CONVERGED:
            print(f"  not converged: {outcome.name} (outputs marked as not converged)")
    print(f"summary: {result.files['summary_csv']}\noverview: {result.files['overview_html']}")
    return result.exit_status
