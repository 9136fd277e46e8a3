"""Findings: what the week review concludes about a point or a device, as plain data.

``findings.csv`` is an interface (documented in README.md): one row per finding with at least
the columns of :data:`FINDING_COLUMNS`, in that order; further columns follow.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from enum import StrEnum

import pandas as pd


class FindingKind(StrEnum):
    """Kinds of finding, in the words the findings file uses (members equal those strings)."""

    REVERSED = "reversed"
    SCALE = "scale"
    OFFSET = "offset"
    DRIFT = "drift"
    STUCK = "stuck"
    NOISY = "noisy"
    MISMAPPED = "mismapped"
    UNVERIFIABLE = "unverifiable"
    #: All points of one RTU stamped late (or early) by one constant time: a finding about
    #: the RTU, not a meter (``tag`` and ``rtu`` name the RTU, ``offset`` is in seconds).
    TIME_OFFSET = "time_offset"
    #: A parameter of the network model the week's meters disagree with (``tag`` is
    #: ``element:parameter``; ``parameter``, ``model_value``, ``estimated_value`` and
    #: ``estimated_std`` say which and by how much): for the model's owner, not a meter.
    MODEL = "model"
    #: A tap-position point against the tap ratio its transformer's meters imply (``tag`` the
    #: point): reads a constant ``offset`` steps off, counts the wrong way, stays frozen while
    #: the tap moves, or the model's step size (``factor``: implied / modelled) is wrong.
    TAP_OFFSET = "tap_offset"
    TAP_INVERTED = "tap_inverted"
    TAP_FROZEN = "tap_frozen"
    TAP_STEP_SIZE = "tap_step_size"
    #: A transformer without tap telemetry whose ratio steps over the period (``tag`` and
    #: ``element`` the branch).
    TAP_UNREPORTED = "tap_unreported"


#: Every finding kind, in the order the findings file and the lists use.
FINDING_KINDS = tuple(FindingKind)
#: Kinds a software correction (a gain and a bias) can undo.
CORRECTABLE_KINDS = (FindingKind.REVERSED, FindingKind.SCALE, FindingKind.OFFSET)
#: Kinds with a fitted factor: measured ≈ factor × implied.
FACTOR_KINDS = (FindingKind.REVERSED, FindingKind.SCALE)
#: Kinds about a tap changer's indication or model: for the RTU/SCADA or protection and control
#: engineer (and the model owner), never a CT crew.
TAP_KINDS = (FindingKind.TAP_OFFSET, FindingKind.TAP_INVERTED, FindingKind.TAP_FROZEN,
             FindingKind.TAP_STEP_SIZE, FindingKind.TAP_UNREPORTED)
#: Kinds about an RTU or a tap changer rather than one meter: for the RTU/SCADA engineer, not
#: the field crew's checklist, and never corrected in software.
RTU_KINDS = (FindingKind.TIME_OFFSET, *TAP_KINDS)
#: Kinds about the network model rather than a meter: for whoever owns the model, not the
#: field crew's checklist; corrected in the model (``model-corrections.csv``), never in a
#: meter's software correction.
MODEL_KINDS = (FindingKind.MODEL,)


class DiagnosisKind(StrEnum):
    """What the classification of one point's own week concludes (``classify.py``): healthy,
    too little data, or a fault whose finding kind has the same name. Mismapped and
    unverifiable are concluded by other steps (``mismap.py``, ``redundancy.py``)."""

    HEALTHY = "healthy"
    INSUFFICIENT = "insufficient"
    REVERSED = FindingKind.REVERSED.value
    SCALE = FindingKind.SCALE.value
    OFFSET = FindingKind.OFFSET.value
    DRIFT = FindingKind.DRIFT.value
    STUCK = FindingKind.STUCK.value
    NOISY = FindingKind.NOISY.value


#: Diagnoses that make no finding.
NO_FAULT = (DiagnosisKind.HEALTHY, DiagnosisKind.INSUFFICIENT)

#: The stable leading columns of findings.csv.
FINDING_COLUMNS = [
    "tag", "device", "substation", "finding", "factor", "offset", "drift_per_day", "onset",
    "confidence", "evidence",
]
#: Further columns, also written to findings.csv after the stable ones.
EXTRA_COLUMNS = [
    "scope", "quantity", "element", "end", "unit", "rtu", "channel", "cause", "action",
    "matched", "until", "snapshots_used", "share_supporting", "finding_id",
    "parameter", "model_value", "estimated_value", "estimated_std", "explains",
    "alternative_meters",
]


@dataclass
class Finding:
    """One conclusion about one point.

    ``scope`` is ``"device"`` when the same conclusion holds for every channel of the device
    (e.g. CT polarity reverses P and Q), else ``"point"``. ``factor``: measured ≈ factor ×
    implied (reversed, scale); ``offset``: measured ≈ implied + offset (offset, in the point's
    unit); ``drift_per_day``: the error grows by this much per day from ``onset``;
    ``matched``: for a mismapped point, the quantity it actually reads; ``until``: the end of a
    stuck or drifting interval when it ended inside the period.
    """

    tag: str
    device: str
    substation: str
    finding: FindingKind
    confidence: float
    evidence: str
    factor: float | None = None
    offset: float | None = None
    drift_per_day: float | None = None
    onset: pd.Timestamp | None = None
    scope: str = "point"
    quantity: str = ""
    element: str = ""
    end: str = ""
    unit: str = ""
    rtu: str = ""
    channel: str = ""
    cause: str = ""
    action: str = ""
    matched: str = ""
    until: pd.Timestamp | None = None
    snapshots_used: int = 0
    share_supporting: float = 0.0
    parameter: str = ""  #: model findings: r, x, b, tap, shift or shunt
    model_value: float | None = None  #: model findings: the value the network model holds
    estimated_value: float | None = None  #: model findings: the value the meters fit
    estimated_std: float | None = None  #: model findings: its standard deviation
    explains: str = ""  #: model findings: the points whose disagreement it explains (", ")
    #: model findings: the meters whose errors explain the data as well ("" when separable)
    alternative_meters: str = ""
    details: dict = field(default_factory=dict)

    @property
    def finding_id(self) -> str:
        """Stable key used to match a finding across reviews: tag and kind."""
        return f"{self.tag}|{self.finding}"

    def as_row(self) -> dict:
        row = asdict(self)
        row.pop("details")
        row["finding_id"] = self.finding_id
        return row


def findings_table(findings: list[Finding]) -> pd.DataFrame:
    """Findings as a DataFrame with the findings.csv columns, stable columns first."""
    cols = FINDING_COLUMNS + EXTRA_COLUMNS
    if not findings:
        return pd.DataFrame(columns=cols)
    df = pd.DataFrame([f.as_row() for f in findings])
    return df[cols]
