"""Options shared by several subcommands."""

from __future__ import annotations

import argparse


def add_input_options(p: argparse.ArgumentParser) -> None:
    """TOAS and MODEL, plus the files a model may need besides its own settings."""
    p.add_argument("toas", help="TOA table (plain text)")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--sites", action="append", default=[], metavar="FILE",
                   help="extra site file (TOML); may be repeated")
    p.add_argument("--ephemeris", metavar="BSP",
                   help="JPL SPK ephemeris file (default: the model's settings, else built-in DE421)")
    p.add_argument("--clock", action="append", default=[], metavar="FILE",
                   help="clock-correction table; may be repeated")


# Python argument names (the library's error fields) and the options that set them
OPTION_OF_ARGUMENT = {"free": "--free", "fix": "--fix", "window_toas": "--window-toas",
                      "window_days": "--window-days", "window_toas/window_days":
                      "--window-toas/--window-days", "min_significance": "--min-significance",
                      "known_epochs_mjd": "--known-epochs", "null_trials": "--null-trials",
                      "cluster": "--cluster", "error_us": "--error-us",
                      "freqs_mhz": "--freq-mhz"}


def name_options(exc) -> None:
    """An error about an argument (no file) names the command-line option."""
    if getattr(exc, "path", None) is None and getattr(exc, "field", None) in OPTION_OF_ARGUMENT:
        exc.field = OPTION_OF_ARGUMENT[exc.field]


def progress_enabled() -> bool:
    """Progress bars only on a terminal."""
    import sys
    return sys.stderr.isatty()
