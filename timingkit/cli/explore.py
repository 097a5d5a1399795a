"""``timingkit explore``: write explorer.html, the interactive residual explorer,
from a fit's output folder."""

from __future__ import annotations

from timingkit.cli.options import add_wait_option


def add_parsers(sub) -> None:
    p = sub.add_parser(
        "explore", help="write explorer.html: explore residuals in a browser, mark TOAs to "
                        "leave out",
        description="Write one self-contained page (works offline) from the outputs of 'fit', "
                    "'residuals' or 'glitches': pan and zoom, hover for every column of a TOA, "
                    "choose the axes and colours, select TOAs to leave out and download the "
                    "exclusion list for 'fit --exclude'.")
    p.add_argument("outdir", help="folder written by 'fit', 'residuals' or 'glitches'")
    p.add_argument("-o", "--output", metavar="HTML", help="page to write (default "
                   "OUTDIR/explorer.html)")
    add_wait_option(p, "into OUTDIR")
    p.set_defaults(func=cmd_explore)


def cmd_explore(args) -> int:
    from timingkit.outputs.explorer_page import write_explorer
    path = write_explorer(args.outdir, args.output)
    print(f"wrote {path}: open it in a browser (it needs no network)")
    return 0
