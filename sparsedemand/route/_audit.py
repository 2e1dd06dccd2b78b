"""The audit table: per item, the statistics, the method and parameters, the reason and warnings."""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from ._fitting import _TUNED
from .rules import Rule


_GROUNDS = {
    "ses": "SES suits steady demand (Syntetos, Boylan & Croston 2005)",
    "sba": "SBA corrects Croston's bias on intermittent demand (Syntetos & Boylan 2005)",
    "tsb": "TSB updates the demand probability every period, so it follows demand that changes or stops "
           "(Teunter, Syntetos & Babai 2011)",
    "mean_since_first": "too few demands to fit smoothing constants, so the mean since the first demand",
    "zeros": "no demand on record, so a zero forecast",
}


def _describe_params(params: Mapping[str, np.ndarray], i: int, fixed: Mapping) -> str:
    parts = []
    for key, arr in params.items():
        v = arr[i]
        if np.isfinite(v):
            tag = "" if key in fixed else " (optimised)" if key in _TUNED else " (fitted)"
            parts.append(f"{key}={v:.4g}{tag}")
    return ", ".join(parts)


def _method_reason(rule: Rule, pattern: str, cost: str) -> str:
    grounds = _GROUNDS.get(rule.method, f"method {rule.method}")
    if rule.source == "default policy":
        return f"default policy row '{pattern}' -> {rule.method}: {grounds}"
    return f"{rule.source} -> {rule.method}"


def _audit_table(classes, keys, changes, rules, method_col, param_text, cost_col, dist_col, fallback, cost):
    audit = pd.DataFrame(
        {
            "item": classes.index,
            "pattern": classes["pattern"].to_numpy(),
            "adi": classes["adi"].to_numpy(),
            "cv2": classes["cv2"].to_numpy(),
            "n_demands": classes["n_demands"].to_numpy(),
            "method": method_col,
            "parameters": param_text,
            "in_sample_cost": cost_col,
            "cost_measure": cost,
            "distribution": dist_col,
            "rule": [r.source for r in rules],
            "rate_change_p": np.nan if changes is None else changes["p_value"].to_numpy(),
        }
    )
    reasons, warnings = [], []
    unavailable = classes["unavailable_periods"].to_numpy()
    patterns = classes["pattern"].to_numpy()
    class_reasons = classes["reason"].to_numpy()
    for i, rule in enumerate(rules):
        pattern = patterns[i]
        why = class_reasons[i]
        if keys[i] == "rate-change":
            c = changes.iloc[i]
            why += (f"; demand in {c.recent_demands} of the last {c.recent_periods} available periods against "
                    f"{c.earlier_demands} of {c.earlier_periods} before (Fisher's exact test p = "
                    f"{c.p_value:.2g}): rate-change")
        reasons.append(f"{why}; {_method_reason(rule, keys[i], cost)}")
        notes = []
        if unavailable[i] > 0:
            notes.append(f"{int(unavailable[i])} out-of-stock periods left out")
        if pattern == "too-short":
            notes.append("short history")
        if pattern == "gone-quiet":
            notes.append("no recent demand: check for obsolescence")
        if fallback[i]:
            notes.append(f"{rule.method} could not be fitted: fell back to mean since first demand")
        warnings.append("; ".join(notes))
    audit["reason"] = reasons
    audit["warnings"] = warnings
    return audit
