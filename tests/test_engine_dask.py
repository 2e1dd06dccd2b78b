"""The Dask engine against the local engine, on a local cluster of two worker processes.

The reference is the local engine run on the same Parquet dataset: every table
the distributed run writes must equal the one the local run writes (sorted by
item, through the same Parquet writer), up to float round-off.
"""

from __future__ import annotations

import json
import multiprocessing
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

# dask.distributed is in the dev extra: a missing install fails the suite instead of skipping it
import distributed

from sparsedemand import evaluate
from sparsedemand.runs import compute_stock
from sparsedemand.demo import DemoSpec, make_demo
from sparsedemand.engine import LOCAL_CLUSTER_OPTIONS, run_distributed
from sparsedemand.errors import InputError
from sparsedemand.io import Columns, read_demand, write_table
from sparsedemand.route import DEFAULT_POLICY, Rule, forecast
from sparsedemand.stock import stock_totals

pytestmark = pytest.mark.dask

COLUMNS = Columns(attributes=("lead_time", "safety_critical"))
SEED = 3


@pytest.fixture(scope="module")
def client():
    """Two worker processes with one thread each, on loopback only, no dashboard."""
    cluster = distributed.LocalCluster(n_workers=2, **LOCAL_CLUSTER_OPTIONS)
    assert LOCAL_CLUSTER_OPTIONS["threads_per_worker"] == 1 and LOCAL_CLUSTER_OPTIONS["host"] == "127.0.0.1"
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.fixture(scope="module")
def dataset(tmp_path_factory) -> Path:
    """The seeded demo history as a Parquet dataset of three files (rows in file order)."""
    table = make_demo(DemoSpec(parts=40, days=200))
    folder = tmp_path_factory.mktemp("demand") / "demand"
    folder.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(table)), 3)):
        table.iloc[rows].to_parquet(folder / f"chunk-{i}.parquet", index=False)
    return folder


@pytest.fixture(scope="module")
def local_panel(dataset):
    return read_demand(dataset, columns=COLUMNS)


def as_written(frame: pd.DataFrame, folder: Path, name: str) -> pd.DataFrame:
    """A local table as the Parquet writer stores it (periods become labels)."""
    path = write_table(frame, folder / f"local-{name}.parquet")
    return pd.read_parquet(path)


def assert_same(dask_dir: Path, local: pd.DataFrame, keys: list[str], tmp_path: Path) -> None:
    got = pd.read_parquet(dask_dir).sort_values(keys).reset_index(drop=True)
    want = as_written(local, tmp_path, dask_dir.name).sort_values(keys).reset_index(drop=True)
    pd.testing.assert_frame_equal(got, want, check_dtype=False, rtol=1e-12, atol=1e-12)


def test_forecast_matches_local_engine(client, dataset, local_panel, tmp_path):
    panel, summary = local_panel
    local = forecast(panel, 14, seed=SEED)  # first, so the workers find the compiled kernels cached
    out = tmp_path / "run"
    run = run_distributed("forecast", dataset, out_dir=out, scheduler=client, partitions=3, horizon=14,
                          columns=COLUMNS, seed=SEED)
    assert_same(out / "forecasts", local.table(), ["item", "step"], tmp_path)
    assert_same(out / "audit", local.audit, ["item"], tmp_path)
    assert_same(out / "patterns", local.classes, ["item"], tmp_path)

    # Every item lies in exactly one partition file.
    files = sorted((out / "forecasts").glob("part-*.parquet"))
    assert [f.name for f in files] == ["part-00000.parquet", "part-00001.parquet", "part-00002.parquet"]
    owners = pd.concat([pd.read_parquet(f, columns=["item"]).drop_duplicates().assign(file=f.name) for f in files])
    assert owners["item"].is_unique and set(owners["item"]) == set(panel.items)

    assert run.summary.text() == summary.text()
    counts = local.audit.groupby(["pattern", "method"]).size()
    assert run.routing.set_index(["pattern", "method"])["items"].sort_index().equals(counts.sort_index())
    manifest = json.loads((out / "run.json").read_text())
    assert manifest["engine"]["name"] == "dask" and manifest["engine"]["partitions"] == 3
    assert manifest["input"] == str(dataset.resolve()) and manifest["horizon"] == 14
    # nothing but the outputs: the staging folder is gone
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_stock_matches_local_engine(client, dataset, local_panel, tmp_path):
    panel, _ = local_panel
    snapshot = pd.DataFrame({"item": panel.items[::3], "on_hand": np.arange(len(panel.items[::3])) % 4,
                             "on_order": 1.0})
    snapshot_file = tmp_path / "on_hand.csv"
    snapshot.to_csv(snapshot_file, index=False)
    opts = dict(lead_time=None, lead_time_column="lead_time", review_period=2, service_level=None,
                fill_rate=0.9, on_hand_file=snapshot_file, seed=SEED)
    horizon = int(panel.attribute("lead_time").max()) + 2  # the stock command's horizon rule
    local = forecast(panel, horizon, seed=SEED)
    table = compute_stock(local, opts)
    out = tmp_path / "run"
    run = run_distributed("stock", dataset, out_dir=out, scheduler=client, partitions=2, columns=COLUMNS, **opts)
    assert_same(out / "stock", table, ["item"], tmp_path)
    assert_same(out / "forecasts", local.table(), ["item", "step"], tmp_path)
    totals = stock_totals(table)
    pd.testing.assert_frame_equal(run.stock_totals[totals.columns], totals, rtol=1e-12)
    assert run.stock_totals.attrs["items"] == panel.n_items


