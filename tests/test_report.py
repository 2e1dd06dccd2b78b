"""The HTML report builder: contents, self-containment, item pages, bad run folders."""

from __future__ import annotations

import base64
import json
import re
from html import escape

import numpy as np
import pandas as pd
import pytest
from statsmodels.tsa import holtwinters

from report_run import make_run
from sparsedemand import methods, report
from sparsedemand.classify import pattern_summary
from sparsedemand.panel import first_demand_offsets
from sparsedemand.report import STOCK_CAUTION, build_report, ses_level

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def full_run(tmp_path_factory):
    """A run folder with every table and the report built from it."""
    folder = tmp_path_factory.mktemp("run")
    frames = make_run(folder)
    path = build_report(folder, out=folder / "report.html", top_items=3, max_item_pages=6)
    return folder, frames, path.read_text(encoding="utf-8")


def section(html: str, key: str) -> str:
    start = html.index(f'<section id="{key}">')
    return html[start: html.index("</section>", start)]


def audit_rows(html: str) -> list[str]:
    body = section(html, "audit")
    body = body[body.index("<tbody>"): body.index("</tbody>")]
    return re.findall(r"<tr>(.*?)</tr>", body)


# ------------------------------------------------------------------ self-contained


def test_report_is_one_file_that_fetches_nothing(full_run):
    folder, _, html = full_run
    assert html.startswith("<!DOCTYPE html>")
    # nothing from a network: no absolute or protocol-relative address in any src or href
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:[a-z]+:)?//""", html, re.I)
    assert "http://" not in html and "https://" not in html
    assert "<link" not in html and "<script src" not in html and "@import" not in html
    # links inside the file only point at anchors of the file
    for target in re.findall(r'href="([^"]*)"', html):
        assert target.startswith("#"), target
        assert f'id="{target[1:]}"' in html, target


def test_every_image_is_an_embedded_png_of_its_stated_size(full_run):
    _, _, html = full_run
    images = re.findall(r'<img src="([^"]+)" alt="[^"]*" width="(\d+)" height="(\d+)">', html)
    assert len(images) == html.count("<img ")
    # overview, pattern map, router, coverage, pinball, simulation, metrics, levels, 2 stock, 6 items
    assert len(images) >= 16
    for src, width, height in images:
        assert src.startswith("data:image/png;base64,")
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == PNG_SIGNATURE
        assert int.from_bytes(png[16:20], "big") == int(width) > 50
        assert int.from_bytes(png[20:24], "big") == int(height) > 50


def test_sections_and_the_stock_caution(full_run):
    _, _, html = full_run
    for key in ("overview", "patterns", "backtest", "stock", "items", "audit"):
        assert f'<section id="{key}">' in html
        assert f'href="#{key}"' in html
    stock = section(html, "stock")
    assert escape(STOCK_CAUTION) in stock
    assert "decision support" in STOCK_CAUTION and "safety-critical" in STOCK_CAUTION.lower()
    assert "qualified staff" in STOCK_CAUTION


# ------------------------------------------------------------------ contents


def test_pattern_shares_match_the_classifier_summary(full_run):
    folder, frames, html = full_run
    classes, panel = frames["patterns"], frames["panel"]
    expected = pattern_summary(classes, panel)
    expected = expected[expected["items"] > 0]
    volume = pd.Series(panel.values.sum(axis=1), index=panel.items.astype(str))
    ours = report._pattern_summary(classes.reset_index(drop=True), volume)
    assert list(ours.index) == list(expected.index)
    np.testing.assert_array_equal(ours["items"], expected["items"])
    np.testing.assert_allclose(ours["item_share"], expected["item_share"])
    np.testing.assert_allclose(ours["volume_share"], expected["volume_share"])
    overview = section(html, "overview")
    for name, share in expected["item_share"].items():
        assert f"<td>{name}</td>" in overview
        assert f"{share:.1%}" in overview


