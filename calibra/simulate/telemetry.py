"""Simulated telemetry of a week: true states, measured values, faults, gaps, as a Site.

Pipeline per snapshot: loads and generation → Newton power flow → noise-free point values →
transducer noise (σ from the accuracy class, :func:`calibra.model.points.default_sigma`) →
meter faults → historian rounding → missing values (scattered values, short gaps, one RTU
communication outage). An RTU whose clock is wrong (``rtu_lag_minutes``) reports its analog
points' noise-free values from a constant time earlier (late) or later (early), interpolated
linearly between the simulated snapshots, before the noise. Independent random streams drive
the operating point, the noise, the gaps, the faults and the clock error, so a run with
``faults=False`` differs from the faulted run with the same seed only in the faulted columns.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.diagnosis.findings import FindingKind
from calibra.model.network import Network, branch_status
from calibra.model.points import ANALOG_QUANTITIES, default_sigma
from calibra.model.site import Site
from calibra.simulate.case import GridCase
from calibra.simulate.faultmix import DEFAULT_MIX, random_faults
from calibra.simulate.faults import TRUTH_COLUMNS, FaultSpec, apply_faults
from calibra.simulate.model_errors import MODEL_TRUTH_COLUMNS, ModelError, model_with_errors
from calibra.simulate.powerflow import solve_snapshots
from calibra.simulate.profiles import (
    OperatingSeries,
    PlannedOutage,
    choose_planned_outage,
    make_operating_series,
)
from calibra.simulate.quantities import point_values_series
from calibra.simulate.redundancy import RedundancyReport, redundancy_report
from calibra.simulate.tap_motion import OltcOptions, TapMotion, moving_taps


@dataclass(frozen=True)
class TelemetryOptions:
    """Imperfections of the data path besides meter faults.

    ``missing_rate``: share of single analog values lost; ``gaps_per_point``: expected number
    of 2–30 minute gaps per analog point over the period; ``rtu_outage_hours``: length of one
    RTU communication outage (0: none) on ``rtu_outage`` (default: a random RTU); it is placed
    outside planned outages and left out when the period has no room for it.
    ``resolution_bits``: the transducer's converter resolution (0: none), readings quantized to
    steps of 2 × full scale / 2**bits; ``deadband_pct``: report by exception, a value is stored
    only when it moves more than this share (% of full scale) from the last stored one, which is
    held until then. ``state_storage``: the site's point list states the deadband and the
    resolution the readings were stored with (:func:`stated_storage`); otherwise it leaves
    them to be inferred from the data.
    ``rtu_lag_minutes``: the clock error of one RTU (0: none; positive: late, its values at t
    are the true values at t − lag), on ``rtu_lag`` (default: a random RTU with at least
    ``MIN_LAG_POINTS`` analog points); recorded as a truth row of kind ``time_offset`` whose
    tag is the RTU and whose offset is the lag in seconds.
    """

    missing_rate: float = 0.002
    gaps_per_point: float = 0.5
    rtu_outage_hours: float = 3.0
    rtu_outage: str | None = None
    resolution_bits: int = 0
    deadband_pct: float = 0.0
    state_storage: bool = False
    rtu_lag_minutes: float = 0.0
    rtu_lag: str | None = None
    #: Moving on-load tap changers, with or without tap telemetry (None: taps held).
    oltc: OltcOptions | None = None


#: Fewest analog points of an RTU drawn at random for a clock error.
MIN_LAG_POINTS = 4


@dataclass
class SimulationResult:
    """A simulated site and everything that was true while its data were made."""

    site: Site
    true_vm: pd.DataFrame  # snapshots × buses, pu (float32)
    true_va: pd.DataFrame  # snapshots × buses, rad (float32)
    true_values: pd.DataFrame  # snapshots × tags, noise-free values in each point's unit
    truth: pd.DataFrame  # ground truth of the faults, columns TRUTH_COLUMNS
    faulted: bool  # False: the clean week
    operating: OperatingSeries
    redundancy: RedundancyReport
    rtu_outage: tuple[str, pd.Timestamp, pd.Timestamp] | None
    iterations: np.ndarray  # Newton iterations per snapshot
    #: The RTU whose clock is wrong and its lag in seconds (late positive), or None.
    rtu_lag: tuple[str, float] | None = None
    #: Wrong parameters of the site's network model (columns MODEL_TRUTH_COLUMNS; empty: none).
    model_truth: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=MODEL_TRUTH_COLUMNS))
    #: The moving tap changers and their reported steps (None: taps held).
    taps: TapMotion | None = None


def snapshot_index(start, periods: int, timezone: str, freq: str = "1min") -> pd.DatetimeIndex:
    """UTC timestamps of ``periods`` snapshots from ``start`` (naive = local time in timezone)."""
    first = pd.Timestamp(start)
    first = first.tz_localize(timezone) if first.tzinfo is None else first.tz_convert(timezone)
    return pd.date_range(first, periods=periods, freq=freq).tz_convert("UTC").rename("timestamp")


def historian_resolution(points: pd.DataFrame) -> pd.Series:
    """Storage step of each point: the power of ten at or below σ/5 (0.001 … 1; status: 0)."""
    sigma = default_sigma(points).to_numpy(float)
    with np.errstate(divide="ignore"):
        step = 10.0 ** np.floor(np.log10(np.maximum(sigma, 1e-12) / 5.0))
    step = np.clip(step, 1e-3, 1.0)
    step[~points["quantity"].isin(ANALOG_QUANTITIES).to_numpy()] = 0.0
    return pd.Series(step, index=points.index)


def round_to_historian(values: np.ndarray, step: np.ndarray) -> np.ndarray:
    """Round each column to its step (columns with step 0 are left alone)."""
    safe = np.where(step > 0, step, 1.0)
    rounded = np.round(values / safe) * safe
    return np.where(step > 0, rounded, values)


def quantize(values: np.ndarray, points: pd.DataFrame, bits: int) -> np.ndarray:
    """Readings of a ``bits``-bit converter spanning ± full scale (analog points only)."""
    if bits <= 0:
        return values
    fs = pd.to_numeric(points["full_scale"], errors="coerce").to_numpy(float)
    step = 2.0 * fs / 2.0 ** bits
    analog = points["quantity"].isin(ANALOG_QUANTITIES).to_numpy() & (step > 0)
    step = np.where(analog, step, 1.0)
    return np.where(analog[None, :], np.round(values / step) * step, values)


def hold_within_deadband(values: np.ndarray, points: pd.DataFrame, deadband_pct: float
                         ) -> np.ndarray:
    """Report by exception: each analog value is replaced by the last stored one until it moves
    more than ``deadband_pct`` % of full scale away from it (NaN never stored)."""
    if deadband_pct <= 0:
        return values
    fs = pd.to_numeric(points["full_scale"], errors="coerce").to_numpy(float)
    band = deadband_pct / 100.0 * fs
    analog = points["quantity"].isin(ANALOG_QUANTITIES).to_numpy() & (band > 0)
    out = values.copy()
    held = values[0].copy()
    for t in range(1, len(values)):
        v = values[t]
        move = ~np.isfinite(held) | (np.abs(v - held) > band)
        held = np.where(move & np.isfinite(v), v, held)
        out[t] = np.where(analog, held, v)
    return out


def stated_storage(points: pd.DataFrame, opts: TelemetryOptions) -> pd.DataFrame:
    """The point list stating, for every analog point, the deadband (``deadband_pct`` % of
    full scale, 0 for none) and the resolution its readings are stored with: the converter's
    step or the historian's, whichever is coarser."""
    out = points.copy()
    analog = out["quantity"].isin(ANALOG_QUANTITIES).to_numpy()
    fs = pd.to_numeric(out["full_scale"], errors="coerce").to_numpy(float)
    converter = 2.0 * fs / 2.0 ** opts.resolution_bits if opts.resolution_bits > 0 else 0.0
    step = np.maximum(converter, historian_resolution(out).to_numpy(float))
    out["deadband"] = np.where(analog, opts.deadband_pct / 100.0 * fs, np.nan)
    out["resolution"] = np.where(analog, step, np.nan)
    return out


