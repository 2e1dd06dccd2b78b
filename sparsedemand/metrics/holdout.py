"""Shared input handling of the metrics: arrays, availability masks, the holdout.

A period flagged unavailable (or NaN) is left out of every error; ``_Holdout``
carries the scored actuals and their mask, and gives a scalar back for a
single series.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

Score = float | np.ndarray  # a scalar for one series, one value per item otherwise


def _as_2d(name: str, x, *, allow_1d: bool = True) -> tuple[np.ndarray, bool]:
    """float64 C array of 2 dims and whether the input was a single series."""
    try:
        arr = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: not a numeric array ({exc})") from None
    if arr.ndim == 1 and allow_1d:
        return np.ascontiguousarray(arr[None, :]), True
    if arr.ndim != 2:
        raise InputError(f"{name}: expected a 1-D series or a 2-D items x periods array, got {arr.ndim}-D")
    return np.ascontiguousarray(arr), False


def _flags(name: str, available, shape: tuple[int, int]) -> np.ndarray:
    """The caller's availability flags as a C bool array of ``shape``."""
    flags = np.asarray(available)
    if flags.dtype != np.bool_:
        if not np.isin(flags, (0, 1)).all():
            raise InputError(f"{name}: availability flags must be boolean (or 0/1)")
        flags = flags.astype(np.bool_)
    if flags.ndim == 1 and shape[0] == 1:
        flags = flags[None, :]
    if flags.shape != shape:
        raise InputError(f"{name}: mask has shape {np.shape(available)}, values have {shape}")
    return np.ascontiguousarray(flags)


def _availability(name: str, available, values: np.ndarray) -> np.ndarray:
    """Scored-period mask: the caller's flags, and never a NaN value."""
    ok = np.isfinite(values)
    if available is None:
        return ok
    return ok & _flags(name, available, values.shape)


def _item_label(i: int, one_d: bool) -> str:
    return "the series" if one_d else f"item {i}"


@dataclass(frozen=True)
class _Holdout:
    actual: np.ndarray  # (n, h), 0 where not scored
    mask: np.ndarray  # (n, h) True where scored
    one_d: bool

    @property
    def n_items(self) -> int:
        return self.actual.shape[0]

    def out(self, values: np.ndarray):
        """Scalar (or per-level vector) for a single series, per item otherwise."""
        if self.one_d:
            v = values[0]
            return float(v) if np.ndim(v) == 0 else v
        return values


def _holdout(actual, available) -> _Holdout:
    y, one_d = _as_2d("actual", actual)
    mask = _availability("available", available, y)
    if (y[mask] < 0).any():
        i, t = np.argwhere(mask & (y < 0))[0]
        raise InputError(f"actual: negative demand at {_item_label(i, one_d)}, period {t}")
    return _Holdout(np.where(mask, y, 0.0), mask, one_d)


def _point(name: str, forecast, h: _Holdout) -> np.ndarray:
    f = np.asarray(forecast, dtype=np.float64)
    if h.one_d and f.ndim == 1:
        f = f[None, :]
    if f.shape != h.actual.shape:
        want = h.actual.shape[1:] if h.one_d else h.actual.shape
        raise InputError(f"{name}: shape {np.shape(forecast)} does not match actual {want}")
    _check_finite(name, f, h.mask, h.one_d)
    return np.where(h.mask, f, 0.0)


def _quantile_forecast(quantiles, levels, h: _Holdout) -> tuple[np.ndarray, np.ndarray]:
    lv = np.atleast_1d(np.asarray(levels, dtype=np.float64))
    if lv.ndim != 1 or lv.size == 0:
        raise InputError("levels: give a 1-D list of quantile levels")
    if not (np.isfinite(lv).all() and (lv > 0).all() and (lv < 1).all()):
        raise InputError(f"levels: every quantile level must lie strictly between 0 and 1, got {lv.tolist()}")
    q = np.asarray(quantiles, dtype=np.float64)
    if h.one_d and q.ndim == 2:
        q = q[None, :, :]
    want = h.actual.shape + (lv.size,)
    if q.shape != want:
        raise InputError(
            f"quantiles: shape {np.shape(quantiles)} does not match actual and levels "
            f"(expected {want[1:] if h.one_d else want})"
        )
    _check_finite("quantiles", q, h.mask[:, :, None], h.one_d)
    return np.where(h.mask[:, :, None], q, 0.0), lv


def _check_finite(name: str, f: np.ndarray, mask: np.ndarray, one_d: bool) -> None:
    bad = ~np.isfinite(f) & mask
    if bad.any():
        i, t = np.argwhere(bad)[0][:2]
        raise InputError(f"{name}: missing or infinite value at {_item_label(i, one_d)}, period {t} (an available period)")


def _masked_mean(x: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Mean over the period axis (axis 1) of the scored entries; NaN when none."""
    if x.ndim == 3:
        mask = mask[:, :, None]
    count = mask.sum(axis=1)
    total = np.where(mask, x, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)
