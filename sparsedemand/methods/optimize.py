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
bounds, then Brent's method (parabolic interpolation safeguarded by
golden-section steps; Brent 1973, Algorithms for Minimization without
Derivatives, ch. 5) inside the two grid cells around the best grid point, to
a width of ``TOL``; the best grid point and its two neighbours give the first
parabola. On the smooth costs this takes about 8 steps where golden section
alone takes 23. Two free constants: a ``GRID_2D`` x ``GRID_2D`` grid, then
``ROUNDS_2D`` rounds of the same line search (to a width of ``TOL_2D``) along
each axis around the incumbent, the second round in half-cells. The result
is the best point ever evaluated, so it is never worse than any grid point;
ties keep the earliest point (the smaller constant). Like any local search,
the refinement can stop in a second, shallower dip of a non-smooth cost
(MAE, MAR) inside the bracket.

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
    # the MSE and MAE terms vanish for m = 0, so these common cases need no test on m
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
(_PH, _LO, _HI, _N, _I, _BX, _BF, _BI, _A, _B, _XB, _W, _V, _FX, _FW, _FV, _DD, _EE, _X, _TL,
 _PREV, _LEFT, _RIGHT, _WANT) = range(24)
_LINE = 24
_GRID, _START, _BRENT, _DONE = 0.0, 1.0, 2.0, 3.0
_CGOLD = (3.0 - math.sqrt(5.0)) / 2.0
_MAX_STEPS = 200  # a guard only: the bracket shrinks at every step


@njit("void(float64[::1], int64)", cache=True, nogil=True)
def _brent_next(st, o):
    # choose the next point: a parabolic step when it is safe, a golden-section step otherwise
    a = st[o + _A]
    b = st[o + _B]
    x = st[o + _XB]
    tol1 = st[o + _TL] / 4.0
    tol2 = 2.0 * tol1
    xm = 0.5 * (a + b)
    if abs(x - xm) <= tol2 - 0.5 * (b - a):
        st[o + _PH] = _DONE
        return
    e = st[o + _EE]
    d = st[o + _DD]
    golden = True
    if abs(e) > tol1:
        w, v = st[o + _W], st[o + _V]
        fx, fw, fv = st[o + _FX], st[o + _FW], st[o + _FV]
        r = (x - w) * (fx - fv)
        q = (x - v) * (fx - fw)
        p = (x - v) * q - (x - w) * r
        q = 2.0 * (q - r)
        if q > 0.0:
            p = -p
        q = abs(q)
        e_before = e
        e = d
        if (q > 0.0 and abs(p) < abs(0.5 * q * e_before) and p > q * (a - x)
                and p < q * (b - x)):
            d = p / q
            u = x + d
            if u - a < tol2 or b - u < tol2:
                d = tol1 if xm >= x else -tol1
            golden = False
    if golden:
        e = (a - x) if x >= xm else (b - x)
        d = _CGOLD * e
    if abs(d) < tol1:
        d = tol1 if d >= 0.0 else -tol1
    st[o + _EE] = e
    st[o + _DD] = d
    st[o + _X] = x + d


@njit("void(float64[::1], int64, float64, float64)", cache=True, nogil=True)
def _brent_setup(st, o, a, b):
    # refine inside [a, b]; after a grid, its best point and that point's grid
    # neighbours seed the first parabola, otherwise start at the golden point
    if b - a <= st[o + _TL]:
        st[o + _PH] = _DONE
        return
    st[o + _A] = a
    st[o + _B] = b
    st[o + _DD] = 0.0
    if st[o + _N] >= 2.0:
        x = st[o + _BX]
        st[o + _XB] = x
        st[o + _FX] = st[o + _BF]
        step = (st[o + _HI] - st[o + _LO]) / (st[o + _N] - 1.0)
        left, right = st[o + _LEFT], st[o + _RIGHT]
        w, fw = (x - step, left) if left == left else (x + step, right)
        v, fv = (x + step, right) if right == right else (w, fw)
        st[o + _W] = w
        st[o + _FW] = fw if fw == fw else _INF
        st[o + _V] = v
        st[o + _FV] = fv if fv == fv else _INF
        st[o + _EE] = b - a  # lets the first step be parabolic
        st[o + _PH] = _BRENT
        _brent_next(st, o)
    else:
        x = a + _CGOLD * (b - a)
        st[o + _XB] = x
        st[o + _W] = x
        st[o + _V] = x
        st[o + _EE] = 0.0
        st[o + _X] = x
        st[o + _PH] = _START


