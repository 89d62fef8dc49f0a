"""`warranty-forecast backtest` (tools/backtest_origins.py): the command on a small simulated data set, what
came against a hand count of the generated claims, the chain ladder against `chain_ladder` called directly,
the interval columns on hand-made frames, and the argument and output-folder checks.

The data set is invented here (seeded numpy): two products, 24 build months of 240 units, Weibull lives
from the sale date; every claim carries its sale date, is approved and falls well inside the warranty, so
each generated claim is a counted return (README input contract; common practice, no source).
"""

from __future__ import annotations

import contextlib
import csv
import datetime as dt
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from warranty_forecast import exit_codes
from warranty_forecast.cli import main
from warranty_forecast.errors import ConfigError
from warranty_forecast.stages.chain_ladder import chain_ladder, next_periods_forecast, returns_triangle
from warranty_forecast.tools.backtest_origins import (
    MONTH_COLUMNS,
    ORIGIN_COLUMNS,
    CountedReturns,
    OriginRun,
    compare_origin,
    origin_dates,
    read_origin_run,
)

DATA_END = dt.date(2025, 6, 30)  # the newest ship and claim date: the latest as-of date
DAYS_PER_MONTH = 365.25 / 12
PRODUCTS = {"P1": (1.5, 80.0), "P2": (0.9, 400.0)}  # Weibull shape, scale in months
ORIGINS, HORIZON = 2, 3  # origins 2025-02-28 and 2025-03-31: windows to 2025-05 and 2025-06


def _first_of_month(number: int) -> dt.date:
    return dt.date(number // 12, number % 12 + 1, 1)


def simulated_extracts(folder: Path) -> tuple[Path, Path, pd.DataFrame]:
    """Shipments and claims CSVs, and the claims as a frame (dates as dates) for hand counts."""
    rng = np.random.default_rng(20250630)
    shipments, claims = [], []
    first = 2023 * 12 + 6  # build months 2023-07 .. 2025-06
    for product, (shape, scale) in PRODUCTS.items():
        for number in range(first, first + 24):
            build = _first_of_month(number)
            for lot in range(24):  # 24 lots of 10 units
                ship = min(build + dt.timedelta(days=int(rng.integers(0, 26))), DATA_END)
                sale = ship + dt.timedelta(days=int(rng.integers(5, 41)))
                known_sale = sale if sale <= DATA_END else None
                shipments.append({
                    "product": product, "build_month": build.strftime("%Y-%m"), "ship_date": ship.isoformat(),
                    "sale_date": known_sale.isoformat() if known_sale else "", "units": "10",
                    "warranty_months": "24", "serial": "",
                })
                if known_sale is None:
                    continue
                ages = scale * rng.weibull(shape, size=10)
                for age in ages[ages <= 23.0]:  # well inside the 24-month warranty
                    failure = sale + dt.timedelta(days=int(age * DAYS_PER_MONTH))
                    claim = failure + dt.timedelta(days=int(rng.integers(0, 11)))
                    if claim > DATA_END:
                        continue
                    claims.append({
                        "claim_id": f"C{len(claims):06d}", "product": product, "build_month": build.strftime("%Y-%m"),
                        "sale_date": sale.isoformat(), "failure_date": failure.isoformat(),
                        "claim_date": claim.isoformat(), "cost": "50.00", "status": "approved",
                        "failure_code": "WEAR", "serial": "",
                    })
    shipments[-1]["ship_date"] = DATA_END.isoformat()  # the newest date of the extracts is a month end
    paths = []
    for name, rows in (("shipments.csv", shipments), ("claims.csv", claims)):
        path = folder / name
        with open(path, "w", newline="", encoding="utf-8") as handle:
            writer = csv.DictWriter(handle, fieldnames=list(rows[0]), lineterminator="\n")
            writer.writeheader()
            writer.writerows(rows)
        paths.append(path)
    frame = pd.DataFrame(claims)
    for column in ("failure_date", "claim_date"):
        frame[column] = pd.to_datetime(frame[column]).dt.date
    frame["build_month"] = pd.to_datetime(frame["build_month"] + "-01").dt.date
    frame["failure_month"] = [d.replace(day=1) for d in frame["failure_date"]]
    return paths[0], paths[1], frame


@pytest.fixture(scope="module")
def backtest_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("backtest")
    shipments, claims, frame = simulated_extracts(folder)
    out = folder / "out"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main([
            "backtest", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out),
            "--origins", str(ORIGINS), "--horizon", str(HORIZON),
        ])
    assert code == exit_codes.SUCCESS
    return out, frame, printed.getvalue()


