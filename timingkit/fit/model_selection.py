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
Candidates: the next spin-frequency derivative; the next dispersion-measure
derivative; the astrometric terms held fixed (position, proper motion,
parallax); each fixed parameter of a binary section (when the model has one;
the companion Shapiro delay's two parameters together, and the periastron
longitude of a circular orbit with its eccentricity); a glitch at given epochs
(when the glitch section is available). Candidates these TOAs cannot measure
(one observing frequency for a DM term, TOAs at the barycentre for
astrometry) are skipped and listed as such. A trial parameter whose current
value gives it no effect on the TOAs (a Shapiro delay of zero range, the
periastron of a zero eccentricity) starts from a value the data can move:
sin i = 0.866 (i = 60 deg, the median for random orientations) and the
companion mass that the mass function then gives for a 1.4 M_sun pulsar
(common practice); an eccentricity of 1e-4. The Shapiro shape (or sin i) is
then stepped over a grid (0.3 ... 0.99) with the range (or mass), which enters
linearly, fitted at each step, and the best step starts the full fit: near
s = 1 the delay is too far from linear for one start to reach every orbit.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Callable

import scipy.stats

from timingkit.formats.errors import FitError, InputError
from timingkit.fit.least_squares import FitResult, fit
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
    """Each fixed parameter of a binary section, freed on its own, or with its
    partner (:data:`_BINARY_PARTNERS`) when that is fixed and zero too."""
    out, done = [], set()
    for comp in model.orbit_sections():
        for p in comp.parameters():
            if p.free or p.name in done:
                continue
            names = [p.name]
            partner = _BINARY_PARTNERS.get(p.name)
            if partner and partner in model.parameter_names():
                q = model.parameter(partner)
                if not q.free and q.value == 0:
                    names.append(partner)
            done.update(names)
            what = " with ".join(model.parameter(n).description or n for n in names)
            out.append(Candidate(f"binary term: {what}", names, _freeing(names)))
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


def dispersion_derivative_candidate(model: TimingModel) -> Candidate:
    k = len(model.dispersion.derivatives)
    name = f"dispersion.derivatives.{k}"
    ordinal = {1: "first", 2: "second", 3: "third"}.get(k + 1, f"order-{k + 1}")

    def build(m: TimingModel) -> TimingModel:
        m = m.copy()
        m.dispersion.derivatives.append(Parameter(
            name, 0.0, derivative_unit("pc cm^-3", k + 1, "yr"),
            description=f"dispersion-measure derivative {k + 1}"))
        m.parameter(name).free = True
        return m

    return Candidate(f"{ordinal} dispersion-measure derivative", [name], build)


def _freeing(names: list[str]):
    def build(m: TimingModel) -> TimingModel:
        m = m.copy()
        for name in names:
            m.parameter(name).free = True
        return m
    return build


def astrometric_candidates(model: TimingModel) -> list[Candidate]:
    """The position, the proper motion (both components) and the parallax, each
    when held fixed."""
    astro = model.astrometry
    groups = (("position", [astro.longitude, astro.latitude]),
              ("proper motion", [astro.pm_longitude, astro.pm_latitude]),
              ("parallax", [astro.parallax]))
    out = []
    for what, params in groups:
        fixed = [p.name for p in params if not p.free]
        if fixed:
            out.append(Candidate(f"astrometric term: {what}", fixed, _freeing(fixed)))
    return out


# fixed binary parameters tried together: the second has no effect while the first is zero
_BINARY_PARTNERS = {"binary.periastron_longitude_deg": "binary.eccentricity",
                    "binary.shapiro_shape": "binary.shapiro_range_s",
                    "binary.shapiro_range_s": "binary.shapiro_shape",
                    "binary.sin_inclination": "binary.companion_mass_msun",
                    "binary.companion_mass_msun": "binary.sin_inclination"}


def candidate_additions(model: TimingModel, glitch_epochs_mjd=()) -> list[Candidate]:
    out = [next_derivative_candidate(model), dispersion_derivative_candidate(model)]
    out.extend(astrometric_candidates(model))
    out.extend(binary_candidates(model))
    out.extend(glitch_candidate(model, e) for e in glitch_epochs_mjd)
    return out


MEDIAN_SIN_INCLINATION = math.sin(math.radians(60.0))   # random orientations (common practice)
SHAPE_GRID = (0.3, 0.6, MEDIAN_SIN_INCLINATION, 0.95, 0.99, 0.998)
SHAPE_NAMES = ("binary.shapiro_shape", "binary.sin_inclination")
PULSAR_MASS_MSUN = 1.4                                   # common practice
START_ECCENTRICITY = 1e-4


