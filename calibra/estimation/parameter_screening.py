"""Which network parameters, and which constant meter errors, the consistent residuals of a
sample point to: normalized Lagrange multipliers over many snapshots.

Holding a parameter at its model value is a constraint p = p₀ of the estimate; its Lagrange
multiplier, normalized by its standard deviation, tests that constraint (Zhu & Abur,
"Identification of network parameter errors", IEEE Trans. Power Systems 21(2), 2006, from
memory: the parameter or measurement with the largest normalized multiplier or residual is the
likeliest error, and an error shows only above a threshold such as 3). Over a sample of K
snapshots the multipliers of one shared parameter add up and so do their variances: with
:func:`~calibra.estimation.parameter_terms.schur_terms` at the ordinary estimates,
λᴺ = q/√Σ. A constant meter error (scale or offset over the sample) is tested the same way, so
parameters and meters are ranked on one scale; their correlation Σ_pm/√(Σ_pp Σ_mm) says whether
the metering can tell them apart at all. All candidates share one factorization per snapshot.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.measurements import BRANCH_END_CODES, V_MAG
from calibra.estimation.parameter_terms import (
    MeterError,
    MeterTerm,
    SampleSnapshot,
    Term,
    TermModel,
    schur_terms,
)
from calibra.model.parameters import BRANCH_KINDS, NetworkParameter, ParameterKind
from calibra.progress import Progress

#: Kinds tested on a line, and on a transformer (a shift only where the model has one).
LINE_KINDS = (ParameterKind.X, ParameterKind.R, ParameterKind.B)
TRANSFORMER_KINDS = (ParameterKind.TAP, ParameterKind.X)
#: Candidates screened in one factorization pass (bounds the work on large networks).
MAX_CANDIDATES = 200


@dataclass(frozen=True)
class ScreenedTerm:
    """One candidate's test over the sample."""

    term: Term
    multiplier: float  # normalized Lagrange multiplier, signed
    step: float  # q/Σ: one Gauss-Newton step's change (the parameter's unit; meters: β)
    information: float  # Σ: 1/variance of the term over the sample

    @property
    def drop(self) -> float:
        """The objective drop of that one step (λᴺ²)."""
        return self.multiplier ** 2


def branch_kinds(network, branch: str) -> tuple[ParameterKind, ...]:
    """The parameter kinds screened for a branch."""
    row = network.branches.loc[branch]
    if str(row["kind"]) != "transformer":
        return LINE_KINDS
    shift = row["shift_deg"]
    return TRANSFORMER_KINDS + ((ParameterKind.SHIFT,) if np.isfinite(shift) and shift else ())


def branches_near_rows(model: MeasurementModel, rows) -> list[str]:
    """Branches a list of measurement rows touches: first every branch-end point's own branch
    and the branches at every injection or voltage point's bus (in the order of the rows), then
    every other branch at the buses the rows depend on — so a bound on the candidates keeps the
    branches the rows measure directly."""
    funcs = model.functions
    net = model.network
    adm = net.branch_admittances(np.ones(net.n_branch, bool))
    direct: dict[str, None] = {}
    around: dict[str, None] = {}
    for i in rows:
        if funcs.is_branch[i]:
            direct.setdefault(str(net.branches.index[funcs.element[i]]), None)
        else:
            b = funcs.element[i]
            for e in np.flatnonzero((adm.f == b) | (adm.t == b)):
                direct.setdefault(str(net.branches.index[e]), None)
        buses = funcs.buses_of(int(i))
        for e in np.flatnonzero(np.isin(adm.f, buses) | np.isin(adm.t, buses)):
            around.setdefault(str(net.branches.index[e]), None)
    return list(direct) + [b for b in around if b not in direct]


def candidate_parameters(model: MeasurementModel, rows,
                         limit: int = MAX_CANDIDATES) -> list[NetworkParameter]:
    """Parameters of the branches near ``rows`` (most significant rows first), at most
    ``limit``."""
    out: list[NetworkParameter] = []
    for branch in branches_near_rows(model, rows):
        for kind in branch_kinds(model.network, branch):
            out.append(NetworkParameter(branch, kind))
    return out[:limit]


