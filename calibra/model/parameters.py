"""Network parameters a model can get wrong: their vocabulary, values and admittance derivatives.

A parameter is one number of the network model: a branch's series resistance ``r`` or
reactance ``x``, its total charging ``b`` (pu), a transformer's off-nominal ``tap`` ratio or
phase ``shift`` (degrees, as the branch table holds it), or a bus's shunt susceptance
``shunt`` (Mvar at 1.0 pu). The branch's four π-model admittances (conventions of
:mod:`calibra.model.network`) depend on it analytically::

    ys = 1/(r + jx), t = a·e^{jφ}:  Ytt = ys + jb/2,  Yff = Ytt/a²,  Yft = −ys/conj(t),  Ytf = −ys/t
    ∂ys/∂r = −ys²,  ∂ys/∂x = −j ys²
    ∂/∂a:  Yff → −2 Yff/a,  Yft → −Yft/a,  Ytf → −Ytf/a
    ∂/∂φ:  Yff, Ytt unchanged,  Yft → j Yft,  Ytf → −j Ytf

(derived here from the π model; the tests check them against central finite differences).
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from calibra.model.network import Network


class ParameterKind(StrEnum):
    """Kinds of network parameter, in the words the files use (members equal those strings)."""

    R = "r"
    X = "x"
    B = "b"
    TAP = "tap"
    SHIFT = "shift"
    SHUNT = "shunt"


#: Kinds that belong to a branch (the shunt belongs to a bus).
BRANCH_KINDS = (ParameterKind.R, ParameterKind.X, ParameterKind.B, ParameterKind.TAP,
                ParameterKind.SHIFT)
#: Kinds only a transformer has.
TRANSFORMER_KINDS = (ParameterKind.TAP, ParameterKind.SHIFT)
#: The table column of each kind.
COLUMN = {ParameterKind.R: "r", ParameterKind.X: "x", ParameterKind.B: "b",
          ParameterKind.TAP: "tap", ParameterKind.SHIFT: "shift_deg",
          ParameterKind.SHUNT: "b_shunt_mvar"}


@dataclass(frozen=True)
class NetworkParameter:
    """One parameter of the network model: a branch's (or, for ``shunt``, a bus's) id and kind."""

    element: str
    kind: ParameterKind

    def __post_init__(self) -> None:
        object.__setattr__(self, "element", str(self.element))
        object.__setattr__(self, "kind", ParameterKind(self.kind))

    @property
    def on_bus(self) -> bool:
        return self.kind == ParameterKind.SHUNT

    def label(self) -> str:
        return f"{self.kind} of {'bus' if self.on_bus else 'branch'} {self.element}"


def check_parameter(network: Network, parameter: NetworkParameter) -> None:
    """Raise ValueError naming the element when the parameter is not one of the network's."""
    table = network.buses if parameter.on_bus else network.branches
    if parameter.element not in table.index:
        what = "bus" if parameter.on_bus else "branch"
        raise ValueError(f"{parameter.kind}: {what} {parameter.element!r} is not in the network")


def model_value(network: Network, parameter: NetworkParameter) -> float:
    """The value the network model holds (tap 0 or missing read as 1, others missing as 0)."""
    check_parameter(network, parameter)
    table = network.buses if parameter.on_bus else network.branches
    value = table.at[parameter.element, COLUMN[parameter.kind]]
    if parameter.kind == ParameterKind.TAP:
        return 1.0 if not np.isfinite(value) or value == 0 else float(value)
    return 0.0 if not np.isfinite(value) else float(value)


def with_parameters(network: Network, values: dict[NetworkParameter, float]) -> Network:
    """A copy of the network with the given parameters set (the original is not changed)."""
    buses, branches = network.buses, network.branches
    if any(p.on_bus for p in values):
        buses = buses.copy()
    if any(not p.on_bus for p in values):
        branches = branches.copy()
    for p, v in values.items():
        check_parameter(network, p)
        (buses if p.on_bus else branches).at[p.element, COLUMN[p.kind]] = float(v)
    return Network(network.name, network.base_mva, buses, branches, network.reference_bus,
                   network.frequency_hz)


def admittance_derivative(network: Network, parameter: NetworkParameter) -> np.ndarray:
    """∂(Yff, Yft, Ytf, Ytt)/∂p of the parameter's branch at the model's values (per unit per
    the parameter's unit: pu, pu, pu, 1, degree); for a bus shunt ∂Y_bus,bus/∂p in the first
    entry (per Mvar). The branch taken in service."""
    if parameter.on_bus:
        check_parameter(network, parameter)
        return np.array([1j / network.base_mva, 0, 0, 0], complex)
    br = network.branches.loc[parameter.element]
    ys = 1.0 / (float(br["r"]) + 1j * float(br["x"]))
    bc = 0.0 if not np.isfinite(br["b"]) else float(br["b"])
    a = model_value(network, NetworkParameter(parameter.element, ParameterKind.TAP))
    shift = np.deg2rad(model_value(network, NetworkParameter(parameter.element,
                                                              ParameterKind.SHIFT)))
    t = a * np.exp(1j * shift)
    ytt = ys + 0.5j * bc
    yff, yft, ytf = ytt / a ** 2, -ys / np.conj(t), -ys / t
    kind = parameter.kind
    if kind in (ParameterKind.R, ParameterKind.X):
        dys = -ys ** 2 * (1.0 if kind == ParameterKind.R else 1j)
        return np.array([dys / a ** 2, -dys / np.conj(t), -dys / t, dys])
    if kind == ParameterKind.B:
        return np.array([0.5j / a ** 2, 0, 0, 0.5j])
    if kind == ParameterKind.TAP:
        return np.array([-2 * yff / a, -yft / a, -ytf / a, 0])
    deg = np.pi / 180.0
    return np.array([0, 1j * yft * deg, -1j * ytf * deg, 0])
