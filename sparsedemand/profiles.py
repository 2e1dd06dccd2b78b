"""Multiplicative calendar profiles per item: estimation, shrinkage and the decision.

Slots: ``weekday`` (7, Monday first) in daily panels; ``month`` of year (12) in day,
week (the month of the week's middle day) and month panels, only for items with two
full years (730 days, 104 weeks, 24 months) from their first demand. Integer
calendars get none. Kinds multiply; months are estimated and tested on exposure
weighted by the item's weekday factors (history divided by the weekday profile).

Estimation: in-stock periods from the first demand on. Per slot ``s``: exposure
``E_s`` (in-stock periods, weekday-weighted for months), volume ``V_s``, demands
``n_s``; ``r = V / E``. Raw factor ``x_s = V_s / (E_s r)``; a profile is normalised
so one cycle averages 1 (weekdays alike; months by their days in day and week
panels). Group profile: ``sum_i V_is / sum_i E_is r_i``, pooled volumes against
what flat items would sell in the same in-stock periods.

Tests (``S`` slots with exposure; ``e_s``, ``m_s`` demands and volume expected
under the null profile, flat or the group's):

* occurrence: ``X2 = sum_s (n_s - e_s)^2 / (e_s (1 - e_s / E_s))`` on ``S - 1``
  df; against flat, Pearson's test of the 2 x S table sold / not sold by slot.
* volume, from ``volume_demands_per_slot * S`` demands (slot means near normal):
  quasi-Poisson ``F = sum_s (V_s - m_s)^2 / (E_s sigma2) / (S - 1)`` on
  ``(S - 1, E - S)`` df, ``sigma2`` the within-slot variance of period demand
  (overdispersion allowed); against flat it is one-way ANOVA by slot.
* item: ``p = min(1, 2 min(p_occ, p_vol))`` (Bonferroni), ``p_occ`` alone without
  the volume test; untested under ``item_demands_per_slot * S`` demands.
* group: ``X2 = sum_s (V_gs - m_gs)^2 / sum_i E_is sigma2_i`` on ``S - 1`` df.
* fit to the group: the volume test against the group's profile where it
  applies, else the occurrence test (a fast item's cycle is in its sizes).

Item and fit tests get Benjamini-Hochberg q-values per kind; group tests Holm's
family-wise adjustment, since one false group profile reaches all its members.
Significant means adjusted p <= ``fdr``.

Decision per item and kind: groups are split into slow and frequent items (a sale
in at least half the in-stock periods), whose cycles differ in kind (occurrences
against sizes) and whose volumes would swamp the slow ones. The reference group
is the most specific level (location x category, category, location, all items;
missing attributes skip levels) with ``group_demands_per_slot * S`` demands; a
tested group without a cycle is evidence against one: the search stops there.
The group counts when significant and the item's fit test does not reject it.
Item significant: ``own shrunk toward <level>`` if the group counts, else ``own
shrunk toward flat``. Not significant: ``<level>`` if the group counts, else ``none``.

Shrinkage (Buhlmann-Straub credibility with a count-type variance, as in the
Poisson-gamma model; from memory: Buhlmann and Straub 1970, Klugman, Panjer and
Willmot, *Loss Models*): ``f_s = w_s x_s + (1 - w_s) c_s``, ``c`` the group's
profile (flat when it does not count), ``w_s = m_s / (m_s + k c_s)`` with
``m_s = E_s n / E`` the slot's demands at the item's mean demand rate (a slot
where a slow item never sells still weighs). ``Var x_s ~ c_s s2 / m_s``: per
reference group ``k = s2 / a``, ``s2`` the demand-weighted mean of
``sigma2_i p_i / r_i^2`` (``p_i = n_i / E_i``), ``a = sum_s [sum_i m_is (x_is -
c_s)^2 - I_s c_s s2] / sum_is m_is`` (``I_s`` items with weight in slot ``s``),
``k`` infinite when ``a <= 0``. The result is normalised again.
"""

from __future__ import annotations

from collections import namedtuple
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from numba import njit
from scipy import sparse, stats

