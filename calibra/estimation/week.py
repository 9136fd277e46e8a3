"""The week engine: estimate blocks of snapshots at once, with residual statistics.

For a block of snapshots with one topology, every snapshot is solved by the same fixed-matrix
iteration on the equality-constrained WLS optimality conditions::

    [ G₀  C₀ᵀ ] [ Δx ]   [ H(x)ᵀ W (z − h(x)) − C(x)ᵀ λ ]
    [ C₀  0   ] [ Δλ ] = [ −c(x)                         ]

G₀ and C₀ are taken once at a reference snapshot's converged state; h, H, c and C are
evaluated exactly for every snapshot (vectorised over the block, states as matrix columns).
The fixed point satisfies the exact optimality conditions, so the converged states equal a fully
converged Gauss-Newton solution of each snapshot (checked in the tests to 1e-6); G₀ only sets the
speed of convergence. Snapshots whose measurement pattern leaves part of the block's islands
unobservable are iterated on the reduced matrix of their pattern (lost buses held); a snapshot
that the fixed matrix does not bring to convergence is finished by damped Gauss-Newton on its
own matrix; what fails numerically splits the block, down to single snapshots, each with its
outcome and reason. The block solver is :mod:`calibra.estimation.block`, its pieces
:mod:`calibra.estimation.block_parts`.

Residual covariance: Ω = R − H P Hᵀ is computed once per block at the reference state for the
block's full measurement set; a snapshot that misses the measurements M gets the exact update
Ω'ᵢᵢ = Ωᵢᵢ − Ωᵢₘ Ωₘₘ⁻¹ Ωₘᵢ (a block Sherman-Morrison-Woodbury step), so only the change of
operating point within the block is approximated (see DEVELOPERS.md for the measured accuracy).
"""

from __future__ import annotations

import mmap
from contextlib import closing
from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd

from calibra.estimation.block import BlockSolver
from calibra.estimation.block_parts import (
    BLOCK_TOLERANCE,
    describe_error,
)
from calibra.estimation.residuals import chi_square_threshold
from calibra.estimation.runtime import can_fork, default_workers, fork_imap, tune_allocator
from calibra.estimation.wls import Estimator


@dataclass
class PeriodResult:
    """Block results of a whole period, stacked in time order (arrays as in BlockResult)."""

    index: pd.Index
    vm: np.ndarray
    va: np.ndarray
    residual: np.ndarray
    omega: np.ndarray
    outcomes: pd.DataFrame


@dataclass(frozen=True)
class SolverSettings:
    """How a period's blocks are solved: the longest block, the largest state update accepted
    as converged (pu / rad) and the chi-square test level."""

    max_block: int = 360
    tolerance: float = BLOCK_TOLERANCE
    confidence: float = 0.99


#: Longest time a block of consecutive snapshots spans: its operating points stay near its
#: reference's (6 h of one-minute data is 360 snapshots; 15-minute data gives blocks of 24
#: rather than a whole day, whose load cycle a fixed iteration matrix does not follow).
MAX_SPAN = pd.Timedelta(hours=6)