def test_overview_counts_items_periods_and_warnings(full_run):
    _, frames, html = full_run
    panel, audit = frames["panel"], frames["audit"]
    overview = section(html, "overview")
    flagged = int((audit["warnings"] != "").sum())
    assert flagged > 0
    assert f"<dd>{flagged:,} of {len(audit):,}</dd>" in overview
    assert f"<dd>{panel.n_items:,}</dd>" in overview
    assert f"{panel.n_periods:,} (day)" in overview
    assert f"{panel.values.sum():,.0f} units" in overview


def test_audit_table_has_every_item_with_raw_values_for_sorting(full_run):
    _, frames, html = full_run
    audit = frames["audit"]
    rows = audit_rows(html)
    assert len(rows) == len(audit)
    header = section(html, "audit")
    assert header.count('<th scope="col"') == len(audit.columns)
    assert '<th scope="col" data-type="number"><button type="button">adi</button>' in header
    first = rows[0]
    assert audit["item"].iat[0] in first
    assert f'data-v="{float(audit["adi"].iat[0])!r}"' in first
    # CV² is undefined for some items: a blank that sorts last, not "nan"
    assert "nan" not in " ".join(re.findall(r'data-v="([^"]*)"', header)).lower()


def test_item_pages_cover_top_value_items_then_flagged_ones(full_run):
    _, frames, html = full_run
    panel, audit = frames["panel"], frames["audit"]
    value = pd.Series(panel.values.sum(axis=1) * panel.attribute("unit_price").to_numpy(float),
                      index=panel.items.astype(str))
    top = value.sort_values(ascending=False, kind="stable").index[:3].tolist()
    flagged = audit.loc[audit["warnings"] != "", "item"]
    flagged = flagged.iloc[np.argsort(-value.reindex(flagged).to_numpy(), kind="stable")].tolist()
    expected = list(dict.fromkeys(top + flagged))[:6]
    pages = re.findall(r'<article class="item" id="item-(\d+)"><h3>([^<]+)</h3>', html)
    assert [label for _, label in pages] == expected
    assert [int(k) for k, _ in pages] == list(range(1, 7))
    # flagged items beyond the cap are named so nobody misses them
    left = [i for i in list(dict.fromkeys(top + flagged))[6:] if i in flagged]
    if left:
        assert f"{len(left):,} more items with a warning have no page" in html
        assert left[0] in section(html, "items")
    # the audit table links to the pages
    assert f'<a href="#item-1">{expected[0]}</a>' in section(html, "audit")


def test_item_page_shows_method_reason_warnings_and_stock(full_run):
    _, frames, html = full_run
    audit = frames["audit"].set_index("item")
    items = section(html, "items")
    pages = re.findall(r'(<article class="item" id="item-\d+"><h3>([^<]+)</h3>.*?</article>)', items, re.S)
    assert pages
    for page, item in pages:
        row = audit.loc[item]
        assert f"<dd>{row['method']}</dd>" in page
        assert escape(row["reason"]) in page
        if row["warnings"]:
            assert row["warnings"] in page
        assert "reorder point" in page
        assert "forecast band q50 to q95" in page
        assert ("fitted level: one-step forecast of" in page) or ("smoothed level" in page)


def test_backtest_section_charts_every_metric_and_judges_the_router(full_run):
    _, frames, html = full_run
    backtest = section(html, "backtest")
    assert "Coverage of each quantile level" in backtest
    assert "Scaled pinball loss per quantile level" in backtest
    assert "fill rate against stock on hand" in backtest
    assert "Across aggregation levels" in backtest
    # the synthetic scores make the router best on every lower-is-better error
    assert re.search(r"<td>mase</td><td[^>]*>0.7</td><td>zeros</td>.*?<td>yes</td>", backtest)


def test_router_verdicts_follow_each_metric_direction():
    rows = []
    for method, mase, fill, bias, cover in (("router", 0.8, 0.90, 0.30, 0.86),
                                            ("zeros", 1.0, 0.95, 0.05, 0.60),
                                            ("repeat_last", 1.2, 0.70, -0.5, 0.97)):
        rows += [(method, "mase", mase), (method, "fill_rate", fill), (method, "scaled_bias", bias),
                 (method, "coverage_q90", cover), (method, "a_new_metric", 1.0)]
    frame = pd.DataFrame(rows, columns=["method", "metric", "value"]).assign(pattern="all", level="item")
    html = report._router_section(frame, report._method_colours(["router", "zeros", "repeat_last"]))
    verdicts = dict(re.findall(r"<tr><td>([a-z_0-9]+)</td>.*?<td>(yes|no|)</td></tr>", html))
    # lower MASE wins; a lower fill rate loses; a bias further from 0 loses;
    # coverage 86% is nearer the 90% target than 97% (repeat_last) and 60% (zeros)
    assert verdicts == {"mase": "yes", "fill_rate": "no", "scaled_bias": "no", "coverage_q90": "yes",
                        "a_new_metric": ""}
    assert "<b>2 of 4</b>" in html


