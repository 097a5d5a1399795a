"""The ``timingkit`` command: one subcommand group per module of this folder.

Exit status: 0 success, 2 bad input (one message, no traceback unless
--debug), 1 internal failure, 3 from ``batch`` when some sources failed, 4 when a
fit did not converge (outputs written and marked as not converged; from
``batch``: some sources did not converge, none failed).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from timingkit import __version__
from timingkit.formats.errors import FitError, InputError, cap

DESCRIPTION = ("timingkit: pulsar timing from arrival times to a fitted timing model. "
               "Barycentre TOAs, fit spin, position, dispersion and orbit, inspect residuals, "
               "report derived physics.")

# Modules of timingkit.cli, each with add_parsers(subparsers), in the order of --help.
COMMAND_GROUPS = ["fit", "explore", "derive", "simulate", "glitches", "events", "batch", "convert",
                  "predict", "profiles", "demo"]

# The group module of each command name (aliases too). Start-up imports only the group of
# the command given, so that `timingkit barycentre` does not load the fitter, the glitch
# search or the batch runner; tests/test_cli.py checks this table against the parsers.
COMMAND_GROUP_OF = {
    "fit": "fit", "residuals": "fit", "barycentre": "fit", "barycenter": "fit", "plot": "fit",
    "derive": "derive", "simulate": "simulate", "glitches": "glitches", "batch": "batch",
    "convert": "convert", "predict": "predict", "profile-toas": "profiles",
    "simulate-profiles": "profiles", "explore": "explore", "events": "events",
    "event-toas": "events", "simulate-events": "events", "demo": "demo",
}


def build_parser(groups=None) -> argparse.ArgumentParser:
    """The command-line parser with the subcommands of ``groups`` (default: all)."""
    parser = argparse.ArgumentParser(prog="timingkit", description=DESCRIPTION)
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    parser.add_argument("--version", action="version", version=f"timingkit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for group in COMMAND_GROUPS if groups is None else groups:
        importlib.import_module(f"timingkit.cli.{group}").add_parsers(sub)
    return parser


def _quiet_after_broken_pipe() -> int:
    """The reader of our output went away (``| head``): stop quietly. Further
    writes, including the flush at exit, go to the null device."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    return 0


def _requested_group(argv) -> str | None:
    """The group of the command in ``argv`` (the first word that is not an option), or
    None when there is none or it is unknown (then every group is loaded, for the full
    help and the list of choices)."""
    for word in argv:
        if not word.startswith("-"):
            return COMMAND_GROUP_OF.get(word)
        if word in ("-h", "--help", "--version"):
            return None
    return None


def _run(args):
    """The command's handler; with --wait, busy output locks are waited for."""
    if not getattr(args, "wait", False):
        return args.func(args)
    from timingkit.outputs.folder_lock import waiting_for_output_locks
    with waiting_for_output_locks():
        return args.func(args)


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    group = _requested_group(argv)
    parser = build_parser(None if group is None else [group])
    args = parser.parse_args(argv)
    try:
        status = int(_run(args) or 0)
        sys.stdout.flush()
        return status
    except BrokenPipeError:
        return _quiet_after_broken_pipe()
    except (InputError, FitError) as exc:
        if args.debug:
            raise
        from timingkit.cli.options import name_options
        name_options(exc)
        print(f"timingkit: error: {cap(str(exc))}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("timingkit: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # internal failure: say so, briefly
        if args.debug:
            raise
        print(f"timingkit: internal error: {type(exc).__name__}: {cap(str(exc))} "
              "(run with --debug for the traceback)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
