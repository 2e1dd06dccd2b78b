"""The fitted level drawn on the item pages.

When :mod:`sparsedemand.methods` provides ``fit`` and knows the item's method,
the line is the method's own one-step forecast with the item's fitted
parameters, made at up to ``level_points`` origins over the history (the
history up to each origin, right-aligned, earlier periods marked unavailable).
Otherwise it is simple exponential smoothing of the demand per available
period from the first demand on, with constant :data:`LEVEL_ALPHA`.

Examples
--------
>>> _parse_parameters("alpha=0.1 (optimised), window=4")
{'alpha': 0.1, 'window': 4}
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import InputError
from ..panel import first_demand_offsets

LEVEL_ALPHA = 0.1


def _parse_parameters(text) -> dict[str, float | int]:
    """``"alpha=0.1 (optimised), window=4"`` -> ``{"alpha": 0.1, "window": 4}``."""
    if not isinstance(text, str):
        return {}
    out: dict[str, float | int] = {}
    for key, value in re.findall(r"([A-Za-z_]\w*)=([^,\s]+)", text):
        try:
            number = float(value)
        except ValueError:
            return {}
        out[key] = int(number) if re.fullmatch(r"-?\d+", value) else number
    return out


def ses_level(y: np.ndarray, available: np.ndarray, start: int, *, alpha: float = LEVEL_ALPHA) -> np.ndarray:
    """Simple exponential smoothing of demand per period, as the expected demand of each period.

    ``level[t]`` is the smoothed demand known before period ``t``: the level
    starts at the first demand ``y[start]`` and moves ``alpha`` of the way to
    each later available period's demand; unavailable periods leave it
    unchanged. NaN up to and including ``start``.

    Examples
    --------
    >>> ses_level(np.array([0., 4., 0., 2.]), np.ones(4, bool), 1, alpha=0.5).tolist()
    [nan, nan, 4.0, 2.0]
    """
    n = len(y)
    level = np.full(n, np.nan)
    if start >= n:
        return level
    current = float(y[start])
    for t in range(start + 1, n):
        level[t] = current
        if available[t]:
            current += alpha * (float(y[t]) - current)
    return level


def _method_level(y, available, start, method: str, params: dict, points: int, season_length: int):
    """One-step forecasts of ``method`` at up to ``points`` origins, or None if it cannot be had.

    Row ``k`` of the block is the history before origin ``t_k``, right-aligned
    so every row has the same length; the padding is marked unavailable, so
    the method reads each row as the history up to its origin. The method is
    run with the item's fitted parameters, or refitted at each origin when
    those are not options of the method (the fitted zero-inflated
    distributions, for example). Returns (origins, level, how).
    """
    from .. import methods as registry

    fit = getattr(registry, "fit", None)
    if fit is None or method not in getattr(registry, "METHODS", ()):
        return None
    n = len(y)
    if n - start < 3:
        return None
    origins = np.unique(np.linspace(start + 1, n - 1, min(points, n - 1 - start)).round().astype(np.int64))
    block = np.zeros((len(origins), n))
    ok = np.zeros((len(origins), n), dtype=bool)
    for k, t in enumerate(origins):
        block[k, n - t:] = y[:t]
        ok[k, n - t:] = available[:t]
    extra = {"season_length": season_length} if method == "seasonal_mean" and season_length else {}
    starts = first_demand_offsets(block)
    attempts = [({**extra, **params}, "with its fitted parameters")] if params else []
    for options, how in attempts + [(extra, "refitted at each point" if params else "")]:
        try:
            fitted = fit(method, block, starts, ok, horizon=1, **options)
        except (InputError, TypeError, ValueError):
            continue
        level = np.asarray(fitted.mean, dtype=float)[:, 0]
        if np.isfinite(level).any():
            return origins, level, how
    return None


def _fitted_level(y, available, start, method, params_text, points: int, season_length: int = 0):
    """(x, level, legend text) for an item page."""
    if method:
        found = _method_level(y, available, start, str(method), _parse_parameters(params_text), points,
                              season_length)
        if found is not None:
            x, level, how = found
            return x, level, f"fitted level: one-step forecast of {method} {how}".rstrip()
    level = ses_level(y, available, start)
    return np.arange(len(y)), level, f"smoothed level: exponential smoothing of demand, α = {LEVEL_ALPHA:g}"
