"""The period a review estimates, prepared once: per-unit values, checked topology, estimator.

A review chooses its snapshots and applies the ledger's software corrections
(:func:`calibra.review_period.select_period`); what the estimation needs of them is prepared
here once and handed to every evidence round and to the engine that estimates them, on this
machine or on a cluster (whose workers prepare the same period from the files they read).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from calibra.estimation.measurement_model import MeasurementModel
from calibra.estimation.tap_settings import TapFallback, branch_states, tap_factors
from calibra.estimation.topology import StatusConflict, checked_topology
from calibra.estimation.wls import Estimator
from calibra.model.site import Site


@dataclass(frozen=True)
class PreparedPeriod:
    """The snapshots of one period ready for estimation (arrays k × m, or k × branches)."""

    site: Site
    index: pd.DatetimeIndex
    estimator: Estimator
    measured: np.ndarray  # k × m float32 in the points' own units (±inf beyond float32)
    z: np.ndarray  # k × m per unit, NaN = missing
    #: k × branches branch state: bool, or float with telemetered taps (see
    #: :mod:`calibra.model.network`)
    in_service: np.ndarray
    status_conflicts: list[StatusConflict] = field(default_factory=list)
    #: The software corrections applied to the values (ledger records, in the order applied).
    corrections: tuple = ()
    #: Points judged only on their data after a repair inside the period: tag → repair time.
    held_out: Mapping[str, pd.Timestamp] = field(default_factory=dict)
    #: Where tap-position points gave no usable step (the model's tap was used there).
    tap_fallbacks: list[TapFallback] = field(default_factory=list)

    @property
    def model(self) -> MeasurementModel:
        return self.estimator.model


def prepare_period(site: Site, snapshots: pd.DataFrame | None = None, *,
                   corrections: tuple = (),
                   held_out: Mapping[str, pd.Timestamp] | None = None,
                   estimator: Estimator | None = None) -> PreparedPeriod:
    """Per-unit values and checked topology of ``snapshots`` (default: the site's), which
    already have ``corrections`` applied and ``held_out`` points left out before their times
    (recorded with the period so an engine elsewhere can prepare the same). ``estimator``: one
    already built for the site's network and points (a period read day by day keeps one)."""
    snaps = site.snapshots if snapshots is None else snapshots
    if estimator is None:
        estimator = Estimator(MeasurementModel.from_points(site.network, site.points))
    model = estimator.model
    values = snaps.reindex(columns=model.tags).to_numpy(float)
    z = model.to_per_unit(values)
    status, conflicts = checked_topology(site, snaps)
    factors, fallbacks = tap_factors(site.network, site.points, snaps)
    in_service = branch_states(status, factors)
    with np.errstate(over="ignore"):  # readings beyond float32 (bad data) are kept as ±inf
        measured = values.astype(np.float32)
    return PreparedPeriod(site, snaps.index, estimator, measured, z, in_service,
                          conflicts, tuple(corrections), dict(held_out or {}), fallbacks)
