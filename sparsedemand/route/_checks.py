"""Checks of routing rules: every method and parameter is judged when the rule is read.

A rule's parameters are tried on a tiny series, so the method's own checks
judge the values and the message names the file, line or column at fault.
"""

from __future__ import annotations

import dataclasses
from typing import Mapping

import numpy as np

from .. import methods as _methods
from ..errors import InputError
from ..io import _first_line
from .rules import DEFAULT_POLICY, Rule

_PROBE = np.array([[0.0, 2.0, 0.0, 1.0, 0.0, 0.0, 3.0, 1.0]])


def _probe_fit(method: str, params: Mapping) -> None:
    """Fit ``method`` with ``params`` to a tiny series: the method's own checks judge the values."""
    options = dict(params)
    if "season_length" in _methods.method_options(method) and options.get("season_length") is None:
        options["season_length"] = 4  # supplied by the calendar at fit time
    _methods.fit(method, _PROBE, np.array([1]), None, horizon=1, **options)


def _check_rule(rule: Rule, where: str, key_where=None, checked: set | None = None) -> None:
    """Fail early, naming ``where``, if a method or its parameters are unknown or bad.

    ``key_where(key)`` names the place of one parameter (its line or column);
    each parameter is checked on its own first so the message points at it.
    Rules whose key is in ``checked`` passed before and are not probed again
    (a long override file repeats a few rules); passing ones are added.
    """
    if checked is not None and isinstance(rule.method, str) and rule.key() in checked:
        return
    if not isinstance(rule.method, str) or rule.method not in _methods.METHODS:
        known = ", ".join(_methods.METHODS)
        raise InputError(f"{where}: unknown method {rule.method!r} (known: {known})")
    allowed = _methods.method_options(rule.method)
    checks = [(key, {key: value}) for key, value in rule.params.items()] + [(None, rule.params)]
    for key, params in checks:
        place = where if key is None or key_where is None else key_where(key)
        if key is not None and key not in allowed:
            choices = ", ".join(allowed) if allowed else "none"
            raise InputError(f"{place}: unknown parameter {key!r} for method {rule.method} (parameters: {choices})")
        try:
            _probe_fit(rule.method, params)
        except InputError as exc:
            raise InputError(f"{place}: {exc}") from None
        except (TypeError, ValueError) as exc:
            raise InputError(f"{place}: bad parameters for {rule.method}: {_first_line(exc)}") from None
    if checked is not None:
        checked.add(rule.key())


def _caller_rules(rules: Mapping, what: str, label) -> dict:
    """Check rules given from Python; name their origin in the audit trail."""
    out = {}
    checked: set = set()
    for key, rule in rules.items():
        where = f"{what} {label(key)}"
        if not isinstance(rule, Rule):
            raise InputError(f"{where}: expected a Rule(method, params), got {type(rule).__name__}")
        _check_rule(rule, where, checked=checked)
        if rule.source == "default policy" and not (what == "policy row" and DEFAULT_POLICY.get(key) == rule):
            rule = dataclasses.replace(rule, source=f"{where} given by the caller")
        out[key] = rule
    return out
