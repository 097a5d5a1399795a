"""``timingkit derive``: the physics that follows from a model's spin parameters."""

from __future__ import annotations

import json


def add_parsers(sub) -> None:
    p = sub.add_parser("derive", help="derived physics of a timing model")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_derive)


def cmd_derive(args) -> int:
    from timingkit.pipeline.inputs import load_model
    from timingkit.outputs.report import derived_for, write_json  # noqa: F401
    from timingkit.physics import spin as derived_mod
    model = load_model(args.model)
    d = derived_for(model)
    if args.json:
        from timingkit.outputs.report import _clean
        print(json.dumps(_clean({"source": model.name, "derived": d,
                                 "assumptions": derived_mod.ASSUMPTIONS,
                                 "cautions": derived_mod.cautions_for(d)}), indent=2))
        return 0
    print(f"{model.name}: derived from the spin parameters")
    for key, q in d.items():
        if q["value"] is None:
            print(f"  {key:36s} —  ({q.get('note') or 'not available'})")
        else:
            unc = "" if q["uncertainty"] is None else f" ± {q['uncertainty']:.3g}"
            print(f"  {key:36s} {q['value']:.6g}{unc} {q['unit']}")
    print(f"  assumptions: {derived_mod.ASSUMPTIONS}")
    for c in derived_mod.cautions_for(d):
        if c != derived_mod.ASSUMPTIONS:
            print(f"  caution: {c}")
    return 0
