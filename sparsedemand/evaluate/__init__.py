"""Backtests: how each method and the router would have done on the planner's own history.

Design
------
The last ``holdout`` periods of the history are held back and forecast from
the periods before them; with ``origins=N`` this is repeated at N forecast
origins ``step`` periods apart, the last one leaving exactly the final
``holdout`` periods to score (rolling origin, expanding window). At every
origin *everything* is redone from the history before it only: the demand
pattern of each item, the router's choice, every method's fit and
predictive distribution, the in-sample scales and the item weights (common
practice; Tashman 2000, "Out-of-sample tests of forecasting accuracy", IJF
16:437-450).

Scores per origin, method and item (see :mod:`sparsedemand.metrics` for the
definitions and their sources): MASE, RMSSE, MAE, scaled bias, scaled PIS and
the number of shortages, the scaled pinball loss and the coverage of every
quantile level, the MAE relative to a baseline, and an inventory simulation
(:mod:`sparsedemand.evaluate.simulate`): each period-review an order is placed up to
``S``, the ``service_level`` quantile of the method's predictive distribution
of demand over ``lead_time + review_period`` periods, and the fill rate,
cycle service level, average stock on hand and stock-out periods achieved on
the held-back demand are recorded. Periods flagged out of stock are left out
of every score and every scale and counted (``excluded_periods``).

Aggregates
----------
An (item, origin) pair belongs to the pattern the item had *at that origin*.
Each metric is averaged over the pairs of a pattern (and over all pairs,
pattern ``"all"``), leaving out pairs where it is undefined; the ``count``
column says how many pairs were used. ``excluded_periods`` is a total, not a
mean. Volume- or value-weighted MASE and RMSSE weigh each pair by the item's
share of the units (or units x ``unit_price``) sold over the last
``holdout`` periods before its origin. ``rel_mae_gmean`` is the geometric
mean of the item ratios MAE(method) / MAE(baseline), weighted by scored
periods (AvgRelMAE, Davydenko & Fildes 2013, IJF 29:510-522).
``weighted_rmsse`` is computed with actuals and forecasts summed bottom-up
to each group level (item, location, category, total: the levels whose
labels the panel carries), one score per level and origin, and under level
``"all"`` the mean over the levels (the WRMSSE of Makridakis, Spiliotis &
Assimakopoulos 2022, IJF 38:1346-1364); values are means over origins.

The router
----------
The method ``"router"`` is what :func:`sparsedemand.route.forecast` would
have produced at each origin: items are classified and given a method by the
routing policy (and overrides). Items routed to a method whose options match
a method already fitted at that origin take that fit's rows, which are the
same numbers a separate fit of those items gives (every fit is per item);
other rules are fitted on their items alone. An item whose routed fit failed
falls back to the mean since first demand, as the router does. Bootstrap
samples are seeded per item label, so an item's quantiles do not depend on
which other items it was fitted with.

Modules
-------
``options`` (names, option checks), ``origins`` (rolling origins, what is
scored at one origin), ``forecasts`` (each method's and the router's
forecasts, quantiles and order-up-to levels at one origin), ``scoring``
(per-item metrics, running totals), ``hierarchy`` (weighted RMSSE per group
level), ``tables`` (the output tables), ``result`` (:class:`BacktestResult`),
``rolling`` (:func:`backtest`: the loop over origins and methods) and
``simulate`` (the periodic-review order-up-to simulation).

Targets are decision support; follow the organisation's policies,
regulations and qualified staff, especially for safety-critical spares.
"""


from __future__ import annotations

from .forecasts import OriginForecast
from .options import BASELINES, GROUP_LEVELS, ROUTER
from .origins import origin_cuts
from .result import BacktestResult
from .rolling import backtest
from .scoring import metric_names
from .simulate import StockSimulation, review_periods, simulate_order_up_to

__all__ = [
    "BASELINES",
    "ROUTER",
    "GROUP_LEVELS",
    "BacktestResult",
    "OriginForecast",
    "backtest",
    "origin_cuts",
    "metric_names",
    "StockSimulation",
    "simulate_order_up_to",
    "review_periods",
]
