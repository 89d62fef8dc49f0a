"""The roll-forward of the warranty reserve between two runs: the table finance discloses for product
warranty liabilities (common practice for product-warranty disclosures; no single source), per product
and in total, to the cent.

    opening reserve                       the opening run's published reserve (reserve_by_product.reserve)
  + accruals for units shipped since      units shipped after the opening as-of date, each at this run's
                                          estimate of its whole-warranty cost at issue (below)
  - claims settled                        settled claims filed after the opening as-of date (their cost),
                                          and rejected / no-fault-found claims in that time at
                                          reserve.handling_cost_per_claim
  + changes in estimate                   for units already reserved at the opening: everything else
                                          (new information, the passage of time, expiries, open claims
                                          decided, inflation and price changes)
  = closing reserve                       this run's reserve (reserve_by_product.reserve)

Amounts are undiscounted, in the runs' currency (the roll-forward is refused when the two differ). Every
line is rounded to the cent on its own (half away from zero); the change in estimate is the closing less the
other lines in whole cents, so each row adds up exactly, and the total row is the sum of the product rows
in whole cents (it may differ from the unrounded total by at most half a cent per product).

Accrual at issue for a unit of product p, build month m, warranty W months: its expected claims over the
whole warranty, F(W) (1 + r_p), at this run's reserve per expected claim c_p:
    F(W)  = 1 - R(end of month in service W) under the life the forecast uses for (p, m) (a flagged build
            month's own life, else the product's);
    r_p   = expected repeat claims / expected first failures still to come, from this run's forecast (0 when
            none);
    c_p   = (reserve_future_claims + reserve_handling) / expected_future_claims (inflation and handling
            included), else cost_per_claim when no claim is expected.
A claim's filing date stands for its settlement date (the extract has no payment date): an open claim
filed before the opening and decided since shows in the change in estimate, not in claims settled.
"""

from __future__ import annotations

import datetime as dt
import math
from decimal import ROUND_HALF_UP, Decimal
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import pandas as pd

from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.stages.forecast import LifeDistribution

ROLL_FORWARD_COLUMNS = (
    "product",
    "is_total",
    "currency",
    "opening_run_id",
    "opening_as_of_date",
    "opening_reserve",
    "accruals_for_units_shipped",
    "claims_settled",
    "changes_in_estimate",
    "closing_reserve",
    "units_shipped_since_opening",
    "settled_claims",
    "settled_handled_claims",
)
TOTAL_LABEL = "(all products)"
AMOUNT_COLUMNS = (
    "opening_reserve", "accruals_for_units_shipped", "claims_settled", "changes_in_estimate", "closing_reserve"
)


@dataclass(frozen=True)
class OpeningReserve:
    """The opening run: its id, as-of date and reserve_by_product table (product, currency, reserve)."""

    run_id: str
    as_of_date: dt.date
    by_product: pd.DataFrame


def empty_roll_forward() -> pd.DataFrame:
    """The roll-forward table with no rows (no earlier run to roll forward from), typed."""
    types = {
        "product": "object", "is_total": "bool", "currency": "object", "opening_run_id": "object",
        "opening_as_of_date": "object", "units_shipped_since_opening": "float64", "settled_claims": "int64",
        "settled_handled_claims": "int64", **{column: "float64" for column in AMOUNT_COLUMNS},
    }
    return pd.DataFrame({column: pd.Series(dtype=types[column]) for column in ROLL_FORWARD_COLUMNS})


def cents(value: float) -> int:
    """An amount in whole cents: its shortest decimal form rounded half away from zero (12.345 -> 1235;
    NaN counts as 0)."""
    if value is None or not math.isfinite(float(value)):
        return 0
    return int(Decimal(repr(float(value))).scaleb(2).quantize(Decimal(1), rounding=ROUND_HALF_UP))


def accruals_for_units_shipped(
    units_by_ship_date: pd.DataFrame,
    opening_as_of_date: dt.date,
    models: Mapping[str, LifeDistribution],
    month_models: Mapping[tuple[str, object], LifeDistribution],
    reserve_by_product: pd.DataFrame,
) -> pd.DataFrame:
    """Per product: units shipped after `opening_as_of_date` and their accrual at issue (currency units).

    `units_by_ship_date`: the units_shipped_by_day model (product, build_month, warranty_months, ship_date,
    units); `reserve_by_product`: this run's reserve per product. A product without a life model accrues
    nothing (its reserve is empty too)."""
    shipped = units_by_ship_date[pd.to_datetime(units_by_ship_date["ship_date"]) > pd.Timestamp(opening_as_of_date)]
    per_product = reserve_by_product.set_index("product")
    rows = []
    for product, rows_of_product in shipped.groupby("product", sort=True):
        units = float(rows_of_product["units"].sum())
        model = models.get(product)
        if model is None or product not in per_product.index:
            rows.append((product, units, 0.0))
            continue
        grouped = rows_of_product.groupby(["build_month", "warranty_months"], sort=True)["units"].sum()
        expected_first = 0.0
        for (build_month, warranty), group_units in grouped.items():
            life = _month_model(month_models, product, build_month) or model
            end = month_interval_ends(np.array([int(warranty)]))[1]
            expected_first += float(group_units) * float(-np.expm1(life.log_survival(end))[0])
        facts = per_product.loc[product]
        rows.append((product, units, expected_first * (1.0 + _repeat_ratio(facts)) * _price_per_claim(facts)))
    return pd.DataFrame(rows, columns=["product", "units_shipped_since_opening", "accruals_for_units_shipped"])