def add_noise(values: np.ndarray, points: pd.DataFrame, rng: np.random.Generator) -> np.ndarray:
    """Transducer noise, gaussian with the default σ, on analog points only."""
    sigma = default_sigma(points).to_numpy(float)
    sigma = np.where(points["quantity"].isin(ANALOG_QUANTITIES).to_numpy(), sigma, 0.0)
    return values + rng.standard_normal(values.shape) * sigma[None, :]


def missing_mask(
    index: pd.DatetimeIndex,
    points: pd.DataFrame,
    opts: TelemetryOptions,
    rng: np.random.Generator,
    avoid: Sequence[PlannedOutage] = (),
) -> tuple[np.ndarray, tuple[str, pd.Timestamp, pd.Timestamp] | None]:
    """Where values are missing (K × points, bool) and the RTU outage (rtu, start, end)."""
    k, m = len(index), len(points)
    analog = points["quantity"].isin(ANALOG_QUANTITIES).to_numpy()
    mask = (rng.random((k, m)) < opts.missing_rate) & analog[None, :]
    n_gaps = rng.poisson(opts.gaps_per_point, m) * analog
    for col in np.flatnonzero(n_gaps):
        for _ in range(n_gaps[col]):
            start = int(rng.integers(k))
            mask[start:start + int(rng.integers(2, 31)), col] = True
    outage = None
    rtus = sorted(points["rtu"].dropna().astype(str).unique()) if "rtu" in points else []
    span = int(round(opts.rtu_outage_hours * 60 / max(_minutes(index), 1e-9)))
    if opts.rtu_outage_hours > 0 and rtus and 0 < span < k:
        rtu = opts.rtu_outage or rtus[int(rng.integers(len(rtus)))]
        if rtu not in rtus:
            raise ValueError(f"RTU {rtu!r} for the communication outage is not in the point list")
        busy = np.zeros(k, bool)
        for out in avoid:
            busy |= np.asarray((index >= out.start) & (index < out.end))
        starts = [s for s in range(0, k - span) if not busy[s:s + span].any()]
        if starts:
            s = starts[int(rng.integers(len(starts)))]
            mask[s:s + span, (points["rtu"].astype(str) == rtu).to_numpy()] = True
            outage = (rtu, index[s], index[s + span])
    return mask, outage