def meter_terms_around(model: MeasurementModel, parameter: NetworkParameter,
                       kinds=(MeterError.SCALE, MeterError.OFFSET),
                       ring: bool = False) -> list[MeterTerm]:
    """Constant errors of the meters whose values the parameter changes directly (the branch's
    flows and currents, the injections at its buses) and of the voltage meters there; with
    ``ring``, of every meter whose value depends on the voltage at the parameter's buses."""
    funcs = model.functions
    net = model.network
    tm = funcs.terminals
    if parameter.kind in BRANCH_KINDS:
        e = int(net.branch_positions([parameter.element])[0])
        adm = net.branch_admittances(np.ones(net.n_branch, bool))
        buses = np.array([adm.f[e], adm.t[e]])
        touched = ((tm.kind <= 1) & (tm.element == e)) | ((tm.kind == 2) & np.isin(tm.element,
                                                                                   buses))
    else:
        buses = net.bus_positions([parameter.element])
        touched = (tm.kind == 2) & np.isin(tm.element, buses)
    term = funcs.terminal_of
    if ring:
        # Every terminal whose current depends on the voltage at those buses: the flows of all
        # their branches and the injections of their neighbours, whose errors move the same
        # states.
        touched = np.zeros(len(tm.kind), bool)
        touched[tm.entry_row[np.isin(tm.entry_col, buses)]] = True
    rows = np.flatnonzero(((term >= 0) & touched[np.maximum(term, 0)])
                          | ((funcs.code == V_MAG) & np.isin(funcs.element, buses)))
    out = [MeterTerm((int(i),), k) for i in rows for k in kinds]
    # One CT feeds the P, Q and |I| rows of a branch end: its ratio scales them together.
    if MeterError.SCALE in kinds:
        ends = rows[np.isin(funcs.code[rows], BRANCH_END_CODES)]
        for t in np.unique(term[ends]):
            shared = tuple(int(i) for i in ends[term[ends] == t])
            if len(shared) > 1:
                out.append(MeterTerm(shared, MeterError.SCALE))
    return out


def disagreeing_places(model: MeasurementModel, parameter: NetworkParameter,
                       rows) -> int:
    """How many distinct places (a branch end, a bus's injection, a bus's voltage) among the
    meters whose values depend on the voltages at the parameter's buses hold one of ``rows``:
    a wrong parameter makes the meters of two or more places disagree (its own and its
    neighbours'), one meter's (or one CT's) error only its own."""
    touched = {t.rows[0] for t in meter_terms_around(model, parameter, (MeterError.OFFSET,),
                                                     ring=True)}
    funcs = model.functions
    places = set()
    for r in set(int(i) for i in rows) & touched:
        term = int(funcs.terminal_of[r])
        places.add(("terminal", term) if term >= 0 else (int(funcs.code[r]),
                                                         int(funcs.element[r])))
    return len(places)


def screen_terms(model: MeasurementModel, sample: list[SampleSnapshot], terms: list[Term],
                 progress: Progress | None = None) -> list[ScreenedTerm]:
    """Normalized Lagrange multipliers of ``terms`` held at their model values (meter errors
    at 0) over the sample's states, strongest first; terms the sample does not see at all
    (Σ = 0: e.g. the branch of an unobserved part) are left out."""
    tm = TermModel(model, terms)
    st = schur_terms(tm, sample, tm.model_values, diagonal=True, progress=progress)
    info = st.sigma
    seen = info > 1e-12 * max(float(np.max(np.abs(info), initial=0.0)), 1e-300)
    out = [ScreenedTerm(term, float(st.q[i] / np.sqrt(info[i])), float(st.q[i] / info[i]),
                        float(info[i]))
           for i, term in enumerate(terms) if seen[i]]
    return sorted(out, key=lambda s: -abs(s.multiplier))


def subset_drop(q: np.ndarray, sigma: np.ndarray, subset) -> float:
    """qₛᵀΣₛₛ⁻¹qₛ: the objective drop of one joint step on the terms in ``subset``."""
    s = np.asarray(subset, int)
    if s.size == 0:
        return 0.0
    try:
        return float(q[s] @ np.linalg.solve(sigma[np.ix_(s, s)], q[s]))
    except np.linalg.LinAlgError:
        return float(q[s] @ np.linalg.lstsq(sigma[np.ix_(s, s)], q[s], rcond=1e-12)[0])


def conditional_information(sigma: np.ndarray, first: int, others) -> float:
    """Σ₁₁ − Σ₁ₒΣₒₒ⁻¹Σₒ₁: what the sample says about term ``first`` that ``others`` cannot
    also explain (0: indistinguishable)."""
    o = np.asarray(others, int)
    if o.size == 0:
        return float(sigma[first, first])
    cross = sigma[first, o]
    return float(sigma[first, first] - cross @ np.linalg.lstsq(sigma[np.ix_(o, o)], cross,
                                                               rcond=1e-12)[0])
