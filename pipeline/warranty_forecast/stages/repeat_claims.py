"""Repeat claims: the claims still to come from units that have already had a claim.

The life model counts a unit once, at its first counted claim (`is_return` in
claims_assigned_to_sale_month_groups): a serial's later counted in-coverage claims are repeat claims, not
failed units. Finance pays, and reserves for, every claim, so the forecast of claims is the life model's
expected returns (first claims) plus the expected repeat claims of this module.

Model (a rate by time since the first claim, estimated non-parametrically)
--------------------------------------------------------------------------
After its first claim a unit makes repeat claims at a rate r(u) per unit-month, u the months since the
first claim's failure date, until its warranty ends. r is taken constant inside each month j, u in
(j-1, j], and estimated from the serialised repaired units (claims without a serial cannot be followed):

    r_j = d_j / e_j,

d_j the repeat claims in month j since the first claim and e_j the units' time at risk in it (unit-months:
1 for a unit observed through the month, the fraction for one whose observation ends inside it, at the
as-of date or at its warranty end). The mean cumulative function (MCF) of repeat claims per repaired unit
is M(u) = sum over j <= u of r_j; when every unit is observed through whole months, e_j is the number of
units at risk n_j and M is Nelson's non-parametric MCF estimate, sum d_j / n_j (Nelson 2003, Recurrent
Events Data Analysis for Product Repairs, Disease Recurrences, and Other Applications, ASA-SIAM, ch. 2;
Lawless & Nadeau 1995, Technometrics 37, 158-168, for the same estimator as the mean of a recurrent-event
process). Its standard error here is the Poisson one, sqrt(sum d_j / e_j^2); Nelson's robust variance needs
each unit's own counts, which the aggregated table does not carry, and is larger when units differ.

Assumptions, stated: the repeat rate depends on the time since the first claim only (not on the age at
the first claim, the build month or the calendar); a unit stays at risk until its warranty ends whatever
its number of repeats; units without a serial repeat at the serialised units' rate. Where fewer than
`min_units_at_risk` units were observed into a month (the long tail of u, seen only by units that failed
young in old build months), the rate is carried forward: the pooled rate sum d / sum e of those months and
the `tail_months` before them.

Forecast, per product x build month x calendar month, until each unit's warranty ends:
  (a) units already repaired and still under warranty (repaired_units_under_warranty): with u0 months
      since their first claim at the as-of date and L months of warranty left after it, the expected
      repeat claims are  units x integral of r(u) over (u0, L];
  (b) units that will have their first failure in the forecast (the life model's expected returns,
      FORECAST_DETAIL_COLUMNS): each expected first failure in calendar month m at month in service k
      is taken at the middle of month m and at age k - 1/2, and brings the integral of r(u) over
      (0, W - (k - 1/2)] repeat claims.
Each piece of a month j of u is spread over the calendar months it covers in proportion to time (the rate
is constant inside it). Ages and times are in months of 365.25/12 days, a calendar month counted as one.

Products with no serialised repaired unit, or no repeat claim among them, forecast no repeat claims and
say so in their note. Pure functions over DataFrames (numpy, pandas).
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from typing import Iterable, Mapping

import numpy as np
import pandas as pd

from warranty_forecast.stages.by_product import rows_by_product

REPEAT_RATE_COLUMNS = (
    "product",
    "months_since_first_claim",  # j: u in (j-1, j] months since the unit's first claim
    "units_at_risk",  # serialised repaired units observed into month j
    "unit_months_at_risk",  # their time at risk in month j (unit-months)
    "repeat_claims",  # d_j
    "repeat_rate",  # per unit-month, r_j (carried forward where is_rate_carried_forward)
    "is_rate_carried_forward",
    "mean_cumulative_repeats",  # M(j) = sum of r_i, i <= j: expected repeat claims per repaired unit by j
    "mean_cumulative_repeats_se",  # Poisson standard error of M(j); NaN once the rate is carried forward
)

REPEAT_FORECAST_COLUMNS = (
    "product",
    "build_month",
    "month",  # first day of the calendar month (datetime.date)
    "expected_repeat_claims",
    "from_repaired_units",  # (a) units repaired by the as-of date
    "from_future_returns",  # (b) units whose first failure is still to come
)

REPEAT_SUMMARY_COLUMNS = (
    "product",
    "serialised_repaired_units",
    "repeat_claims_observed",
    "unit_months_at_risk",
    "pooled_repeat_rate",  # repeat claims per unit-month over every month since first claim
    "mean_cumulative_repeats_12",  # M(12): expected repeat claims in the 12 months after a first claim
    "expected_repeat_claims",
    "from_repaired_units",
    "from_future_returns",
    "note",
)

_RATE_INPUT_COLUMNS = ("product", "months_since_first_claim", "units_at_risk", "unit_months_at_risk", "repeat_claims")
_REPAIRED_INPUT_COLUMNS = (
    "product", "build_month", "warranty_months", "repaired_units", "months_since_first_claim", "warranty_months_left",
)
_FIRST_FAILURE_INPUT_COLUMNS = ("product", "build_month", "warranty_months", "months_in_service", "month",
                                "expected_returns")


# ------------------------------------------------------------------------------------------ estimation


def mean_cumulative_function(repeat_claims: np.ndarray, unit_months_at_risk: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nelson's non-parametric MCF on monthly bins, and its Poisson standard error.

    `repeat_claims[j-1]` = d_j, `unit_months_at_risk[j-1]` = e_j for months j = 1..J since the first claim.
    M(j) = sum over i <= j of d_i / e_i (expected repeat claims per unit by the end of month j);
    se(j) = sqrt(sum d_i / e_i^2). A month with no time at risk must hold no repeat claim (ValueError);
    it adds nothing to M and leaves its standard error undefined from there on (NaN).
    """
    d = np.asarray(repeat_claims, dtype=float)
    e = np.asarray(unit_months_at_risk, dtype=float)
    if d.shape != e.shape or d.ndim != 1:
        raise ValueError("repeat_claims and unit_months_at_risk must be 1-D arrays of the same length")
    if np.any(~np.isfinite(d)) or np.any(d < 0):
        raise ValueError("repeat_claims must be finite counts >= 0")
    if np.any(~np.isfinite(e)) or np.any(e < 0):
        raise ValueError("unit_months_at_risk must be finite and >= 0")
    if np.any((e == 0) & (d > 0)):
        raise ValueError("unit_months_at_risk is 0 in a month with repeat claims")
    observed = e > 0
    rate = np.divide(d, e, out=np.zeros_like(d), where=observed)
    variance = np.divide(d, e * e, out=np.zeros_like(d), where=observed)
    se = np.sqrt(np.cumsum(variance))
    se[np.cumsum(~observed) > 0] = np.nan
    return np.cumsum(rate), se


