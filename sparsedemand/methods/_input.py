"""The boundary of the methods package: input arrays in, forecasts and fits out.

Everything a user or another stage hands to a method passes through here:
1-D or 2-D demand (NaN = unavailable), an optional availability mask, or a
:class:`~sparsedemand.panel.DemandPanel`; options are checked here with
one-line :class:`~sparsedemand.errors.InputError` messages, and results are
shaped back to what the caller gave (1-D in, 1-D out).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from ..panel import DemandPanel
from .events import Events, extract_events
from .optimize import COSTS

__all__ = [
    "MethodFit",
    "PanelArrays",
    "as_arrays",
    "check_constant",
    "check_bounds",
    "check_cost",
    "check_horizon",
    "check_count",
    "check_choice",
    "run_public",
]


@dataclass(frozen=True)
class MethodFit:
    """Forecast and predictive distribution of one method for every item.

    Attributes
    ----------
    name : str
        Method name as in ``METHODS``.
    mean : ndarray of float64, shape (n_items, horizon)
        Forecast mean per item and step; never negative; 0 for items that
        never sold while available.
    params : dict of str to ndarray (n_items,)
        Fitted parameters per item (NaN where not applicable).
    cost : ndarray of float64, shape (n_items,)
        In-sample cost per item (NaN where undefined).
    distribution : str
        ``"compound"``, ``"zip"``, ``"zinb"``, ``"normal"``, ``"empirical"`` or
        ``"point"``.
    dist_params : dict of str to ndarray (n_items,)
        Parameters of the predictive distribution (see the package docs).
    """

    name: str
    mean: np.ndarray
    params: dict
    cost: np.ndarray
    distribution: str
    dist_params: dict


@dataclass(eq=False)
class PanelArrays:
    """Values, first-demand offsets and mask of a panel, with its events made once.

    The events are extracted on first use and kept, so a method that needs
    them and a caller that already has them (``events=``) never pay twice.
    """

    values: np.ndarray
    start: np.ndarray
    available: np.ndarray | None
    _events: Events | None = field(default=None, repr=False)

    @property
    def n_items(self) -> int:
        return self.values.shape[0]

    @property
    def events(self) -> Events:
        if self._events is None:
            self._events = extract_events(self.values, self.start, self.available)
        return self._events


def _first_bad(mask: np.ndarray) -> tuple[int, int]:
    r, c = np.argwhere(mask)[0]
    return int(r), int(c)


def as_arrays(y, available=None) -> tuple[PanelArrays, bool]:
    """Turn user input into :class:`PanelArrays`; also say whether it was 1-D.

    ``y`` may be a 1-D series, a 2-D items x periods array (NaN marks an
    unavailable period), a pandas Series/DataFrame of that shape, or a
    :class:`~sparsedemand.panel.DemandPanel`.

    Examples
    --------
    >>> data, one_d = as_arrays([0.0, 2.0, np.nan, 1.0])
    >>> data.values.tolist(), data.start.tolist(), data.available.tolist(), one_d
    ([[0.0, 2.0, 0.0, 1.0]], [1], [[True, True, False, True]], True)
    """
    if isinstance(y, DemandPanel):
        if available is not None:
            raise InputError("available: the panel already carries its availability mask")
        return PanelArrays(y.values, y.start, y.available), False
    try:
        arr = np.array(y, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"y must be numeric demand, could not read it ({exc})") from None
    one_d = arr.ndim == 1
    if one_d:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise InputError(f"y must be 1-D (one series) or 2-D (items x periods), got {arr.ndim}-D")
    if np.isinf(arr).any():
        r, c = _first_bad(np.isinf(arr))
        raise InputError(f"y: infinite demand at item {r}, period {c}")
    if (arr < 0).any():
        r, c = _first_bad(arr < 0)
        raise InputError(f"y: negative demand {arr[r, c]:g} at item {r}, period {c}")
    missing = np.isnan(arr)
    mask = None
    if available is not None:
        mask = np.array(available, dtype=np.bool_)
        if one_d and mask.ndim == 1:
            mask = mask[None, :]
        if mask.shape != arr.shape:
            raise InputError(
                f"available must have the shape of y {arr.shape[1:] if one_d else arr.shape}, "
                f"got {mask.shape[1:] if one_d and mask.ndim == 2 else mask.shape}"
            )
    if missing.any():
        mask = ~missing if mask is None else (mask & ~missing)
        arr[missing] = 0.0
    values = np.ascontiguousarray(arr)
    if mask is not None:
        mask = np.ascontiguousarray(mask)
    return PanelArrays(values, _first_demand(values), mask), one_d


def _first_demand(values: np.ndarray) -> np.ndarray:
    positive = values > 0
    start = positive.argmax(axis=1).astype(np.int64)
    start[~positive.any(axis=1)] = values.shape[1]
    return start


# ---------------------------------------------------------------- validation
def check_constant(name: str, value, *, allow_none: bool = True) -> float:
    """A smoothing constant in (0, 1]; ``None`` (optimise) becomes NaN."""
    if value is None:
        if allow_none:
            return math.nan
        raise InputError(f"{name} must be a number in (0, 1], got None")
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise InputError(f"{name} must be a number in (0, 1] or None, got {value!r}")
    value = float(value)
    if not 0.0 < value <= 1.0:
        raise InputError(f"{name} must be in (0, 1], got {value:g}")
    return value


def check_bounds(bounds) -> tuple[float, float]:
    """Search bounds ``(low, high)`` with ``0 < low < high <= 1``."""
    try:
        lo, hi = (float(b) for b in bounds)
    except (TypeError, ValueError):
        raise InputError(f"bounds must be a pair (low, high), got {bounds!r}") from None
    if not (0.0 < lo < hi <= 1.0):
        raise InputError(f"bounds must satisfy 0 < low < high <= 1, got ({lo:g}, {hi:g})")
    return lo, hi


def check_cost(cost) -> int:
    """Cost name to its kernel code."""
    if not isinstance(cost, str) or cost.lower() not in COSTS:
        raise InputError(f"cost must be one of {', '.join(COSTS)}, got {cost!r}")
    return COSTS.index(cost.lower())


def check_horizon(horizon) -> int:
    """Forecast horizon: a positive integer."""
    if isinstance(horizon, bool) or not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise InputError(f"horizon must be a positive integer, got {horizon!r}")
    return int(horizon)


def check_count(name: str, value, *, allow_none: bool = False, minimum: int = 1) -> int:
    """A positive whole number of periods (``None`` becomes 0 when allowed)."""
    if value is None and allow_none:
        return 0
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        extra = " or None" if allow_none else ""
        raise InputError(f"{name} must be an integer >= {minimum}{extra}, got {value!r}")
    return int(value)


def check_choice(name: str, value, choices: tuple[str, ...]) -> str:
    """One of a few names."""
    if value not in choices:
        raise InputError(f"{name} must be one of {', '.join(choices)}, got {value!r}")
    return value


# ------------------------------------------------------------------- output
def run_public(core, y, horizon, available, return_params, options):
    """Shared body of the public method functions.

    Converts the input, runs ``core(data, horizon, **options)`` (which
    returns a :class:`MethodFit`) and shapes the result like the input.
    """
    horizon = check_horizon(horizon)
    data, one_d = as_arrays(y, available)
    result = core(data, horizon, **options)
    mean = result.mean[0] if one_d else result.mean
    if not return_params:
        return mean
    if one_d:
        params = {k: float(v[0]) for k, v in result.params.items()}
        return mean, params, float(result.cost[0])
    return mean, result.params, result.cost


def constant_mean(per_step: np.ndarray, horizon: int) -> np.ndarray:
    """Repeat one forecast per item over the horizon (C-contiguous, never negative)."""
    out = np.empty((per_step.shape[0], horizon))
    out[:] = np.maximum(per_step, 0.0)[:, None]
    return out


def compound_params(p: np.ndarray, size_mean: np.ndarray, size_var: np.ndarray) -> dict:
    """``dist_params`` of the compound Bernoulli x size distribution (``p * size_mean`` is the mean)."""
    return {
        "p": np.clip(p, 0.0, 1.0),
        "size_mean": np.maximum(size_mean, 0.0),
        "size_var": np.maximum(size_var, 0.0),
    }
