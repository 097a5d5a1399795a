"""``timingkit convert MODEL [--frame F] [--binary-model M] -o OUT``: rewrite a
timing model with its position in the other frame (equatorial ICRS <->
ecliptic, IERS 2010 obliquity) and/or its orbit in another binary form
(keplerian / relativistic <-> low_eccentricity). The input is never changed;
the output is written atomically."""

from __future__ import annotations

import os

from timingkit.formats.errors import InputError
from timingkit.model.astrometry import FRAMES, convert_model_frame
from timingkit.model.binary import MODELS, Binary, keplerian_section, low_eccentricity_section


def convert_model(model, frame: str | None = None, binary_model: str | None = None):
    """A converted copy of ``model`` (a TimingModel). The binary conversion
    carries the orbit at its epoch (see timingkit.model.binary); fitted
    uncertainties of converted orbital elements are dropped."""
    from timingkit.model.timing_model import TimingModel
    from timingkit.formats.model_file import format_model_document, parse_model_text
    out = convert_model_frame(model, frame) if frame else model.copy()
    if binary_model:
        binary = next((c for c in out.extra if isinstance(c, Binary)), None)
        if binary is None:
            raise InputError("the model has no [binary] section to convert", path=model.path,
                             field="binary")
        doc = out.to_document()
        sec = {k: v for k, v in doc["binary"].items() if k != "uncertainty"}
        if binary_model == "low_eccentricity" and binary.model != "low_eccentricity":
            new = low_eccentricity_section(sec)
        elif binary_model != "low_eccentricity" and binary.model == "low_eccentricity":
            new = keplerian_section(sec, binary_model)
        else:
            new = dict(sec, model=binary_model)
            if binary_model == "keplerian":
                for key in ("shapiro_range_s", "shapiro_shape", "companion_mass_msun",
                            "sin_inclination"):
                    new.pop(key, None)
        doc["binary"] = new
        legal = {f"binary.{k}" for k in new}
        doc["fit"]["free"] = [n for n in doc["fit"]["free"]
                              if not n.startswith("binary.") or n in legal]
        out = TimingModel(parse_model_text(format_model_document(doc), model.path))
    return out


def add_convert_parser(sub) -> None:
    p = sub.add_parser("convert", help="rewrite a model in the other sky frame or binary form")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--frame", choices=FRAMES, help="position frame of the output")
    p.add_argument("--binary-model", choices=MODELS, help="binary model of the output")
    p.add_argument("-o", "--output", required=True, metavar="TOML", help="output model file")
    p.set_defaults(func=cmd_convert)


def cmd_convert(args) -> int:
    from timingkit.model.timing_model import TimingModel
    if not args.frame and not args.binary_model:
        raise InputError("nothing to do: give --frame and/or --binary-model", field="convert")
    if os.path.abspath(args.output) == os.path.abspath(args.model):
        raise InputError("refusing to overwrite the input model; choose another --output",
                         path=args.output)
    model = TimingModel.from_file(args.model)
    new = convert_model(model, args.frame, args.binary_model)
    new.write(args.output, comment=f"converted by timingkit from {os.path.basename(args.model)}")
    print(f"wrote {args.output} (position frame {new.astrometry.frame}"
          + (f", binary model {args.binary_model}" if args.binary_model else "") + ")")
    for comp in new.extra:
        for warning in comp.warnings():
            print(f"warning: {warning}")
    return 0


__all__ = ["convert_model", "add_convert_parser", "cmd_convert"]
