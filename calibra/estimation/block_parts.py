"""Pieces of the week engine's block solver: its result and missing-measurement groups, the
Woodbury downdate of Ω, a cache of K₀⁻¹ columns, Anderson mixing, outcome rows and limits."""


from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.linalg as la
import scipy.sparse as sp

from calibra.estimation.measurements import StateLayout
from calibra.estimation.observability import Observability

#: Largest number of missing measurements handled by the Woodbury update of Ω.
MAX_WOODBURY = 400
#: Scaled Ωₘₘ pivots² above this are clearly not singular (no observability test needed).
CLEAR_PIVOT = 1e-3
#: Missing sets up to this size are updated together across the block (padded arrays).
SMALL_MISSING = 6
#: Largest state update (pu, rad) accepted as converged by default: the period's states are
#: kept as float32, whose resolution near 1 pu is 1.2e-7, so iterating further changes nothing
#: that is stored (against a 1e-11 run on IEEE 118 and the 2,000-bus network: states within
#: one float32 step, Ω within 1e-7 relative, 14 % fewer iterations).
BLOCK_TOLERANCE = 1e-7
#: Bytes of one complex (m × columns) array above which a block iterates its snapshots in
#: column chunks (large networks: keeps temporaries in reused memory and caches).
COLUMN_CHUNK_BYTES = 16 * 2**20


@dataclass
class BlockResult:
    """Estimates and residual statistics of k snapshots (arrays float32, NaN = not available).

    ``omega`` is the diagonal of the residual covariance Ω (pu²); ``outcomes`` one row per
    snapshot: converged, iterations, method ("block" or "single"), reason, objective, dof,
    chi2_threshold, observable, n_used.
    """

    vm: np.ndarray
    va: np.ndarray
    residual: np.ndarray
    omega: np.ndarray
    outcomes: pd.DataFrame


@dataclass(frozen=True)
class ReferenceSetup:
    """What a block solve sets up once at its reference state: the base rows, K₀ (its solver,
    H₀, C₀, G₀'s diagonal) and, with statistics, K₀⁻¹'s state columns and Ωᵢᵢ of the base set
    (P, Mᵀ, H₀ in the stiff transform's variables; None without statistics)."""

    ref: object  # the reference SnapshotEstimate
    layout: StateLayout
    idx: np.ndarray  # base rows (measurements any snapshot of the block has)
    cidx: np.ndarray  # constraints used
    nx: int
    var: np.ndarray  # σ² of the base rows
    H0: sp.csr_matrix
    C0: sp.csr_matrix
    H0_dense: np.ndarray | None
    g0_diag: np.ndarray
    stiff: sp.spmatrix | None  # the stiff transform T (x = T x'), None when not needed
    solve_k0: Callable[[np.ndarray], np.ndarray]
    P: np.ndarray | None = None
    Mt: np.ndarray | None = None
    Hn: sp.csr_matrix | None = None
    omega_diag: np.ndarray | None = None


@dataclass
class MissingGroup:
    """Snapshots of a block that miss the same base measurements M, with Ωₘₘ factorized."""

    members: np.ndarray  # snapshot positions in the block
    missing: np.ndarray  # positions in the base measurement list
    factor: np.ndarray | None  # Ωₘₘ⁻¹, None when M is empty or leaves M unobservable
    omega_diag: np.ndarray  # Ωᵢᵢ of the snapshot's pattern, over the base list
    h_missing: np.ndarray | None = None  # Uᵀ: [Hₘ, 0] (|M| × (nx + nc)), dense
    q_missing: np.ndarray | None = None  # K₀⁻¹U: K₀⁻¹ [Hₘᵀ; 0] ((nx + nc) × |M|)
    #: When M leaves part of the block's islands unobservable: the snapshots' own
    #: observability, the further base rows they cannot use, the zero-injection constraints
    #: they drop (bool over the block's constraints) and the buses they do not estimate.
    observability: Observability | None = None
    unusable: np.ndarray | None = None
    constraints_off: np.ndarray | None = None
    lost: np.ndarray | None = None
    pins: np.ndarray | None = None  #: state columns held (lost buses, new islands' angles)


