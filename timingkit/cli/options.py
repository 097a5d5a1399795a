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


def progress_enabled() -> bool:
    """Progress bars only on a terminal."""
    import sys
    return sys.stderr.isatty()
