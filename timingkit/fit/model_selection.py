"""Model selection for nested timing fits: F-test, change in AIC and BIC, and
the list of additions the data support (``timingkit fit --suggest``).

For a base fit with chi-square chi2_b on nu_b degrees of freedom and an
extended fit (the base plus dk = nu_b - nu_e parameters) with chi2_e on nu_e,

    F = ((chi2_b - chi2_e) / dk) / (chi2_e / nu_e),

and the probability that pure noise gives an F at least this large is the
upper tail of Fisher's F distribution with (dk, nu_e) degrees of freedom
(Bevington & Robinson, *Data Reduction and Error Analysis for the
Physical Sciences*, 3rd ed. 2003, ch. 11, the F test for an additional
term); a small probability
means the added parameters are needed. The tail is scipy.stats.f.sf.

With Gaussian errors of known scale, -2 ln L_max = chi2 + constant, so

    delta AIC = chi2_e - chi2_b + 2 dk          (Akaike 1974)
    delta BIC = chi2_e - chi2_b + dk ln N       (Schwarz 1978);

negative values favour the extended model. With a noise model the chi-square
is the generalised one (white errors scaled, red noise marginalised) and the
noise parameters are held at their fitted values in both fits, so the tests
compare timing models under the same noise.

An addition is listed as *supported* when its F-test probability is below
the chosen level (default 1 %); delta AIC and BIC are reported beside it.
Candidates: the next spin-frequency derivative; each fixed parameter of a
binary section (when the model has one); a glitch at given epochs (when
the glitch section is available).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Callable

import scipy.stats

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.fitter import FitResult, fit
from timingkit.model.parameters import Parameter, derivative_unit
from timingkit.model.timing_model import OPTIONAL_SECTIONS, TimingModel
from timingkit.geometry.observations import Observations

DEFAULT_LEVEL = 0.01
GLITCH_STEP_KEYS = ("phase_step", "frequency_step_hz", "frequency_derivative_step")


def f_test(chi2_base: float, dof_base: int, chi2_extended: float,
           dof_extended: int) -> tuple[float, float]:
    """(F statistic, probability of an F this large by chance) for nested fits."""
    dk = dof_base - dof_extended
    if dk <= 0:
        raise ValueError("the extended fit must have fewer degrees of freedom than the base fit")
    if dof_extended <= 0:
        raise ValueError("the extended fit has no degrees of freedom left")
    if chi2_extended <= 0:
        return math.inf, 0.0
    f_stat = ((chi2_base - chi2_extended) / dk) / (chi2_extended / dof_extended)
    if f_stat <= 0:
        return float(f_stat), 1.0
    return float(f_stat), float(scipy.stats.f.sf(f_stat, dk, dof_extended))


def information_criteria_change(chi2_base: float, k_base: int, chi2_extended: float,
                                k_extended: int, n_toas: int) -> tuple[float, float]:
    """(delta AIC, delta BIC), extended minus base; negative favours the extension."""
    dk = k_extended - k_base
    d_chi2 = chi2_extended - chi2_base
    return float(d_chi2 + 2.0 * dk), float(d_chi2 + dk * math.log(n_toas))


@dataclass
class Comparison:
    """One nested comparison: base fit vs base + ``parameters``."""
    addition: str
    parameters: list[str]
    chi2_base: float | None = None
    dof_base: int | None = None
    chi2_extended: float | None = None
    dof_extended: int | None = None
    f_statistic: float | None = None
    f_probability: float | None = None
    delta_aic: float | None = None
    delta_bic: float | None = None
    supported: bool = False
    values: dict = field(default_factory=dict)     # fitted added parameters: value, uncertainty
    note: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def compare_fits(base: FitResult, extended: FitResult, addition: str, parameters: list[str],
                 level: float = DEFAULT_LEVEL) -> Comparison:
    """F-test and AIC/BIC change between two converged nested fits."""
    n = len(base.postfit.time_s)
    k_base = n - base.dof
    k_ext = n - extended.dof
    f_stat, prob = f_test(base.chi2, base.dof, extended.chi2, extended.dof)
    d_aic, d_bic = information_criteria_change(base.chi2, k_base, extended.chi2, k_ext, n)
    values = {}
    for name in parameters:
        p = extended.model.parameter(name)
        values[name] = {"value": p.text(), "uncertainty": p.uncertainty, "unit": p.unit}
    return Comparison(addition=addition, parameters=list(parameters), chi2_base=base.chi2,
                      dof_base=base.dof, chi2_extended=extended.chi2, dof_extended=extended.dof,
                      f_statistic=f_stat, f_probability=prob, delta_aic=d_aic, delta_bic=d_bic,
                      supported=bool(prob < level), values=values)


@dataclass
class Candidate:
    """A possible addition: ``build(model)`` returns a copy of ``model`` with
    the addition made and its parameters free."""
    addition: str
    parameters: list[str]
    build: Callable[[TimingModel], TimingModel]


def next_derivative_candidate(model: TimingModel) -> Candidate:
    k = len(model.spin.derivatives)
    name = f"spin.frequency_derivatives.{k}"
    ordinal = {1: "first", 2: "second", 3: "third", 4: "fourth"}.get(k + 1, f"order-{k + 1}")

    def build(m: TimingModel) -> TimingModel:
        m = m.copy()
        p = Parameter(name, 0.0, derivative_unit("Hz", k + 1), high_precision=True,
                      description=f"frequency derivative {k + 1}")
        m.spin.derivatives.append(p)
        m.parameter(name).free = True
        return m

    return Candidate(f"{ordinal} spin-frequency derivative", [name], build)


def binary_candidates(model: TimingModel) -> list[Candidate]:
    """Each fixed parameter of a binary section, freed on its own."""
    out = []
    for comp in model.orbit_sections():
        for p in comp.parameters():
            if p.free:
                continue

            def build(m: TimingModel, name=p.name) -> TimingModel:
                m = m.copy()
                m.parameter(name).free = True
                return m

            what = p.description or p.name
            out.append(Candidate(f"binary term: {what}", [p.name], build))
    return out


def glitch_candidate(model: TimingModel, epoch_mjd: float | str) -> Candidate:
    """A glitch at ``epoch_mjd`` (phase, frequency and frequency-derivative
    steps free), as a new [[glitch]] table of the model file."""
    if "glitch" not in OPTIONAL_SECTIONS:
        raise InputError("glitch candidates need the glitch section ([[glitch]]), "
                         "which this installation does not have", field="glitch")
    epoch = str(epoch_mjd)

    def build(m: TimingModel) -> TimingModel:
        from timingkit.formats.model_file import format_model_document, parse_model_text
        doc = m.to_document()
        glitches = doc.setdefault("glitch", [])
        glitches.append({"epoch_mjd": epoch, **{k: 0.0 for k in GLITCH_STEP_KEYS}})
        new = TimingModel(parse_model_text(format_model_document(doc), m.path))
        added = [c for c in new.extra if c.section == "glitch"][-1]
        for p in added.parameters():
            if p.key in GLITCH_STEP_KEYS:
                p.free = True
        return new

    new = build(model)
    comp = [c for c in new.extra if c.section == "glitch"][-1]
    names = [p.name for p in comp.parameters() if p.key in GLITCH_STEP_KEYS]
    return Candidate(f"glitch at MJD {epoch}", names, build)


def candidate_additions(model: TimingModel, glitch_epochs_mjd=()) -> list[Candidate]:
    out = [next_derivative_candidate(model)]
    out.extend(binary_candidates(model))
    out.extend(glitch_candidate(model, e) for e in glitch_epochs_mjd)
    return out


def _fixed_noise(model: TimingModel) -> TimingModel:
    m = model.copy()
    for comp in m.noise_sections():
        for p in comp.parameters():
            p.free = False
    return m


def suggest(result: FitResult, obs: Observations, reference: Observations | None = None,
            level: float = DEFAULT_LEVEL, candidates: list[Candidate] | None = None,
            glitch_epochs_mjd=()) -> list[Comparison]:
    """Try each candidate addition on top of the fitted model and compare.

    The base is refitted with the noise parameters held at their fitted
    values, so base and extension share one noise model. Candidates that
    cannot be fitted are returned with a note and ``supported = False``."""
    base_model = _fixed_noise(result.model)
    base = fit(base_model, obs, reference=reference)
    if candidates is None:
        candidates = candidate_additions(base_model, glitch_epochs_mjd)
    out = []
    for cand in candidates:
        try:
            ext = fit(cand.build(base_model), obs, reference=reference)
            cmp_ = compare_fits(base, ext, cand.addition, cand.parameters, level)
            if not ext.converged:
                cmp_.note = "extended fit did not converge"
        except (FitError, ValueError) as exc:
            cmp_ = Comparison(addition=cand.addition, parameters=cand.parameters,
                              note=f"could not be fitted: {exc}")
        out.append(cmp_)
    return out


def suggestions_entry(comparisons: list[Comparison], level: float = DEFAULT_LEVEL) -> dict:
    """The ``suggestions`` entry of report.json."""
    return {"level": level,
            "criterion": f"F-test probability below {level:g} (delta AIC/BIC < 0 favour an addition)",
            "supported": [c.addition for c in comparisons if c.supported],
            "tried": [c.as_dict() for c in comparisons]}


def suggestions_text(entry: dict) -> str:
    """Terminal lines for a :func:`suggestions_entry`."""
    level = entry["level"]
    lines = ["", f"  suggested additions (F-test at the {100 * level:g}% level; delta AIC/BIC < 0 "
             "favour the addition):"]
    for c in entry["tried"]:
        if c["f_probability"] is None:
            lines.append(f"    {c['addition']:40s} —  ({c['note']})")
            continue
        verdict = "SUPPORTED" if c["supported"] else "not needed"
        lines.append(f"    {c['addition']:40s} {verdict:10s} F-test p = {c['f_probability']:.3g}, "
                     f"dAIC = {c['delta_aic']:+.2f}, dBIC = {c['delta_bic']:+.2f}"
                     + (f" ({c['note']})" if c["note"] else ""))
    if not entry["supported"]:
        lines.append("    none of the tried additions is supported by these data")
    return "\n".join(lines)


__all__ = ["f_test", "information_criteria_change", "Comparison", "compare_fits", "Candidate",
           "candidate_additions", "next_derivative_candidate", "binary_candidates",
           "glitch_candidate", "suggest", "suggestions_entry", "suggestions_text"]
