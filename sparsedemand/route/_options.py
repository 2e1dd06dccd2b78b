"""Checks of the router's options, at the boundary, before any work."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .result import quantile_column


def _check_forecast_options(horizon, levels, cost, selection, holdout, panel) -> tuple[float, ...]:
    """Validate the options; return the quantile levels as floats."""
    if isinstance(horizon, bool) or not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise InputError(f"--horizon must be a whole number of periods >= 1, got {horizon!r}")
    try:
        lv = tuple(float(q) for q in levels)
    except (TypeError, ValueError):
        raise InputError(f"--quantiles must be numbers strictly between 0 and 1, got {levels!r}") from None
    if not lv or any(not 0.0 < q < 1.0 for q in lv):
        raise InputError(f"--quantiles must lie strictly between 0 and 1, got {list(levels)}")
    names = [quantile_column(q) for q in lv]
    twice = [q for q, name in zip(lv, names) if names.count(name) > 1]
    if twice:
        raise InputError(f"--quantiles lists the level {twice[0]:g} twice")
    if cost not in ("mse", "mae", "mar", "msr"):
        raise InputError(f"--cost must be mse, mae, mar or msr, got {cost!r}")
    if selection not in ("policy", "holdout"):
        raise InputError(f"--selection must be policy or holdout, got {selection!r}")
    if holdout is not None and (isinstance(holdout, bool) or not isinstance(holdout, (int, np.integer))
                                or not 1 <= holdout < panel.n_periods):
        raise InputError(f"--holdout must be a whole number between 1 and {panel.n_periods - 1}, got {holdout!r}")
    if panel.n_periods < 2:
        raise InputError("the history needs at least 2 periods to forecast")
    return lv
