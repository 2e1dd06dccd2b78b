"""Routing: which method each item gets, and why.

Every item is classified (:mod:`sparsedemand.classify`), then sent to a method
by the *routing policy*: a table from pattern or status to a method and its
parameters. The default table follows the published comparisons:

=============  ===================  ==================================================
pattern        method               grounds
=============  ===================  ==================================================
smooth         SES                  Syntetos, Boylan & Croston (2005, JORS 56:495-503):
                                    outside the intermittent region, per-period
                                    smoothing is adequate and unbiased.
erratic        SBA                  Syntetos, Boylan & Croston (2005): SBA outperforms
intermittent   SBA                  Croston wherever ADI >= 1.32 or CV² >= 0.49;
lumpy          SBA                  Syntetos & Boylan (2005, IJF 21:303-314).
rate-change    TSB                  Teunter, Syntetos & Babai (2011): TSB updates
                                    the demand probability every period, so it
                                    follows a change in how often demand comes;
                                    SBA only learns at the next demand.
gone-quiet     TSB, beta = 0.1      Teunter, Syntetos & Babai (2011, EJOR 214:606-615):
                                    the demand probability decays while demand is
                                    absent, so the forecast follows obsolescence.
                                    The probability constant is fixed: fitted to a
                                    history whose demand has since stopped, it comes
                                    out so small that the forecast hardly decays.
too-short      mean since first     too few demands to fit smoothing constants.
never-sold     zero forecast        nothing to forecast.
=============  ===================  ==================================================

``rate-change`` is a routing status of the router's own: an erratic,
intermittent or lumpy item whose demand frequency over the last third of its
history (at least 8 available periods) differs from the frequency before, by
Fisher's exact test of the two counts (two-sided, level
:data:`CHANGE_LEVEL`; see :func:`rate_change`). The methods that assume a
steady demand rate (SBA) are kept for the items that show none.

Smoothing constants are optimised per item unless fixed (Kourentzes 2014,
IJPE 156:180-190, compares the in-sample costs used). For Croston's method,
SBA, SBJ and TSB the search stays within 0.01 to 0.2
(:data:`INTERMITTENT_BOUNDS`), the range the intermittent-demand comparisons
above study (from memory: 0.05 to 0.2 in Syntetos & Boylan 2005); wider
constants fitted to a few noisy demands overreact to the last demand. Other
methods keep their own bounds.

A *policy file* (TOML) replaces rows of the table::

    [patterns.lumpy]
    method = "tsb"
    alpha = 0.1        # fixed; leave out to optimise
    beta = 0.05

A *per-item override file* (CSV with columns ``item``, ``method`` and any
parameter columns, blank meaning "optimise") wins over the table.
With ``selection="holdout"`` the method for each pattern is instead the
candidate with the lowest mean RMSSE over the last ``holdout`` periods of that
pattern's items, refitted on the full history; the scores are kept.

Quantiles come from each method's predictive distribution; where a method has
none (the means), from the bootstrap of Willemain, Smart & Schwarz (2004),
seeded per item label so that an item's quantiles do not depend on the other
items it is fitted with.

The package, one module per job:

- :mod:`.rules`: :class:`Rule`, :data:`DEFAULT_POLICY` and the router's constants;
- :mod:`.policy_files`: TOML policy files and per-item override CSVs
  (:mod:`._checks` judges every rule they hold);
- :mod:`.frequency_change`: the test behind the ``rate-change`` status;
- :mod:`.assign`: the rule of every item;
- :mod:`.router`: :func:`forecast` (:mod:`._options` checks its options,
  :mod:`._fitting` fits each group of items, :mod:`._holdout` selects by
  holdout, :mod:`._audit` writes the audit table);
- :mod:`.result`: :class:`ForecastResult` and the quantile columns.
"""

from __future__ import annotations

# The private names below are imported by the later stages (evaluate, engine) and the tests.
from .. import methods as _methods  # noqa: F401  (a test replaces methods.fit through it)
from ._fitting import _routed_options
from ._holdout import _select_by_holdout
from ._options import _check_forecast_options
from .assign import assign_methods, routing_keys
from .frequency_change import _hypergeom_tails, rate_change
from .policy_files import _resolve_policy, load_overrides, load_policy
from .result import ForecastResult, quantile_column
from .router import forecast
from .rules import (
    CHANGE_LEVEL,
    DEFAULT_CANDIDATES,
    DEFAULT_LEVELS,
    DEFAULT_POLICY,
    INTERMITTENT_BOUNDS,
    ROUTING_STATUSES,
    Rule,
)

__all__ = [
    "DEFAULT_POLICY",
    "INTERMITTENT_BOUNDS",
    "CHANGE_LEVEL",
    "ROUTING_STATUSES",
    "DEFAULT_LEVELS",
    "DEFAULT_CANDIDATES",
    "Rule",
    "ForecastResult",
    "load_policy",
    "load_overrides",
    "assign_methods",
    "forecast",
    "quantile_column",
    "rate_change",
]