def _month_model(month_models: Mapping[tuple[str, object], LifeDistribution], product: str, build_month: object):
    wanted = pd.Timestamp(build_month)
    for (owner, month), model in month_models.items():
        if owner == product and pd.Timestamp(month) == wanted:
            return model
    return None


def _number(facts: pd.Series, column: str) -> float:
    value = facts.get(column, 0.0)
    return float(value) if value is not None and pd.notna(value) else 0.0


def _repeat_ratio(facts: pd.Series) -> float:
    first = _number(facts, "expected_future_returns")
    return _number(facts, "expected_repeat_claims") / first if first > 0 else 0.0


def _price_per_claim(facts: pd.Series) -> float:
    claims = _number(facts, "expected_future_claims")
    if claims > 0:
        priced = _number(facts, "reserve_future_claims") if "reserve_future_claims" in facts else _number(facts, "reserve")
        return (priced + _number(facts, "reserve_handling")) / claims
    return _number(facts, "cost_per_claim")


def claims_settled_since(
    claims_by_claim_date: pd.DataFrame, opening_as_of_date: dt.date, handling_cost_per_claim: float
) -> pd.DataFrame:
    """Per product: claims settled after `opening_as_of_date` (count, cost), rejected / no-fault-found claims
    in that time (count) and the money they took (cost + handled x handling cost), currency units.

    `claims_by_claim_date`: the claims_by_claim_date model (product, claim_date, settled_claims, settled_cost,
    handled_claims)."""
    since = claims_by_claim_date[pd.to_datetime(claims_by_claim_date["claim_date"]) > pd.Timestamp(opening_as_of_date)]
    grouped = since.groupby("product", sort=True)[["settled_claims", "settled_cost", "handled_claims"]].sum()
    grouped = grouped.reset_index()
    grouped["claims_settled"] = grouped["settled_cost"].astype(float) + grouped["handled_claims"] * float(handling_cost_per_claim)
    return grouped.rename(columns={"handled_claims": "settled_handled_claims"})[
        ["product", "settled_claims", "settled_handled_claims", "claims_settled"]
    ]


def roll_forward(
    opening: OpeningReserve,
    closing_by_product: pd.DataFrame,
    accruals: pd.DataFrame,
    settled: pd.DataFrame,
) -> pd.DataFrame:
    """The roll-forward table (ROLL_FORWARD_COLUMNS): one row per product in either run, then the total row
    (product TOTAL_LABEL, is_total True). Raises ValueError when the two runs' currencies differ."""
    currency = _one_currency(closing_by_product, "this run")
    opening_currency = _one_currency(opening.by_product, f"the opening run {opening.run_id}")
    if currency and opening_currency and currency != opening_currency:
        raise ValueError(
            f"the opening run {opening.run_id} booked its reserve in {opening_currency} and this run in {currency}:"
            " no roll-forward across currencies"
        )
    products = sorted(set(opening.by_product["product"]) | set(closing_by_product["product"])
                      | set(accruals["product"]) | set(settled["product"]))
    open_cents = _cents_by_product(opening.by_product, "reserve")
    close_cents = _cents_by_product(closing_by_product, "reserve")
    accrual_cents = _cents_by_product(accruals, "accruals_for_units_shipped")
    settled_cents = _cents_by_product(settled, "claims_settled")
    units = accruals.set_index("product")["units_shipped_since_opening"] if len(accruals) else pd.Series(dtype=float)
    counts = settled.set_index("product") if len(settled) else pd.DataFrame(columns=["settled_claims", "settled_handled_claims"])
    rows = []
    for product in products:
        opening_c, closing_c = open_cents.get(product, 0), close_cents.get(product, 0)
        accrual_c, settled_c = accrual_cents.get(product, 0), settled_cents.get(product, 0)
        change_c = closing_c - opening_c - accrual_c + settled_c
        rows.append({
            "product": product, "is_total": False,
            "opening": opening_c, "accruals": accrual_c, "settled": settled_c, "change": change_c, "closing": closing_c,
            "units_shipped_since_opening": float(units.get(product, 0.0)),
            "settled_claims": int(counts["settled_claims"].get(product, 0)) if product in counts.index else 0,
            "settled_handled_claims": int(counts["settled_handled_claims"].get(product, 0)) if product in counts.index else 0,
        })
    total = {
        "product": TOTAL_LABEL, "is_total": True,
        **{key: sum(row[key] for row in rows) for key in
           ("opening", "accruals", "settled", "change", "closing", "units_shipped_since_opening",
            "settled_claims", "settled_handled_claims")},
    }
    table = pd.DataFrame([*rows, total])
    for column, key in zip(AMOUNT_COLUMNS, ("opening", "accruals", "settled", "change", "closing")):
        table[column] = table.pop(key).astype("int64") / 100.0
    table["currency"] = currency or opening_currency
    table["opening_run_id"] = opening.run_id
    table["opening_as_of_date"] = opening.as_of_date
    table["settled_claims"] = table["settled_claims"].astype("int64")
    table["settled_handled_claims"] = table["settled_handled_claims"].astype("int64")
    return table[list(ROLL_FORWARD_COLUMNS)]


