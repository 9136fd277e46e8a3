"""Corrections of the network model decided by its owner, applied to every review.

The user's network files are never rewritten: a correction says that one parameter of the
model (a branch's r, x, b, tap or shift, a bus's shunt) is to be taken at another value
(``set``), or that the model's value was checked and is right as it is (``keep``: the review
then does not offer that parameter as the explanation of its meters' disagreement, so the
meters around it are the suspects). They are kept in ``model-corrections.csv`` in the site
folder (:mod:`calibra.io.model_corrections_file`).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from enum import StrEnum

from calibra.model.network import Network
from calibra.model.parameters import NetworkParameter, model_value, with_parameters


class ModelDecision(StrEnum):
    """What the model's owner decided about one parameter (the file's words)."""

    SET = "set"  #: take the parameter at ``value``
    KEEP = "keep"  #: the model's value is right as it is


@dataclass(frozen=True)
class ModelCorrection:
    """One row of the model-correction file."""

    parameter: NetworkParameter
    decision: ModelDecision
    value: float | None  #: the value to use (``set``); None for ``keep``
    reason: str = ""
    entered_by: str = ""
    entered_at: str = ""  #: as written in the file (ISO 8601 UTC when calibra writes it)
    ledger_action: int | None = None  #: the ledger action that wrote it (None: by hand)
    row: int | None = None  #: its row in the file (header = 1), when read from one

    def describe(self, network: Network | None = None) -> str:
        """'x of branch L7 set to 0.0412 (model 0.0537)' or '… kept at 0.0537'."""
        was = model_value(network, self.parameter) if network is not None else None
        if self.decision == ModelDecision.KEEP:
            return f"{self.parameter.label()} kept as it is" + (
                f" ({was:.6g})" if was is not None else "")
        return f"{self.parameter.label()} set to {self.value:.6g}" + (
            f" (network files: {was:.6g})" if was is not None else "")


def apply_model_corrections(network: Network, corrections: Iterable[ModelCorrection]
                            ) -> Network:
    """The network with every ``set`` correction's value (a copy; ``keep`` changes nothing)."""
    values = {c.parameter: float(c.value) for c in corrections
              if c.decision == ModelDecision.SET and c.value is not None}
    return with_parameters(network, values) if values else network


def kept_parameters(corrections: Iterable[ModelCorrection]) -> frozenset[NetworkParameter]:
    """The parameters the owner checked and keeps as they are."""
    return frozenset(c.parameter for c in corrections if c.decision == ModelDecision.KEEP)