@dataclass(frozen=True)
class RepeatRates:
    """Repeat-claim rates per product by months since the first claim (REPEAT_RATE_COLUMNS in `table`).

    `rate_by_product[p]` holds r_1..r_J (per unit-month) for the months with data and `tail_rate[p]` the
    rate carried beyond them; `notes[p]` says how the product's rate was estimated, or why it is zero.
    """

    table: pd.DataFrame
    rate_by_product: Mapping[str, np.ndarray]
    tail_rate: Mapping[str, float]
    notes: Mapping[str, str]
    min_units_at_risk: int
    tail_months: int

    def rates(self, product: str, months: int) -> np.ndarray:
        """r_1..r_months for `product` (per unit-month): its estimated rates, then its tail rate; zeros for a
        product without a rate."""
        if months < 0:
            raise ValueError(f"months must be >= 0, got {months}")
        own = np.asarray(self.rate_by_product.get(product, np.zeros(0)), dtype=float)[:months]
        tail = self.tail_rate.get(product, 0.0)
        return np.concatenate([own, np.full(months - len(own), tail)])


def estimate_repeat_rates(
    repeat_claims_by_age: pd.DataFrame,
    products: Iterable[str] = (),
    *,
    min_units_at_risk: int = 10,
    tail_months: int = 6,
) -> RepeatRates:
    """Repeat-claim rate per unit-month by months since the first claim, per product (see the module).

    `repeat_claims_by_age` has the columns of the repeat_claims_by_age model; `products` adds products
    with no row there (they get a zero rate and a note).
    """
    if min_units_at_risk < 1:
        raise ValueError(f"min_units_at_risk must be >= 1, got {min_units_at_risk}")
    if tail_months < 1:
        raise ValueError(f"tail_months must be >= 1, got {tail_months}")
    missing = [c for c in _RATE_INPUT_COLUMNS if c not in repeat_claims_by_age.columns]
    if missing:
        raise ValueError(f"repeat_claims_by_age lacks columns {missing}")
    rows = repeat_claims_by_age.loc[:, list(_RATE_INPUT_COLUMNS)]
    if len(rows) and (rows["months_since_first_claim"] < 1).any():
        raise ValueError("repeat_claims_by_age: months_since_first_claim must be >= 1")
    all_products = sorted(set(rows["product"]) | set(products))
    tables, rates, tails, notes = [], {}, {}, {}
    rows_of = rows_by_product(rows)
    for product in all_products:
        own = rows_of[product]
        length = int(own["months_since_first_claim"].max()) if len(own) else 0
        index = own["months_since_first_claim"].to_numpy(dtype=np.int64) - 1
        n = np.zeros(length)
        e = np.zeros(length)
        d = np.zeros(length)
        np.add.at(n, index, own["units_at_risk"].to_numpy(dtype=float))
        np.add.at(e, index, own["unit_months_at_risk"].to_numpy(dtype=float))
        np.add.at(d, index, own["repeat_claims"].to_numpy(dtype=float))
        rate, carried, tail, note = _product_rates(n, e, d, min_units_at_risk, tail_months)
        # Nelson's MCF of the rates in use; its Poisson standard error only where the rates are the months' own
        mcf = np.cumsum(rate)
        se = np.sqrt(np.cumsum(np.divide(d, e * e, out=np.zeros_like(d), where=e > 0)))
        se[carried] = np.nan
        rates[product], tails[product], notes[product] = rate, tail, note
        tables.append(pd.DataFrame({
            "product": product,
            "months_since_first_claim": np.arange(1, length + 1, dtype=np.int64),
            "units_at_risk": n,
            "unit_months_at_risk": e,
            "repeat_claims": d,
            "repeat_rate": rate,
            "is_rate_carried_forward": carried,
            "mean_cumulative_repeats": mcf,
            "mean_cumulative_repeats_se": se,
        }))
    table = (
        pd.concat(tables, ignore_index=True) if tables else pd.DataFrame(columns=list(REPEAT_RATE_COLUMNS))
    )
    return RepeatRates(
        table=table.loc[:, list(REPEAT_RATE_COLUMNS)],
        rate_by_product=rates,
        tail_rate=tails,
        notes=notes,
        min_units_at_risk=min_units_at_risk,
        tail_months=tail_months,
    )


