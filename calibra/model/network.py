"""The AC network model: buses and branches as id-indexed tables, and their admittances.

Conventions (per unit on the system base):
- Branch π model with the off-nominal tap on the from side: complex ratio
  ``t = tap * exp(j*shift)``, series admittance ``ys = 1/(r + jx)``, total charging ``b``.
  ``Yff = (ys + jb/2)/|t|²``, ``Yft = -ys/conj(t)``, ``Ytf = -ys/t``, ``Ytt = ys + jb/2``.
- Bus shunt ``g_shunt_mw + j b_shunt_mvar`` at 1.0 pu voltage, divided by the base:
  positive g absorbs MW, positive b injects Mvar (capacitive).
- Flows are positive leaving the named bus into the branch; injections positive into the network.

A branch that is out of service keeps its row and position; its admittances are zero, so
measurement indices stay stable when the topology changes from snapshot to snapshot.

*Branch state* of a snapshot: a row of one entry per branch, either bool (in service or not) or
float where 0 is out of service and any other value is the factor on the ratio of the branch's
tapped side (1: the model's ratio). A telemetered tap position sets the factor snapshot by
snapshot (:mod:`calibra.model.tap_changers`); sites without one keep bool rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp

BUS_COLUMNS = ["substation", "kv", "zero_injection", "g_shunt_mw", "b_shunt_mvar", "name"]
BRANCH_COLUMNS = [
    "from_bus", "to_bus", "r", "x", "b", "tap", "shift_deg", "kind", "in_service", "name",
]
#: Optional tap-changer columns of a transformer branch: the step in % of the nominal ratio,
#: the neutral step and the tapped side ('from' or 'to'); NaN / "" where a branch has none.
TAP_CHANGER_COLUMNS = ["tap_step_pct", "tap_neutral", "tap_side"]


def branch_status(state: np.ndarray) -> np.ndarray:
    """In-service flags of a branch state (bool rows as they are, float rows: nonzero)."""
    state = np.asarray(state)
    return state if state.dtype == bool else state != 0


def state_key(state: np.ndarray) -> bytes:
    """A cache key of a branch state: its flags when bool, else its values."""
    state = np.asarray(state)
    return state.tobytes() if state.dtype == bool else b"f" + state.astype(float).tobytes()


@dataclass(frozen=True)
class BranchAdmittances:
    """Per-branch π-model admittances and terminal bus positions for one topology."""

    f: np.ndarray  # from-bus positions (int)
    t: np.ndarray  # to-bus positions (int)
    yff: np.ndarray
    yft: np.ndarray
    ytf: np.ndarray
    ytt: np.ndarray
    in_service: np.ndarray  # bool


@dataclass
class Network:
    """Buses and branches of an AC network, indexed by their ids (strings).

    ``buses`` columns: see :data:`BUS_COLUMNS`; ``branches`` columns: see :data:`BRANCH_COLUMNS`.
    ``reference_bus`` is the bus whose voltage angle is held at zero.
    """

    name: str
    base_mva: float
    buses: pd.DataFrame
    branches: pd.DataFrame
    reference_bus: str
    frequency_hz: float = 50.0
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self) -> None:
        self.buses.index = self.buses.index.astype(str)
        self.buses.index.name = "bus"
        self.branches.index = self.branches.index.astype(str)
        self.branches.index.name = "branch"
        self.branches["from_bus"] = self.branches["from_bus"].astype(str)
        self.branches["to_bus"] = self.branches["to_bus"].astype(str)
        if self.reference_bus not in self.buses.index:
            raise ValueError(f"reference bus {self.reference_bus!r} is not a bus of the network")

    # ----------------------------------------------------------------- sizes and lookups
    @property
    def n_bus(self) -> int:
        return len(self.buses)

    @property
    def n_branch(self) -> int:
        return len(self.branches)

    @property
    def reference_position(self) -> int:
        return int(self.buses.index.get_loc(self.reference_bus))

    def bus_positions(self, ids) -> np.ndarray:
        """Positions of bus ids in the bus table; raises KeyError for unknown ids."""
        pos = self.buses.index.get_indexer(pd.Index(ids).astype(str))
        if (pos < 0).any():
            missing = list(pd.Index(ids)[pos < 0])
            raise KeyError(f"unknown bus id(s): {missing}")
        return pos

    def branch_positions(self, ids) -> np.ndarray:
        """Positions of branch ids in the branch table; raises KeyError for unknown ids."""
        pos = self.branches.index.get_indexer(pd.Index(ids).astype(str))
        if (pos < 0).any():
            missing = list(pd.Index(ids)[pos < 0])
            raise KeyError(f"unknown branch id(s): {missing}")
        return pos

    @property
    def zero_injection_positions(self) -> np.ndarray:
        return np.flatnonzero(self.buses["zero_injection"].to_numpy(bool))

    def default_in_service(self) -> np.ndarray:
        if "in_service" not in self.branches:
            return np.ones(self.n_branch, bool)
        return self.branches["in_service"].fillna(True).to_numpy(bool)

    # ----------------------------------------------------------------- admittances
    def shunt_admittance(self) -> np.ndarray:
        """Bus shunt admittances in per unit (complex)."""
        g = self.buses["g_shunt_mw"].fillna(0.0).to_numpy(float)
        b = self.buses["b_shunt_mvar"].fillna(0.0).to_numpy(float)
        return (g + 1j * b) / self.base_mva

    def branch_admittances(self, in_service: np.ndarray | None = None) -> BranchAdmittances:
        """π-model admittances for a branch state (default: the model's in_service column).

        A float state's factor ``a`` scales the tapped side's ratio: the from-side ratio
        (``t·a``) of a branch tapped on the from side (or with no tapped side given), an ideal
        ``a:1`` transformer at the to bus of one tapped on the to side, so that
        ``Yft = -ys/(conj(t)·a)``, ``Ytf = -ys/(t·a)``, ``Ytt = (ys + jb/2)/a²``.
        """
        state = self.default_in_service() if in_service is None else np.asarray(in_service)
        key = ("adm", state_key(state))
        if key in self._cache:
            return self._cache[key]
        status = branch_status(state)
        br = self.branches
        f = self.bus_positions(br["from_bus"])
        t = self.bus_positions(br["to_bus"])
        ys = 1.0 / (br["r"].to_numpy(float) + 1j * br["x"].to_numpy(float))
        bc = br["b"].fillna(0.0).to_numpy(float)
        tap = br["tap"].fillna(1.0).to_numpy(float)
        tap = np.where(tap == 0.0, 1.0, tap)
        to_factor = np.ones(self.n_branch)
        if state.dtype != bool:
            factor = np.where(status, state.astype(float), 1.0)
            on_to = self.tapped_on_to_side()
            tap = np.where(on_to, tap, tap * factor)
            to_factor = np.where(on_to, factor, 1.0)
        ratio = tap * np.exp(1j * np.deg2rad(br["shift_deg"].fillna(0.0).to_numpy(float)))
        on = status.astype(float)
        ytt = (ys + 0.5j * bc) * on
        yff = ytt / (ratio * np.conj(ratio))
        yft = -ys / np.conj(ratio) / to_factor * on
        ytf = -ys / ratio / to_factor * on
        ytt = ytt / to_factor ** 2
        result = BranchAdmittances(f, t, yff, yft, ytf, ytt, status.copy())
        if len(self._cache) > 256:
            self._cache.clear()
        self._cache[key] = result
        return result

    def admittance_matrices(
        self, in_service: np.ndarray | None = None
    ) -> tuple[sp.csr_matrix, sp.csr_matrix, sp.csr_matrix]:
        """Ybus (n×n), Yf and Yt (branch×bus) so that If = Yf V and It = Yt V."""
        status = self.default_in_service() if in_service is None else np.asarray(in_service)
        key = ("ymat", state_key(status))
        if key in self._cache:
            return self._cache[key]
        a = self.branch_admittances(status)
        nb, nl = self.n_bus, self.n_branch
        rows = np.arange(nl)
        yf = sp.csr_matrix(
            (np.r_[a.yff, a.yft], (np.r_[rows, rows], np.r_[a.f, a.t])), shape=(nl, nb)
        )
        yt = sp.csr_matrix(
            (np.r_[a.ytf, a.ytt], (np.r_[rows, rows], np.r_[a.f, a.t])), shape=(nl, nb)
        )
        cf = sp.csr_matrix((np.ones(nl), (rows, a.f)), shape=(nl, nb))
        ct = sp.csr_matrix((np.ones(nl), (rows, a.t)), shape=(nl, nb))
        ybus = (cf.T @ yf + ct.T @ yt + sp.diags(self.shunt_admittance())).tocsr()
        result = (ybus, yf, yt)
        self._cache[key] = result
        return result

    def tapped_on_to_side(self) -> np.ndarray:
        """Per branch: its tap changer sits on the to side (``tap_side`` 'to')."""
        if "tap_side" not in self.branches:
            return np.zeros(self.n_branch, bool)
        return self.branches["tap_side"].fillna("").astype(str).eq("to").to_numpy()

    # ----------------------------------------------------------------- topology helpers
    def substation_of_bus(self) -> pd.Series:
        return self.buses["substation"]

    def islands(self, in_service: np.ndarray | None = None) -> np.ndarray:
        """Connected-component label per bus for the given topology."""
        from scipy.sparse.csgraph import connected_components

        status = self.default_in_service() if in_service is None else \
            branch_status(in_service)
        a = self.branch_admittances(status)
        on = np.flatnonzero(status)
        adj = sp.coo_matrix(
            (np.ones(len(on)), (a.f[on], a.t[on])), shape=(self.n_bus, self.n_bus)
        )
        _, labels = connected_components(adj, directed=False)
        return labels


def empty_bus_table() -> pd.DataFrame:
    return pd.DataFrame(columns=BUS_COLUMNS).rename_axis("bus")


def network_from_matpower(ppc: dict, name: str = "case", frequency_hz: float = 60.0) -> Network:
    """Build a :class:`Network` from a MATPOWER/pypower case dict (version 2 format).

    Bus ids become the bus numbers as strings; branch ids ``"<from>-<to>-<k>"`` with k counting
    parallel circuits. Bus loads and generation are not part of the network model.
    ``zero_injection`` is set for buses with no load, no in-service generator and no shunt.
    """
    bus = np.asarray(ppc["bus"], float)
    branch = np.asarray(ppc["branch"], float)
    gen = np.asarray(ppc.get("gen", np.zeros((0, 10))), float)
    base = float(ppc["baseMVA"])
    ids = [str(int(b)) for b in bus[:, 0]]
    gen_buses = {str(int(g[0])) for g in gen if g.shape[0] > 7 and g[7] > 0}
    zero = (
        (bus[:, 2] == 0) & (bus[:, 3] == 0) & (bus[:, 4] == 0) & (bus[:, 5] == 0)
        & np.array([i not in gen_buses for i in ids])
    )
    buses = pd.DataFrame(
        {
            "substation": ids,
            "kv": np.where(bus[:, 9] > 0, bus[:, 9], 1.0),
            "zero_injection": zero,
            "g_shunt_mw": bus[:, 4],
            "b_shunt_mvar": bus[:, 5],
            "name": ids,
        },
        index=pd.Index(ids, name="bus"),
    )
    seen: dict[tuple[str, str], int] = {}
    branch_ids = []
    for row in branch:
        key = (str(int(row[0])), str(int(row[1])))
        seen[key] = seen.get(key, 0) + 1
        branch_ids.append(f"{key[0]}-{key[1]}-{seen[key]}")
    tap = branch[:, 8]
    branches = pd.DataFrame(
        {
            "from_bus": [str(int(v)) for v in branch[:, 0]],
            "to_bus": [str(int(v)) for v in branch[:, 1]],
            "r": branch[:, 2],
            "x": branch[:, 3],
            "b": branch[:, 4],
            "tap": np.where(tap == 0, 1.0, tap),
            "shift_deg": branch[:, 9],
            "kind": np.where((tap != 0) | (branch[:, 9] != 0), "transformer", "line"),
            "in_service": branch[:, 10] > 0,
            "name": branch_ids,
        },
        index=pd.Index(branch_ids, name="branch"),
    )
    ref = ids[int(np.flatnonzero(bus[:, 1] == 3)[0])] if (bus[:, 1] == 3).any() else ids[0]
    return Network(name, base, buses, branches, ref, frequency_hz)
