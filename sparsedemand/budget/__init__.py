"""Stock under a budget, uncertain lead times, packs and minimum orders.

Periodic review, order-up-to level ``S``, unmet demand backordered: the same
model and definitions as :mod:`sparsedemand.stock`. Per item and whole-unit
level ``S = 0 .. S_max`` a :class:`ServiceCurves` holds

* ``filled(S)``: expected units filled from stock per period,
  ``(E[D_R] - ESPRC(S)) / R`` with ``ESPRC(S) = E[(D_{L+R} - S)^+] - E[(D_L - S)^+]``,
  i.e. the expected fill rate times the mean demand per period;
* ``on_hand(S)``: expected stock on hand, ``(1/R) sum_j E[(S - D_{L+j})^+]``, ``j = 1 .. R``;
* ``cycle_service(S)``: ``P(D_{L+R} <= S)``.

:func:`order_up_to_curves` builds them from the PMFs the stock stage already
computes. On top of the curves: :func:`allocate_budget` (greedy marginal
analysis), :func:`budget_frontier` and :func:`uniform_ladder` (what a budget
buys against one service target for all), :func:`packed_curves` and
:func:`order_quantity` (packs and minimum orders), and the lead-time helpers
:func:`lead_time_mixture` and :func:`lead_time_distribution`.

Examples
--------
>>> c = service_curves([[0.0, 0.6, 0.9, 1.0]], [[0.0, 0.4, 1.1, 2.0]])
>>> allocate_budget(c, unit_price=[10.0], budget=12.0).level.tolist()
[2]
"""

from __future__ import annotations

from .allocate import Allocation, allocate_budget, budget_frontier, uniform_ladder
from .curves import (ServiceCurves, curve_values, levels_for_service, order_quantity, order_up_to_curves,
                     packed_curves, service_curves)
from .lead_time import lead_time_demand_moments, lead_time_distribution, lead_time_mixture, lead_time_moments

__all__ = [
    "ServiceCurves", "Allocation", "service_curves", "order_up_to_curves", "levels_for_service",
    "curve_values", "allocate_budget", "budget_frontier", "uniform_ladder", "packed_curves",
    "order_quantity", "lead_time_mixture", "lead_time_distribution", "lead_time_moments",
    "lead_time_demand_moments",
]