def test_open_metric_set_without_pattern_or_level_columns(tmp_path):
    make_run(tmp_path, tables=("patterns",), history="none")
    scores = pd.DataFrame({"method": ["router", "zeros", "router", "zeros"],
                           "metric": ["waste_index", "waste_index", "mase", "mase"],
                           "value": [1.0, 2.0, 0.5, 0.9]})
    scores.to_csv(tmp_path / "scores.csv", index=False)
    html = build_report(tmp_path, out=tmp_path / "r.html").read_text(encoding="utf-8")
    backtest = section(html, "backtest")
    assert "Backtest metrics for each method and pattern" in backtest
    assert "<td>waste_index</td>" in backtest and "not judged" in backtest


# ------------------------------------------------------------------ partial folders and history


def test_tables_with_only_their_required_columns(tmp_path):
    tables = {
        "patterns": pd.DataFrame({"item": ["A", "B"], "pattern": ["lumpy", "never-sold"]}),
        "forecasts": pd.DataFrame({"item": ["A", "A", "B"], "step": [1, 2, 1], "forecast": [0.5, 0.5, 0.0]}),
        "audit": pd.DataFrame({"item": ["A", "B"], "pattern": ["lumpy", "never-sold"],
                               "method": ["tsb", "zeros"]}),
        "scores": pd.DataFrame({"method": ["router"], "metric": ["mase"], "value": [0.9]}),
        "item_scores": pd.DataFrame({"item": ["A"], "method": ["router"]}),
        "stock": pd.DataFrame({"item": ["A", "B"], "safety_stock": ["unknown", "2"]}),
    }
    for name, frame in tables.items():
        frame.to_csv(tmp_path / f"{name}.csv", index=False)
    html = build_report(tmp_path).read_text(encoding="utf-8")
    assert "no naive baseline rows" in section(html, "backtest")
    assert "items with a stock target</dt><dd>2</dd>" in section(html, "stock")
    assert "safety stock (units)" not in section(html, "stock")  # not numbers: not added up
    # ADI and CV² are absent: the map is left out with a note, the pages still come
    assert "<img " not in section(html, "patterns")
    assert section(html, "items").count('<article class="item"') == 0  # nothing flagged, no volume
    assert len(audit_rows(html)) == 2


def test_missing_tables_leave_a_note_naming_the_command(tmp_path):
    make_run(tmp_path, tables=("patterns",))
    html = build_report(tmp_path, out=tmp_path / "r.html").read_text(encoding="utf-8")
    assert "<code>scores.csv</code> (written by <code>sparsedemand backtest</code>)" in section(html, "backtest")
    assert "<code>stock.csv</code> (written by <code>sparsedemand stock</code>)" in section(html, "stock")
    assert "<code>audit.csv</code> (written by <code>sparsedemand forecast</code>)" in section(html, "audit")
    assert escape(STOCK_CAUTION) in section(html, "stock")
    assert html.count("<img ") >= 2  # the pattern shares and the map still drawn


def test_history_from_run_json_and_its_cutoffs(tmp_path):
    frames = make_run(tmp_path, history="run.json", tables=("patterns", "audit", "forecasts"))
    settings = json.loads((tmp_path / "run.json").read_text())
    settings["classify_options"] = {"adi_cutoff": 1.5, "cv2_cutoff": 0.6}
    (tmp_path / "run.json").write_text(json.dumps(settings))
    html = build_report(tmp_path, max_item_pages=2).read_text(encoding="utf-8")
    assert (tmp_path / "report.html").exists()
    assert "sales.csv" in section(html, "overview")
    assert f"{frames['panel'].n_items:,}" in section(html, "overview")
    assert "cutoffs ADI 1.5 and CV² 0.6" in section(html, "patterns")
    assert "14 periods" in section(html, "overview")  # the horizon from run.json