def topology_runs(in_service: np.ndarray, max_block: int,
                  index: pd.Index | None = None,
                  max_span: pd.Timedelta | None = MAX_SPAN) -> list[tuple[int, int]]:
    """Split snapshot positions into runs of one topology, each at most ``max_block`` long.

    With a DatetimeIndex, runs also break at every UTC day, so that a period cut into days
    (a cluster works day by day) is solved in exactly the same blocks as the whole period, and
    a run spans at most ``max_span``.
    """
    k = in_service.shape[0]
    if k == 0:
        return []
    change = np.r_[True, np.any(in_service[1:] != in_service[:-1], axis=1)]
    timed = isinstance(index, pd.DatetimeIndex) and len(index) == k
    if timed:
        day = index.normalize().asi8
        change |= np.r_[True, day[1:] != day[:-1]]
    starts = np.flatnonzero(change)
    ends = np.r_[starts[1:], k]
    runs = []
    for a, b in zip(starts, ends, strict=True):
        # Equal blocks of at most max_block (not max_block and a short remainder).
        size = -(-(b - a) // -(-(b - a) // max_block))
        s = a
        while s < b:
            e = min(s + size, b)
            if timed and max_span is not None:
                limit = index[s] + max_span
                e = min(e, max(s + 1, int(np.searchsorted(index.asi8[s:e], limit.value,
                                                            side="left")) + s))
            runs.append((int(s), int(e)))
            s = e
    return runs


@dataclass(frozen=True)
class _PeriodWork:
    """What every block of a period needs (inherited by forked block workers, not sent), and
    the period's output arrays (shared with them)."""

    estimator: Estimator
    z: np.ndarray
    in_service: np.ndarray
    settings: SolverSettings
    out: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
    index: pd.Index | None


def _solve_run(w: _PeriodWork, run: tuple[int, int]) -> tuple[int, int, pd.DataFrame]:
    """Solve one block and write its arrays into the period's output (shared with the parent
    process when in a worker), returning only the outcomes table. Whatever goes wrong inside
    the block is an outcome of its snapshots, named with the block, never the period's end."""
    a, b = run
    vm, va, res, om = w.out
    try:
        solver = BlockSolver(w.estimator, w.in_service[a], tolerance=w.settings.tolerance)
        block = solver.solve(w.z[a:b], w.settings.confidence)
    except Exception as exc:  # noqa: BLE001 - reported per snapshot, with the block
        vm[a:b], va[a:b], res[a:b], om[a:b] = np.nan, np.nan, np.nan, np.nan
        return a, b, failed_outcomes(b - a, block_label(w.index, a, b), exc)
    vm[a:b], va[a:b], res[a:b], om[a:b] = block.vm, block.va, block.residual, block.omega
    return a, b, block.outcomes


def block_label(index, a: int, b: int) -> str:
    """'the block of 96 snapshots from 2027-03-02 00:00 UTC' (positions when no times)."""
    if isinstance(index, pd.DatetimeIndex) and len(index) > a:
        return f"the block of {b - a} snapshots from {index[a]:%Y-%m-%d %H:%M} UTC"
    return f"the block of snapshots {a}-{b - 1}"


def failed_outcomes(k: int, where: str, exc: BaseException) -> pd.DataFrame:
    """Outcome rows of snapshots whose estimate failed unexpectedly."""
    rows = [{"converged": False, "iterations": 0, "method": "failed",
             "reason": f"estimation failed in {where}: {describe_error(exc)}", "observable": False,
             "islands": 0, "buses_not_estimated": 0, "dof": 0, "n_used": 0,
             "objective": 0.0}] * k
    return pd.DataFrame(rows)


def _output_array(shape: tuple[int, int], shared: bool) -> np.ndarray:
    """A float32 array for period results; in memory shared with forked workers (an anonymous
    shared mapping) when ``shared``, so blocks are written in place instead of sent back."""
    if not shared:
        return np.empty(shape, np.float32)
    size = int(np.prod(shape)) * 4
    buf = mmap.mmap(-1, max(size, 1), flags=mmap.MAP_SHARED)
    return np.frombuffer(buf, np.float32, count=int(np.prod(shape))).reshape(shape)


def estimate_period(
    estimator: Estimator,
    z: np.ndarray,
    in_service: np.ndarray,
    index: pd.Index | None = None,
    *,
    settings: SolverSettings = SolverSettings(),
    progress=None,
    workers: int | None = None,
    by_day: bool = True,
) -> PeriodResult:
    """Estimate every snapshot of a period (k × m per unit) block by block.

    Blocks hold one topology and at most ``settings.max_block`` consecutive snapshots (6 h of
    one-minute data by default), so the reference state of a block stays close to all its
    snapshots. Blocks run in ``workers`` processes (default: :func:`default_workers`); each
    block is solved the same way wherever it runs, so the results do not depend on the number
    of workers. ``settings.tolerance`` is the largest state update accepted as converged.
    Blocks break at every UTC day unless ``by_day`` is False (a thin sample of the period).
    """
    tune_allocator()
    k, m = z.shape
    n = estimator.model.network.n_bus
    runs = topology_runs(in_service, settings.max_block, index if by_day else None)
    workers = default_workers() if workers is None else workers
    parallel = len(runs) > 1 and can_fork(workers)
    # The runs cover every snapshot once, so every row of the outputs is written.
    vm, va = (_output_array((k, n), parallel) for _ in range(2))
    res, om = (_output_array((k, m), parallel) for _ in range(2))
    frames: dict[int, pd.DataFrame] = {}
    work = _PeriodWork(estimator, z, in_service, settings, (vm, va, res, om), index)
    done = 0
    # closing: a cancel raised by the progress ends the workers at once.
    with closing(fork_imap(partial(_solve_run, work), runs, workers if parallel else 1,
                           ordered=False)) as results:
        for a, b, block_outcomes in results:
            frames[a] = block_outcomes
            done += b - a
            if progress is not None:
                progress.update(done, k, "estimating snapshots")
    outcomes = pd.concat([frames[a] for a in sorted(frames)], ignore_index=True) \
        if frames else pd.DataFrame()
    if len(outcomes):
        dof = outcomes["dof"].clip(lower=1)
        outcomes["chi2_threshold"] = chi_square_threshold(settings.confidence,
                                                          dof.to_numpy(float))
        outcomes["chi2_passed"] = outcomes["objective"] <= outcomes["chi2_threshold"]
        outcomes.loc[~outcomes["converged"].astype(bool), "chi2_passed"] = False
    idx = index if index is not None else pd.RangeIndex(k, name="snapshot")
    outcomes.index = idx
    return PeriodResult(idx, vm, va, res, om, outcomes)
