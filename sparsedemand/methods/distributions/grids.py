"""PMFs on the integer grid, kind by kind: the mixture kinds (compound, ZIP, ZINB), normal, point.

Rows are computed in blocks of items with similar grids (:func:`size_blocks`);
a mixture row whose tail beyond its grid is above :data:`TAIL_TOLERANCE` is
retried on a grid twice as wide, up to the cap.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numba import njit
from scipy.special import ndtr

from .params import _LOG_MIN_WEIGHT, _MIN_CELL, TAIL_TOLERANCE, _initial_grid, _mixture_inputs, _mixture_moments

@njit(cache=True)
def _log_rising(a, x):
    """``log Gamma(a + x) - log Gamma(a)`` without cancellation for large ``a`` (Stirling series)."""
    if x == 0.0:
        return 0.0
    if a < 10.0:
        return math.lgamma(a + x) - math.lgamma(a)
    z = a + x
    return ((a - 0.5) * math.log1p(x / a) + x * math.log(z) - x
            + (1.0 / z - 1.0 / a) / 12.0 - (1.0 / z**3 - 1.0 / a**3) / 360.0)


@njit(cache=True)
def _add_component(row, base, xmax, w, poisson, a, lp, l1p):
    """Add ``w * P(X = x)`` at ``row[base + x]`` for ``x <= xmax``; return a bound on ``w * P(X > xmax)``.

    ``X`` is Poisson with mean ``a`` (``poisson``) or negative binomial with
    size ``a`` and success probability ``exp(lp)``. The walk starts at the mode
    (or the grid end) and uses the ratio of successive probabilities, stopping
    once the terms are negligible. Past the mode the ratio decreases, so the
    mass beyond the grid is at most a geometric series from the last term
    (at most ``w`` when the grid ends before the mode).
    """
    if poisson:
        mode = math.floor(a)
        q1 = 0.0
    else:
        q1 = math.exp(l1p)
        mode = math.floor((a - 1.0) * q1 / math.exp(lp)) if a > 1.0 else 0.0
    x0 = int(min(mode, float(xmax)))
    if poisson:
        logp = -a + x0 * math.log(a) - math.lgamma(x0 + 1.0)
    else:
        logp = _log_rising(a, float(x0)) - math.lgamma(x0 + 1.0) + a * lp + x0 * l1p
    p0 = math.exp(logp)
    row[base + x0] += w * p0
    p = p0
    for x in range(x0, 0, -1):  # downwards: P(x-1) from P(x)
        if poisson:
            p *= x / a
        else:
            p *= x / ((x - 1.0 + a) * q1)
        row[base + x - 1] += w * p
        if w * p < _MIN_CELL:
            break
    p = p0
    for x in range(x0 + 1, xmax + 1):  # upwards: P(x) from P(x-1)
        if poisson:
            p *= a / x
        else:
            p *= (x - 1.0 + a) / x * q1
        row[base + x] += w * p
        if w * p < _MIN_CELL and x > mode:
            return 0.0
    ratio = a / (xmax + 1.0) if poisson else (xmax + a) / (xmax + 1.0) * q1
    if xmax < mode or ratio >= 1.0:
        return w  # no geometric bound yet: at most the whole component
    return min(w, w * p * ratio / (1.0 - ratio))


@njit(cache=True)
def _mixture_kernel(n, q, shift, mu, size, grid, out, tail):
    """Total over ``n[i]`` periods of ``B * (shift + X)``, B ~ Bernoulli(q), X Poisson/NB (size inf = Poisson).

    Mixture over the number ``k`` of active periods: ``Binomial(k; n, q)`` times
    the law of ``k * shift + X_1 + ... + X_k`` (Poisson(k mu) or NB(k r, same
    success probability)). Rows are filled on ``0 .. grid[i]-1`` of ``out``;
    ``tail[i]`` receives a bound on the probability beyond the grid.
    """
    for i in range(out.shape[0]):
        row = out[i]
        ni = n[i]
        qi = q[i]
        K = grid[i]
        tail[i] = 0.0
        if ni <= 0 or qi <= 0.0:
            row[0] += 1.0
            continue
        c = shift[i]
        m = mu[i]
        r = size[i]
        poisson = not (r < np.inf)
        lp = 0.0
        l1p = 0.0
        if m > 0.0 and not poisson:
            lp = -math.log1p(m / r)
            l1p = math.log(m) - math.log(r + m)
        lq = math.log(qi)
        l1q = math.log1p(-qi) if qi < 1.0 else -np.inf
        lgn = math.lgamma(ni + 1.0)
        for k in range(ni + 1):
            if qi >= 1.0:
                if k != ni:
                    continue
                lw = 0.0
            else:
                lw = lgn - math.lgamma(k + 1.0) - math.lgamma(ni - k + 1.0) + k * lq + (ni - k) * l1q
            if lw < _LOG_MIN_WEIGHT:
                continue
            w = math.exp(lw)
            base = c * k
            xmax = K - 1 - base
            if xmax < 0:  # k active periods already need more than the grid
                tail[i] += w
                continue
            if k == 0 or m <= 0.0:
                row[base] += w
                continue
            a = k * m if poisson else k * r
            tail[i] += _add_component(row, base, xmax, w, poisson, a, lp, l1p)


# --------------------------------------------------------------------------- PMFs
#: Cells per dense working block; rows are grouped by grid size under this budget.
_BLOCK_CELLS = 1 << 22


def size_blocks(grid: np.ndarray, budget: int = _BLOCK_CELLS) -> list[np.ndarray]:
    """Positions into ``grid`` in increasing size, split so each block has at most ``budget`` cells.

    Examples
    --------
    >>> [b.tolist() for b in size_blocks(np.array([5, 1, 5]), budget=10)]
    [[1, 0], [2]]
    """
    order = np.argsort(grid, kind="stable")
    g = grid[order]
    out = []
    i = 0
    while i < len(order):
        lo, hi = i + 1, len(order)  # largest j with (j - i) * g[j - 1] <= budget
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if (mid - i) * g[mid - 1] <= budget:
                lo = mid
            else:
                hi = mid - 1
        out.append(order[i:lo])
        i = lo
    return out


def _store_rows(block: np.ndarray, rows: np.ndarray, out: list) -> None:
    """Put each row of ``block``, cut after its last positive cell, at ``out[rows[i]]``."""
    if block.shape[0] == 0:
        return
    positive = block > 0
    last = np.where(positive.any(axis=1), block.shape[1] - 1 - positive[:, ::-1].argmax(axis=1), 0)
    for r, row, end in zip(rows.tolist(), block, last.tolist()):
        out[r] = row[: end + 1].copy()


def pad_rows(rows: Sequence, width: int | None = None) -> np.ndarray:
    """Stack ragged PMF rows into one zero-padded ``(len(rows), width)`` array.

    Examples
    --------
    >>> pad_rows([np.array([1.0]), np.array([0.5, 0.5])]).tolist()
    [[1.0, 0.0], [0.5, 0.5]]
    """
    if width is None:
        width = max((len(r) for r in rows), default=1)
    out = np.zeros((len(rows), width))
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def _mixture_rows(kind: str, prm: dict, n: np.ndarray, cap: int) -> list:
    q, shift, m, r = (np.ascontiguousarray(x) for x in _mixture_inputs(kind, prm))
    q, m, r = (x.astype(np.float64) for x in (q, m, r))
    shift = shift.astype(np.int64)
    grid = _initial_grid(*_mixture_moments(q, shift, m, r, n), cap)
    out: list = [None] * len(n)
    pending = np.arange(len(n))
    while pending.size:
        retry = []
        for blk in size_blocks(grid[pending]):
            rows = pending[blk]
            block = np.zeros((rows.size, int(grid[rows].max())))
            tail = np.zeros(rows.size)
            _mixture_kernel(n[rows], q[rows], shift[rows], m[rows], r[rows], grid[rows], block, tail)
            short = tail > TAIL_TOLERANCE
            capped = short & (grid[rows] >= cap)
            # at the cap the tail goes on the last cell so that each row sums to 1
            left = np.maximum(1.0 - block.sum(axis=1), 0.0)
            block[np.flatnonzero(capped), grid[rows[capped]] - 1] += left[capped]
            done = ~short | capped
            block /= block.sum(axis=1, keepdims=True)  # rounding in the log-probabilities of large counts
            _store_rows(block[done], rows[done], out)
            retry.append(rows[~done])
        pending = np.concatenate(retry)
        grid[pending] = np.minimum(grid[pending] * 2, cap)
    return out


def _normal_rows(total: np.ndarray, sd: np.ndarray, cap: int) -> list:
    grid = _initial_grid(total, sd * sd, cap)
    out: list = [None] * len(total)
    for rows in size_blocks(grid):
        width = int(grid[rows].max())
        k = np.arange(width, dtype=np.float64)
        s = sd[rows][:, None]
        safe = np.where(s > 0, s, 1.0)
        upper = ndtr((k[None, :] + 0.5 - total[rows][:, None]) / safe)
        block = np.diff(upper, axis=1, prepend=0.0)
        block[:, -1] += 1.0 - upper[:, -1]
        flat = sd[rows] <= 0
        if flat.any():
            block[flat] = _point_block(total[rows][flat], width)
        _store_rows(np.clip(block, 0.0, None), rows, out)
    return out


def _point_block(total: np.ndarray, width: int) -> np.ndarray:
    """All mass on ``total``, split between its neighbouring whole numbers to keep the mean."""
    lo = np.floor(total + 1e-12).astype(np.int64)
    frac = np.clip(total - lo, 0.0, 1.0)
    frac[frac < 1e-12] = 0.0
    block = np.zeros((len(total), width))
    rows = np.arange(len(total))
    block[rows, np.minimum(lo, width - 1)] += 1.0 - frac
    hi = frac > 0
    block[rows[hi], np.minimum(lo[hi] + 1, width - 1)] += frac[hi]
    return block


def _point_rows(total: np.ndarray, cap: int) -> list:
    total = np.minimum(total, cap - 1)
    grid = np.floor(total + 1e-12).astype(np.int64) + 2
    out: list = [None] * len(total)
    for rows in size_blocks(grid):
        _store_rows(_point_block(total[rows], int(grid[rows].max())), rows, out)
    return out
