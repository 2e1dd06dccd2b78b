"""Bounded parameter search and in-sample cost accounting, inside numba.

Two small pieces shared by every smoothing kernel:

* **Cost accumulators.** A kernel walks an item's demand events, not its
  periods. Between two demands the actual demand is zero and the forecast is
  either constant (Croston family, moving average) or decays geometrically
  (SES, TSB), so the contribution of a whole run of zeros to each cost has a
  closed form. :func:`run_constant`, :func:`run_geometric` and
  :func:`point_error` add those contributions; :func:`finish_cost` divides by
  the number of one-step errors.

* **Ask/tell searches.** numba cannot cache a function that receives another
  function as an argument, so the optimiser is a small state machine kept in
  a float64 array: the kernel asks for the next point, evaluates its own cost
  there and tells the value back. :func:`plan_start` sets up the right search
  for a pair of smoothing constants (fixed, one free, both tied, or both
  free), and :func:`plan_ask` / :func:`plan_tell` drive it.

Costs
-----
With one-step in-sample errors ``e_t = y_t - f_t`` over the periods
``t = 1 .. n-1`` of the trimmed, available history and the cumulative error
``E_t = e_1 + ... + e_t``:

* ``mse`` = mean of ``e_t**2``;
* ``mae`` = mean of ``|e_t|``;
* ``mar`` = mean of ``|E_t|`` and ``msr`` = mean of ``E_t**2``: the mean
  absolute and mean squared *rate* costs of Kourentzes (2014, International
  Journal of Production Economics 156:180-190), which score how far the
  cumulative forecast drifts from the cumulative demand, so that a biased
  forecast cannot hide behind many well-predicted zeros. (The normalisation by
  the number of periods does not change the optimum.)

Search
------
One free constant: an evenly spaced grid of ``GRID_1D`` points over the
bounds, then golden-section refinement inside the two grid cells around the
best grid point, to a width of ``TOL``. Two free constants: a ``GRID_2D`` x
``GRID_2D`` grid, then ``ROUNDS_2D`` rounds of golden-section line searches
(to a width of ``TOL_2D``) along each axis around the incumbent, the second
round in half-cells. The result is the best point ever
evaluated, so it is never worse than any grid point; ties keep the earliest
point (the smaller constant).

Examples
--------
>>> import numpy as np
>>> st = np.empty(STATE_SIZE)
>>> plan_start(st, np.nan, 0.3, True, 0.01, 0.5)
>>> while True:
...     a, b = plan_ask(st)
...     if a != a:
...         break
...     plan_tell(st, (a - 0.2) ** 2)
>>> round(plan_best(st)[0], 3)
0.2
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = [
    "COSTS",
    "MSE",
    "MAE",
    "MAR",
    "MSR",
    "STATE_SIZE",
    "WORK_SIZE",
    "GRID_1D",
    "GRID_2D",
    "TOL",
    "run_constant",
    "run_geometric",
    "point_error",
    "finish_cost",
    "fill_powers",
    "geometric_sums",
    "POWERS",
    "line_start",
    "line_ask",
    "line_tell",
    "plan_start",
    "plan_ask",
    "plan_tell",
    "plan_best",
]

COSTS = ("mse", "mae", "mar", "msr")
MSE, MAE, MAR, MSR = 0, 1, 2, 3

GRID_1D = 24
GRID_2D = 5
ROUNDS_2D = 2
TOL = 1e-6
TOL_2D = 1e-3
_INVPHI = (math.sqrt(5.0) - 1.0) / 2.0
_INF = np.inf


# --------------------------------------------------------------------- costs
@njit("UniTuple(float64, 2)(int64, float64, float64, float64)", cache=True, nogil=True)
def point_error(code, acc, cum, e):
    """Add one error ``e``; return the new (accumulated cost, cumulative error)."""
    cum += e
    if code == MSE:
        acc += e * e
    elif code == MAE:
        acc += abs(e)
    elif code == MAR:
        acc += abs(cum)
    else:
        acc += cum * cum
    return acc, cum


@njit("UniTuple(float64, 2)(int64, float64, float64, float64, int64)", cache=True, nogil=True)
def run_constant(code, acc, cum, f, m):
    """Add ``m`` periods of zero demand forecast at a constant ``f >= 0``.

    The cumulative error after ``k`` of them is ``cum - k f``.
    """
    mf = float(max(m, 0))
    # with m = 0 every branch adds nothing, so short runs need no test of their own
    if code == MSE:
        return acc + mf * f * f, cum - mf * f
    if code == MAE:
        return acc + mf * f, cum - mf * f
    if m <= 0:
        return acc, cum
    s1 = mf * (mf + 1.0) / 2.0
    if code == MSR:
        s2 = mf * (mf + 1.0) * (2.0 * mf + 1.0) / 6.0
        acc += mf * cum * cum - 2.0 * cum * f * s1 + f * f * s2
    else:
        if f <= 0.0:
            acc += mf * abs(cum)
        else:
            # the first c steps keep E_k >= 0, the rest are negative
            ratio = cum / f
            if ratio <= 0.0:
                c = 0.0
            elif ratio >= mf:
                c = mf
            else:
                c = math.floor(ratio)
            sc = c * (c + 1.0) / 2.0
            acc += (c * cum - f * sc) + (f * (s1 - sc) - (mf - c) * cum)
    return acc, cum - mf * f


@njit(
    "UniTuple(float64, 2)(int64, float64, float64, float64, float64, float64, float64, float64,"
    " float64, int64)",
    cache=True,
    nogil=True,
)
def run_geometric(code, acc, cum, f0, r, log_r, rm, sm, qm, m):
    """Add ``m`` periods of zero demand forecast at ``f0 * r**k`` (k = 0 .. m-1).

    Requires ``0 <= r < 1``, ``log_r = log(r)`` (``-inf`` for 0) and the sums
    of :func:`geometric_sums`: ``rm = r**m``, ``sm = sum r**k`` and
    ``qm = sum r**(2k)`` over ``k < m``. Returns (accumulated cost,
    cumulative error).
    """
    if m <= 0:
        return acc, cum
    if code == MSE:
        acc += f0 * f0 * qm
    elif code == MAE:
        acc += f0 * sm
    else:
        # E_k = A + B r**k for k = 1 .. m
        mf = float(m)
        big_b = f0 / (1.0 - r)
        big_a = cum - big_b
        q1 = r * sm
        if code == MSR:
            acc += mf * big_a * big_a + 2.0 * big_a * big_b * q1 + big_b * big_b * r * r * qm
        elif big_b <= 0.0:
            acc += mf * abs(big_a)
        else:
            # E_k decreases in k: the first c steps are non-negative
            if big_a >= 0.0:
                c = mf
            else:
                level = -big_a / big_b
                if level >= 1.0 or r <= 0.0:
                    c = 0.0
                else:
                    c = math.floor(math.log(level) / log_r)
                    c = min(max(c, 0.0), mf)
            rc = math.exp(c * log_r) if r > 0.0 else (1.0 if c == 0.0 else 0.0)
            q1c = r * (1.0 - rc) / (1.0 - r)
            head = c * big_a + big_b * q1c
            tail = (mf - c) * big_a + big_b * (q1 - q1c)
            acc += head - tail
    return acc, cum - f0 * sm


POWERS = 64


@njit("void(float64[::1], float64)", cache=True, nogil=True)
def fill_powers(work, r):
    """Tables for ``m < POWERS``: ``r**m``, ``sum r**k`` and ``sum r**(2k)`` over ``k < m``.

    Most gaps between demands are short, so lookups replace ``exp`` and
    divisions in the inner loops.
    """
    x = 1.0
    s = 0.0
    q = 0.0
    for m in range(POWERS):
        work[m] = x
        work[POWERS + m] = s
        work[2 * POWERS + m] = q
        s += x
        q += x * x
        x *= r


@njit("UniTuple(float64, 3)(float64[::1], float64, float64, int64)", cache=True, nogil=True)
def geometric_sums(work, r, log_r, m):
    """(``r**m``, ``sum r**k``, ``sum r**(2k)``) over ``k < m``, from the tables when short."""
    if m < POWERS:
        return work[m], work[POWERS + m], work[2 * POWERS + m]
    rm = math.exp(m * log_r) if r > 0.0 else 0.0
    return rm, (1.0 - rm) / (1.0 - r), (1.0 - rm * rm) / (1.0 - r * r)


@njit(cache=True, nogil=True)
def finish_cost(acc, count):
    """Mean cost over ``count`` one-step errors (NaN when there are none)."""
    if count <= 0:
        return np.nan
    return acc / count


# ------------------------------------------------------------ 1-D line search
# state layout of a line search (offsets inside the state array)
_PH, _LO, _HI, _N, _I, _BX, _BF, _BI, _A, _B, _C, _D, _FC, _FD, _STG, _X, _TL = range(17)
_LINE = 17
_GRID, _GOLD, _DONE = 0.0, 1.0, 2.0


@njit("void(float64[::1], int64, float64, float64)", cache=True, nogil=True)
def _golden_setup(st, o, a, b):
    if b - a <= st[o + _TL]:
        st[o + _PH] = _DONE
        return
    st[o + _A] = a
    st[o + _B] = b
    st[o + _C] = b - _INVPHI * (b - a)
    st[o + _D] = a + _INVPHI * (b - a)
    st[o + _STG] = 0.0
    st[o + _PH] = _GOLD


@njit("void(float64[::1], int64, float64, float64, int64, float64)", cache=True, nogil=True)
def line_start(st, o, lo, hi, n_grid, tol):
    """Search [lo, hi] to width ``tol`` in ``st[o:o+17]``; ``n_grid < 2``: golden only."""
    st[o + _TL] = tol
    st[o + _LO] = lo
    st[o + _HI] = hi
    st[o + _N] = n_grid
    st[o + _I] = 0.0
    st[o + _BX] = lo
    st[o + _BF] = _INF
    st[o + _BI] = 0.0
    if n_grid >= 2:
        st[o + _PH] = _GRID
    else:
        _golden_setup(st, o, lo, hi)


@njit("float64(float64[::1], int64)", cache=True, nogil=True)
def line_ask(st, o):
    """Next point to evaluate, NaN when the search is over."""
    ph = st[o + _PH]
    if ph == _GRID:
        x = st[o + _LO] + (st[o + _HI] - st[o + _LO]) * st[o + _I] / (st[o + _N] - 1.0)
    elif ph == _GOLD:
        stage = st[o + _STG]
        x = st[o + _C] if stage == 0.0 or stage == 2.0 else st[o + _D]
    else:
        x = np.nan
    st[o + _X] = x
    return x


@njit("void(float64[::1], int64, float64)", cache=True, nogil=True)
def line_tell(st, o, value):
    """Report the cost at the point last asked for."""
    if value != value:
        value = _INF
    x = st[o + _X]
    ph = st[o + _PH]
    improved = value < st[o + _BF]
    if improved:
        st[o + _BF] = value
        st[o + _BX] = x
    if ph == _GRID:
        if improved:
            st[o + _BI] = st[o + _I]
        st[o + _I] += 1.0
        if st[o + _I] >= st[o + _N]:
            lo = st[o + _LO]
            hi = st[o + _HI]
            step = (hi - lo) / (st[o + _N] - 1.0)
            centre = lo + step * st[o + _BI]
            _golden_setup(st, o, max(lo, centre - step), min(hi, centre + step))
        return
    if ph != _GOLD:
        return
    stage = st[o + _STG]
    if stage == 0.0:
        st[o + _FC] = value
        st[o + _STG] = 1.0
        return
    if stage == 1.0 or stage == 3.0:
        st[o + _FD] = value
    else:
        st[o + _FC] = value
    a = st[o + _A]
    b = st[o + _B]
    c = st[o + _C]
    d = st[o + _D]
    if st[o + _FC] < st[o + _FD]:
        b = d
        d = c
        st[o + _FD] = st[o + _FC]
        c = b - _INVPHI * (b - a)
        st[o + _STG] = 2.0
    else:
        a = c
        c = d
        st[o + _FC] = st[o + _FD]
        d = a + _INVPHI * (b - a)
        st[o + _STG] = 3.0
    st[o + _A] = a
    st[o + _B] = b
    st[o + _C] = c
    st[o + _D] = d
    if b - a <= st[o + _TL]:
        st[o + _PH] = _DONE


# --------------------------------------------------- plan for two constants
# plan fields, then one line search at offset _SUB
_MODE, _FA, _FB, _BA2, _BB2, _BF2, _LO2, _HI2, _AXIS, _ROUND, _STEP, _GI, _AA, _AB = range(14)
_SUB = 16
STATE_SIZE = _SUB + _LINE
WORK_SIZE = STATE_SIZE + 3 * POWERS  # search state, then the tables of fill_powers
_FIXED, _FREE_A, _FREE_B, _TIED, _BOTH = 0.0, 1.0, 2.0, 3.0, 4.0
_PLAN_GRID, _PLAN_LINE, _PLAN_DONE = 0.0, 1.0, 2.0


@njit("void(float64[::1], float64, float64, boolean, float64, float64)", cache=True, nogil=True)
def plan_start(st, alpha, beta, tie, lo, hi):
    """Prepare the search for (alpha, beta); NaN marks a constant to optimise.

    ``tie=True`` makes beta follow alpha (one constant for both roles).
    """
    st[_LO2] = lo
    st[_HI2] = hi
    st[_FA] = alpha
    st[_FB] = beta
    free_a = alpha != alpha
    free_b = (not tie) and beta != beta
    # a free constant starts at the lower bound, kept when no cost is defined
    st[_BA2] = lo if free_a else alpha
    st[_BB2] = st[_BA2] if tie else (lo if free_b else beta)
    st[_BF2] = _INF
    if tie:
        st[_MODE] = _TIED if free_a else _FIXED
    elif free_a and free_b:
        st[_MODE] = _BOTH
    elif free_a:
        st[_MODE] = _FREE_A
    elif free_b:
        st[_MODE] = _FREE_B
    else:
        st[_MODE] = _FIXED
    mode = st[_MODE]
    if mode == _FIXED:
        st[_STEP] = _PLAN_DONE
    elif mode == _BOTH:
        st[_STEP] = _PLAN_GRID
        st[_GI] = 0.0
    else:
        st[_STEP] = _PLAN_LINE
        line_start(st, _SUB, lo, hi, GRID_1D, TOL)


@njit(cache=True, nogil=True)
def plan_ask(st):
    """Next (alpha, beta) to evaluate; (NaN, NaN) when the search is over."""
    step = st[_STEP]
    mode = st[_MODE]
    if step == _PLAN_DONE:
        a = np.nan
        b = np.nan
    elif step == _PLAN_GRID:
        lo = st[_LO2]
        h = (st[_HI2] - lo) / (GRID_2D - 1.0)
        gi = int(st[_GI])
        a = lo + h * (gi // GRID_2D)
        b = lo + h * (gi % GRID_2D)
    else:
        x = line_ask(st, _SUB)
        if mode == _FREE_A:
            a = x
            b = st[_FB]
        elif mode == _FREE_B:
            a = st[_FA]
            b = x
        elif mode == _TIED:
            a = x
            b = x
        elif st[_AXIS] == 0.0:
            a = x
            b = st[_BB2]
        else:
            a = st[_BA2]
            b = x
    st[_AA] = a
    st[_AB] = b
    return a, b


@njit(cache=True, nogil=True)
def _plan_axis(st):
    # a line search along the current axis, around the incumbent, one grid cell each side
    lo = st[_LO2]
    hi = st[_HI2]
    h = (hi - lo) / (GRID_2D - 1.0) / (1.0 + st[_ROUND])
    centre = st[_BA2] if st[_AXIS] == 0.0 else st[_BB2]
    line_start(st, _SUB, max(lo, centre - h), min(hi, centre + h), 0, TOL_2D)


@njit(cache=True, nogil=True)
def plan_tell(st, value):
    """Report the cost at the (alpha, beta) last asked for."""
    if value != value:
        value = _INF
    if value < st[_BF2]:
        st[_BF2] = value
        st[_BA2] = st[_AA]
        st[_BB2] = st[_AB]
    step = st[_STEP]
    if step == _PLAN_GRID:
        st[_GI] += 1.0
        if st[_GI] >= GRID_2D * GRID_2D:
            st[_STEP] = _PLAN_LINE
            st[_AXIS] = 0.0
            st[_ROUND] = 0.0
            _plan_axis(st)
        return
    if step != _PLAN_LINE:
        return
    line_tell(st, _SUB, value)
    if st[_SUB + _PH] != _DONE:
        return
    if st[_MODE] != _BOTH:
        st[_STEP] = _PLAN_DONE
        return
    if st[_AXIS] == 0.0:
        st[_AXIS] = 1.0
    else:
        st[_AXIS] = 0.0
        st[_ROUND] += 1.0
        if st[_ROUND] >= ROUNDS_2D:
            st[_STEP] = _PLAN_DONE
            return
    _plan_axis(st)


@njit(cache=True, nogil=True)
def plan_best(st):
    """(alpha, beta, cost) of the best point evaluated (the fixed pair when nothing was free)."""
    return st[_BA2], st[_BB2], st[_BF2]