def lagged_values(values: np.ndarray, index: pd.DatetimeIndex, lag_seconds: float
                  ) -> np.ndarray:
    """Each column as a clock ``lag_seconds`` late would stamp it: the value at t is the
    value at t − lag, linear between snapshots, the first (last) value held beyond the ends."""
    t = np.asarray((index - index[0]) / pd.Timedelta(seconds=1), float)
    return np.column_stack([np.interp(t - lag_seconds, t, values[:, j])
                            for j in range(values.shape[1])]) if values.size else values


def choose_lagging_rtu(points: pd.DataFrame, opts: TelemetryOptions,
                       rng: np.random.Generator) -> tuple[str, np.ndarray] | None:
    """The RTU whose clock is wrong and which columns are its analog points (None: no lag)."""
    if opts.rtu_lag_minutes == 0:
        return None
    if "rtu" not in points:
        raise ValueError("an RTU clock error needs the point list's rtu column")
    analog = points["quantity"].isin(ANALOG_QUANTITIES).to_numpy()
    rtu_of = points["rtu"].astype(str).to_numpy()
    if opts.rtu_lag is not None:
        if opts.rtu_lag not in set(rtu_of):
            raise ValueError(f"RTU {opts.rtu_lag!r} for the clock error is not in the point list")
        rtu = opts.rtu_lag
    else:
        counts = pd.Series(rtu_of[analog]).value_counts()
        eligible = sorted(counts.index[counts >= MIN_LAG_POINTS])
        if not eligible:
            raise ValueError(f"no RTU has {MIN_LAG_POINTS} analog points for a clock error")
        rtu = eligible[int(rng.integers(len(eligible)))]
    return rtu, np.flatnonzero(analog & (rtu_of == rtu))