from .errors import InputError
from .methods.events import run_in_threads
from .panel import DemandPanel

__all__ = ["CalendarProfiles", "ProfileTable", "estimate_profiles", "profile_kinds",
           "calendar_slots", "benjamini_hochberg", "holm", "occurrence_test", "volume_test"]

WEEKDAYS = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
_MONTH_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=np.float64)
_TWO_YEARS = {"day": 730, "week": 104, "month": 24}
LEVELS = ("location x category", "category", "location", "all items")


def profile_kinds(frequency: str | None) -> tuple[str, ...]:
    """Profile kinds that apply to a calendar frequency.

    Examples
    --------
    >>> profile_kinds("day"), profile_kinds("week"), profile_kinds(None)
    (('weekday', 'month'), ('month',), ())
    """
    kinds = {"day": ("weekday", "month"), "week": ("month",), "month": ("month",)}
    return kinds.get(frequency or "", ())


def calendar_slots(periods: pd.Index, kind: str) -> np.ndarray:
    """Slot index (int64) of each period: weekday 0 = Monday, month 0 = January.

    A week belongs to the month of its middle (fourth) day, which holds most of
    its days.

    Examples
    --------
    >>> calendar_slots(pd.period_range("2024-01-01", periods=3, freq="D"), "weekday")
    array([0, 1, 2])
    """
    if not isinstance(periods, pd.PeriodIndex):
        raise InputError("calendar profiles need day, week or month periods")
    code = periods.freqstr
    if kind == "weekday":
        if code != "D":
            raise InputError(f"a weekday profile needs daily periods, got {code!r}")
        return np.asarray(periods.day_of_week, dtype=np.int64)
    if kind != "month":
        raise InputError(f"unknown profile kind {kind!r}")
    if code.startswith("W"):
        middle = periods.start_time + pd.Timedelta(days=3)
        return np.asarray(middle.month, dtype=np.int64) - 1
    return np.asarray(periods.month, dtype=np.int64) - 1


def _cycle_weights(kind: str, frequency: str) -> np.ndarray:
    """Weight of each slot in one full cycle, for the normalisation."""
    if kind == "weekday" or frequency == "month":
        return np.ones(7 if kind == "weekday" else 12)
    return _MONTH_DAYS.copy()