def _product_rates(
    n: np.ndarray, e: np.ndarray, d: np.ndarray, min_units: int, tail_months: int
) -> tuple[np.ndarray, np.ndarray, float, str]:
    """(rates r_1..r_J, which are carried forward, the tail rate, the note) for one product."""
    units = int(n[0]) if len(n) else 0
    total_e, total_d = float(e.sum()), float(d.sum())
    if total_e <= 0:
        return (np.zeros(len(n)), np.zeros(len(n), dtype=bool), 0.0,
                "no serialised unit with a claim: repeat claims cannot be followed; none forecast")
    if total_d == 0:
        return (np.zeros(len(n)), np.zeros(len(n), dtype=bool), 0.0,
                f"no repeat claim among {units:,} serialised repaired units ({total_e:,.0f} unit-months at risk);"
                " none forecast")
    reliable = n >= min_units  # units at risk never grow with j, so these are months 1..J_r
    last = int(np.count_nonzero(reliable))
    if last == 0:
        pooled = total_d / total_e
        return (np.full(len(n), pooled), np.ones(len(n), dtype=bool), pooled,
                f"{int(total_d):,} repeat claims among {units:,} serialised repaired units, fewer than"
                f" {min_units} at risk in every month: one pooled rate of {pooled:.4g} per unit-month")
    first_pooled = max(last - tail_months, 0)
    tail = float(d[first_pooled:].sum() / e[first_pooled:].sum())
    rate = np.divide(d, e, out=np.zeros_like(d), where=e > 0)
    rate[last:] = tail
    carried = np.arange(len(n)) >= last
    return (rate, carried, tail,
            f"{int(total_d):,} repeat claims among {units:,} serialised repaired units ({total_e:,.0f} unit-months"
            f" at risk); own rate in months 1-{last} since the first claim, {tail:.4g} per unit-month after")


# -------------------------------------------------------------------------------------------- forecast


