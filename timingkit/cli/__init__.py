"""The ``timingkit`` command line: ``main`` (in :mod:`timingkit.cli.main`) and one module per
subcommand group (fit, derive, simulate, glitches, batch, convert, predict, profiles, demo)."""


def main(argv=None) -> int:
    """Run the ``timingkit`` command with ``argv`` (default: sys.argv); return the exit status."""
    from timingkit.cli.main import main as run
    return run(argv)
