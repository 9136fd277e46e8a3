"""The review's model pass: wrong network parameters behind the meters' consistent disagreement.

After the meters are judged (and RTU clocks moved back), the week's evidence is searched for
wrong parameters (:func:`calibra.diagnosis.model_errors.find_model_errors`) — only when there
is something to explain: a point found faulty or set aside. A clean week costs nothing.

A parameter whose comparison with meter errors says "model" is put into the review's copy of
the network model (the site's files are never changed) and the meters are judged again on it,
so the meters it explains are not blamed and a real meter fault elsewhere is still found. One
that meter errors explain as well (not separable) is not applied: the meters keep their
findings, and both the model finding and each of those meters' findings say so, with the meter
that would tell them apart. Every accepted parameter becomes a ``model`` finding, for the
model's owner: advisory, to be checked against the datasheet, nameplate or tap position.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

from calibra.diagnosis.evidence import WeekEvidence
from calibra.diagnosis.findings import NO_FAULT, Finding, FindingKind
from calibra.diagnosis.model_errors import ModelErrorResult, ModelErrorSettings, find_model_errors
from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.meter_or_model import Verdict
from calibra.estimation.parameter_screening import meter_terms_around
from calibra.estimation.period import PreparedPeriod
from calibra.estimation.wls import Estimator
from calibra.io.model_corrections_file import MODEL_CORRECTIONS_FILE
from calibra.model.model_corrections import ModelDecision, kept_parameters
from calibra.model.parameters import ParameterKind, with_parameters
from calibra.model.site import Site
from calibra.progress import Progress


@dataclass
class ModelPassSettings:
    """Whether and how the review searches the network model (common practice, no source)."""

    enabled: bool = True
    search: ModelErrorSettings = field(default_factory=ModelErrorSettings)


#: The unit of each parameter kind, as the network tables hold it.
PARAMETER_UNITS = {ParameterKind.R: "pu", ParameterKind.X: "pu", ParameterKind.B: "pu",
                   ParameterKind.TAP: "ratio", ParameterKind.SHIFT: "deg",
                   ParameterKind.SHUNT: "Mvar"}


def something_to_explain(ev: WeekEvidence, diagnoses: dict) -> bool:
    """Whether the week leaves anything a wrong parameter could explain: a point set aside from
    the estimate or found faulty."""
    return bool(ev.set_aside.any()) or any(d.kind not in NO_FAULT for d in diagnoses.values())


def search_model(period: PreparedPeriod, ev: WeekEvidence, diagnoses: dict,
                 settings: ModelPassSettings, progress: Progress | None = None
                 ) -> list[ModelErrorResult]:
    """The wrong parameters the week points to ([] on a clean week or when disabled);
    parameters the model's owner keeps as they are (``model-corrections.csv``) are not
    offered."""
    if not settings.enabled or not something_to_explain(ev, diagnoses):
        return []
    settled = kept_parameters(period.site.model_corrections)
    return find_model_errors(ev, period.estimator, settings.search, progress, settled)


def applied(results: list[ModelErrorResult]) -> list[ModelErrorResult]:
    """The results the meters are judged again with: those no meter error explains as well."""
    return [r for r in results if r.verdict == Verdict.MODEL]


def corrected_period(period: PreparedPeriod, results: list[ModelErrorResult]
                     ) -> PreparedPeriod:
    """The period on a copy of the site whose network carries the estimated values (the
    readings are the same: per-unit values do not depend on branch parameters)."""
    values = {r.parameter: r.estimated_value for r in results}
    if not values:
        return period
    site = period.site
    network = with_parameters(site.network, values)
    moved = replace(site, network=network)
    estimator = Estimator(MeasurementModel.from_points(network, site.points),
                          period.estimator.options)
    return replace(period, site=moved, estimator=estimator)


def _substation(site: Site, r: ModelErrorResult) -> str:
    net = site.network
    bus = r.element if r.parameter.on_bus else str(net.branches.at[r.element, "from_bus"])
    return str(net.buses.at[bus, "substation"]) if bus in net.buses.index else ""


def model_tag(r: ModelErrorResult) -> str:
    """The finding's tag: ``element:parameter`` (e.g. ``L12:x``)."""
    return f"{r.element}:{r.kind}"


