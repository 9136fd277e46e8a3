"""Wrong network parameters for simulated sites: the telemetry comes from the true network, the
site's network files carry the wrong values (as a model typed from the wrong datasheet would).
The ground truth goes to ``truth/model_errors.csv``; tests and benchmarks read it, the tool
never does."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import pandas as pd

from calibra.model.network import Network
from calibra.model.parameters import NetworkParameter, ParameterKind, model_value, with_parameters

MODEL_TRUTH_FILE = "model_errors.csv"
MODEL_TRUTH_COLUMNS = ["element", "parameter", "true_value", "model_value", "detail"]


@dataclass(frozen=True)
class ModelError:
    """One wrong parameter of the network model: the true value times ``factor``, plus
    ``offset`` (e.g. a tap one step of 0.0125 off), or exactly ``value`` when given."""

    element: str
    parameter: ParameterKind
    factor: float = 1.0
    offset: float = 0.0
    value: float | None = None
    detail: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "element", str(self.element))
        object.__setattr__(self, "parameter", ParameterKind(self.parameter))

    def wrong_value(self, true_value: float) -> float:
        return float(self.value) if self.value is not None else \
            true_value * self.factor + self.offset


def model_with_errors(network: Network, errors: Sequence[ModelError]
                      ) -> tuple[Network, pd.DataFrame]:
    """The network model with ``errors`` applied, and their ground truth
    (:data:`MODEL_TRUTH_COLUMNS`). Raises ValueError for an unknown element, or an error
    named twice."""
    values: dict[NetworkParameter, float] = {}
    rows = []
    for e in errors:
        p = NetworkParameter(e.element, e.parameter)
        if p in values:
            raise ValueError(f"the {p.label()} is given two errors")
        true = model_value(network, p)
        values[p] = e.wrong_value(true)
        rows.append((e.element, str(e.parameter), true, values[p], e.detail))
    truth = pd.DataFrame(rows, columns=MODEL_TRUTH_COLUMNS)
    return (with_parameters(network, values) if values else network), truth