def test_history_argument_wins_over_the_folder(tmp_path):
    frames = make_run(tmp_path, tables=("patterns", "audit", "forecasts"))
    panel = frames["panel"]
    smaller = panel.subset(np.arange(5))
    html = build_report(tmp_path, history=smaller, max_item_pages=1).read_text(encoding="utf-8")
    assert "given by the caller" in html
    assert f"<dd>{smaller.n_items:,}</dd>" in section(html, "overview")


def test_without_history_item_pages_show_the_forecast_only(tmp_path):
    make_run(tmp_path, tables=("audit", "forecasts"), history="none")
    html = build_report(tmp_path, max_item_pages=2).read_text(encoding="utf-8")
    assert "No demand history was found" in html
    items = section(html, "items")
    assert "forecast mean" in items and "demand per period" not in items


# ------------------------------------------------------------------ fitted level


def test_ses_level_matches_a_reference_library():
    # statsmodels' simple exponential smoothing with a known initial level
    # (Hyndman & Athanasopoulos, Forecasting: Principles and Practice, 3rd ed. 2021, ch. 8.1)
    y = np.array([0.0, 0.0, 3.0, 0.0, 1.0, 0.0, 0.0, 4.0, 2.0, 0.0, 0.0, 1.0])
    start = 2
    ours = ses_level(y, np.ones(len(y), bool), start, alpha=0.3)
    model = holtwinters.SimpleExpSmoothing(y[start:], initialization_method="known", initial_level=y[start])
    fitted = model.fit(smoothing_level=0.3, optimized=False).fittedvalues
    assert np.isnan(ours[: start + 1]).all()
    np.testing.assert_allclose(ours[start + 1:], fitted[1:], rtol=1e-12)


def test_ses_level_holds_through_unavailable_periods():
    y = np.array([2.0, 0.0, 0.0, 0.0, 4.0])
    ok = np.array([True, True, False, False, True])
    # by hand, alpha 0.5: level 2 -> 1 after period 1; periods 2 and 3 skipped
    np.testing.assert_allclose(ses_level(y, ok, 0, alpha=0.5), [np.nan, 2.0, 1.0, 1.0, 1.0])


def test_fitted_level_is_the_methods_own_one_step_forecast():
    rng = np.random.default_rng(4)
    y = np.where(rng.random(150) < 0.2, rng.integers(1, 6, 150), 0).astype(float)
    y[:7] = 0.0
    y[7] = 3.0
    ok = rng.random(150) > 0.1
    ok[7] = True
    for name, params in (("croston", {"alpha": 0.1, "beta": 0.2}), ("tsb", {"alpha": 0.2, "beta": 0.05}),
                         ("mean_since_first", {})):
        x, level, _ = report._method_level(y, ok, 7, name, params, 25, 0)
        assert len(x) == 25 and x[0] == 8 and x[-1] == 149
        for t, value in zip(x, level):
            head = y[None, :t].copy()
            direct = methods.fit(name, head, first_demand_offsets(head), ok[None, :t].copy(), horizon=1,
                                 **params)
            assert value == pytest.approx(direct.mean[0, 0], rel=1e-12, abs=1e-12)


def test_fitted_level_falls_back_to_smoothing_for_an_unknown_method():
    y = np.array([0.0, 2.0, 0.0, 1.0, 0.0, 3.0])
    x, level, legend = report._fitted_level(y, np.ones(6, bool), 1, "no_such_method", "", 10)
    assert legend.startswith("smoothed level: exponential smoothing")
    np.testing.assert_allclose(level, ses_level(y, np.ones(6, bool), 1))


def test_parameters_text_is_read_back_as_options():
    assert report._parse_parameters("alpha=0.1234 (optimised), beta=0.05") == {"alpha": 0.1234, "beta": 0.05}
    assert report._parse_parameters("window=4") == {"window": 4}
    assert isinstance(report._parse_parameters("window=4")["window"], int)
    assert report._parse_parameters("") == {}
    assert report._parse_parameters(float("nan")) == {}
    assert report._parse_parameters("kind=fast") == {}


