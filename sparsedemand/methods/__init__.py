"""Forecasting methods for intermittent demand, as numba kernels.

Every method is available two ways:

* as a function of a series or an items x periods array,
  ``croston(y, horizon=1, *, alpha=0.1, ...)``, returning the forecast
  (shape ``(horizon,)`` for 1-D input, ``(n_items, horizon)`` for 2-D), or
  ``(forecast, params, cost)`` with ``return_params=True``;
* through the registry, ``fit(name, values, start, available, horizon=h,
  **options)``, returning a :class:`MethodFit` with the predictive
  distribution the stock stage needs.

Leading zeros are trimmed per item, unavailable periods are skipped (never
read as zeros), items that never sold forecast 0, and forecasts are never
negative. A smoothing constant of ``None`` is optimised per item within
``bounds`` by the chosen in-sample cost (``"mse"``, ``"mae"``, ``"mar"``,
``"msr"``; see :mod:`sparsedemand.methods.optimize`).

Examples
--------
>>> import numpy as np
>>> values = np.array([[0., 3., 0., 0., 2., 0.], [0., 0., 0., 0., 0., 0.]])
>>> res = fit("sba", values, np.array([1, 6]), None, horizon=2, alpha=0.5)
>>> res.mean.round(3).tolist(), res.distribution
([[0.625, 0.625], [0.0, 0.0]], 'compound')
"""

from __future__ import annotations

import inspect

import numpy as np

from ..errors import InputError
from ._input import MethodFit, PanelArrays, check_horizon
from .aggregation import adida, fit_adida, fit_imapa, imapa
from .baselines import (
    fit_mean_all,
    fit_mean_recent,
    fit_mean_since_first,
    fit_repeat_last,
    fit_seasonal_mean,
    fit_zeros,
    mean_all,
    mean_recent,
    mean_since_first,
    repeat_last,
    seasonal_mean,
    zeros,
)
from .croston import croston, fit_croston_family, sba, sbj
from .events import Events, extract_events
from .smoothing import fit_moving_average, fit_ses, moving_average, ses
from .tsb import fit_tsb, tsb
from .zero_inflated import fit_zinb, fit_zip, zinb, zip  # noqa: A004

__all__ = [
    "METHODS",
    "MethodFit",
    "Events",
    "extract_events",
    "fit",
    "method_options",
    "croston",
    "sba",
    "sbj",
    "tsb",
    "ses",
    "moving_average",
    "adida",
    "imapa",
    "zip",
    "zinb",
    "zeros",
    "mean_all",
    "mean_since_first",
    "mean_recent",
    "repeat_last",
    "seasonal_mean",
]


def _variant(name):
    def core(data, horizon, **options):
        return fit_croston_family(data, horizon, variant=name, **options)

    core.__signature__ = inspect.signature(fit_croston_family)
    return core


_CORES = {
    "croston": _variant("croston"),
    "sba": _variant("sba"),
    "sbj": _variant("sbj"),
    "tsb": fit_tsb,
    "ses": fit_ses,
    "moving_average": fit_moving_average,
    "adida": fit_adida,
    "imapa": fit_imapa,
    "zip": fit_zip,
    "zinb": fit_zinb,
    "zeros": fit_zeros,
    "mean_all": fit_mean_all,
    "mean_since_first": fit_mean_since_first,
    "mean_recent": fit_mean_recent,
    "repeat_last": fit_repeat_last,
    "seasonal_mean": fit_seasonal_mean,
}

METHODS: tuple[str, ...] = tuple(_CORES)

# options a user sets per method (the variant of the Croston family is fixed by the name)
_INTERNAL = {"variant"}


def method_options(name: str) -> dict:
    """Options of a method with their defaults.

    Examples
    --------
    >>> method_options("tsb")
    {'alpha': 0.1, 'beta': 0.1, 'cost': 'mse', 'bounds': (0.01, 0.5)}
    """
    if name not in _CORES:
        raise InputError(f"unknown method {name!r}; choose one of {', '.join(METHODS)}")
    sig = inspect.signature(_CORES[name])
    return {
        p.name: p.default
        for p in sig.parameters.values()
        if p.kind is inspect.Parameter.KEYWORD_ONLY and p.name not in _INTERNAL
    }


def fit(
    name: str,
    values: np.ndarray,
    start: np.ndarray,
    available: np.ndarray | None,
    *,
    horizon: int,
    events: Events | None = None,
    **options,
) -> MethodFit:
    """Fit one method to every item of a panel.

    Parameters
    ----------
    name : str
        One of ``METHODS``.
    values : ndarray of float64, shape (n_items, n_periods)
        Demand, never negative.
    start : ndarray of int64, shape (n_items,)
        First-demand offsets (``n_periods`` for an item that never sold).
    available : ndarray of bool, shape (n_items, n_periods), or None
        False where a period is unavailable and must be skipped.
    horizon : int
        Steps ahead.
    events : Events, optional
        Events already extracted from these arrays by :func:`extract_events`;
        pass them when fitting several methods to the same panel so the one
        full pass over the data is made only once.
    **options
        The method's options (see :func:`method_options`); an unknown option
        or a bad value raises :class:`~sparsedemand.errors.InputError`.

    Returns
    -------
    MethodFit

    Examples
    --------
    >>> r = fit("zip", np.array([[0., 2., 0., 0., 4., 0.]]), np.array([1]), None, horizon=1)
    >>> r.distribution, sorted(r.dist_params), r.mean.round(2).tolist()
    ('zip', ['lam', 'pi'], [[1.2]])
    """
    allowed = method_options(name)
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        choices = ", ".join(allowed) if allowed else "none"
        raise InputError(f"unknown option {unknown[0]!r} for method {name}; options: {choices}")
    horizon = check_horizon(horizon)
    values = np.ascontiguousarray(values, dtype=np.float64)
    if values.ndim != 2:
        raise InputError(f"values must be 2-D (items x periods), got {values.ndim}-D")
    start = np.ascontiguousarray(start, dtype=np.int64)
    if start.shape != (values.shape[0],):
        raise InputError(f"start must have shape ({values.shape[0]},), got {start.shape}")
    if available is not None:
        available = np.ascontiguousarray(available, dtype=np.bool_)
        if available.shape != values.shape:
            raise InputError(f"available has shape {available.shape}, values have {values.shape}")
    if events is not None and (events.n_items != values.shape[0]
                               or events.n_periods != values.shape[1]):
        raise InputError("events were extracted from a panel of another shape")
    data = PanelArrays(values, start, available, events)
    return _CORES[name](data, horizon, **options)