def test_the_command_writes_the_documented_files(backtest_run):
    out, _, printed = backtest_run
    assert "2025-03-31      P2" in printed and "per product over all origins" in printed
    assert sorted(p.name for p in out.iterdir()) == [
        "backtest.parquet", "backtest.png", "backtest_by_month.parquet", "manifest.json",
    ]
    assert not list(out.parent.glob(".out.backtest-runs-*"))  # the working folder is gone
    by_origin = pd.read_parquet(out / "backtest.parquet")
    by_month = pd.read_parquet(out / "backtest_by_month.parquet")
    assert list(by_origin.columns) == list(ORIGIN_COLUMNS)
    assert list(by_month.columns) == list(MONTH_COLUMNS)
    assert sorted(set(by_origin["origin"])) == [dt.date(2025, 2, 28), dt.date(2025, 3, 31)]
    assert len(by_origin) == ORIGINS * len(PRODUCTS) and len(by_month) == ORIGINS * len(PRODUCTS) * HORIZON
    manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["producer"]["name"] == "warranty-forecast" and manifest["as_of_date"] == DATA_END.isoformat()
    assert manifest["columns"]["backtest.parquet"] == ORIGIN_COLUMNS
    # the by-month rows add up to the per-origin rows
    summed = by_month.groupby(["origin", "product"])[["forecast", "came", "chain_ladder_forecast"]].sum()
    indexed = by_origin.set_index(["origin", "product"])
    np.testing.assert_allclose(summed["forecast"], indexed.loc[summed.index, "forecast"], rtol=1e-9)
    np.testing.assert_allclose(summed["came"], indexed.loc[summed.index, "came"])
    np.testing.assert_allclose(summed["chain_ladder_forecast"], indexed.loc[summed.index, "chain_ladder_forecast"], rtol=1e-9)
    assert (by_origin["forecast"] > 0).all() and by_origin["covered"].isna().all()  # no interval columns yet
    # the triangle holds exactly the returns the origin's run counted to date
    np.testing.assert_array_equal(by_origin["triangle_returns_at_origin"], by_origin["returns_to_date_at_origin"])


def test_came_is_a_hand_count_of_the_generated_claims(backtest_run):
    out, claims, _ = backtest_run
    by_origin = pd.read_parquet(out / "backtest.parquet")
    by_month = pd.read_parquet(out / "backtest_by_month.parquet")
    for row in by_origin.itertuples(index=False):
        first, last = row.first_month, row.last_month
        mine = claims[(claims["product"] == row.product) & (claims["build_month"] <= row.origin)]
        in_window = mine[(mine["failure_month"] >= first) & (mine["failure_month"] <= last)]
        assert row.came == len(in_window)
        assert row.build_months == len({m for m in claims["build_month"] if m <= row.origin}) == 20 + (row.origin.month == 3)
        months = by_month[(by_month["origin"] == row.origin) & (by_month["product"] == row.product)]
        by_hand = in_window.groupby("failure_month").size()
        for month in months.itertuples(index=False):
            assert month.came == by_hand.get(month.month, 0)


def test_the_chain_ladder_matches_chain_ladder_on_the_triangle_directly(backtest_run):
    out, claims, _ = backtest_run
    by_origin = pd.read_parquet(out / "backtest.parquet")
    by_month = pd.read_parquet(out / "backtest_by_month.parquet")
    for row in by_origin.itertuples(index=False):
        known = claims[
            (claims["product"] == row.product) & (claims["build_month"] <= row.origin) & (claims["claim_date"] <= row.origin)
        ]
        development = [
            (f.year - b.year) * 12 + f.month - b.month + 1 for b, f in zip(known["build_month"], known["failure_month"])
        ]
        counts = pd.DataFrame({"build_month": known["build_month"], "development_month": development, "returns": 1.0})
        build_months = sorted({m for m in claims["build_month"] if m <= row.origin})
        result = chain_ladder(returns_triangle(counts, row.origin, origins=build_months))
        ahead = next_periods_forecast(result, periods=HORIZON)
        assert row.chain_ladder_forecast == pytest.approx(ahead.total, rel=1e-12)
        assert row.chain_ladder_standard_error == pytest.approx(ahead.total_standard_error, rel=1e-12)
        assert row.chain_ladder_reserve == pytest.approx(result.total_reserve, rel=1e-12)
        assert row.triangle_returns_at_origin == len(known)
        months = by_month[(by_month["origin"] == row.origin) & (by_month["product"] == row.product)]
        np.testing.assert_allclose(months["chain_ladder_forecast"], ahead.by_period.to_numpy(), rtol=1e-12)