# ------------------------------------------------------------------ bad input


def test_missing_or_wrong_run_folder(tmp_path, input_error):
    out = tmp_path / "r.html"
    input_error(lambda: build_report(tmp_path / "nowhere", out=out), "nowhere", "no such run folder")
    (tmp_path / "file.csv").write_text("x\n1\n")
    input_error(lambda: build_report(tmp_path / "file.csv", out=out), "file.csv", "not a folder")
    empty = tmp_path / "empty"
    empty.mkdir()
    input_error(lambda: build_report(empty, out=out), "empty", "no run outputs found", "patterns.csv")
    assert not out.exists()


def test_bad_table_names_the_file_and_column(tmp_path, input_error):
    make_run(tmp_path, tables=("patterns", "scores"), history="none")
    scores = pd.read_csv(tmp_path / "scores.csv").drop(columns="metric")
    scores.to_csv(tmp_path / "scores.csv", index=False)
    input_error(lambda: build_report(tmp_path), "scores.csv", "missing column 'metric'")
    (tmp_path / "scores.csv").write_text("")
    input_error(lambda: build_report(tmp_path), "scores.csv", "empty")
    assert not (tmp_path / "report.html").exists()


def test_bad_run_json(tmp_path, input_error):
    make_run(tmp_path, tables=("patterns",), history="run.json")
    good = (tmp_path / "run.json").read_text()
    (tmp_path / "run.json").write_text("{not json")
    input_error(lambda: build_report(tmp_path), "run.json", "cannot read the run settings")
    settings = json.loads(good)
    settings["columns"]["colour"] = "red"
    (tmp_path / "run.json").write_text(json.dumps(settings))
    input_error(lambda: build_report(tmp_path), "run.json", "unknown column field 'colour'")
    settings = json.loads(good)
    settings["input"] = "input/gone.csv"
    (tmp_path / "run.json").write_text(json.dumps(settings))
    input_error(lambda: build_report(tmp_path), "run.json", "gone.csv", "no such file")


def test_failed_build_keeps_the_previous_report(tmp_path, input_error):
    make_run(tmp_path, tables=("patterns", "stock"), history="none")
    out = tmp_path / "report.html"
    out.write_text("previous report")
    (tmp_path / "stock.csv").write_text("sku,reorder_point\nA,3\n")
    input_error(lambda: build_report(tmp_path, out=out), "stock.csv", "missing column 'item'")
    assert out.read_text() == "previous report"
    assert [p.name for p in tmp_path.glob(".report.html*")] == []


@pytest.mark.parametrize("option, value", [("top_items", -1), ("max_item_pages", 2.5),
                                           ("table_rows", 0), ("level_points", True),
                                           ("adi_cutoff", 0.5), ("cv2_cutoff", "high")])
def test_bad_options_are_named(tmp_path, input_error, option, value):
    make_run(tmp_path, tables=("patterns",), history="none")
    input_error(lambda: build_report(tmp_path, **{option: value}), option)


def test_out_must_not_be_a_folder(tmp_path, input_error):
    make_run(tmp_path, tables=("patterns",), history="none")
    input_error(lambda: build_report(tmp_path, out=tmp_path), "is a folder")


# ------------------------------------------------------------------ the real pipeline


def test_report_from_a_routed_forecast(tmp_path):
    from sparsedemand.classify import classify
    from sparsedemand.io import write_table
    from sparsedemand.route import forecast

    frames = make_run(tmp_path, tables=(), history="demand.csv")
    panel = frames["panel"]
    result = forecast(panel, 14)
    write_table(classify(panel), tmp_path / "patterns.csv")
    write_table(result.table(), tmp_path / "forecasts.csv")
    write_table(result.audit, tmp_path / "audit.csv")
    html = build_report(tmp_path, max_item_pages=3).read_text(encoding="utf-8")
    assert len(audit_rows(html)) == panel.n_items
    items = section(html, "items")
    assert items.count('<article class="item"') == 3
    assert "fitted level: one-step forecast of" in items