@njit("void(float64[::1], int64, float64, float64, int64, float64)", cache=True, nogil=True)
def line_start(st, o, lo, hi, n_grid, tol):
    """Search [lo, hi] to width ``tol`` in ``st[o:o+24]``; ``n_grid < 2``: no grid."""
    st[o + _TL] = tol
    st[o + _LO] = lo
    st[o + _HI] = hi
    st[o + _N] = n_grid
    st[o + _I] = 0.0
    st[o + _BX] = lo
    st[o + _BF] = _INF
    st[o + _BI] = 0.0
    st[o + _PREV] = np.nan
    st[o + _LEFT] = np.nan
    st[o + _RIGHT] = np.nan
    st[o + _WANT] = 0.0
    if n_grid >= 2:
        st[o + _PH] = _GRID
    else:
        _brent_setup(st, o, lo, hi)


@njit("float64(float64[::1], int64)", cache=True, nogil=True)
def line_ask(st, o):
    """Next point to evaluate, NaN when the search is over."""
    ph = st[o + _PH]
    if ph == _GRID:
        x = st[o + _LO] + (st[o + _HI] - st[o + _LO]) * st[o + _I] / (st[o + _N] - 1.0)
        st[o + _X] = x
        return x
    if ph == _DONE:
        return np.nan
    return st[o + _X]


@njit("void(float64[::1], int64, float64)", cache=True, nogil=True)
def line_tell(st, o, value):
    """Report the cost at the point last asked for."""
    if value != value:
        value = _INF
    u = st[o + _X]
    ph = st[o + _PH]
    improved = value < st[o + _BF]
    if improved:
        st[o + _BF] = value
        st[o + _BX] = u
    if ph == _GRID:
        if st[o + _WANT] == 1.0:
            st[o + _RIGHT] = value
            st[o + _WANT] = 0.0
        if improved:
            st[o + _BI] = st[o + _I]
            st[o + _LEFT] = st[o + _PREV]
            st[o + _RIGHT] = np.nan
            st[o + _WANT] = 1.0
        st[o + _PREV] = value
        st[o + _I] += 1.0
        if st[o + _I] >= st[o + _N]:
            lo = st[o + _LO]
            hi = st[o + _HI]
            step = (hi - lo) / (st[o + _N] - 1.0)
            centre = lo + step * st[o + _BI]
            _brent_setup(st, o, max(lo, centre - step), min(hi, centre + step))
        return
    if ph == _START:
        st[o + _FX] = value
        st[o + _FW] = value
        st[o + _FV] = value
        st[o + _PH] = _BRENT
        _brent_next(st, o)
        return
    if ph != _BRENT:
        return
    st[o + _I] += 1.0
    if st[o + _I] > st[o + _N] + _MAX_STEPS:
        st[o + _PH] = _DONE
        return
    x = st[o + _XB]
    fx = st[o + _FX]
    if value <= fx:
        if u >= x:
            st[o + _A] = x
        else:
            st[o + _B] = x
        st[o + _V] = st[o + _W]
        st[o + _FV] = st[o + _FW]
        st[o + _W] = x
        st[o + _FW] = fx
        st[o + _XB] = u
        st[o + _FX] = value
    else:
        if u < x:
            st[o + _A] = u
        else:
            st[o + _B] = u
        w = st[o + _W]
        v = st[o + _V]
        if value <= st[o + _FW] or w == x:
            st[o + _V] = w
            st[o + _FV] = st[o + _FW]
            st[o + _W] = u
            st[o + _FW] = value
        elif value <= st[o + _FV] or v == x or v == w:
            st[o + _V] = u
            st[o + _FV] = value
    _brent_next(st, o)


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