def _listed(tags: list[str], most: int = 6) -> str:
    """'A, B, C' or 'A, B, … and 12 more' (the full list is in the ``explains`` column)."""
    if len(tags) <= most:
        return ", ".join(tags)
    return f"{', '.join(tags[:most])} and {len(tags) - most} more"


def model_findings(site: Site, results: list[ModelErrorResult]) -> list[Finding]:
    """One ``model`` finding per parameter the week points to (advisory)."""
    out = []
    for r in results:
        separable = r.verdict == Verdict.MODEL
        evidence = r.evidence
        if separable:
            evidence += ("; the meters were judged again with the estimated value"
                         + (f" ({_listed(r.explained)} then agree)" if r.explained else ""))
        else:
            evidence += ("; the metering cannot tell the parameter from those meters' errors: "
                         "the review keeps their findings"
                         + ("" if r.separating_meter else ", and no one added meter it tried "
                            "would separate them"))
        action = ("check the model's value against the datasheet, nameplate, tap position "
                  "and as-built drawings; if the estimate is right, correct the model")
        if not separable and r.separating_meter:
            action += f"; or add {r.separating_meter} to tell the model from the meters"
        out.append(Finding(
            tag=model_tag(r), device="", substation=_substation(site, r),
            finding=FindingKind.MODEL, confidence=round(float(r.confidence), 3),
            evidence=evidence, scope="model", element=r.element,
            unit=PARAMETER_UNITS[r.kind],
            cause="the network model holds another value than the meters fit",
            action=action, snapshots_used=int(r.snapshots),
            share_supporting=round(float(r.confidence), 3), parameter=str(r.kind),
            model_value=float(r.model_value), estimated_value=float(r.estimated_value),
            estimated_std=float(r.std), explains=", ".join(r.explained),
            alternative_meters="" if separable else ", ".join(r.alternative),
            details={"verdict": str(r.verdict), "explained": list(r.explained),
                     "alternative": list(r.alternative),
                     "separating_meter": r.separating_meter,
                     "multiplier": float(r.multiplier),
                     "objective_before": float(r.objective_before),
                     "objective_after": float(r.objective_after)}))
    return out


def note_kept(findings: list[Finding], site: Site, model: MeasurementModel) -> None:
    """Each meter finding beside a parameter the model's owner checked and keeps as it is
    (``keep`` in the model-correction file) says so: the model was ruled out, the meter is the
    suspect."""
    for c in site.model_corrections:
        if c.decision != ModelDecision.KEEP:
            continue
        rows = {i for t in meter_terms_around(model, c.parameter, ring=True) for i in t.rows}
        beside = {str(model.tags[i]) for i in rows}
        where = f", row {c.row}" if c.row is not None else ""
        for f in findings:
            if f.tag in beside and f.finding not in (FindingKind.MODEL, FindingKind.UNVERIFIABLE):
                f.evidence += (f"; the model's owner checked the {c.parameter.label()} and keeps "
                               f"it as it is ({MODEL_CORRECTIONS_FILE}{where}): not the model")


def note_alternatives(findings: list[Finding], results: list[ModelErrorResult]) -> None:
    """Each meter finding that a not-separable parameter explains as well says so."""
    for r in results:
        if r.verdict == Verdict.MODEL:
            continue
        meters = set(r.alternative) | set(r.explained)
        for f in findings:
            if f.tag in meters and f.finding != FindingKind.MODEL:
                f.evidence += (f"; or the {r.parameter.label()} is wrong (the model holds "
                               f"{r.model_value:.5g}, the meters fit {r.estimated_value:.5g}): "
                               "the metering cannot tell them apart, see the model finding "
                               f"{model_tag(r)}")