@dataclass(frozen=True)
class RepeatClaimsForecast:
    """The repeat-claims forecast: `by_month` (REPEAT_FORECAST_COLUMNS, expected repeat claims per product x
    build month x calendar month), `by_product` (REPEAT_SUMMARY_COLUMNS), the rates behind them."""

    rates: RepeatRates
    by_month: pd.DataFrame
    by_product: pd.DataFrame
    notes: tuple[str, ...] = field(default=())

    @property
    def by_build_month(self) -> pd.DataFrame:
        """Expected future repeat claims per product x build month (columns product, build_month,
        expected_future_repeat_claims)."""
        return (
            self.by_month.groupby(["product", "build_month"], as_index=False)["expected_repeat_claims"].sum()
            .rename(columns={"expected_repeat_claims": "expected_future_repeat_claims"})
        )

    @property
    def summary(self) -> str:
        """One line for the run log."""
        total = float(self.by_month["expected_repeat_claims"].sum()) if len(self.by_month) else 0.0
        return f"{len(self.by_month)} rows, {total:,.1f} repeat claims"


def forecast_repeat_claims(
    repeat_claims_by_age: pd.DataFrame,
    repaired_units_under_warranty: pd.DataFrame,
    first_failures: pd.DataFrame,
    as_of_date: dt.date,
    *,
    min_units_at_risk: int = 10,
    tail_months: int = 6,
) -> RepeatClaimsForecast:
    """Expected repeat claims per product x build month x calendar month (see the module).

    `repeat_claims_by_age`, `repaired_units_under_warranty`: the SQL outputs of those names;
    `first_failures`: the life model's expected returns with FORECAST_DETAIL_COLUMNS (at least product,
    build_month, warranty_months, months_in_service, month, expected_returns); `as_of_date`: the run's.
    """
    for name, frame, columns in (
        ("repaired_units_under_warranty", repaired_units_under_warranty, _REPAIRED_INPUT_COLUMNS),
        ("first_failures", first_failures, _FIRST_FAILURE_INPUT_COLUMNS),
    ):
        missing = [c for c in columns if c not in frame.columns]
        if missing:
            raise ValueError(f"{name} lacks columns {missing}")
    products = set(repaired_units_under_warranty["product"]) | set(first_failures["product"])
    rates = estimate_repeat_rates(
        repeat_claims_by_age, products, min_units_at_risk=min_units_at_risk, tail_months=tail_months
    )
    repaired = expected_repeats_from_repaired_units(repaired_units_under_warranty, rates, as_of_date)
    future = expected_repeats_from_future_returns(first_failures, rates)
    keys = ["product", "build_month", "month"]
    by_month = (
        repaired.rename(columns={"expected_repeat_claims": "from_repaired_units"})
        .merge(future.rename(columns={"expected_repeat_claims": "from_future_returns"}), on=keys, how="outer")
        .fillna({"from_repaired_units": 0.0, "from_future_returns": 0.0})
    )
    by_month["expected_repeat_claims"] = by_month["from_repaired_units"] + by_month["from_future_returns"]
    by_month = by_month.loc[:, list(REPEAT_FORECAST_COLUMNS)].sort_values(keys, ignore_index=True)
    by_product = _summary(rates, by_month, sorted(products | set(rates.notes)))
    notes = tuple(f"product {p}: {rates.notes[p]}" for p in sorted(rates.notes))
    return RepeatClaimsForecast(rates=rates, by_month=by_month, by_product=by_product, notes=notes)


def expected_repeats_from_repaired_units(
    repaired_units_under_warranty: pd.DataFrame, rates: RepeatRates, as_of_date: dt.date
) -> pd.DataFrame:
    """(a) Expected repeat claims of the units repaired by `as_of_date`, per product x build month x calendar
    month (columns product, build_month, month, expected_repeat_claims): units x integral of r over (u0, L],
    u0 = months_since_first_claim, L = warranty_months_left, placed from the as-of date on."""
    rows = repaired_units_under_warranty
    if len(rows) == 0:
        return _empty_forecast()
    start = rows["months_since_first_claim"].to_numpy(dtype=float)
    end = rows["warranty_months_left"].to_numpy(dtype=float)
    units = rows["repaired_units"].to_numpy(dtype=float)
    _check_finite_non_negative("repaired_units_under_warranty", units=units, months_since_first_claim=start,
                               warranty_months_left=end)
    now = _calendar_coordinate(as_of_date, end_of_day=True)
    return _spread_repeats(rows, units, start, end, np.full(len(rows), now) - start, rates)


