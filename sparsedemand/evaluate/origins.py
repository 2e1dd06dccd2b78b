"""Rolling forecast origins and everything a method is scored against at one origin."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .. import methods as _methods
from ..classify import classify as _classify
from ..errors import InputError
from ..metrics import item_weights, naive_scale
from ..panel import DemandPanel
from ..route import Rule, assign_methods, rate_change
from .hierarchy import hierarchy_levels
from .options import LABELS, Options, whole


def origin_cuts(n_periods: int, *, holdout: int, origins: int = 1, step: int | None = None) -> np.ndarray:
    """Training lengths of the forecast origins of a rolling-origin backtest.

    Origin ``k`` (0-based, oldest first) trains on periods ``0 .. cut_k - 1``
    and scores periods ``cut_k .. cut_k + holdout - 1``, with
    ``cut_k = n_periods - holdout - (origins - 1 - k) * step``: the last
    origin scores the final ``holdout`` periods, and every earlier origin is
    ``step`` periods before the next (expanding window).

    Examples
    --------
    >>> origin_cuts(100, holdout=10, origins=3, step=5).tolist()
    [80, 85, 90]
    """
    holdout = whole("holdout", holdout, minimum=1)
    origins = whole("origins", origins, minimum=1)
    step = holdout if step is None else whole("step", step, minimum=1)
    cuts = n_periods - holdout - step * np.arange(origins - 1, -1, -1, dtype=np.int64)
    if cuts[0] < 2:
        raise InputError(
            f"holdout {holdout} with {origins} origins {step} periods apart needs more than "
            f"{holdout + (origins - 1) * step + 1} periods of history, the data has {n_periods}"
        )
    return cuts


@dataclass
class Origin:
    """Everything a method is scored against at one origin (all from data before it, but the actuals)."""

    train: DemandPanel
    events: object
    scale: object
    actual: np.ndarray
    available: np.ndarray
    excluded: np.ndarray
    codes: np.ndarray
    classes: pd.DataFrame
    weights: dict
    groups: dict
    seeds: np.ndarray
    levels: np.ndarray
    service_level: float
    lead_time: int
    review: int
    unmet: str
    hierarchy: dict = field(default_factory=dict)  # group level -> Level (empty: no weights at this origin)
    empirical: dict = field(default_factory=dict)  # cached bootstrap quantiles, shared by every empirical fit

    @property
    def horizon(self) -> int:
        return self.actual.shape[1]

    @property
    def n_reviews(self) -> int:
        return -(-self.horizon // self.review)


def start_origin(panel: DemandPanel, cut: int, mask: np.ndarray, opts: Options) -> tuple[Origin, list[Rule], dict]:
    """Cut the history at ``cut`` and prepare what every method is scored against.

    Returns the origin, the router's rule per item (empty without the router)
    and an empty store for the fits the router may reuse.
    """
    horizon = opts.horizon
    train = panel.head(cut)
    classes = _classify(train, **dict(opts.classify_options or {}))
    codes = pd.Categorical(classes["pattern"].to_numpy(), categories=LABELS).codes.astype(np.int64)
    available = np.ascontiguousarray(mask[:, cut: cut + horizon])
    ctx = Origin(
        train=train,
        events=_methods.extract_events(train.values, train.start, train.available),
        scale=naive_scale(train.values, insample_available=train.available),
        actual=np.ascontiguousarray(panel.values[:, cut: cut + horizon]),
        available=available,
        excluded=(~available).sum(axis=1),
        codes=codes,
        classes=classes,
        weights=_origin_weights(train, min(horizon, cut), opts.weights, opts.price),
        groups=opts.groups,
        seeds=opts.seeds,
        levels=opts.levels,
        service_level=opts.service_level,
        lead_time=opts.lead_time,
        review=opts.review,
        unmet=opts.unmet,
    )
    w = ctx.weights[opts.weights[0]]
    if opts.groups and (w > 0).any():
        ctx.hierarchy = hierarchy_levels(train, opts.groups, w)
    rules = []
    if opts.include_router:
        # the same routing as route.forecast at this origin, rate-change status included
        changed = None
        if opts.change_level is not None:
            changed = rate_change(train, classes, level=opts.change_level)["changed"].to_numpy()
        rules = assign_methods(classes, policy=opts.policy, overrides=opts.overrides, changed=changed)
    return ctx, rules, {}


def _origin_weights(train: DemandPanel, last: int, kinds, price) -> dict:
    out = {}
    for kind in kinds:
        try:
            out[kind] = item_weights(train.values, last=last, available=train.available,
                                     unit_price=price if kind == "value" else None)
        except InputError:
            # nothing sold in the window: no weighting is possible at this origin
            out[kind] = np.zeros(train.n_items)
    return out