def test_origins_are_the_month_ends_a_horizon_before_the_latest_whole_month():
    expected = [dt.date(2024, 12, 31), dt.date(2025, 1, 31), dt.date(2025, 11, 30)]
    dates = origin_dates(dt.date(2026, 11, 30), 12, 12)
    assert [dates[0], dates[1], dates[-1]] == expected and len(dates) == 12
    assert origin_dates(dt.date(2026, 12, 15), 12, 12) == dates  # December not yet whole
    with pytest.raises(ConfigError, match="--horizon must be a whole number"):
        origin_dates(dt.date(2026, 11, 30), 3, 0)


@pytest.mark.parametrize("month_name", ["calendar_month", "month"])  # as read now; as a run from before the rename
def test_interval_columns_are_used_when_the_run_has_them(month_name):
    # hand-made: one product, two build months, origin 2025-03-31, horizon 12, a per-product interval
    origin, jan, feb = dt.date(2025, 3, 31), dt.date(2025, 1, 1), dt.date(2025, 2, 1)
    april, may = dt.date(2025, 4, 1), dt.date(2025, 5, 1)
    forecast = pd.DataFrame({
        "product": ["P"] * 4, "build_month": [jan, jan, feb, feb], month_name: [april, may, april, may],
        "expected_returns": [2.0, 2.5, 1.0, 1.5], "expected_returns_product_model": [2.0, 2.5, 1.0, 1.5],
        "returns_lower": [1.0, 1.0, 0.0, 0.0], "returns_median": [2.0, 2.0, 1.0, 1.0], "returns_upper": [4.0, 4.0, 1.0, 3.0],
    })
    reserve = pd.DataFrame({
        "product": ["P", "P"], "build_month": [jan, feb], "units": [100, 100], "returns_to_date": [3, 1],
        "expected_future_returns": [10.0, 8.0], "forecast_status": ["forecast (weibull)"] * 2,
    })
    interval = pd.DataFrame({"product": ["P"], "lower": [4.0], "upper": [9.0]})
    counted = CountedReturns(
        dt.date(2026, 3, 31),
        pd.DataFrame({
            "product": ["P"] * 5, "build_month": [jan, jan, jan, feb, feb],
            "failure_month": [jan, april, may, april, may], "claim_month": [jan, april, may, april, may],
            "returns": [3, 3, 1, 2, 1],
        }),
        pd.DataFrame({"product": ["P", "P"], "build_month": [jan, feb], "units": [100, 120]}),
    )
    by_month = pd.DataFrame({"product": ["P", "P"], month_name: [april, may], "lower": [2.0, 1.0], "upper": [4.0, 1.5]})
    run = OriginRun(origin, forecast, reserve, interval, "reserve_by_product.parquet: x_12_lower, x_12_upper",
                    by_month, "by_month.parquet")
    comparison = compare_origin(run, counted, horizon=12, confidence_level=0.95)
    row = comparison.by_product.iloc[0]
    assert row["forecast"] == 7.0 and row["came"] == 7.0 and row["covered"] == 1.0
    assert row["units_shipped_after_origin"] == 20.0 and row["build_months"] == 2
    months = comparison.by_month.set_index("month")
    # April: jan came 3 in [1, 4], feb came 2 not in [0, 1]; May: jan 1 in [1, 4], feb 1 in [0, 3]
    assert months.loc[april, "interval_cells"] == 2 and months.loc[april, "interval_cells_covered"] == 1
    assert months.loc[may, "interval_cells"] == 2 and months.loc[may, "interval_cells_covered"] == 2
    assert months.loc[dt.date(2025, 6, 1), "came"] == 0 and months.loc[dt.date(2025, 6, 1), "forecast"] == 0
    # the per-product monthly interval: April came 5 not in [2, 4]; May came 2 not in [1, 1.5]; June none
    assert list(months["covered"].iloc[:2]) == [0.0, 0.0] and months["covered"].iloc[2:].isna().all()
    without = compare_origin(
        OriginRun(origin, forecast.drop(columns=["returns_lower", "returns_median", "returns_upper"]), reserve, None, None),
        counted, horizon=12, confidence_level=0.95,
    )
    assert np.isnan(without.by_product.iloc[0]["covered"]) and (without.by_month["interval_cells"] == 0).all()
    assert without.by_month["covered"].isna().all()


