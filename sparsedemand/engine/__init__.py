"""Running forecast, stock and backtest on a Dask cluster, one slice of the items per task.

The local engine reads the whole history into one panel. This engine reads a
long-layout Parquet dataset (or a Dask DataFrame) with Dask, sends every row
of an item to the same partition (a hash of the cleaned item label modulo the
number of partitions), builds one :class:`~sparsedemand.panel.DemandPanel` per
partition through :func:`sparsedemand.io.from_frame` with the same column and
calendar options, and runs the same functions on it as the local engine:
:func:`sparsedemand.route.forecast`, :func:`sparsedemand.stock.stock_targets`
and :func:`sparsedemand.evaluate.backtest`.

What keeps the partitions equal to one big panel
------------------------------------------------
* **One calendar.** The earliest and latest period of the whole input are
  found first; every partition's loader sees them (as two rows of a hidden
  placeholder item, dropped again after loading), so every item lies on the
  same calendar, with the same partial buckets dropped when aggregating.
* **Original row order.** Rows keep their position in the input: within a
  partition they are loaded in input order, so items come in order of first
  appearance, duplicate rows are summed in the same order, and a bad row is
  reported with its row number in the whole input.
* **Per-item work.** Classification, fitting, stock targets and per-item
  backtest scores depend on the item's own history only, and every bootstrap
  is seeded from the item label, so no result depends on which items share a
  partition.
* **Cross-item steps done centrally.** Holdout selection (the method per
  pattern with the lowest mean RMSSE over all the pattern's items) adds up the
  partitions' sums and counts before choosing; per-item overrides, the
  on-hand snapshot and the lead-time column are checked against all items.

Outputs are Parquet datasets, one file per partition
(``DIR/forecasts/part-00000.parquet`` ...), plus ``run.json``. Everything is
written into a staging folder beside ``DIR`` and moved into place only when
every partition has succeeded (:func:`sparsedemand.io.staged_output`), so on
a real cluster ``DIR`` must be on storage that every worker and the client
share.

The package: :mod:`~sparsedemand.engine.cluster` (the client and running a
function on every partition), :mod:`~sparsedemand.engine.partition` (the
input as one panel per item partition on the global calendar) and
:mod:`~sparsedemand.engine.run` (settings, each partition's whole command
through :mod:`sparsedemand.runs`, the central steps and ``run.json``).

Stock targets are decision support; follow the organisation's policies,
regulations and qualified staff, especially for safety-critical spares.
"""


from __future__ import annotations

from ..runs.partitions import combine_backtest_scores
from .cluster import LOCAL_CLUSTER_OPTIONS, WORKER_ENV, start_client
from .run import COMMANDS, DistributedRun, run_distributed, run_settings

__all__ = [
    "COMMANDS",
    "ENGINES",
    "LOCAL_CLUSTER_OPTIONS",
    "WORKER_ENV",
    "DistributedRun",
    "run_distributed",
    "run_settings",
    "start_client",
    "combine_backtest_scores",
]

ENGINES: tuple[str, ...] = ("local", "dask")
