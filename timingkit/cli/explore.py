"""``timingkit explore``: write explorer.html, the interactive residual explorer,
from a fit's output folder."""

from __future__ import annotations

from timingkit.cli.options import add_wait_option, writing_output_file


# what the page is made from (outputs.explorer_page), never written over by -o
READ_FILES = ("residuals.csv", "prefit_residuals.csv", "report.json", "glitches.json",
              "fitted.toml")


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
    import contextlib
    import os
    from timingkit.formats.atomic_file import refuse_output_over_inputs
    from timingkit.outputs.explorer_page import write_explorer
    if args.output is not None:            # never over the files the page is made from
        refuse_output_over_inputs(args.output, [os.path.join(args.outdir, name) for name in
                                                READ_FILES])
    elsewhere = args.output is not None and os.path.dirname(os.path.abspath(args.output)) != \
        os.path.abspath(args.outdir)
    with writing_output_file(args.output) if elsewhere else contextlib.nullcontext():
        path = write_explorer(args.outdir, args.output)
    print(f"wrote {path}: open it in a browser (it needs no network)")
    return 0