def _minutes(index: pd.DatetimeIndex) -> float:
    if len(index) < 2:
        return 1.0
    return float((index[1] - index[0]) / pd.Timedelta(minutes=1))


def simulate_site(
    case: GridCase,
    points: pd.DataFrame,
    *,
    start,
    periods: int = 10080,
    timezone: str = "UTC",
    seed: int = 0,
    faults: bool | Sequence[FaultSpec] = True,
    fault_kinds: Sequence[str] = DEFAULT_MIX,
    outages: str | Sequence[PlannedOutage] | None = "auto",
    options: TelemetryOptions | None = None,
    name: str | None = None,
    mix: np.ndarray | None = None,
    wind_mw: dict[str, float] | None = None,
    freq: str = "1min",
    model_errors: Sequence[ModelError] = (),
) -> SimulationResult:
    """Simulate ``periods`` snapshots of telemetry for ``points`` on ``case``.

    ``faults``: True draws a random mix of ``fault_kinds`` (on points with enough redundancy),
    False gives the clean data, a sequence applies exactly those faults. ``outages``: "auto"
    picks one planned line outage (a branch with a status point), None none, or a list.
    ``model_errors``: parameters the site's network model gets wrong; the telemetry still
    comes from the true network (``case``), the truth goes to ``model_truth``.
    """
    opts = options or TelemetryOptions()
    net = case.network
    # A sixth stream for the clock error: the first five are those of spawn(5), so the data
    # without a clock error are what they always were.
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(6)]
    rng_ops, rng_outage, rng_noise, rng_missing, rng_faults, rng_clock = streams
    index = snapshot_index(start, periods, timezone, freq)
    if isinstance(outages, str):
        if outages != "auto":
            raise ValueError(f"outages must be 'auto', None or a list, not {outages!r}")
        status_branches = points.loc[points["quantity"] == "branch_status", "element"]
        chosen = choose_planned_outage(case, index, timezone, rng_outage,
                                       candidates=status_branches.astype(str))
        outages = [chosen] if chosen else []
    ops = make_operating_series(case, index, timezone, rng_ops, outages=list(outages or []),
                                mix=mix, wind_mw=wind_mw)
    motion = None
    if opts.oltc is not None and opts.oltc.transformers > 0:
        # A seventh stream: the first six are those of spawn(6).
        rng_taps = np.random.default_rng(np.random.SeedSequence(seed).spawn(7)[6])
        motion = moving_taps(net, points, ops.load_mw.sum(axis=1), opts.oltc, rng_taps)
        net = motion.network
        if len(motion.points):
            points = pd.concat([points, motion.points.reindex(columns=points.columns)])
        ops.in_service = np.where(ops.in_service, motion.factors, 0.0)
    p, q = ops.net_injection()
    pf = solve_snapshots(net, p, q, ops.v_set, ops.pv, ops.in_service)
    if not pf.converged.all():
        bad = np.flatnonzero(~pf.converged)
        raise RuntimeError(
            f"power flow did not converge in {len(bad)} snapshot(s), first at {index[bad[0]]}"
        )
    true = point_values_series(net, points, pf.vm, pf.va_rad, ops.in_service)
    lagging = choose_lagging_rtu(points, opts, rng_clock)
    stamped = true
    if lagging is not None:
        stamped = true.copy()
        stamped[:, lagging[1]] = lagged_values(true[:, lagging[1]], index,
                                               60.0 * opts.rtu_lag_minutes)
    measured = pd.DataFrame(add_noise(stamped, points, rng_noise), index=index,
                            columns=points.index)
    if motion is not None:
        for tag in motion.reported:
            measured[tag] = motion.reported[tag].to_numpy(float)
    true_df = pd.DataFrame(true, index=index, columns=points.index)

    normal = np.flatnonzero((branch_status(ops.in_service) == net.default_in_service())
                            .all(axis=1))
    load = ops.load_mw.sum(axis=1)[normal]
    at = normal[np.argsort(load)[len(load) // 2]] if len(normal) else 0
    report = redundancy_report(net, points, pf.vm[at], pf.va_rad[at], ops.in_service[at])

    if faults is True:
        specs = random_faults(points, true_df, fault_kinds, rng=rng_faults, exclude=report.weak())
    elif faults is False:
        specs = []
    else:
        specs = list(faults)
    if specs:
        measured, truth = apply_faults(measured, points, specs, rng_faults)
    else:
        truth = pd.DataFrame(columns=TRUTH_COLUMNS)
    if motion is not None and motion.truth:
        truth = _with_tap_truth(truth, motion, index)
    if lagging is not None:
        clock = clock_truth(lagging[0], opts.rtu_lag_minutes, index,
                            int(truth["fault"].max()) if len(truth) else 0)
        truth = pd.concat([truth, clock], ignore_index=True) if len(truth) else clock
    step = historian_resolution(points).to_numpy(float)
    values = quantize(measured.to_numpy(float), points, opts.resolution_bits)
    values = hold_within_deadband(values, points, opts.deadband_pct)
    values = round_to_historian(values, step)
    mask, rtu_out = missing_mask(index, points, opts, rng_missing, ops.outages)
    values[mask] = np.nan
    snapshots = pd.DataFrame(values, index=index, columns=points.index)
    snapshots.columns.name = None
    listed = stated_storage(points, opts) if opts.state_storage else points.copy()
    model_net, model_truth = model_with_errors(net, model_errors)
    if motion is not None:
        branches = model_net.branches.copy()
        branches[motion.model_columns.columns] = motion.model_columns
        model_net = Network(model_net.name, model_net.base_mva, model_net.buses, branches,
                            model_net.reference_bus, model_net.frequency_hz)
    site = Site(None, name or net.name, timezone, model_net, listed, snapshots)
    buses = net.buses.index
    return SimulationResult(
        site=site,
        true_vm=pd.DataFrame(pf.vm.astype(np.float32), index=index, columns=buses),
        true_va=pd.DataFrame(pf.va_rad.astype(np.float32), index=index, columns=buses),
        true_values=true_df,
        truth=truth,
        faulted=bool(specs),
        operating=ops,
        redundancy=report,
        rtu_outage=rtu_out,
        iterations=pf.iterations,
        rtu_lag=None if lagging is None else (lagging[0], 60.0 * opts.rtu_lag_minutes),
        model_truth=model_truth,
        taps=motion,
    )


def _with_tap_truth(truth: pd.DataFrame, motion: TapMotion, index: pd.DatetimeIndex
                    ) -> pd.DataFrame:
    """The truth with a row per tap fault (numbered after the meter faults)."""
    after = int(truth["fault"].max()) if len(truth) else 0
    rows = []
    for j, r in enumerate(motion.truth):
        row = {c: "" for c in TRUTH_COLUMNS}
        row.update(fault=after + 1 + j, device="", factor=1.0, offset=0.0, drift_per_day=0.0,
                   onset=index[0], noise_factor=1.0)
        row.update(r)
        rows.append(row)
    taps = pd.DataFrame(rows, columns=TRUTH_COLUMNS)
    return pd.concat([truth, taps], ignore_index=True) if len(truth) else taps


def clock_truth(rtu: str, lag_minutes: float, index: pd.DatetimeIndex, after: int
                ) -> pd.DataFrame:
    """The truth row of an RTU clock error: kind ``time_offset``, the RTU as tag, the lag in
    seconds as offset (numbered after the ``after`` meter faults' rows)."""
    row = {c: "" for c in TRUTH_COLUMNS}
    row.update(fault=after + 1, tag=rtu, device="", kind=FindingKind.TIME_OFFSET,
               factor=1.0, offset=60.0 * lag_minutes, drift_per_day=0.0, onset=index[0],
               noise_factor=1.0, detail=f"RTU clock {lag_minutes:+g} min")
    return pd.DataFrame([row], columns=TRUTH_COLUMNS)