def test_backtest_matches_local_engine(client, dataset, local_panel, tmp_path):
    panel, _ = local_panel
    options = dict(methods=["ses", "sba", "tsb", "zeros"], weights=("volume", "value"))
    local = evaluate.backtest(panel, holdout=14, origins=2, seed=SEED, **options)
    out = tmp_path / "run"
    run = run_distributed("backtest", dataset, out_dir=out, scheduler=client, partitions=3, holdout=14, origins=2,
                          columns=COLUMNS, seed=SEED, backtest_options=options)
    assert_same(out / "item_scores", local.item_scores, ["item", "method"], tmp_path)

    keys = ["method", "pattern", "level", "metric"]
    want = local.scores[~local.scores["metric"].isin(run.not_combined)]
    got = pd.read_parquet(out / "scores.parquet")
    both = want.merge(got, on=keys, how="outer", suffixes=("_local", "_dask"), indicator=True)
    assert (both["_merge"] == "both").all(), both[both["_merge"] != "both"].head()
    np.testing.assert_allclose(both["value_dask"], both["value_local"], rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(both["count_dask"], both["count_local"])
    # what cannot be added up over partitions is named, not silently approximated
    assert set(run.not_combined) <= set(local.scores["metric"])
    assert "rel_mae_gmean" in run.not_combined and "mase" not in run.not_combined


def test_holdout_selection_is_taken_over_all_items(client, dataset, local_panel, tmp_path):
    panel, _ = local_panel
    local = forecast(panel, 7, selection="holdout", holdout=14, seed=SEED)
    out = tmp_path / "run"
    # by address, as a user points the engine at a running scheduler
    run_distributed("forecast", dataset, out_dir=out, scheduler=client.scheduler.address, partitions=3,
                    horizon=7, selection="holdout", holdout=14, columns=COLUMNS, seed=SEED)
    got = pd.read_parquet(out / "selection.parquet")
    pd.testing.assert_frame_equal(got, local.selection, check_dtype=False, rtol=1e-12)
    assert_same(out / "audit", local.audit, ["item"], tmp_path)
    assert_same(out / "forecasts", local.table(), ["item", "step"], tmp_path)


def test_bad_row_is_named_as_in_the_whole_input(client, dataset, tmp_path, input_error):
    table = pd.read_parquet(dataset)
    table.loc[2000, "quantity"] = -3
    bad = tmp_path / "bad"
    bad.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(table)), 3)):
        table.iloc[rows].to_parquet(bad / f"chunk-{i}.parquet", index=False)
    item = table.loc[2000, "item"]
    with pytest.raises(InputError) as local_error:
        read_demand(bad)
    out = tmp_path / "run"
    message = input_error(lambda: run_distributed("forecast", bad, out_dir=out, scheduler=client, partitions=3,
                                                  horizon=3), "row 2001", repr(item), "negative quantity")
    assert message == str(local_error.value)
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_bootstrap_quantiles_do_not_depend_on_partitions(client, dataset, tmp_path):
    # A monthly calendar leaves most items with short histories; the means use the bootstrap, whose
    # draws must be seeded by item label for the quantiles to match whatever the partitioning.
    policy = dict(DEFAULT_POLICY, lumpy=Rule("mean_since_first"), intermittent=Rule("mean_since_first"))
    panel, _ = read_demand(dataset, columns=COLUMNS, frequency="month")
    local = forecast(panel, 2, policy=policy, seed=SEED)
    out = tmp_path / "run"
    run_distributed("forecast", dataset, out_dir=out, scheduler=client, partitions=3, horizon=2, frequency="month",
                    policy=policy, columns=COLUMNS, seed=SEED)
    assert (local.audit["distribution"] == "empirical").sum() > 10
    assert_same(out / "forecasts", local.table(), ["item", "step"], tmp_path)


def test_own_local_cluster_is_started_and_closed(dataset, local_panel, tmp_path):
    panel, _ = local_panel
    local = forecast(panel, 3, seed=SEED)
    before = {p.pid for p in multiprocessing.active_children()}
    out = tmp_path / "run"
    run = run_distributed("forecast", dataset, out_dir=out, n_workers=2, horizon=3, columns=COLUMNS, seed=SEED)
    assert run.partitions == 3  # the input's three files (more than the two worker threads)
    assert_same(out / "forecasts", local.table(), ["item", "step"], tmp_path)
    assert {p.pid for p in multiprocessing.active_children()} <= before  # its worker processes are gone
