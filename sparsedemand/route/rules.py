"""The routing table: :class:`Rule`, the default policy and the router's constants.

Examples
--------
>>> DEFAULT_POLICY["lumpy"].method
'sba'
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

from ..classify import PATTERNS, STATUSES

__all__ = [
    "DEFAULT_LEVELS",
    "DEFAULT_CANDIDATES",
    "INTERMITTENT_BOUNDS",
    "CHANGE_LEVEL",
    "ROUTING_STATUSES",
    "Rule",
    "DEFAULT_POLICY",
]

DEFAULT_LEVELS = (0.5, 0.8, 0.9, 0.95)
DEFAULT_CANDIDATES = ("ses", "croston", "sba", "sbj", "tsb", "adida", "imapa", "mean_since_first")

#: Search range of optimised smoothing constants for the Croston family and TSB.
INTERMITTENT_BOUNDS = (0.01, 0.2)
_NARROW = frozenset({"croston", "sba", "sbj", "tsb"})

#: Significance level of the test for a change in demand frequency.
CHANGE_LEVEL = 0.01
#: Routing statuses of the router's own, beside the classifier's patterns and statuses.
ROUTING_STATUSES: tuple[str, ...] = ("rate-change",)
# patterns whose default method assumes a steady demand rate
_STEADY = ("erratic", "intermittent", "lumpy")

@dataclass(frozen=True)
class Rule:
    """One routing decision: a method and its fixed parameters.

    Parameters
    ----------
    method : str
        A name from :data:`sparsedemand.methods.METHODS`.
    params : mapping
        Fixed keyword options; a smoothing constant left out is optimised.
    source : str
        Where the rule came from, for the audit trail.
    """

    method: str
    params: Mapping[str, object] = field(default_factory=dict)
    source: str = "default policy"

    def key(self) -> tuple:
        return (self.method, tuple(sorted((k, repr(v)) for k, v in self.params.items())))


DEFAULT_POLICY: dict[str, Rule] = {
    "smooth": Rule("ses"),
    "erratic": Rule("sba"),
    "intermittent": Rule("sba"),
    "lumpy": Rule("sba"),
    "rate-change": Rule("tsb"),
    "gone-quiet": Rule("tsb", {"beta": 0.1}),
    "too-short": Rule("mean_since_first"),
    "never-sold": Rule("zeros"),
}


def _row_names() -> tuple[str, ...]:
    """Every name a policy row may have: the patterns, the statuses and the router's own."""
    return (*PATTERNS, *STATUSES, *ROUTING_STATUSES)