def downdated(omega_diag: np.ndarray, rows: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """Ωᵢᵢ − Σ Ωᵢₘ (Ωₘₘ⁻¹)ₘₙ Ωₙᵢ over the base list, given the rows Ωₘ,· (r × base) and
    Ωₘₘ⁻¹. Correlations fall off with electrical distance: only the columns where some row
    could change Ωᵢᵢ by more than 1e-7 of itself are summed (on a large network a few per
    cent of them)."""
    reach = (rows ** 2 * np.abs(np.diag(factor))[:, None]).max(axis=0)
    cols = np.flatnonzero(reach > 1e-7 * np.maximum(omega_diag, 1e-300))
    out = omega_diag.copy()
    if cols.size:
        a = rows[:, cols]
        out[cols] -= ((factor @ a) * a).sum(axis=0)
    return np.maximum(out, 0.0)


class ColumnCache:
    """K₀⁻¹[Hᵢᵀ; 0] for base rows i, computed in one batch and kept for the block (up to a
    memory limit; beyond it, computed on every request)."""

    LIMIT = 16_000_000  #: entries kept at most (128 MB)

    def __init__(self, compute, expected: np.ndarray):
        self._compute = compute
        self.where: dict[int, int] = {}
        self.store: np.ndarray | None = None
        self.expected = expected

    def get(self, rows: np.ndarray) -> np.ndarray:
        rows = np.asarray(rows, np.int64)
        if self.store is None:
            first = self._compute(rows[:1]) if rows.size else np.zeros((0, 0))
            dim = first.shape[0]
            if dim * max(self.expected.size, 1) > self.LIMIT or rows.size == 0:
                return self._compute(rows) if rows.size else np.zeros((dim, 0))
            # Everything the block will ask for, in one batch of solves.
            self.store = self._compute(self.expected)
            self.where = {int(r): j for j, r in enumerate(self.expected)}
        cols = [self.where.get(int(r), -1) for r in rows]
        if min(cols, default=0) < 0:
            return self._compute(rows)
        return self.store[:, cols]


def woodbury_rank(g: MissingGroup) -> int:
    """Rank of a group's update of K₀."""
    return 0 if g.h_missing is None else g.h_missing.shape[0]


@dataclass
class SmallWoodbury:
    """Padded Woodbury factors of the groups with at most SMALL_MISSING missing measurements,
    indexed by ``position`` (per snapshot of the block; −1: not such a group)."""

    position: np.ndarray
    h: np.ndarray  # (groups, width, nx + nc)
    f: np.ndarray  # (groups, width, width)
    q: np.ndarray  # (nx + nc, groups, width)



#: Columns of a block's outcome rows (``n_used`` and ``objective`` are added from the arrays).
OUTCOME_COLUMNS = ("converged", "iterations", "method", "reason", "observable", "islands",
                   "buses_not_estimated", "dof")
#: What a failed factorization or a singular dense solve raises (SuperLU: RuntimeError).
NUMERICAL_ERRORS = (RuntimeError, la.LinAlgError, np.linalg.LinAlgError, FloatingPointError,
                    ValueError, ZeroDivisionError)
#: Blocks shorter than twice this are not split further: their snapshots go one at a time.
MIN_SPLIT = 8
REFERENCE_BY_LOADING = True
ANDERSON_DEPTH = 8
#: Fixed-matrix iterations before a snapshot is finished on its own matrix. A fixed-matrix
#: iteration costs a fraction of a millisecond per snapshot, Gauss-Newton on the snapshot's own
#: matrix tens of milliseconds on a 1,354-bus network; snapshots whose pattern loses part of the
#: block's islands contract more slowly (PEGASE 1354, 45 % of branch ends metered: 39 of 96
#: snapshots a day finished alone after 15 iterations, 21 after 30).
CHORD_ITERATIONS = 30
#: A snapshot's own matrix is kept while each step is below this share of the one before …
CONTRACTION = 0.3
#: … for at most this many steps.
REFRESH_ALONE = 6
#: Column ordering for a snapshot's own matrix (one factorization, no search).
ORDERINGS_ALONE = ("MMD_AT_PLUS_A",)
#: Largest state change (pu, rad) of one Gauss-Newton step on a snapshot's own matrix.
MAX_NEWTON_STEP = 0.5
#: Steps without halving the smallest one before Gauss-Newton on a snapshot's own matrix gives
#: up (an estimate that cycles around a gross error).
NEWTON_PATIENCE = 12



def converged_reason(obs: Observability) -> str:
    return "converged" if obs.observable else "converged on the observable part; " + obs.reason


def outcome_of(obs) -> dict:
    """The observability columns of an outcome row."""
    return {"observable": bool(obs.observable), "islands": int(obs.n_islands),
            "buses_not_estimated": int((~obs.estimated_buses).sum())}


def nearest_in_time(Z: np.ndarray) -> np.ndarray:
    """Z with each missing value taken from the nearest earlier snapshot that has it (the
    nearest later one at the start)."""
    return pd.DataFrame(Z).ffill().bfill().to_numpy()


def observability_counts(outcomes: pd.DataFrame) -> dict:
    """Snapshots estimated on part of the network only (``partly_observable``, with the most
    buses any of them left out), and with nothing estimable (``not_observable``)."""
    if len(outcomes) == 0:
        return {"partly_observable": 0, "most_buses_not_estimated": 0, "not_observable": 0}
    conv = outcomes["converged"].astype(bool).to_numpy()
    full = outcomes["observable"].astype(bool).to_numpy()
    islands = outcomes["islands"].to_numpy(float) if "islands" in outcomes else \
        np.where(full, 1.0, 0.0)
    lost = outcomes["buses_not_estimated"].to_numpy(float) if "buses_not_estimated" in \
        outcomes else np.zeros(len(outcomes))
    partly = conv & ~full & (islands > 0)
    return {"partly_observable": int(partly.sum()),
            "most_buses_not_estimated": int(lost[partly].max()) if partly.any() else 0,
            "not_observable": int(((islands == 0) & (outcomes["method"] != "failed")).sum())}


def describe_error(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def stack_blocks(parts: list[BlockResult]) -> BlockResult:
    return BlockResult(*(np.concatenate([getattr(p, f) for p in parts])
                         for f in ("vm", "va", "residual", "omega")),
                       pd.concat([p.outcomes for p in parts], ignore_index=True))


class Anderson:
    """Anderson acceleration of the block's fixed-point iteration, one least-squares mixing
    per snapshot column (memory ``depth``).

    The plain iteration y ← y + f(y) (f: the Gauss-Newton-like step with the fixed matrix)
    converges linearly; mixing the last steps — s = f − (ΔY + ΔF)γ with γ minimising
    ‖f − ΔF γ‖ over the state rows — speeds it up without moving the fixed point, so the
    converged states are the same. A column whose mixed step is far larger than its plain
    step keeps the plain step. All columns start together and share one history length (kept
    in ring buffers); columns that stop iterating are dropped with :meth:`keep`.
    """

    def __init__(self, dim: int, k: int, depth: int = 3):
        self.depth = depth
        self.prev_f = np.zeros((dim, k))
        self.prev_s = np.zeros((dim, k))
        self.df = np.zeros((depth, dim, k))  # ring buffers of ΔF and ΔY + ΔF
        self.dyf = np.zeros((depth, dim, k))
        self.count = 0  # steps taken

    def keep(self, columns: np.ndarray) -> None:
        """Keep only the given columns (a mask or positions) of the history."""
        self.prev_f, self.prev_s = self.prev_f[:, columns], self.prev_s[:, columns]
        self.df, self.dyf = self.df[:, :, columns], self.dyf[:, :, columns]

    def step(self, f: np.ndarray, rows: int) -> np.ndarray:
        """The step to apply for every column (f: their plain steps)."""
        s = f
        if self.count:
            slot = (self.count - 1) % self.depth
            df = f - self.prev_f
            self.df[slot] = df
            np.add(self.prev_s, df, out=self.dyf[slot])
            used = min(self.count, self.depth)
            D = self.df[:used, :rows]  # (used, rows, k)
            G = np.einsum("pdj,qdj->jpq", D, D)
            b = np.einsum("pdj,dj->jp", D, f[:rows])
            reg = 1e-10 * np.maximum(np.trace(G, axis1=1, axis2=2), 1e-300)
            G = G + reg[:, None, None] * np.eye(used)[None]
            try:
                gamma = np.linalg.solve(G, b[..., None])[..., 0]  # (k, used)
            except np.linalg.LinAlgError:
                gamma = np.zeros((f.shape[1], used))
            mix = np.einsum("pdj,jp->dj", self.dyf[:used], gamma)
            s = f - mix
            wild = np.abs(s[:rows]).max(axis=0) > 10 * np.abs(f[:rows]).max(axis=0) + 1e-12
            s[:, wild] = f[:, wild]
        self.prev_f[...] = f
        self.prev_s[...] = s
        self.count += 1
        return s