def _normalise(factors: np.ndarray, weights: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        out = factors / (factors @ weights / weights.sum())[:, None]
    return np.where(np.isfinite(out), out, 1.0)


@njit(cache=True, nogil=True)
def _tally_kernel(i0, i1, values, start, available, has_mask, cells, out):
    """Rows i0..i1: per calendar cell exposure, volume, squared volume and demands.

    Only in-stock periods from the item's first demand count.
    """
    n_periods = values.shape[1]
    acc = np.zeros(out.shape[1] * 4)
    for i in range(i0, i1):
        acc[:] = 0.0
        for t in range(start[i], n_periods):
            if has_mask and not available[i, t]:
                continue
            y = values[i, t]
            c = cells[t] * 4
            acc[c] += 1.0
            acc[c + 1] += y
            acc[c + 2] += y * y
            acc[c + 3] += 1.0 if y > 0 else 0.0
        for c in range(out.shape[1]):
            for k in range(4):
                out[i, c, k] = acc[c * 4 + k]


@dataclass(frozen=True)
class _Tally:
    exposure: np.ndarray  # items x slots: in-stock periods
    volume: np.ndarray
    squares: np.ndarray
    demands: np.ndarray
    effective: np.ndarray  # exposure weighted by the item's other profile (else = exposure)


def _tallies(panel: DemandPanel, kinds: tuple[str, ...]) -> np.ndarray:
    """One pass over the panel: items x weekday x month x 4 (weekday axis of 1 if not daily)."""
    month = calendar_slots(panel.periods, "month")
    week = calendar_slots(panel.periods, "weekday") if "weekday" in kinds else 0 * month
    has_mask = panel.available is not None
    mask = panel.available if has_mask else np.ones((1, 1), dtype=np.bool_)
    n_week = 7 if "weekday" in kinds else 1
    out = np.empty((panel.n_items, n_week * 12, 4))
    run_in_threads(_tally_kernel, panel.n_items, panel.values, panel.start, mask, has_mask,
                   week * 12 + month, out)
    return out.reshape(panel.n_items, n_week, 12, 4)


def _marginal(cube: np.ndarray, kind: str, weekday_factors=None) -> _Tally:
    """The tally of one kind; months get the exposure weighted by the weekday factors."""
    t = cube.sum(axis=2 if kind == "weekday" else 1)
    exposure = t[..., 0]
    effective = exposure  # months: weekday-weighted exposure, rescaled to the same total
    if kind == "month" and weekday_factors is not None:
        effective = np.einsum("idm,id->im", cube[..., 0], weekday_factors)
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = exposure.sum(axis=1, keepdims=True) / effective.sum(axis=1, keepdims=True)
        effective = effective * np.nan_to_num(scale)
    return _Tally(exposure, t[..., 1], t[..., 2], t[..., 3], effective)


def _within_variance(t: _Tally) -> tuple[np.ndarray, np.ndarray]:
    """Pooled within-slot variance of period demand and its degrees of freedom."""
    with np.errstate(invalid="ignore", divide="ignore"):
        between = np.where(t.exposure > 0, t.volume**2 / t.exposure, 0.0)
    df = t.exposure.sum(axis=1) - (t.exposure > 0).sum(axis=1)
    ss = np.maximum(t.squares.sum(axis=1) - between.sum(axis=1), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(df > 0, ss / df, np.nan), df


def occurrence_test(demands, exposure, profile=None) -> tuple[np.ndarray, np.ndarray]:
    """Pearson chi-square of demand occurrences by slot against a profile (flat by default).

    Rows are items, columns slots. Against a flat profile it is the test of
    independence of the 2 x S table (sold / not sold by slot). Returns the
    statistic and p-value per row (p = 1 where nothing can be tested).

    Examples
    --------
    >>> stat, p = occurrence_test(np.array([[10., 0.]]), np.array([[20., 20.]]))
    >>> round(float(stat[0]), 3)
    13.333
    """
    n, e = np.atleast_2d(demands).astype(float), np.atleast_2d(exposure).astype(float)
    g = np.ones_like(e) if profile is None else np.broadcast_to(profile, e.shape)
    open_ = e > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(open_, e * g, 0.0)
        expected = n.sum(axis=1, keepdims=True) * share / share.sum(axis=1, keepdims=True)
        rate = np.minimum(np.where(open_, expected / e, 0.0), 1.0)
        cell = (n - expected) ** 2 / (expected * (1.0 - rate))
    stat = np.where(open_ & (expected > 0) & (rate < 1.0), cell, 0.0).sum(axis=1)
    df = open_.sum(axis=1) - 1
    p = np.where(df > 0, stats.chi2.sf(stat, np.maximum(df, 1)), 1.0)
    return stat, np.where(np.isfinite(p), p, 1.0)


def volume_test(volume, squares, exposure, profile=None) -> tuple[np.ndarray, np.ndarray]:
    """Quasi-Poisson F test of volume by slot against a profile (flat by default).

    ``F = sum_s (V_s - m_s)^2 / (E_s sigma^2) / (S - 1)`` on ``(S - 1, E - S)``
    degrees of freedom; against a flat profile it equals one-way ANOVA of the
    period demands by slot.

    Examples
    --------
    >>> t = volume_test(np.array([[6., 2.]]), np.array([[14., 2.]]), np.array([[3., 3.]]))
    >>> round(float(t[0][0]), 3)
    4.0
    """
    arrays = (np.atleast_2d(a).astype(float) for a in (exposure, volume, squares, volume, volume))
    t = _Tally(*arrays)
    sigma2, df2 = _within_variance(t)
    e = t.exposure
    g = np.ones_like(e) if profile is None else np.broadcast_to(profile, e.shape)
    open_ = e > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(open_, e * g, 0.0)
        expected = t.volume.sum(axis=1, keepdims=True) * share / share.sum(axis=1, keepdims=True)
        cell = np.where(open_, (t.volume - expected) ** 2 / e, 0.0).sum(axis=1)
        df1 = open_.sum(axis=1) - 1
        f = cell / sigma2[:] / np.maximum(df1, 1)
    ok = (df1 > 0) & (df2 > 0) & np.isfinite(f)
    p = np.where(ok, stats.f.sf(np.where(ok, f, 0.0), np.maximum(df1, 1), np.maximum(df2, 1)), 1.0)
    exact = (df1 > 0) & (sigma2 == 0) & (cell > 0)  # no spread within slots: differences certain
    p = np.where(exact, 0.0, p)
    return np.where(ok | exact, f, np.nan), np.where(np.isfinite(p), p, 1.0)


def holm(p: np.ndarray) -> np.ndarray:
    """Holm's step-down adjusted p-values (family-wise error); NaN stays NaN.

    Examples
    --------
    >>> holm(np.array([0.01, 0.04, 0.03])).round(3).tolist()
    [0.03, 0.06, 0.06]
    """
    p = np.asarray(p, dtype=np.float64)
    q = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    q[order] = np.minimum(np.maximum.accumulate(p[order] * (ok.size - np.arange(ok.size))), 1.0)
    return q


def benjamini_hochberg(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values); NaN stays NaN.

    Examples
    --------
    >>> benjamini_hochberg(np.array([0.01, 0.04, 0.03])).round(3).tolist()
    [0.03, 0.04, 0.04]
    """
    p = np.asarray(p, dtype=np.float64)
    q = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    order = ok[np.argsort(p[ok], kind="stable")]
    ranked = p[order] * ok.size / np.arange(1, ok.size + 1)
    q[order] = np.minimum(np.minimum.accumulate(ranked[::-1])[::-1], 1.0)
    return q


def _item_tests(t: _Tally, profile, min_demands: float, volume_demands: float):
    """Combined item test against ``profile`` (None = flat): statistics, p-values."""
    n = t.demands.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        null = np.nan_to_num(t.effective / t.exposure) * (1.0 if profile is None else profile)
    occ, p_occ = occurrence_test(t.demands, t.exposure, null)
    vol, p_vol = volume_test(t.volume, t.squares, t.exposure, null)
    use_vol = n >= volume_demands
    p = np.where(use_vol, np.minimum(1.0, 2.0 * np.minimum(p_occ, p_vol)), p_occ)
    tested = n >= min_demands
    return (np.where(tested, occ, np.nan), np.where(tested & use_vol, vol, np.nan),
            np.where(tested, p, np.nan), np.where(tested & use_vol, p_vol, p_occ))


_Level = namedtuple("_Level", "name codes labels onehot")  # onehot: groups x items


def _levels(panel: DemandPanel, frequent: np.ndarray) -> list[_Level]:
    """Group levels, most specific first, each split into slow and frequent items."""
    have = [c for c in ("location", "category") if panel.attributes is not None
            and c in panel.attributes.columns]
    found = {c: pd.factorize(panel.attribute(c), use_na_sentinel=True) for c in have}
    pairs = []
    if len(have) == 2:
        both = (found["location"][0] >= 0) & (found["category"][0] >= 0)
        loc, cat = (panel.attribute(c).astype(str) for c in ("location", "category"))
        codes, uniq = pd.factorize((loc + " / " + cat).where(both), use_na_sentinel=True)
        pairs.append((LEVELS[0], codes, [str(u) for u in uniq]))
    pairs += [(c, found[c][0], [str(u) for u in found[c][1]]) for c in ("category", "location")
              if c in found]
    pairs.append((LEVELS[3], np.zeros(panel.n_items, dtype=np.int64), ["all items"]))
    out = []
    for name, codes, labels in pairs:
        codes = np.where(codes >= 0, 2 * codes + frequent, -1)
        labels = [f"{label} / {kind}" for label in labels for kind in ("slow", "frequent")]
        rows = np.flatnonzero(codes >= 0)
        onehot = sparse.csr_matrix((np.ones(rows.size), (codes[rows], rows)),
                                   shape=(len(labels), panel.n_items))
        out.append(_Level(name, codes, np.array(labels, dtype=object), onehot))
    return out


def _slot_demands(t: _Tally) -> np.ndarray:
    """Demands of each slot at the item's overall demand rate: the weight of its factor.

    Observed demands would give a slot where the item never sells no weight at all.
    """
    e = t.exposure.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.nan_to_num(t.exposure * t.demands.sum(axis=1, keepdims=True) / e)


def _credibility_k(sums: dict, center: np.ndarray) -> np.ndarray:
    """``k = s2 / a`` per group around ``center`` (inf where a <= 0); slot ``s`` uses ``k c_s``."""
    m = sums["m"]
    s2 = sums["m_s2"].sum(axis=1) / np.maximum(m.sum(axis=1), 1.0)
    spread = sums["m_x2"] - 2 * center * sums["m_x"] + center**2 * m
    with np.errstate(invalid="ignore", divide="ignore"):
        a = (spread - sums["members"] * center * s2[:, None]).sum(axis=1) / m.sum(axis=1)
        k = s2 / a
    return np.where((a > 0) & np.isfinite(k), k, np.inf)


@dataclass(frozen=True)
class _Groups:
    level: np.ndarray  # reference level per item ("" for none)
    label: np.ndarray  # reference group label per item
    q: np.ndarray  # the reference group's q-value (NaN for none)
    center: np.ndarray  # items x slots: the reference group's profile
    k_group: np.ndarray  # credibility constant per item, around the group's profile
    k_flat: np.ndarray  # and around a flat profile
    tests: pd.DataFrame  # one row per tested group


def _item_basics(t: _Tally):
    """Overall rate, raw slot factors, within-slot variance, variance per demand."""
    e_item = t.exposure.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        rate = np.where(e_item > 0, t.volume.sum(axis=1) / e_item, 0.0)
        raw = np.where(t.effective > 0, t.volume / t.effective / rate[:, None], 1.0)
        sigma2 = np.nan_to_num(_within_variance(t)[0])
        s2 = np.where(rate > 0, sigma2 * t.demands.sum(axis=1) / e_item / rate**2, 0.0)
    return rate, np.where(np.isfinite(raw), raw, 1.0), sigma2, s2


def _group_sums(t: _Tally, keep: np.ndarray) -> tuple[list[str], np.ndarray]:
    """Item-level quantities that groups sum, side by side (items x blocks of slots)."""
    rate, raw, sigma2, s2 = _item_basics(t)
    m = _slot_demands(t)
    blocks = {"volume": t.volume, "flat": t.effective * rate[:, None],
              "var": t.exposure * sigma2[:, None], "demands": t.demands, "m": m,
              "m_s2": m * s2[:, None], "m_x2": m * raw**2, "m_x": m * raw,
              "members": (m > 0).astype(float)}
    return list(blocks), np.hstack(list(blocks.values())) * keep[:, None]


def _level_tests(sums: dict, weights):
    """Pooled test statistic, p-value, demands and profile per group of one level."""
    vol, flat, var = sums["volume"], sums["flat"], sums["var"]
    open_ = flat > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        stat = np.where(open_ & (var > 0), (vol - flat) ** 2 / var, 0.0).sum(axis=1)
        factor = _normalise(np.where(open_, vol / flat, 1.0), weights)
    df = open_.sum(axis=1) - 1
    p = np.where(df > 0, stats.chi2.sf(stat, np.maximum(df, 1)), 1.0)
    return stat, p, sums["demands"].sum(axis=1), factor


def _group_stage(levels, t: _Tally, eligible, weights, slot_names, *, group_demands) -> _Groups:
    """Test every group, pick each item's reference group, its profile and ``k``."""
    n_items, n_slots = t.exposure.shape
    keep = eligible & (t.volume.sum(axis=1) > 0)
    names, stacked = _group_sums(t, keep.astype(float))
    tested = []
    for lv in levels:
        summed = np.asarray(lv.onehot @ stacked)
        sums = {name: summed[:, j * n_slots: (j + 1) * n_slots] for j, name in enumerate(names)}
        stat, p, dem, factor = _level_tests(sums, weights)
        k = np.stack([_credibility_k(sums, c) for c in (factor, np.ones_like(factor))], axis=1)
        tested.append((lv, stat, np.where(dem >= group_demands, p, np.nan), dem, factor, k))
    q_all = holm(np.concatenate([x[2] for x in tested]))
    q_split = np.split(q_all, np.cumsum([len(x[2]) for x in tested])[:-1])
    out_level = np.full(n_items, "", dtype=object)
    out_label = np.full(n_items, "", dtype=object)
    out_q = np.full(n_items, np.nan)
    center = np.ones((n_items, n_slots))
    k_item = np.full((n_items, 2), np.inf)
    open_ = keep.copy()  # no reference group chosen yet
    frames = []
    for (lv, stat, p, dem, factor, k), q in zip(tested, q_split):
        frame = pd.DataFrame({"level": lv.name, "group": lv.labels, "demands": dem.astype(np.int64),
                              "statistic": stat, "p_value": p, "q_value": q})
        frames.append(pd.concat([frame, pd.DataFrame(factor, columns=slot_names)], axis=1))
        take = open_ & (lv.codes >= 0) & (dem[np.maximum(lv.codes, 0)] >= group_demands)
        c = lv.codes[take]
        out_level[take], out_label[take], out_q[take] = lv.name, lv.labels[c], q[c]
        center[take] = factor[c]
        k_item[take] = k[c]
        open_ &= ~take
    k_item[open_] = tested[-1][5][levels[-1].codes[open_]]  # else the last level: all items
    tests = pd.concat(frames, ignore_index=True)
    return _Groups(out_level, out_label, out_q, center, k_item[:, 0], k_item[:, 1], tests)


@dataclass(frozen=True, eq=False)
class ProfileTable:
    """One profile kind for every item (rows in panel order).

    ``factors``: items x slots (1.0 where ``source`` is ``none``); ``slots``: the
    history's slot indices; ``p_value``/``q_value``: the item's test against flat
    (NaN if untested); ``fit_q_value``: its test against the group's profile.
    """

    kind: str
    slot_names: tuple[str, ...]
    slots: np.ndarray
    factors: np.ndarray
    source: np.ndarray
    group: np.ndarray
    demands: np.ndarray
    occurrence_statistic: np.ndarray
    volume_statistic: np.ndarray
    p_value: np.ndarray
    q_value: np.ndarray
    group_q_value: np.ndarray
    fit_q_value: np.ndarray
    credibility_k: np.ndarray

    def take(self, idx: np.ndarray) -> ProfileTable:
        per_item = {name: getattr(self, name)[idx] for name in self.__dataclass_fields__
                    if name not in ("kind", "slot_names", "slots")}
        return replace(self, **per_item)


@dataclass(frozen=True, eq=False)
class CalendarProfiles:
    """Calendar profiles of a panel's items; see the module docstring for the rules.

    Examples
    --------
    >>> periods = pd.period_range("2024-01-01", periods=14, freq="D")
    >>> prof = estimate_profiles(DemandPanel(np.ones((2, 14)), items=pd.Index(["A", "B"]),
    ...                                      periods=periods))
    >>> prof.future_factors(3).shape
    (2, 3)
    """

    items: pd.Index
    periods: pd.Index
    tables: tuple[ProfileTable, ...]
    group_tests: pd.DataFrame
    fdr: float

    def _rows(self, rows) -> np.ndarray:
        if rows is None or isinstance(rows, slice):
            return np.arange(len(self.items))[rows or slice(None)]
        rows = np.asarray(rows)
        if rows.dtype == bool or np.issubdtype(rows.dtype, np.integer):
            return np.arange(len(self.items))[rows]
        idx = self.items.get_indexer(rows)
        if (idx < 0).any():
            raise InputError(f"unknown item {rows[idx < 0][0]!r}")
        return idx

    def _factors(self, rows, periods: pd.Index, slot_sets) -> np.ndarray:
        idx = self._rows(rows)
        out = np.ones((idx.size, len(periods)))
        for table, slots in zip(self.tables, slot_sets):
            out *= table.factors[idx][:, slots]
        return out

    def history_factors(self, rows=None) -> np.ndarray:
        """Factors (items x history periods), 1.0 where no profile applies."""
        return self._factors(rows, self.periods, [t.slots for t in self.tables])

    def future_factors(self, horizon: int, rows=None) -> np.ndarray:
        """Factors (items x horizon) for the periods after the history."""
        if int(horizon) < 0:
            raise InputError(f"horizon must be at least 0, got {horizon}")
        if not self.tables:  # no calendar profile: the periods need not be calendar periods
            return np.ones((self._rows(rows).size, int(horizon)))
        future = pd.period_range(self.periods[-1] + 1, periods=int(horizon), freq=self.periods.freq)
        return self._factors(rows, future, [calendar_slots(future, t.kind) for t in self.tables])

    def subset(self, rows) -> CalendarProfiles:
        """Profiles of the selected items (positions, boolean mask or labels)."""
        idx = self._rows(rows)
        return replace(self, items=self.items[idx], tables=tuple(t.take(idx) for t in self.tables))

    def to_frame(self) -> pd.DataFrame:
        """One row per item: per kind its source, group, tests and factors."""
        cols: dict[str, object] = {}
        for t in self.tables:
            names = ("source", "group", "demands", "occurrence_statistic", "volume_statistic",
                     "p_value", "q_value", "group_q_value", "fit_q_value")
            cols.update({f"{t.kind}_{n}": getattr(t, n) for n in names})
            cols.update({f"{t.kind}_{n}": t.factors[:, j] for j, n in enumerate(t.slot_names)})
        return pd.DataFrame(cols, index=self.items)

    def __repr__(self) -> str:
        parts = []
        for t in self.tables:
            own = int(sum(s.startswith("own") for s in t.source))
            none = int((t.source == "none").sum())
            parts.append(f"{t.kind}: {own} own, {len(t.source) - own - none} group, {none} none")
        return f"CalendarProfiles({len(self.items)} items; {'; '.join(parts) or 'no profile'})"


def _decide(t: _Tally, eligible, groups: _Groups, weights, *, fdr, min_demands, vol_demands):
    """Sources and factors for one kind (rules in the module docstring)."""
    occ, vol, p, _ = _item_tests(t, None, min_demands, vol_demands)
    p = np.where(eligible, p, np.nan)
    q = benjamini_hochberg(p)
    own = q <= fdr
    group_ok = groups.q <= fdr
    _, _, _, p_fit = _item_tests(t, groups.center, 0.0, vol_demands)
    p_fit = np.where(group_ok & eligible, p_fit, np.nan)
    q_fit = benjamini_hochberg(p_fit)
    counts = group_ok & ~(q_fit <= fdr)
    raw, m = _item_basics(t)[1], _slot_demands(t)
    toward = np.where(counts[:, None], groups.center, 1.0)
    k = np.where(counts, groups.k_group, groups.k_flat)
    with np.errstate(invalid="ignore"):
        w = np.nan_to_num(m / (m + k[:, None] * toward), nan=0.0)
    shrunk = _normalise(w * raw + (1.0 - w) * toward, weights)
    factors = np.where(own[:, None], shrunk, np.where(counts[:, None], groups.center, 1.0))
    level = groups.level.astype(str)
    source = np.where(own, np.where(counts, "own shrunk toward " + level,
                                    "own shrunk toward flat"), np.where(counts, level, "none"))
    group = np.where(counts, groups.label, "")
    return factors, source.astype(object), group.astype(object), occ, vol, p, q, q_fit, k


def _kind_table(panel: DemandPanel, kind: str, t: _Tally, levels, options: dict):
    slot_names = WEEKDAYS if kind == "weekday" else MONTHS
    n_slots, weights = len(slot_names), _cycle_weights(kind, panel.frequency)
    need = 1 if kind == "weekday" else _TWO_YEARS[panel.frequency]
    eligible = (panel.n_periods - panel.start >= need) & (t.demands.sum(axis=1) > 0)
    groups = _group_stage(levels, t, eligible, weights, slot_names,
                          group_demands=options["group_demands_per_slot"] * n_slots)
    factors, source, group, occ, vol, p, q, q_fit, k = _decide(
        t, eligible, groups, weights, fdr=options["fdr"],
        min_demands=options["item_demands_per_slot"] * n_slots,
        vol_demands=options["volume_demands_per_slot"] * n_slots)
    table = ProfileTable(kind, slot_names, calendar_slots(panel.periods, kind), factors, source,
                         group, t.demands.sum(axis=1).astype(np.int64), occ, vol, p, q,
                         groups.q, q_fit, k)
    return table, groups.tests.assign(kind=kind)


def _check_options(calendar, fdr, per_slot: dict) -> None:
    if calendar not in ("auto", "none"):
        raise InputError(f"--calendar must be 'auto' or 'none', got {calendar!r}")
    if isinstance(fdr, bool) or not (isinstance(fdr, (int, float)) and 0.0 < fdr < 1.0):
        raise InputError(f"--calendar-fdr must be between 0 and 1 (exclusive), got {fdr!r}")
    for name, value in per_slot.items():
        if isinstance(value, bool) or not (isinstance(value, (int, float))
                                           and np.isfinite(value) and value >= 0):
            raise InputError(f"calendar option {name} must be a number >= 0, got {value!r}")


def estimate_profiles(
    panel: DemandPanel,
    *,
    calendar: str = "auto",
    fdr: float = 0.05,
    item_demands_per_slot: float = 2.0,
    volume_demands_per_slot: float = 30.0,
    group_demands_per_slot: float = 20.0,
) -> CalendarProfiles:
    """Estimate and decide every item's calendar profiles.

    Parameters
    ----------
    panel : DemandPanel
    calendar : {"auto", "none"}
        ``"none"`` gives every item a flat profile (factors of 1).
    fdr : float
        False discovery rate of the item and fit tests (Benjamini-Hochberg) and
        family-wise error rate of the group tests (Holm).
    item_demands_per_slot : float
        An item is tested with at least this many demands per slot on average.
    volume_demands_per_slot : float
        The volume test joins the occurrence test from this many demands per slot.
    group_demands_per_slot : float
        A group can be a reference group with at least this many demands per slot.

    Returns
    -------
    CalendarProfiles

    Examples
    --------
    >>> periods = pd.period_range("2024-01-01", periods=70, freq="D")
    >>> week = np.tile([5., 5, 5, 5, 5, 0, 0], 10)[None, :]
    >>> prof = estimate_profiles(DemandPanel(week, items=pd.Index(["A"]), periods=periods))
    >>> prof.tables[0].source.tolist(), prof.future_factors(2).round(2).tolist()
    (['own shrunk toward flat'], [[1.4, 1.4]])
    """
    per_slot = {"item_demands_per_slot": item_demands_per_slot,
                "volume_demands_per_slot": volume_demands_per_slot,
                "group_demands_per_slot": group_demands_per_slot}
    _check_options(calendar, fdr, per_slot)
    if not isinstance(panel, DemandPanel):
        raise InputError("calendar profiles need a DemandPanel")
    kinds = profile_kinds(panel.frequency) if calendar == "auto" else ()
    options = {"fdr": float(fdr), **per_slot}
    built, weekday = [], None
    cube = _tallies(panel, kinds) if kinds else None
    if kinds:  # items selling in at least half their in-stock periods are "frequent"
        n_e = cube[..., 3].sum(axis=(1, 2)), cube[..., 0].sum(axis=(1, 2))
        levels = _levels(panel, (n_e[0] >= 0.5 * np.maximum(n_e[1], 1)).astype(np.int64))
    for kind in kinds:
        built.append(_kind_table(panel, kind, _marginal(cube, kind, weekday), levels, options))
        weekday = built[-1][0].factors
    tests = pd.concat([b[1] for b in built], ignore_index=True) if built else pd.DataFrame()
    return CalendarProfiles(panel.items, panel.periods, tuple(b[0] for b in built), tests,
                            float(fdr))
