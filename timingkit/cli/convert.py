"""``timingkit convert MODEL [--frame F] [--binary-model M] -o OUT``: rewrite a
timing model with its position in the other frame (equatorial ICRS <->
ecliptic, IERS 2010 obliquity) and/or its orbit in another binary form
(keplerian / relativistic <-> low_eccentricity). The input is never changed;
the output is written atomically."""

from __future__ import annotations

import os

from timingkit.cli.options import add_wait_option, writing_output_file
from timingkit.formats.errors import InputError
from timingkit.model.astrometry import FRAMES
from timingkit.model.binary import MODELS
from timingkit.model.conversion import convert_model


def add_parsers(sub) -> None:
    p = sub.add_parser("convert", help="rewrite a model in the other sky frame or binary form")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--frame", choices=FRAMES, help="position frame of the output")
    p.add_argument("--binary-model", choices=MODELS, help="binary model of the output")
    p.add_argument("-o", "--output", required=True, metavar="TOML", help="output model file")
    add_wait_option(p, "the model file")
    p.set_defaults(func=cmd_convert)


def cmd_convert(args) -> int:
    from timingkit.model.timing_model import TimingModel
    if not args.frame and not args.binary_model:
        raise InputError("nothing to do: give --frame and/or --binary-model", field="convert")
    from timingkit.formats.atomic_file import refuse_output_over_inputs
    from timingkit.outputs.folder_lock import refuse_if_locked
    refuse_output_over_inputs(args.output, [args.model])
    refuse_if_locked(args.output, field="--output")
    model = TimingModel.from_file(args.model)
    from timingkit.pipeline.inputs import input_paths
    refuse_output_over_inputs(args.output, input_paths(None, model))   # nor a file it names
    new = convert_model(model, args.frame, args.binary_model)
    comment = f"converted by timingkit from {os.path.basename(args.model)}"
    with writing_output_file(args.output):
        new.write(args.output, comment=comment)
    print(f"wrote {args.output} (position frame {new.astrometry.frame}"
          + (f", binary model {args.binary_model}" if args.binary_model else "") + ")")
    for comp in new.extra:
        for warning in comp.warnings():
            print(f"warning: {warning}")
    return 0
