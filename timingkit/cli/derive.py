"""``timingkit derive``: the physics that follows from a model: spin, binary and
kinematic quantities, as ``timingkit fit`` shows them."""

from __future__ import annotations

import json


def add_parsers(sub) -> None:
    p = sub.add_parser("derive", help="derived physics of a timing model (spin, binary, "
                                      "kinematic)")
    p.add_argument("model", help="timing model (TOML)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=cmd_derive)


def derived_report(model) -> dict:
    """The derived sections of a fit report, from the model's own values,
    uncertainties and [correlation] section (as a fitted model carries them)."""
    from timingkit.outputs.report import derived_for
    from timingkit.physics import spin as derived_mod
    from timingkit.physics.binary_report import extra_report_sections
    derived = derived_for(model)
    report = {"source": model.name, "derived": derived, "assumptions": derived_mod.ASSUMPTIONS,
              "cautions": derived_mod.cautions_for(derived)}
    report.update(extra_report_sections(model, derived))
    return report


def cmd_derive(args) -> int:
    from timingkit.outputs.report import _clean, derived_lines
    from timingkit.pipeline.inputs import load_model
    model = load_model(args.model)
    report = derived_report(model)
    if args.json:
        print(json.dumps(_clean(report), indent=2))
        return 0
    print(f"{model.name}: derived from the model's values, uncertainties and correlations")
    print("\n".join(line[2:] if line.startswith("  ") else line
                    for line in derived_lines(report)))
    return 0
