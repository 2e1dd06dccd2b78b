"""Demand events: the one full pass over a panel that the event-driven kernels share.

Intermittent demand is mostly zeros, so the kernels of the Croston family,
TSB, SES, moving averages, temporal aggregation, the zero-inflated fits and
most baselines read only the *events* of each item: the periods with positive
demand, their sizes, and where they fall. :func:`extract_events` builds them
once, in compressed-row form, and every kernel then runs in time proportional
to the number of demands instead of the number of periods.

Positions are counted in **available** periods from the item's first
available demand: a period marked unavailable (out of stock) is dropped from
the item's history as if it had never existed, instead of being read as a
zero. The trimmed, available history of item ``i`` has ``length[i]`` periods;
its demands sit at ``pos[indptr[i]:indptr[i+1]]`` (the first at 0) with sizes
``size[indptr[i]:indptr[i+1]]``.

Examples
--------
>>> import numpy as np
>>> ev = extract_events(np.array([[0., 3., 0., 0., 2., 0.]]))
>>> ev.pos.tolist(), ev.size.tolist(), ev.length.tolist()
([0, 3], [3.0, 2.0], [5])
>>> mask = np.array([[True, True, False, True, True, True]])
>>> extract_events(np.array([[0., 3., 0., 0., 2., 0.]]), available=mask).pos.tolist()
[0, 2]
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from typing import NamedTuple

import numpy as np
from numba import njit

from ..errors import InputError

__all__ = ["Events", "extract_events", "size_moments", "run_in_threads", "worker_count"]

# below this many items a second thread costs more than it saves
_THREAD_MIN_ITEMS = 2048
_BLOCKS_PER_THREAD = 8
_BLOCK_MIN_ITEMS = 512


class Events(NamedTuple):
    """Demand events of a panel in compressed-row form.

    Attributes
    ----------
    indptr : ndarray of int64, shape (n_items + 1,)
        Item ``i`` owns events ``indptr[i]`` to ``indptr[i+1] - 1``.
    pos : ndarray of int64, shape (n_events,)
        Position of each demand, counted in available periods from the item's
        first available demand (so each item's first event is at 0).
    size : ndarray of float64, shape (n_events,)
        Demand size (> 0).
    length : ndarray of int64, shape (n_items,)
        Available periods from the first available demand to the end of the
        panel (0 for an item that never sold while available).
    first : ndarray of int64, shape (n_items,)
        Panel column of the first available demand (``n_periods`` if none).
    n_available : ndarray of int64, shape (n_items,)
        Available periods over the whole row, leading zeros included.
    n_periods : int
        Columns of the panel the events came from.
    size_mean, size_var : ndarray of float64, shape (n_items,)
        Mean and variance (ddof 0) of each item's sizes (0 for an item without
        demand), taken while the sizes are written.
    """

    indptr: np.ndarray
    pos: np.ndarray
    size: np.ndarray
    length: np.ndarray
    first: np.ndarray
    n_available: np.ndarray
    n_periods: int
    size_mean: np.ndarray
    size_var: np.ndarray

    @property
    def n_items(self) -> int:
        return self.length.shape[0]

    def item(self, i: int) -> tuple[np.ndarray, np.ndarray, int]:
        """(positions, sizes, length) of item ``i``."""
        lo, hi = self.indptr[i], self.indptr[i + 1]
        return self.pos[lo:hi], self.size[lo:hi], int(self.length[i])


def worker_count() -> int:
    """Threads to use: the cores this process may run on (never more)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def run_in_threads(kernel, n_items: int, *args) -> None:
    """Run ``kernel(i0, i1, *args)`` over item ranges on one thread per core.

    Kernels are compiled with ``nogil=True`` and write disjoint rows of their
    output arrays, so plain threads parallelise them without numba's parallel
    back end (which would add compile time and its own thread pool). The items
    are cut into a few blocks per thread and handed out as threads free up, so
    a core slowed by other work does not hold the rest back.
    """
    workers = min(worker_count(), max(1, n_items // _THREAD_MIN_ITEMS))
    if workers <= 1:
        kernel(0, n_items, *args)
        return
    blocks = max(workers, min(workers * _BLOCKS_PER_THREAD, n_items // _BLOCK_MIN_ITEMS))
    bounds = np.linspace(0, n_items, blocks + 1).astype(np.int64)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        futures = [
            pool.submit(kernel, int(bounds[b]), int(bounds[b + 1]), *args) for b in range(blocks)
        ]
        for fut in futures:
            fut.result()


@njit(cache=True, nogil=True)
def _count_plain(seg):
    k = 0
    for c in range(seg.shape[0]):
        k += seg[c] > 0.0
    return k


@njit(cache=True, nogil=True)
def _count_masked(seg, m):
    k = 0
    n = 0
    for c in range(seg.shape[0]):
        ok = m[c]
        k += (seg[c] > 0.0) & ok
        n += ok
    return k, n


@njit(cache=True, nogil=True)
def _count_true(m):
    n = 0
    for c in range(m.shape[0]):
        n += m[c]
    return n


@njit(cache=True, nogil=True)
def _count_kernel(i0, i1, values, start, available, has_mask, first, last, length, n_avail, counts):
    # loops run over row slices: numba vectorises those, not offset index ranges
    n_periods = values.shape[1]
    for i in range(i0, i1):
        row = values[i]
        j = start[i]
        e = n_periods - 1
        if has_mask:
            m = available[i]
            while j < n_periods and not (row[j] > 0.0 and m[j]):
                j += 1
            head = _count_true(m[:j])
            if j < n_periods:
                while not (row[e] > 0.0 and m[e]):
                    e -= 1
                counts[i], length[i] = _count_masked(row[j : e + 1], m[j : e + 1])
                length[i] += _count_true(m[e + 1 :])
                n_avail[i] = head + length[i]
            else:
                n_avail[i] = head
        else:
            while j < n_periods and not row[j] > 0.0:
                j += 1
            n_avail[i] = n_periods
            if j < n_periods:
                while not row[e] > 0.0:
                    e -= 1
                counts[i] = _count_plain(row[j : e + 1])
                length[i] = n_periods - j
        if j >= n_periods:
            first[i] = n_periods
            last[i] = -1
            length[i] = 0
            counts[i] = 0
        else:
            first[i] = j
            last[i] = e


@njit(cache=True, nogil=True)
def _fill_plain(seg, pos, size):
    # branch-free: write every period, advance only past demands; the slice
    # ends at the row's last demand so nothing is written past the item's share
    k = 0
    for j in range(seg.shape[0]):
        v = seg[j]
        pos[k] = j
        size[k] = v
        k += v > 0.0


@njit(cache=True, nogil=True)
def _fill_masked(seg, m, pos, size):
    k = 0
    c = 0
    for j in range(seg.shape[0]):
        v = seg[j]
        ok = m[j]
        pos[k] = c
        size[k] = v
        k += (v > 0.0) & ok
        c += ok


@njit(cache=True, nogil=True)
def _fill_kernel(i0, i1, values, available, has_mask, first, last, indptr, pos, size,
                 size_mean, size_var):
    for i in range(i0, i1):
        lo = indptr[i]
        hi = indptr[i + 1]
        if hi == lo:
            size_mean[i] = 0.0
            size_var[i] = 0.0
            continue
        j0 = first[i]
        j1 = last[i] + 1
        if has_mask:
            _fill_masked(values[i, j0:j1], available[i, j0:j1], pos[lo:hi], size[lo:hi])
        else:
            _fill_plain(values[i, j0:j1], pos[lo:hi], size[lo:hi])
        # the item's sizes are still in cache: their moments cost next to nothing here
        size_mean[i], size_var[i] = _moments(size[lo:hi])


@njit(cache=True, nogil=True)
def _moments(s):
    total = 0.0
    for k in range(s.shape[0]):
        total += s[k]
    mu = total / s.shape[0]
    q = 0.0
    for k in range(s.shape[0]):
        d = s[k] - mu
        q += d * d
    return mu, q / s.shape[0]


_NO_MASK = np.ones((1, 1), dtype=np.bool_)


def extract_events(
    values: np.ndarray,
    start: np.ndarray | None = None,
    available: np.ndarray | None = None,
) -> Events:
    """Extract the demand events of every item in one pass.

    Parameters
    ----------
    values : ndarray of float64, shape (n_items, n_periods)
        Demand, never negative.
    start : ndarray of int64, shape (n_items,), optional
        First-demand offsets (columns before them hold no demand). Computed
        when omitted.
    available : ndarray of bool, shape (n_items, n_periods), optional
        False where the period must be skipped (out of stock).

    Returns
    -------
    Events

    Examples
    --------
    >>> ev = extract_events(np.array([[0., 1., 0., 4.], [0., 0., 0., 0.]]))
    >>> ev.indptr.tolist(), ev.length.tolist(), ev.first.tolist()
    ([0, 2, 2], [3, 0], [1, 4])
    """
    values = np.ascontiguousarray(values, dtype=np.float64)
    if values.ndim != 2:
        raise InputError(f"values must be 2-D (items x periods), got {values.ndim}-D")
    n_items, _ = values.shape
    if start is None:
        # the scan finds each first demand itself; no need for a separate pass
        start = np.zeros(n_items, np.int64)
    start = np.ascontiguousarray(start, dtype=np.int64)
    if start.shape != (n_items,):
        raise InputError(f"start must have shape ({n_items},), got {start.shape}")
    if (start < 0).any():
        raise InputError("start offsets must not be negative")
    if available is None:
        mask, has_mask = _NO_MASK, False
    else:
        mask = np.ascontiguousarray(available, dtype=np.bool_)
        if mask.shape != values.shape:
            raise InputError(f"available has shape {mask.shape}, values have {values.shape}")
        has_mask = True
    first = np.empty(n_items, np.int64)
    last = np.empty(n_items, np.int64)
    length = np.empty(n_items, np.int64)
    n_avail = np.empty(n_items, np.int64)
    counts = np.empty(n_items, np.int64)
    run_in_threads(
        _count_kernel, n_items, values, start, mask, has_mask, first, last, length, n_avail, counts
    )
    indptr = np.zeros(n_items + 1, np.int64)
    np.cumsum(counts, out=indptr[1:])
    n_events = int(indptr[-1])
    # allocated by numpy, not inside numba, so that large buffers get huge pages
    pos = np.empty(n_events, np.int64)
    size = np.empty(n_events, np.float64)
    size_mean = np.empty(n_items)
    size_var = np.empty(n_items)
    run_in_threads(
        _fill_kernel, n_items, values, mask, has_mask, first, last, indptr, pos, size,
        size_mean, size_var,
    )
    return Events(indptr, pos, size, length, first, n_avail, values.shape[1], size_mean,
                  size_var)


def size_moments(events: Events) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance (ddof 0) of each item's non-zero sizes; 0 for items with none.

    Examples
    --------
    >>> size_moments(extract_events(np.array([[1., 0., 3.]])))
    (array([2.]), array([1.]))
    """
    return events.size_mean, events.size_var