def expected_repeats_from_future_returns(first_failures: pd.DataFrame, rates: RepeatRates) -> pd.DataFrame:
    """(b) Expected repeat claims of the units whose first failure is forecast, per product x build month x
    calendar month (columns product, build_month, month, expected_repeat_claims): each expected return in
    calendar month m at month in service k brings the integral of r over (0, W - (k - 1/2)], counted from
    the middle of m."""
    rows = first_failures
    if len(rows) == 0:
        return _empty_forecast()
    returns = rows["expected_returns"].to_numpy(dtype=float)
    k = rows["months_in_service"].to_numpy(dtype=float)
    warranty = rows["warranty_months"].to_numpy(dtype=float)
    _check_finite_non_negative("first_failures", expected_returns=returns)
    if np.any(k < 1) or np.any(k > warranty):
        raise ValueError("first_failures: months_in_service must lie in 1..warranty_months")
    month = pd.to_datetime(rows["month"])
    failure_at = (month.dt.year * 12 + month.dt.month - 1).to_numpy(dtype=float) + 0.5
    end = warranty - (k - 0.5)
    return _spread_repeats(rows, returns, np.zeros(len(rows)), end, failure_at, rates)


def claims_forecast(returns_by_month: pd.DataFrame, repeats_by_month: pd.DataFrame) -> pd.DataFrame:
    """Expected claims = expected returns (first claims) + expected repeat claims, per product x build month x
    calendar month. `returns_by_month`: product, build_month, month, expected_returns (the published
    forecast); `repeats_by_month`: RepeatClaimsForecast.by_month. Returns those keys with expected_returns,
    expected_repeat_claims, expected_claims (a month present in only one of them counts 0 in the other)."""
    keys = ["product", "build_month", "month"]
    left = returns_by_month.loc[:, [*keys, "expected_returns"]].copy()
    right = repeats_by_month.loc[:, [*keys, "expected_repeat_claims"]].copy()
    for frame in (left, right):
        frame["month"] = pd.to_datetime(frame["month"]).dt.date
        frame["build_month"] = pd.to_datetime(frame["build_month"]).dt.date
    merged = left.merge(right, on=keys, how="outer").fillna({"expected_returns": 0.0, "expected_repeat_claims": 0.0})
    merged["expected_claims"] = merged["expected_returns"] + merged["expected_repeat_claims"]
    return merged.sort_values(keys, ignore_index=True)


# ----------------------------------------------------------------------------------------------- helpers


