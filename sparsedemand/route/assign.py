"""Which rule each item gets: an override first, then the policy row of its pattern.

Examples
--------
>>> import numpy as np
>>> from sparsedemand.classify import classify
>>> routing_keys(classify(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]]))).tolist()
['intermittent']
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from ..errors import InputError
from .rules import _STEADY, DEFAULT_POLICY, Rule

__all__ = ["assign_methods", "routing_keys"]


def assign_methods(
    classes: pd.DataFrame,
    *,
    policy: Mapping[str, Rule] | None = None,
    overrides: Mapping[str, Rule] | None = None,
    changed: np.ndarray | None = None,
) -> list[Rule]:
    """The rule for every item (overrides first, then the policy row of its pattern).

    Override keys match item labels, or their text (an override file reads
    every label as text). An override for an item not in ``classes`` is an
    error naming where the override came from. ``changed`` (one flag per
    item, see :func:`rate_change`) sends flagged erratic, intermittent and
    lumpy items to the ``rate-change`` row.

    Examples
    --------
    >>> from sparsedemand.classify import classify
    >>> table = classify(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]]))
    >>> [r.method for r in assign_methods(table, overrides={"0": Rule("zeros")})]
    ['zeros']
    """
    policy = DEFAULT_POLICY if policy is None else policy
    index = classes.index
    text_pos: dict[str, int] = {}
    for pos, label in enumerate(index):
        text_pos.setdefault(str(label), pos)
    by_pos: dict[int, Rule] = {}
    for key, rule in (overrides or {}).items():
        pos = index.get_loc(key) if _hashable_in(key, index) else text_pos.get(str(key), -1)
        if not isinstance(pos, (int, np.integer)) or pos < 0:
            origin = rule.source if rule.source.startswith("override file") else "overrides"
            raise InputError(f"{origin}: unknown item {key!r} (not in the input)")
        if int(pos) in by_pos:
            raise InputError(f"overrides: item {index[pos]!r} is overridden twice")
        by_pos[int(pos)] = rule
    rules = []
    keys = routing_keys(classes, changed)
    for pos, (key, pattern) in enumerate(zip(keys, classes["pattern"])):
        rule = by_pos.get(pos)
        if rule is None:
            # a table without a rate-change row keeps such items on their pattern's row
            rule = policy.get(key) or policy.get(pattern)
            if rule is None:
                raise InputError(f"the routing policy has no row for pattern {pattern!r}")
        rules.append(rule)
    return rules


def routing_keys(classes: pd.DataFrame, changed: np.ndarray | None = None) -> np.ndarray:
    """The policy row of every item: its pattern, or ``rate-change`` where flagged."""
    keys = classes["pattern"].to_numpy(dtype=object).copy()
    if changed is not None:
        changed = np.asarray(changed, dtype=bool)
        if changed.shape != keys.shape:
            raise InputError(f"changed: one flag per item expected ({keys.size}), got shape {changed.shape}")
        keys[changed & np.isin(keys, _STEADY)] = "rate-change"
    return keys


def _hashable_in(key, index: pd.Index) -> bool:
    try:
        return key in index
    except (TypeError, ValueError):
        return False
