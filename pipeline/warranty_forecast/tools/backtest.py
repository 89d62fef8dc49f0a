"""Backtest: what an earlier run forecast for the months since, against the returns that came.

    python -m warranty_forecast.tools.backtest EARLIER_OUT LATER_OUT [--all]

EARLIER_OUT and LATER_OUT are two output folders of the nightly run on the same extracts (or on later
extracts), the earlier one run with an earlier as-of date (`--as-of`). For every product x build month:

    forecast  = the earlier run's expected returns in the calendar months after its as-of date, up to
                the later run's as-of month (forecast.parquet, `expected_returns` by `calendar_month`, or
                `month` in a folder written before that rename; and `expected_returns_product_model`,
                what the product's model alone forecast),
    came      = the later run's returns to date less the earlier run's (reserve.parquet,
                returns_to_date), i.e. the counted returns that arrived in between.

Prints the flagged build months of the earlier run (build_month_alerts.parquet), or every build month
with `--all`, and the product totals; exits 0 (non-zero only when a folder lacks an output).

The months match up as the forecast places returns: each expected return in the calendar month that
holds the midpoint of its month in service, so the two differ by up to half a month at either end.
Returns to date count claims by their failure date up to the as-of date; a claim filed after the later
as-of date for a failure before it is in neither.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
from pathlib import Path
from typing import Sequence

import pandas as pd

from warranty_forecast.outputs.output_columns import CALENDAR_MONTH, as_current

BACKTEST_COLUMNS = (
    "product",
    "build_month",
    "is_flagged",
    "forecast",
    "forecast_product_model",
    "came",
)


def _as_of(out_dir: Path) -> dt.date:
    return dt.date.fromisoformat(json.loads((out_dir / "manifest.json").read_text(encoding="utf-8"))["as_of_date"])


def backtest(earlier: Path, later: Path) -> pd.DataFrame:
    """One row per product x build month of the earlier run (BACKTEST_COLUMNS): its forecast for the
    calendar months after its as-of date up to the later run's as-of month, and the returns that came."""
    start, end = _as_of(earlier), _as_of(later)
    if end <= start:
        raise ValueError(f"the later run's as-of date {end} is not after the earlier run's {start}")
    forecast = as_current("forecast", pd.read_parquet(earlier / "forecast.parquet"))  # `month` before the rename
    months = pd.to_datetime(forecast[CALENDAR_MONTH])
    window = forecast[(months > pd.Timestamp(start)) & (months <= pd.Timestamp(end))]
    if "expected_returns_product_model" not in window.columns:  # outputs of an earlier release
        window = window.assign(expected_returns_product_model=window["expected_returns"])
    forecast_sum = window.groupby(["product", "build_month"], as_index=False)[
        ["expected_returns", "expected_returns_product_model"]
    ].sum().rename(columns={"expected_returns": "forecast", "expected_returns_product_model": "forecast_product_model"})
    before = pd.read_parquet(earlier / "reserve.parquet")[["product", "build_month", "returns_to_date"]]
    after = pd.read_parquet(later / "reserve.parquet")[["product", "build_month", "returns_to_date"]]
    came = before.merge(after, on=["product", "build_month"], how="left", suffixes=("_before", "_after"))
    came["came"] = came["returns_to_date_after"].fillna(came["returns_to_date_before"]) - came["returns_to_date_before"]
    table = came[["product", "build_month", "came"]].merge(forecast_sum, on=["product", "build_month"], how="left")
    table[["forecast", "forecast_product_model"]] = table[["forecast", "forecast_product_model"]].fillna(0.0)
    alerts_path = earlier / "build_month_alerts.parquet"
    flagged = set()
    if alerts_path.exists():
        alerts = pd.read_parquet(alerts_path)
        flagged = set(zip(alerts.loc[alerts["is_flagged"], "product"], alerts.loc[alerts["is_flagged"], "build_month"]))
    table["is_flagged"] = [(p, m) in flagged for p, m in zip(table["product"], table["build_month"])]
    return table[list(BACKTEST_COLUMNS)].sort_values(["product", "build_month"], ignore_index=True)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m warranty_forecast.tools.backtest", description=__doc__.split("\n\n")[0], allow_abbrev=False
    )
    parser.add_argument("earlier", type=Path, help="output folder of the run with the earlier as-of date")
    parser.add_argument("later", type=Path, help="output folder of the run with the later as-of date")
    parser.add_argument("--all", action="store_true", help="print every build month, not only the flagged ones")
    args = parser.parse_args(argv)
    try:
        table = backtest(args.earlier, args.later)
    except (OSError, ValueError, KeyError) as error:
        print(f"backtest: {error}", file=sys.stderr)
        return 1
    start, end = _as_of(args.earlier), _as_of(args.later)
    print(f"forecast made at as-of {start} for the months to {end}, against the returns that came")
    shown = table if args.all else table[table["is_flagged"]]
    with pd.option_context("display.width", 160, "display.max_rows", 10_000):
        print(shown.to_string(index=False, float_format=lambda v: f"{v:,.1f}") if len(shown) else "(no flagged build month)")
        totals = table.groupby("product")[["forecast", "forecast_product_model", "came"]].sum()
        print("\nproduct totals")
        print(totals.to_string(float_format=lambda v: f"{v:,.1f}"))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