def _one_currency(frame: pd.DataFrame, whose: str) -> str | None:
    if "currency" not in frame or frame.empty:
        return None
    currencies = sorted(set(frame["currency"].dropna()))
    if len(currencies) > 1:
        raise ValueError(f"{whose} has more than one currency ({', '.join(currencies)}): no roll-forward")
    return currencies[0] if currencies else None


def _cents_by_product(frame: pd.DataFrame, column: str) -> dict[str, int]:
    if frame.empty or column not in frame:
        return {}
    return {str(product): cents(float(np.nansum(values))) for product, values in frame.groupby("product", sort=True)[column]}


def reconciles_to_the_cent(table: pd.DataFrame) -> bool:
    """Every row: opening + accruals - settled + change = closing in whole cents; the total row is the sum of
    the product rows in whole cents."""
    c = {column: table[column].map(cents) for column in AMOUNT_COLUMNS}
    rows_add_up = bool((c["opening_reserve"] + c["accruals_for_units_shipped"] - c["claims_settled"]
                        + c["changes_in_estimate"] == c["closing_reserve"]).all())
    products = ~table["is_total"]
    totals_add_up = all(
        int(c[column][products].sum()) == int(c[column][table["is_total"]].sum()) for column in AMOUNT_COLUMNS
    )
    return rows_add_up and totals_add_up and int(table["is_total"].sum()) == 1


@dataclass(frozen=True)
class ReserveMovement:
    """How the reserve moved: the last run before this one (its id, as-of date, reserve total) for the
    report's change since the last run, and the roll-forward from the opening run (empty when there is
    none; `note` says why)."""

    previous_run_id: str | None
    previous_as_of_date: dt.date | None
    previous_total: float | None
    roll_forward: pd.DataFrame
    note: str


def reserve_total(by_product: pd.DataFrame) -> float | None:
    """The reserve over every product (currency units), or None when no product has one."""
    if by_product.empty or "reserve" not in by_product or by_product["reserve"].notna().sum() == 0:
        return None
    return float(by_product["reserve"].sum())


def reserve_movement(
    *,
    opening: OpeningReserve | None,
    previous: OpeningReserve | None,
    closing_by_product: pd.DataFrame,
    units_by_ship_date: pd.DataFrame,
    claims_by_claim_date: pd.DataFrame,
    models: Mapping[str, LifeDistribution],
    month_models: Mapping[tuple[str, object], LifeDistribution],
    handling_cost_per_claim: float,
) -> ReserveMovement:
    """The change since the last run (`previous`) and the roll-forward from `opening` (both None on a first
    run); see the module's docstring."""
    previous_total = reserve_total(previous.by_product) if previous is not None else None
    common = dict(
        previous_run_id=previous.run_id if previous is not None else None,
        previous_as_of_date=previous.as_of_date if previous is not None else None,
        previous_total=previous_total,
    )
    if opening is None:
        return ReserveMovement(
            **common, roll_forward=empty_roll_forward(),
            note="no earlier run under this output root: nothing to roll forward from",
        )
    try:
        table = roll_forward(
            opening,
            closing_by_product,
            accruals_for_units_shipped(units_by_ship_date, opening.as_of_date, models, month_models, closing_by_product),
            claims_settled_since(claims_by_claim_date, opening.as_of_date, handling_cost_per_claim),
        )
    except ValueError as error:
        return ReserveMovement(**common, roll_forward=empty_roll_forward(), note=f"no roll-forward: {error}")
    return ReserveMovement(
        **common, roll_forward=table,
        note=f"rolled forward from run {opening.run_id} (as of {opening.as_of_date})",
    )