def _spread_repeats(
    rows: pd.DataFrame, weight: np.ndarray, start: np.ndarray, end: np.ndarray, calendar_at_zero: np.ndarray,
    rates: RepeatRates,
) -> pd.DataFrame:
    """Sum over rows of weight x r(u) over u in (start, end], spread over calendar months.

    u (months since the first claim) sits at calendar coordinate calendar_at_zero + u (months since year 0,
    a calendar month counted as one). Each row's interval is cut at whole months of u (the rate is constant
    inside each) and each piece at calendar month boundaries, in proportion to time.
    """
    # a product whose repeat rate is zero everywhere adds nothing: its rows are not spread at all (with
    # thousands of product lines and no serialised repairs that is every row)
    code, names = pd.factorize(rows["product"], sort=True)
    has_rate = np.array([_has_rate(rates, name) for name in names] + [False], dtype=bool)  # code -1: none
    open_rows = np.flatnonzero((end > start) & (weight > 0) & has_rate[code])
    if len(open_rows) == 0:
        return _empty_forecast()
    first = np.floor(start[open_rows]).astype(np.int64) + 1  # month j holding u just above start
    last = np.ceil(end[open_rows]).astype(np.int64)
    count = last - first + 1
    row = np.repeat(open_rows, count)
    offsets = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)
    j = np.repeat(first, count) + offsets
    lower = np.maximum(start[row], j - 1.0)
    upper = np.minimum(end[row], j.astype(float))
    products = rows["product"].to_numpy()
    rate = np.zeros(len(j))
    # the pieces grouped by product once (a mask per product would read every piece once per product:
    # quadratic in the number of product lines)
    piece_code = np.repeat(code[open_rows], count)
    order = np.argsort(piece_code, kind="stable")
    bounds = np.searchsorted(piece_code[order], np.arange(len(names) + 1))
    for index, product in enumerate(names):
        take = order[bounds[index]:bounds[index + 1]]
        if take.size:
            table = rates.rates(product, int(j[take].max()))
            rate[take] = table[j[take] - 1]
    density = weight[row] * rate  # repeat claims per month of u, constant on (lower, upper]
    keep = (density > 0) & (upper > lower)
    row, lower, upper, density = row[keep], lower[keep], upper[keep], density[keep]
    a = calendar_at_zero[row] + lower
    b = calendar_at_zero[row] + upper
    first_month = np.floor(a)
    boundary = first_month + 1.0
    in_first = density * (np.minimum(b, boundary) - a)
    in_second = density * np.maximum(b - boundary, 0.0)  # a piece is at most one month long
    month_index = np.concatenate([first_month, boundary]).astype(np.int64)
    amount = np.concatenate([in_first, in_second])
    row = np.concatenate([row, row])
    nonzero = amount > 0
    if not nonzero.any():
        return _empty_forecast()
    month_index, amount, row = month_index[nonzero], amount[nonzero], row[nonzero]
    frame = pd.DataFrame({
        "product": products[row],
        "build_month": rows["build_month"].to_numpy()[row],
        "month_index": month_index,
        "expected_repeat_claims": amount,
    })
    summed = frame.groupby(["product", "build_month", "month_index"], as_index=False, sort=True)[
        "expected_repeat_claims"
    ].sum()
    summed["month"] = [dt.date(int(i) // 12, int(i) % 12 + 1, 1) for i in summed["month_index"]]
    summed["build_month"] = pd.to_datetime(summed["build_month"]).dt.date
    return summed.loc[:, ["product", "build_month", "month", "expected_repeat_claims"]]


def _has_rate(rates: RepeatRates, product: object) -> bool:
    """False when `product`'s repeat rate is zero at every month since the first claim (tail included)."""
    own = np.asarray(rates.rate_by_product.get(product, np.zeros(0)), dtype=float)
    return bool(np.any(own > 0) or rates.tail_rate.get(product, 0.0) > 0)


def _calendar_coordinate(day: dt.date, *, end_of_day: bool) -> float:
    """Months since year 0 (a calendar month counted as one) at the start (or end) of `day`."""
    days_in_month = (dt.date(day.year + day.month // 12, day.month % 12 + 1, 1) - dt.date(day.year, day.month, 1)).days
    return day.year * 12 + day.month - 1 + (day.day - (0 if end_of_day else 1)) / days_in_month


def _check_finite_non_negative(frame: str, **columns: np.ndarray) -> None:
    for name, values in columns.items():
        if np.any(~np.isfinite(values)) or np.any(values < 0):
            raise ValueError(f"{frame}: {name} must be finite and >= 0")


def _empty_forecast() -> pd.DataFrame:
    return pd.DataFrame({
        "product": pd.Series(dtype=object),
        "build_month": pd.Series(dtype=object),
        "month": pd.Series(dtype=object),
        "expected_repeat_claims": pd.Series(dtype=float),
    })


def _summary(rates: RepeatRates, by_month: pd.DataFrame, products: list[str]) -> pd.DataFrame:
    table = rates.table
    sums = by_month.groupby("product")[["expected_repeat_claims", "from_repaired_units", "from_future_returns"]].sum()
    rows = []
    table_of = rows_by_product(table)
    for product in products:
        own = table_of[product]
        e = float(own["unit_months_at_risk"].sum())
        d = float(own["repeat_claims"].sum())
        first = own[own["months_since_first_claim"] == 1]
        expected = sums.loc[product] if product in sums.index else pd.Series(0.0, index=sums.columns)
        rows.append((
            product,
            int(first["units_at_risk"].iloc[0]) if len(first) else 0,
            int(d),
            e,
            d / e if e > 0 else math.nan,
            float(rates.rates(product, 12).sum()),
            float(expected.get("expected_repeat_claims", 0.0)),
            float(expected.get("from_repaired_units", 0.0)),
            float(expected.get("from_future_returns", 0.0)),
            rates.notes.get(product, "no serialised unit with a claim: none forecast"),
        ))
    return pd.DataFrame(rows, columns=list(REPEAT_SUMMARY_COLUMNS))
