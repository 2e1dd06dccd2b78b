"""The seeded bootstrap of the ``"empirical"`` kind, and the per-item seeds it draws with.

Seeds derive from the call's seed and the item's label, so an item's sample
paths do not depend on which other items share the call.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ...errors import InputError
from ..events import run_in_threads
from .params import _per_item

_U12 = np.uint64(12)
_U25 = np.uint64(25)
_U27 = np.uint64(27)
_U11 = np.uint64(11)
_MULT = np.uint64(2685821657736338717)
_TWO53 = 1.0 / 9007199254740992.0


@njit(cache=True)
def _uniform(state):
    """xorshift64* step: returns (new state, uniform double in [0, 1))."""
    state ^= state >> _U12
    state ^= state << _U25
    state ^= state >> _U27
    return state, float((state * _MULT) >> _U11) * _TWO53


@njit(cache=True)
def _bootstrap_kernel(values, rows, start, available, has_mask, checkpoints, seeds, n_samples, jitter, out):
    """Willemain-Smart-Schwarz bootstrap totals at each checkpoint, ``out[i, j, s]``.

    Item ``i`` uses history row ``rows[i]`` of ``values`` and ``available``
    (read only when ``has_mask``) from period ``start[i]`` on, so a subset of
    a large panel needs no copy.

    Occurrence: two-state Markov chain estimated from transitions between
    consecutive available periods from the item's first demand on (a state
    with no observed exits uses the item's overall demand rate), started from
    the last available state. Sizes: whole-unit non-zero demands resampled with
    replacement; jittered to ``round(x + z sqrt(x))``, keeping ``x`` when that
    is not positive. Every item has its own seed, so an item's samples do not
    depend on which other items share the call.
    """
    n_periods = values.shape[1]
    n_items = rows.shape[0]
    n_checks = checkpoints.shape[1]
    sizes = np.empty(n_periods, dtype=np.float64)
    roots = np.empty(n_periods, dtype=np.float64)
    for i in range(n_items):
        h = rows[i]
        nz = 0
        n_av = 0
        n00 = 0
        n01 = 0
        n10 = 0
        n11 = 0
        prev = -1
        last = 0
        for t in range(start[i], n_periods):
            if has_mask and not available[h, t]:
                prev = -1
                continue
            v = values[h, t]
            occ = 1 if v > 0.0 else 0
            if occ == 1:
                sizes[nz] = max(1.0, float(np.rint(v)))
                roots[nz] = math.sqrt(sizes[nz])
                nz += 1
            n_av += 1
            if prev == 0:
                if occ == 1:
                    n01 += 1
                else:
                    n00 += 1
            elif prev == 1:
                if occ == 1:
                    n11 += 1
                else:
                    n10 += 1
            prev = occ
            last = occ
        horizon = 0
        for j in range(n_checks):
            horizon = max(horizon, checkpoints[i, j])
        if nz == 0 or horizon == 0:
            for j in range(n_checks):
                for s in range(n_samples):
                    out[i, j, s] = 0
            continue
        rate = nz / n_av
        p01 = n01 / (n00 + n01) if n00 + n01 > 0 else rate
        p11 = n11 / (n10 + n11) if n10 + n11 > 0 else rate
        state = np.uint64(seeds[i]) * _MULT + np.uint64(0x9E3779B97F4A7C15)
        if state == np.uint64(0):  # xorshift must not start from zero
            state = _MULT
        csum = np.zeros(horizon + 1, dtype=np.int64)
        spare = 0.0
        have_spare = False
        for s in range(n_samples):
            occupied = last
            total = 0
            for step in range(1, horizon + 1):
                state, u = _uniform(state)
                occupied = 1 if u < (p11 if occupied == 1 else p01) else 0
                if occupied == 1:
                    state, u = _uniform(state)
                    pick = min(int(u * nz), nz - 1)
                    x = sizes[pick]
                    if jitter:
                        if have_spare:
                            z = spare
                            have_spare = False
                        else:  # Box-Muller gives two independent normals
                            state, u1 = _uniform(state)
                            state, u2 = _uniform(state)
                            radius = math.sqrt(-2.0 * math.log(1.0 - u1))
                            z = radius * math.cos(2.0 * math.pi * u2)
                            spare = radius * math.sin(2.0 * math.pi * u2)
                            have_spare = True
                        jx = np.rint(x + z * roots[pick])
                        if jx > 0.0:
                            x = jx
                    total += int(x)
                csum[step] = total
            for j in range(n_checks):
                out[i, j, s] = csum[checkpoints[i, j]]


def item_seeds(seed, n_items: int, *, keys=None) -> np.ndarray:
    """Independent per-item 32-bit seeds: splitmix64 of ``seed`` and a per-item key.

    ``keys`` (whole numbers, one per item) default to the row positions; pass
    keys derived from the item labels to make an item's samples independent
    of its position. A per-item ``seed`` array is taken as the seeds
    themselves (reduced to 32 bits).

    Examples
    --------
    >>> (item_seeds(0, 3) == item_seeds(0, 3)).all(), len(set(item_seeds(0, 3).tolist()))
    (np.True_, 3)
    """
    arr = np.asarray(seed)
    if arr.ndim == 1:
        if arr.shape != (n_items,):
            raise InputError(f"seed must be one number or one per item ({n_items}), got shape {arr.shape}")
        return (arr.astype(np.uint64) & np.uint64(0xFFFFFFFF)).astype(np.int64)
    if arr.ndim != 0 or int(seed) != seed or seed < 0:
        raise InputError(f"seed must be a whole number >= 0, got {seed!r}")
    key = np.arange(n_items, dtype=np.uint64) if keys is None else np.asarray(keys).astype(np.uint64)
    if key.shape != (n_items,):
        raise InputError(f"seed keys must be one per item ({n_items}), got shape {key.shape}")
    with np.errstate(over="ignore"):
        z = np.uint64(int(seed) % (1 << 64)) * np.uint64(0x9E3779B97F4A7C15) + (key + np.uint64(1)) * np.uint64(
            0xBF58476D1CE4E5B9
        )
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z & np.uint64(0xFFFFFFFF)).astype(np.int64)


@njit(cache=True)
def _histogram_rows(totals, cap):
    """Relative frequencies of each row of ``totals`` as one flat array plus row offsets."""
    n_rows, n_samples = totals.shape
    offsets = np.zeros(n_rows + 1, dtype=np.int64)
    for i in range(n_rows):
        top = 0
        for s in range(n_samples):
            top = max(top, totals[i, s])
        offsets[i + 1] = offsets[i] + min(top, cap - 1) + 1
    data = np.zeros(offsets[n_rows], dtype=np.float64)
    for i in range(n_rows):
        o = offsets[i]
        last = offsets[i + 1] - o - 1
        for s in range(n_samples):
            data[o + min(totals[i, s], last)] += 1.0  # exact counts, then one division
    data /= n_samples
    return data, offsets


def _bootstrap_rows(values, rows, start, available, has_mask, checks: np.ndarray, seeds, n_samples: int,
                    jitter: bool, cap: int, block_items: int = 256) -> list[list]:
    n_items, n_checks = checks.shape
    out: list[list] = [[None] * n_items for _ in range(n_checks)]
    for lo in range(0, n_items, block_items):
        sl = slice(lo, min(lo + block_items, n_items))
        totals = np.empty((sl.stop - lo, n_checks, n_samples), dtype=np.int64)
        _bootstrap_kernel(values, rows[sl], start[sl], available, has_mask, checks[sl], seeds[sl],
                          n_samples, jitter, totals)
        for j in range(n_checks):
            data, offsets = _histogram_rows(np.ascontiguousarray(totals[:, j, :]), cap)
            for r in range(sl.stop - lo):
                out[j][lo + r] = data[offsets[r] : offsets[r + 1]]
    return out


@njit(cache=True, nogil=True)
def _scan_history(i0, i1, values, available, has_mask, rows, size_mean, first, bad):
    """One pass over the history rows of items ``i0 .. i1-1``: mean size, first demand.

    ``bad[i]`` gets the first period of the item's row whose available value
    is negative or not finite, -1 when all are valid.
    """
    n_periods = values.shape[1]
    for i in range(i0, i1):
        h = rows[i]
        total = 0.0
        count = 0
        first[i] = n_periods
        bad[i] = -1
        for t in range(n_periods):
            if has_mask and not available[h, t]:
                continue
            v = values[h, t]
            if not (v >= 0.0 and v < np.inf):
                bad[i] = t
                break
            if v > 0.0:
                if count == 0:
                    first[i] = t
                total += v
                count += 1
        size_mean[i] = total / count if count > 0 else np.nan


def _history(values, start, available, history_rows, n_items: int):
    """Checked history (no copies of float64 input): values, item rows, item starts, mask, has_mask, mean sizes."""
    if values is None:
        raise InputError("the empirical (bootstrap) distribution needs the demand history: pass values=")
    values = np.ascontiguousarray(values, dtype=np.float64)
    if values.ndim != 2:
        raise InputError(f"values must be 2-D (items x periods), got shape {values.shape}")
    n_rows, n_periods = values.shape
    if history_rows is None:
        if n_rows != n_items:
            raise InputError(f"values has {n_rows} rows for {n_items} items")
        rows = np.arange(n_items, dtype=np.int64)
    else:
        rows = np.asarray(history_rows, dtype=np.int64)
        if rows.shape != (n_items,) or ((rows < 0) | (rows >= n_rows)).any():
            raise InputError(f"history_rows must give one row of values (0 .. {n_rows - 1}) per item")
    has_mask = available is not None
    if has_mask:
        available = np.ascontiguousarray(available, dtype=np.bool_)
        if available.shape != values.shape:
            raise InputError(f"available has shape {available.shape}, values has {values.shape}")
    else:
        available = np.ones((1, 1), dtype=np.bool_)
    sizes = np.empty(n_items)
    first = np.empty(n_items, dtype=np.int64)
    bad = np.empty(n_items, dtype=np.int64)
    # values where the item was unavailable are never read
    run_in_threads(_scan_history, n_items, values, available, has_mask, rows, sizes, first, bad)
    faulty = np.flatnonzero(bad >= 0)
    if faulty.size:
        h, t = int(rows[faulty[0]]), int(bad[faulty[0]])
        raise InputError(f"values must be finite and >= 0, got {values[h, t]!r} for row {h}, period {t}")
    if start is None:
        item_start = first
    else:
        item_start = _per_item(start, n_rows, name="start", integer=True, minimum=0)[rows]
    item_start = np.minimum(item_start, n_periods).astype(np.int64)
    return values, rows, item_start, available, has_mask, sizes