def _median_companion_mass(model: TimingModel) -> float:
    """Companion mass (M_sun) for sin i = MEDIAN_SIN_INCLINATION and a 1.4 M_sun pulsar
    from the orbit's mass function f = 4 pi^2 (x c)^3 / (G Pb^2) (Kepler's third law),
    by bisection of (m_c sin i)^3 / (m_p + m_c)^2 = f."""
    from timingkit.model.binary import SOLAR_MASS_TIME_S
    x = model.parameter("binary.projected_semi_major_axis_lt_s").value
    pb_s = model.parameter("binary.orbital_period_days").value * 86400.0
    f = (2 * math.pi / pb_s) ** 2 * x ** 3 / SOLAR_MASS_TIME_S
    lo, hi = 0.0, 100.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if (mid * MEDIAN_SIN_INCLINATION) ** 3 / (PULSAR_MASS_MSUN + mid) ** 2 < f:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def _start_value(model: TimingModel, name: str) -> float | None:
    """A value of ``name`` at which the data can move it (module docstring)."""
    from timingkit.model.binary import SOLAR_MASS_TIME_S
    if name in ("binary.shapiro_shape", "binary.sin_inclination"):
        return MEDIAN_SIN_INCLINATION
    if name == "binary.companion_mass_msun":
        return _median_companion_mass(model)
    if name == "binary.shapiro_range_s":
        return _median_companion_mass(model) * SOLAR_MASS_TIME_S
    if name == "binary.eccentricity":
        return START_ECCENTRICITY
    return None


def _zero_columns(model: TimingModel, names: list[str], obs, reference) -> list[str]:
    import numpy as np
    ev = model.evaluate(obs, reference)
    design = model.design_matrix(ev, names)
    return [n for j, n in enumerate(names) if not np.any(design[:, j])]


def prepared_trial(cand: Candidate, base_model: TimingModel, obs, reference):
    """The candidate's model ready to fit, or (None, reason) when these TOAs cannot
    measure it: parameters at a value where they have no effect start from
    :func:`_start_value`."""
    model = cand.build(base_model)
    zero = _zero_columns(model, cand.parameters, obs, reference)
    if zero:
        for name in zero + [_BINARY_PARTNERS.get(n) for n in zero]:
            if name in cand.parameters and model.parameter(name).value == 0:
                start = _start_value(model, name)
                if start is not None:
                    model.parameter(name).value = start
        zero = _zero_columns(model, cand.parameters, obs, reference)
        if zero:
            return None, f"{', '.join(zero)} have no effect on these TOAs"
    problems = model.unconstrained(obs, cand.parameters)
    if problems:
        return None, "; ".join(problems)
    return model, ""


def _fixed_noise(model: TimingModel) -> TimingModel:
    m = model.copy()
    for comp in m.noise_sections():
        for p in comp.parameters():
            p.free = False
    return m


def _fit_trial(trial: TimingModel, names: list[str], base_model: TimingModel, obs,
               reference) -> FitResult:
    """The extended fit; a Shapiro shape started from zero is first stepped over
    SHAPE_GRID (module docstring)."""
    shapes = [n for n in names if n in SHAPE_NAMES and base_model.parameter(n).value == 0]
    if not shapes:
        return fit(trial, obs, reference=reference)
    best = None
    for value in SHAPE_GRID:
        step = trial.copy()
        step.parameter(shapes[0]).value = value
        step.parameter(shapes[0]).free = False
        try:
            held = fit(step, obs, reference=reference)
        except FitError:
            continue
        if best is None or held.chi2 < best.chi2:
            best = held
    if best is None:
        return fit(trial, obs, reference=reference)
    start = best.model.copy()
    start.parameter(shapes[0]).free = True
    return fit(start, obs, reference=reference)


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
        trial, reason = prepared_trial(cand, base_model, obs, reference)
        if trial is None:
            out.append(Comparison(addition=cand.addition, parameters=cand.parameters,
                                  note=f"not measurable: {reason}"))
            continue
        try:
            ext = _fit_trial(trial, cand.parameters, base_model, obs, reference)
            cmp_ = compare_fits(base, ext, cand.addition, cand.parameters, level)
            if not ext.converged:
                cmp_.note = "extended fit did not converge"
        except (FitError, ValueError) as exc:   # a ValueError's text is not for reports
            why = f": {exc}" if isinstance(exc, FitError) else f" ({type(exc).__name__})"
            cmp_ = Comparison(addition=cand.addition, parameters=cand.parameters,
                              note=f"could not be fitted{why}")
        out.append(cmp_)
    return out


def suggestions_entry(comparisons: list[Comparison], level: float = DEFAULT_LEVEL) -> dict:
    """The ``suggestions`` entry of report.json."""
    measurable = [c for c in comparisons if not c.note.startswith("not measurable")]
    return {"level": level,
            "criterion": f"F-test probability below {level:g} (delta AIC/BIC < 0 favour an addition)",
            "supported": [c.addition for c in comparisons if c.supported],
            "tried": [c.as_dict() for c in measurable],
            "not_measurable": {c.addition: c.note[len("not measurable: "):]
                               for c in comparisons if c not in measurable}}


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
    skipped = entry.get("not_measurable") or {}
    if skipped:
        lines.append(f"    not tried (these TOAs cannot measure them): {', '.join(skipped)}")
    return "\n".join(lines)


__all__ = ["f_test", "information_criteria_change", "Comparison", "compare_fits", "Candidate",
           "candidate_additions", "next_derivative_candidate", "binary_candidates",
           "dispersion_derivative_candidate", "astrometric_candidates", "prepared_trial",
           "glitch_candidate", "suggest", "suggestions_entry", "suggestions_text"]
