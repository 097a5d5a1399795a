"""Rewrite a model in the other sky frame (equatorial <-> ecliptic) or another binary form."""

from __future__ import annotations


from timingkit.formats.errors import InputError
from timingkit.model.astrometry import convert_model_frame
from timingkit.model.binary import Binary, keplerian_section, low_eccentricity_section


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