@pytest.mark.parametrize("month_name", ["calendar_month", "month"])  # published now; a folder from before the rename
def test_a_per_product_twelve_month_interval_is_found_in_the_runs_tables(tmp_path, month_name):
    # hand-made output folder: the interval's columns are named by the run (any `<prefix with 12>_lower/_upper`
    # pair in a table without build_month); a table with build_month is not a per-product table
    jan = dt.date(2025, 1, 1)
    pd.DataFrame({"product": ["P"], "build_month": [jan], month_name: [jan], "expected_returns": [1.0]}).to_parquet(
        tmp_path / "forecast.parquet")
    pd.DataFrame({"product": ["P"], "build_month": [jan], "next_12_months_lower": [0.0],
                  "next_12_months_upper": [99.0]}).to_parquet(tmp_path / "reserve.parquet")
    run = read_origin_run(tmp_path, dt.date(2025, 1, 31))
    assert run.product_interval is None and run.interval_source is None
    pd.DataFrame({"product": ["P", "Q"], "returns_next_12_months_lower": [3.0, 1.0],
                  "returns_next_12_months_upper": [8.0, 2.0]}).to_parquet(tmp_path / "reserve_by_product.parquet")
    run = read_origin_run(tmp_path, dt.date(2025, 1, 31))
    assert run.product_interval.to_dict("list") == {"product": ["P", "Q"], "lower": [3.0, 1.0], "upper": [8.0, 2.0]}
    assert run.interval_source == (
        "reserve_by_product.parquet: returns_next_12_months_lower, returns_next_12_months_upper"
    )
    assert run.forecast["calendar_month"].iloc[0] == jan and "month" not in run.forecast.columns  # either name read
    assert run.month_interval is None
    # a long table of horizons comes first; a per-month table gives the monthly interval
    pd.DataFrame({"product": ["P", "P"], "horizon": ["next_12_months", "to_warranty_end"], "expected": [5.0, 9.0],
                  "lower": [4.0, 7.0], "median": [5.0, 9.0], "upper": [6.0, 11.0]}).to_parquet(
        tmp_path / "prediction_by_product.parquet")
    pd.DataFrame({"product": ["P"], month_name: [jan], "expected_returns": [1.0], "returns_lower": [0.0],
                  "returns_median": [1.0], "returns_upper": [3.0]}).to_parquet(tmp_path / "prediction_by_month.parquet")
    run = read_origin_run(tmp_path, dt.date(2025, 1, 31))
    assert run.product_interval.to_dict("list") == {"product": ["P"], "lower": [4.0], "upper": [6.0]}
    assert run.interval_source == "prediction_by_product.parquet: lower, upper where horizon = next_12_months"
    assert run.month_interval.to_dict("list") == {
        "product": ["P"], "calendar_month": [jan], "lower": [0.0], "upper": [3.0]}


@pytest.mark.parametrize("arguments", [["--origins", "0"], ["--horizon", "-1"], ["--origins", "121"]])
def test_bad_numbers_exit_2_before_any_work(tmp_path, arguments):
    out = tmp_path / "out"
    code = main(["backtest", "--shipments", "no.csv", "--claims", "no.csv", "--out", str(out), *arguments])
    assert code == exit_codes.BAD_ARGUMENTS and not out.exists()


def test_a_folder_it_must_not_replace_exits_5_before_any_work(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    code = main(["backtest", "--shipments", "no.csv", "--claims", "no.csv", "--out", str(out)])
    assert code == exit_codes.OUTPUT_FAILED and (out / "notes.txt").read_text(encoding="utf-8") == "mine"
