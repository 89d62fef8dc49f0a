"""The run report (Markdown): what was read, what was fitted, what is forecast, and the cautions.

Pure text rendering from the run's tables; no computation beyond formatting and totals.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np
import pandas as pd

from warranty_forecast.outputs.manifest import RunManifest
from warranty_forecast.stages.roll_forward import ReserveMovement, reserve_total
from warranty_forecast.outputs.safe_text import markdown_text

CAUTIONS = (
    "Reserve figures are statistical estimates (expected future claims x cost per claim, inflated and "
    "discounted only as configured in [reserve], plus the open claims at their estimates and the handling of "
    "rejected and no-fault-found claims; their prediction intervals leave out the risk that the model "
    "itself is wrong). They are for review by finance and auditors before anything is booked, under the "
    "accounting rules that apply to you.",
    "A flagged build month or a poor fit is a statistical signal, not a finding. Anything that may touch "
    "safety goes to qualified engineers and is handled under local regulations; do not wait for this report.",
    "The model assumes one Weibull life per product, independent units and a claims extract complete up to "
    "the as-of date but for the usual filing delay (estimated and allowed for). Recalls, design changes, "
    "field campaigns and a change of filing habits are not in the data and can make the forecast too low.",
)


def _number(value: Any, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    if isinstance(value, float):
        return f"{value:,.{digits}g}" if abs(value) < 1e5 else f"{value:,.0f}"
    return f"{value:,}" if isinstance(value, int) else str(value)


def _money(value: Any) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    return f"{value:,.2f}"


def _freshness_lines(freshness: Mapping[str, Any] | None) -> list[str]:
    if not freshness:
        return []
    return [
        "",
        f"Run date {freshness['run_date']}; newest valid claim_date {freshness['newest_claim_date'] or 'none'}, "
        f"newest valid ship_date {freshness['newest_ship_date'] or 'none'} (a gap over "
        f"{freshness['max_data_gap_days']} days is a warning below).",
    ]


def _text_escaped(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of `frame` whose text cells are escaped for Markdown (numbers and missing values untouched)."""
    escaped = frame.copy()
    for column in escaped.columns:
        if pd.api.types.is_object_dtype(escaped[column]) or pd.api.types.is_string_dtype(escaped[column]):
            escaped[column] = escaped[column].map(lambda v: markdown_text(v) if isinstance(v, str) else v)
    return escaped


def _table(frame: pd.DataFrame) -> str:
    header = "| " + " | ".join(frame.columns) + " |"
    rule = "|" + "|".join("---" for _ in frame.columns) + "|"
    body = ["| " + " | ".join(str(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([header, rule, *body])


def render_report(
    *,
    manifest: RunManifest,
    life_model: pd.DataFrame,
    life_model_by_mode: pd.DataFrame,
    build_month_alerts: pd.DataFrame,
    reserve_totals: pd.DataFrame,
    reconciliation: pd.DataFrame,
    quarantine: pd.DataFrame,
    warnings: list[str],
    build_month_causes: pd.DataFrame | None = None,
    safety_term_claims: pd.DataFrame | None = None,
    flagged_month_lives: pd.DataFrame | None = None,
    charts_drawn: bool = True,
    reporting_delay: pd.DataFrame | None = None,
    movement: ReserveMovement | None = None,
    chart_note: str = "",
) -> str:
    """The run report as Markdown. Text that comes from the data (product names, failure codes, file
    names, messages quoting them) is escaped on the way in, so it cannot break the Markdown or inject HTML."""
    causes = build_month_causes if build_month_causes is not None else pd.DataFrame(columns=["product"])
    life_model, life_model_by_mode, build_month_alerts, causes, reserve_totals, reconciliation, quarantine = (
        _text_escaped(frame)
        for frame in (
            life_model, life_model_by_mode, build_month_alerts, causes, reserve_totals, reconciliation, quarantine
        )
    )
    warnings = [markdown_text(text) for text in warnings]
    lines = [
        f"# Warranty returns forecast — as of {manifest.as_of_date}",
        "",
        f"As-of date {manifest.as_of_date} ({manifest.as_of_source}). "
        f"Run finished {manifest.finished_utc.isoformat(timespec='seconds')} (UTC) in {manifest.seconds_total:.1f} s.",
        *_freshness_lines(manifest.freshness),
        "",
        "## Cautions",
        "",
        *[f"- {text}" for text in CAUTIONS],
        "",
    ]
    if warnings:
        lines += ["## Warnings", "", *[f"- {text}" for text in warnings], ""]

    lines += _movement_lines(movement, reserve_totals)
    lines += ["## Reserve by product", ""]

    def column(name: str) -> pd.Series:
        return reserve_totals[name] if name in reserve_totals else pd.Series(np.nan, index=reserve_totals.index)

    def interval(lower: str, upper: str, show) -> pd.Series:  # type: ignore[no-untyped-def]
        return pd.Series(
            ["n/a" if pd.isna(a) or pd.isna(b) else f"{show(a)} to {show(b)}" for a, b in zip(column(lower), column(upper))],
            index=reserve_totals.index,
        )

    # the currency's code beside every amount (reserve.currency; tables keep exact amounts and a currency column)
    codes = column("currency").dropna()
    currency = str(codes.iloc[0]) if len(codes) else ""

    def money(value: Any) -> str:
        text = _money(value)
        return f"{text} {currency}" if currency and text != "n/a" else text

    shown = reserve_totals.assign(
        units=reserve_totals["units"].map(lambda v: f"{int(v):,}"),
        claims_to_date=(reserve_totals["returns_to_date"] + column("repeat_claims_to_date").fillna(0)).map(
            lambda v: f"{int(v):,}"
        ),
        cost_to_date=reserve_totals["cost_to_date"].map(money),
        future_returns=reserve_totals["expected_future_returns"].map(lambda v: _number(v, 6)),
        returns_interval=interval("returns_lower", "returns_upper", lambda v: f"{int(v):,}"),
        not_yet_reported=column("expected_unreported_returns").map(lambda v: _number(v, 4)),
        repeat_claims=column("expected_repeat_claims").map(lambda v: _number(v, 4)),
        cost_per_claim=reserve_totals["cost_per_claim"].map(money),
        future_claims_reserve=column("reserve_future_claims").map(money),
        open_claims=column("open_claims").map(lambda v: "n/a" if pd.isna(v) else f"{int(v):,}"),
        open_claims_reserve=column("reserve_open_claims").map(money),
        handled_claims=column("expected_handled_claims").map(lambda v: _number(v, 4)),
        handling_reserve=column("reserve_handling").map(money),
        reserve=reserve_totals["reserve"].map(money),
        reserve_interval=interval("reserve_lower", "reserve_upper", _money).map(
            lambda text: f"{text} {currency}" if currency and text != "n/a" else text
        ),
        added_by_flagged_months=column("reserve_added_by_flagged_months").map(money),
    )[["product", "units", "claims_to_date", "cost_to_date", "future_returns", "returns_interval",
       "not_yet_reported", "repeat_claims", "cost_per_claim", "future_claims_reserve", "open_claims",
       "open_claims_reserve", "handled_claims", "handling_reserve", "reserve", "reserve_interval",
       "added_by_flagged_months", "forecast_status", "cost_basis"]]
    total = reserve_totals["reserve"].sum(min_count=1)
    rates = dict(manifest.settings.get("reserve", {})) if getattr(manifest, "settings", None) else {}
    inflation = float(rates.get("annual_inflation_rate", 0.0) or 0.0)
    by_year = [float(r) for r in rates.get("discount_rate_by_year", []) or []]
    discount = float(rates.get("annual_discount_rate", 0.0) or 0.0)
    discount_text = (
        "discounted at " + ", ".join(f"{r:.2%}" for r in by_year) + " a year for years 1, 2, ... after the as-of date"
        " (the last rate beyond)" if by_year else f"discounted at {discount:.2%} a year"
    )
    timing = reserve_totals.assign(
        reserve=reserve_totals["reserve"].map(money),
        current=column("reserve_current").map(money),
        non_current=column("reserve_non_current").map(money),
        reserve_discounted=column("reserve_discounted").map(money),
        current_discounted=column("reserve_current_discounted").map(money),
        non_current_discounted=column("reserve_non_current_discounted").map(money),
        current_interval=interval("reserve_current_lower", "reserve_current_upper", money),
        non_current_interval=interval("reserve_non_current_lower", "reserve_non_current_upper", money),
    )[["product", "reserve", "current", "current_interval", "non_current", "non_current_interval",
       "reserve_discounted", "current_discounted", "non_current_discounted"]]
    currency_text = f"{currency} (reserve.currency)" if currency else "currency units of the claims extract"
    lines += [
        _table(shown),
        "",
        f"Total reserve over products with a forecast: {money(total)}; discounted:"
        f" {money(column('reserve_discounted').sum(min_count=1))}. Amounts in {currency_text}"
        + ("; XXX is ISO 4217's code for no currency: set reserve.currency to the claims extract's" if currency == "XXX" else "")
        + ". reserve = future_claims_reserve + open_claims_reserve + handling_reserve, the total to book."
        " future_claims_reserve = the sum over calendar months of (future_returns + not_yet_reported +"
        f" repeat_claims) x cost_per_claim x (1 + {inflation:.2%}) ^ years from the as-of date to the middle of"
        " the month (reserve.annual_inflation_rate, compounded annually; at 0 it is claims x cost_per_claim): the"
        " first failures still to come, the failures already incurred whose claims are not yet filed, and the"
        " repeat claims of repaired units. open_claims: claims filed and not yet decided (status open or"
        " pending; counted in claims_to_date), reserved at their estimated cost (an empty estimate at"
        " cost_per_claim), due now. handled_claims: the rejected and no-fault-found claims expected with the"
        " future claims (at the product's observed share), reserved at reserve.handling_cost_per_claim"
        " (handling_reserve; 0 when not set). returns_interval and reserve_interval are prediction intervals (by"
        " default 5% to 95%: see the README) for the first failures until the warranties end and for the reserve"
        " (inflated like it, not discounted; the open claims and the handling added at their amounts); they"
        " carry the fitted model's uncertainty and the counts' randomness, not the risk that the model itself is"
        " wrong."
        " Per build month: `reserve.parquet`; per calendar month: `forecast.parquet`,"
        " `forecast_by_calendar_month.parquet` (per product, with the month's cost interval) and"
        " `reserve_by_calendar_month.parquet` (the future claims' cost of all products each month, with its"
        " interval: each month's own, so the months' bounds do not add up); next 12 months:"
        " `forecast_intervals.parquet`."
        " added_by_flagged_months: the part of the reserve that comes from forecasting the flagged build months"
        " with their own life rather than with their product's model (see Build-month alerts).",
        "",
        "When the claims fall due: current = the as-of date's month and the 12 calendar months after it"
        f" (the open claims all current), non_current = later; reserve_discounted = each month's amount {discount_text} from the middle of the"
        " month to the as-of date ((1 + rate) ^ -years, compounded annually). current_interval and"
        " non_current_interval: the parts' prediction intervals, built as the reserve's (each part's own"
        " quantiles: the two bounds do not add up to the reserve's).",
        "",
        _table(timing),
        "",
        *_reporting_delay_lines(reporting_delay),
        *_flagged_month_life_lines(flagged_month_lives),
        "## Life model (Weibull, maximum likelihood on grouped data)",
        "",
    ]
    level = life_model["confidence_level"].dropna()
    level_text = f"{level.iloc[0]:.0%}" if len(level) else "95%"
    fitted = life_model.assign(
        shape=life_model.apply(lambda r: _bounded(r["shape"], r["shape_lr_lower"], r["shape_lr_upper"]), axis=1),
        scale_months=life_model.apply(
            lambda r: _bounded(r["scale"], r["scale_lr_lower"], r["scale_lr_upper"]), axis=1
        ),
        b10_months=life_model.apply(lambda r: _bounded(r["b10"], r["b10_lr_lower"], r["b10_lr_upper"]), axis=1),
        b10_wald=life_model.apply(lambda r: _bounded(r["b10"], r["b10_lower"], r["b10_upper"]), axis=1),
        failed_by_warranty_end=life_model.apply(
            lambda r: _bounded_percent(
                r["fraction_failed_at_warranty_end"],
                r["fraction_failed_at_warranty_end_lr_lower"],
                r["fraction_failed_at_warranty_end_lr_upper"],
            ),
            axis=1,
        ),
        returns=life_model["returns"].map(lambda v: f"{v:,.0f}"),
        fit_p_value=life_model["gof_p_value"].map(lambda v: "n/a" if v != v else f"{v:.2g}"),
        aic_weibull_minus_lognormal=life_model["delta_aic_weibull_minus_lognormal"].map(
            lambda v: "n/a" if v != v else f"{v:.1f}"
        ),
    )[
        [
            "product", "status", "shape", "scale_months", "b10_months", "b10_wald", "failed_by_warranty_end",
            "returns", "fit_p_value", "aic_weibull_minus_lognormal",
        ]
    ]
    lines += [
        f"Estimates with {level_text} likelihood-ratio bounds in brackets (b10_wald: the Wald bounds, for"
        " comparison; when they differ much, trust the likelihood-ratio ones). Scale and B10 in months in"
        " service; failed_by_warranty_end is F at the product's longest warranty. fit_p_value: chi-square test"
        " of observed against expected returns by month in service (small: the Weibull misses something; with"
        " hundreds of thousands of units even small departures give small p-values, so read it with the"
        " probability plot). aic_weibull_minus_lognormal above 10 means the lognormal fits clearly better.",
        "",
        _table(fitted),
        "",
    ]
    for row in life_model.itertuples(index=False):
        if row.status != "fitted":
            lines.append(f"- **{row.product}**: {row.status}: {row.message}")
    if len(life_model_by_mode):
        modes = life_model_by_mode.assign(
            returns=life_model_by_mode["returns"].map(lambda v: f"{v:,.0f}"),
            shape=life_model_by_mode.apply(
                lambda r: _bounded(r["shape"], r["shape_lr_lower"], r["shape_lr_upper"]), axis=1
            ),
            scale_months=life_model_by_mode.apply(
                lambda r: _bounded(r["scale"], r["scale_lr_lower"], r["scale_lr_upper"]), axis=1
            ),
            share_of_future_returns=life_model_by_mode["share_of_expected_future_returns"].map(
                lambda v: "n/a" if v != v else f"{v:.1%}"
            ),
        )[["product", "failure_mode", "failure_codes", "returns", "status", "shape", "scale_months",
           "share_of_future_returns"]]
        lines += [
            "",
            "### Failure modes (independent competing risks; details in `life_model_by_mode.parquet`)",
            "",
            _table(modes),
            "",
        ]
    lines += ["", *_alert_lines(build_month_alerts), *_cause_lines(causes)]
    lines += _safety_term_lines(safety_term_claims, manifest.settings.get("alerts", {}).get("safety_terms"))
    lines += ["", "## Data read", ""]
    lines += [_table(reconciliation), ""]
    facts = manifest.facts
    if facts:
        lines += ["| fact | count |", "|---|---|", *[f"| {k} | {v:,} |" for k, v in facts.items()], ""]
    if len(quarantine):
        counts = quarantine.groupby(["extract", "column", "reason"]).size().reset_index(name="rows")
        lines += ["### Quarantined rows by reason (details in `quarantine.parquet`)", "", _table(counts), ""]
    if not charts_drawn:
        lines += ["## Charts", "", "Not drawn in this run (`--no-charts`).", ""]
        return "\n".join(lines)
    lines += [
        "## Charts",
        "",
        *([markdown_text(chart_note), ""] if chart_note else []),
        "- `return_rate_heatmap.png`: returns per 1,000 unit-months by build month and months in service (top"
        " row; the newest, partly observed month counts its partial exposure; hatched: under 100 unit-months) and"
        " observed / expected returns per cell against the alert baseline (bottom row; red above, blue below;"
        " + more and - fewer returns than expected beyond chance, 99% exact interval).",
        "- `observed_to_expected_by_build_month.png`: observed / expected returns per build month with exact"
        " bounds, whole window and early life; flagged months marked and labelled.",
        "- `cumulative_returns_per_unit.png`: cumulative returns per 1,000 units by months in service, one line"
        " per build month; flagged months in colour.",
        "- `weibull_probability_plot.png`: life-table fraction failed with Greenwood bounds, fitted Weibull line "
        "and its Wald band to the warranty end; points bending away from the line mean the Weibull does not describe"
        " the returns.",
        "- `expected_returns_by_month.png`: claims expected per calendar month after the as-of line with their"
        " prediction band, the returns counted in the 12 months before it, and the expected cost per month with"
        " its prediction interval over all products.",
        "- `failure_mode_pareto.png`: returns to date by failure code, largest first, with the cumulative share;"
        " below, by build month (a code piled up in a few months is a batch defect).",
        "- `reserve_for_finance.png`: the reserve by product (current / non-current, prediction interval), the"
        " expected cost by month still to come with each month's prediction interval, and the movement since the"
        " last run.",
        "",
    ]
    return "\n".join(lines)


def _alert_lines(alerts: pd.DataFrame) -> list[str]:
    """The flagged build months, each with both views' observed and expected returns (already escaped)."""
    lines = ["## Build-month alerts", ""]
    if not len(alerts):
        return lines + ["No build month was checked (no product has a published life model).", ""]
    flagged = alerts[alerts["is_flagged"]]
    months = int(alerts["early_life_months"].iloc[0])
    lines.append(
        f"{len(alerts):,} build months checked against their product's baseline life model (fitted without the"
        f" flagged months); {len(flagged):,} flagged. A statistical signal for qualified engineers to review,"
        " not a finding. A month is flagged when its own test passes the Benjamini-Hochberg step across its"
        f" product's months (q: the smaller p of its early-life count, first {months} months in service, and of"
        " the likelihood-ratio test of its own Weibull scale, doubled) with a ratio of at least the configured"
        " minimum, or when the CUSUM of returns over production order passes its threshold. Observed / expected"
        " returns with exact bounds in brackets; hazard_ratio: the month's own scale as a multiple of the"
        " product's hazard, with likelihood-ratio bounds. Every month: `build_month_alerts.parquet`."
    )
    lines.append("")
    if not len(flagged):
        return lines
    shown = pd.DataFrame(
        {
            "product": flagged["product"],
            "build_month": flagged["build_month"].map(_month_text),
            "early": [_observed_expected(r, "early") for r in flagged.itertuples(index=False)],
            "whole_window": [_observed_expected(r, "window") for r in flagged.itertuples(index=False)],
            "hazard_ratio": [
                _bounded(r.hazard_ratio, r.hazard_ratio_lower, r.hazard_ratio_upper)
                for r in flagged.itertuples(index=False)
            ],
            "q": flagged["month_q_value"].map(lambda v: f"{v:.2g}"),
            "cusum": [
                f"{r.cusum:.1f} / {r.cusum_threshold:.1f}" + (" (signal)" if r.cusum_signal else "")
                for r in flagged.itertuples(index=False)
            ],
            "reason": flagged["reason"],
        }
    )
    return lines + [_table(shown), ""]


def _flagged_month_life_lines(lives: pd.DataFrame | None) -> list[str]:
    """How each flagged build month is forecast (its own life) and what it adds (data text escaped)."""
    if lives is None or not len(lives):
        return []
    lives = _text_escaped(lives)

    def model(row) -> str:  # type: ignore[no-untyped-def]
        if row.life_model == "defective share":
            return (
                f"defective share {row.defective_share:.2%} of units, mean defect life"
                f" {row.defect_mean_life_months:.1f} months"
            )
        return f"own scale: {row.hazard_ratio:.2f} x the product's hazard"

    shown = pd.DataFrame({
        "product": lives["product"],
        "build_month": lives["build_month"].map(_month_text),
        "own_life": [model(r) for r in lives.itertuples(index=False)],
        "expected_future_returns": lives["expected_future_returns"].map(lambda v: f"{v:,.1f}"),
        "under_product_model": lives["expected_future_returns_product_model"].map(lambda v: f"{v:,.1f}"),
    })
    return [
        "### Flagged build months in the forecast",
        "",
        "Each flagged build month is left out of its product's fit and forecast with its own life on top of"
        " the product's model: its own scale (the product's hazard times a ratio) or a defective share (a share"
        " of its units with an exponential defect life, on top of the product's life), whichever fits the"
        " month's returns better by AIC (`flagged_build_month_lives.parquet`). A young month's own life rests on"
        " a few months of returns: treat its figure as uncertain, and review it with the engineers.",
        "",
        _table(shown),
        "",
    ]


TOP_CAUSES_SHOWN = 3  # failure codes per flagged month in the report


def _cause_lines(causes: pd.DataFrame) -> list[str]:
    """The top failure codes of each flagged month by excess returns (already escaped)."""
    if not len(causes):
        return []
    top = causes.groupby(["product", "build_month"], sort=False).head(TOP_CAUSES_SHOWN)
    shown = pd.DataFrame(
        {
            "product": top["product"],
            "build_month": top["build_month"].map(_month_text),
            "failure_code": top["failure_code"],
            "observed / expected": [
                f"{r.observed_returns:,.0f} / {r.expected_returns:,.1f}"
                + (f" = {r.ratio:.2f}" if math.isfinite(r.ratio) else "")
                for r in top.itertuples(index=False)
            ],
            "p_value": top["p_value"].map(lambda v: f"{v:.2g}"),
            "share_of_excess": top["share_of_excess"].map(lambda v: "n/a" if v != v else f"{v:.0%}"),
        }
    )
    return [
        f"Top failure codes of each flagged month (at most {TOP_CAUSES_SHOWN}), by returns above their"
        " expected share: expected = the month's whole-window expected returns x the code's share of the"
        " product's returns in the unflagged build months; all codes in `build_month_causes.parquet`.",
        "",
        _table(shown),
        "",
    ]


SAFETY_CLAIMS_SHOWN = 20  # newest claims listed in the report; all of them in safety_term_claims.parquet
SAFETY_CAUTION = (
    "A signal for qualified engineers, which may carry reporting duties under local product-safety"
    " regulations; the pipeline does not assess safety. A match is a word in a failure code, not a finding,"
    " and a hazard coded in other words is not caught."
)


def _safety_term_lines(claims: pd.DataFrame | None, terms: Any) -> list[str]:
    """Claims whose failure code mentions a safety-relevant term: the caution, the terms searched, counts
    per product and term, the newest claims (text from the data escaped here). No frame: no section."""
    if claims is None:
        return []
    lines = ["## Claims mentioning safety-relevant terms", "", SAFETY_CAUTION, ""]
    if terms is not None and not len(terms):
        return lines + ["The listing is turned off (`alerts.safety_terms` is empty): no failure code was searched.", ""]
    searched = "not recorded" if terms is None else ", ".join(markdown_text(term) for term in terms)
    lines.append(
        f"Terms searched in failure_code: {searched} (any case; a term matches from the start of one of the"
        " code's words, separators skipped: 'fire' matches FIRE_DAMAGE, not FIRMWARE). Valid claims filed by the"
        " as-of date, of every status and in or out of coverage; quarantined claims are not searched."
    )
    lines.append("")
    if not len(claims):
        return lines + ["No claim's failure code matched any of these terms.", ""]
    by_term = claims[["product", "matched_terms"]].explode("matched_terms").rename(columns={"matched_terms": "term"})
    counts = by_term.groupby(["product", "term"], sort=True).size().reset_index(name="claims")
    newest = claims.sort_values(["claim_date", "source_row_number"], ascending=False, kind="stable")
    shown = newest.head(SAFETY_CLAIMS_SHOWN)
    listed = pd.DataFrame(
        {
            "claim_date": shown["claim_date"].astype(str),
            "product": shown["product"],
            "build_month": shown["build_month"].map(_month_text),
            "claim_id": shown["claim_id"],
            "failure_code": shown["failure_code"],
            "status": shown["status"],
            "counted": [
                "n/a" if pd.isna(first) else "repeat claim" if (repeat is True or repeat == 1) else "yes" if first else "no"
                for first, repeat in zip(
                    shown["is_return"],
                    shown["is_repeat_claim"] if "is_repeat_claim" in shown else [False] * len(shown),
                )
            ],
            "matched_terms": shown["matched_terms"].map(lambda terms: ", ".join(str(t) for t in terms)),
        }
    )
    return lines + [
        f"{len(claims):,} claim{'s' if len(claims) != 1 else ''} matched; by product and term (a claim may"
        " match several terms):",
        "",
        _table(_text_escaped(counts.assign(claims=counts["claims"].map(lambda v: f"{v:,}")))),
        "",
        f"Newest first, {len(shown):,} of {len(claims):,} (every one in `safety_term_claims.parquet`):",
        "",
        _table(_text_escaped(listed)),
        "",
    ]


def _month_text(value: Any) -> Any:
    """A build month as YYYY-MM (text from the data passes as it is)."""
    return value.strftime("%Y-%m") if hasattr(value, "strftime") else value


def _observed_expected(row: Any, view: str) -> str:
    observed, expected = getattr(row, f"{view}_observed_returns"), getattr(row, f"{view}_expected_returns")
    ratio = getattr(row, f"{view}_ratio")
    if not math.isfinite(ratio):
        return f"{observed:,.0f} / {expected:,.1f}"
    return (
        f"{observed:,.0f} / {expected:,.1f} = {ratio:.2f}"
        f" [{getattr(row, f'{view}_ratio_lower'):.2f}, {getattr(row, f'{view}_ratio_upper'):.2f}]"
    )


def _bounded_percent(estimate: float, lower: float, upper: float) -> str:
    if not math.isfinite(estimate):
        return "n/a"
    return f"{estimate:.2%} [{lower:.2%}, {upper:.2%}]"


def _bounded(estimate: float, lower: float, upper: float) -> str:
    if not math.isfinite(estimate):
        return "n/a"
    return f"{estimate:.4g} [{lower:.4g}, {upper:.4g}]"


def _reporting_delay_lines(table: pd.DataFrame | None) -> list[str]:
    """The failure-to-claim delay per product and the failures not yet reported (reporting_delay.parquet)."""
    if table is None or not len(table):
        return []
    table = _text_escaped(table)
    shown = pd.DataFrame({
        "product": table["product"],
        "delay_from": table["delay_source"],
        "claims": table["delay_claims"].map(lambda v: f"{v:,.0f}"),
        "mean_days": table["delay_mean_days"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.1f}"),
        "median_days": table["delay_median_days"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.0f}"),
        "p99_days": table["delay_p99_days"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.0f}"),
        "not_yet_reported": table["expected_unreported"].map(lambda v: "n/a" if pd.isna(v) else f"{v:,.1f}"),
        "note": table["note"],
    })
    return [
        "## Claims not yet reported",
        "",
        "Failures before the as-of date whose claims are not filed yet, from the failure-to-claim delay of the"
        " counted returns (claim_date − failure_date, allowing for the as-of date cutting it short). The life"
        " fits allow for them and the forecast adds them in the month their claims are expected.",
        "",
        _table(shown),
        "",
    ]


ROLL_FORWARD_NOTE = (
    "Accruals price each unit shipped since the opening at this run's estimate of its whole-warranty cost at"
    " issue; claims settled are the settled claims filed since the opening (at their cost) and the rejected and"
    " no-fault-found claims at the handling cost; changes in estimate is the rest, for units already reserved"
    " (new information, time passing, expiries, open claims decided). Each amount is rounded to the cent; the"
    " total row adds the products' rows. Published as roll_forward.parquet; for finance and auditors to review."
)


def change_since_last_run(movement: ReserveMovement, reserve: pd.DataFrame) -> str:
    """One sentence: this run's reserve total against the last run before it (currency units)."""
    total = reserve_total(reserve) if len(reserve) else None
    currencies = sorted(set(reserve["currency"].dropna())) if "currency" in reserve and len(reserve) else []
    unit = f" {currencies[0]}" if len(currencies) == 1 else ""
    if total is None:
        return "No reserve in this run."
    if movement.previous_run_id is None:
        return f"Reserve {total:,.2f}{unit}; no earlier run under this output root to compare with."
    if movement.previous_total is None:
        return (f"Reserve {total:,.2f}{unit}; the last run ({movement.previous_run_id}, as of"
                f" {movement.previous_as_of_date}) has no reserve to compare with.")
    change = total - movement.previous_total
    share = f" ({change / movement.previous_total:+.2%})" if movement.previous_total else ""
    return (
        f"Reserve {total:,.2f}{unit}: {change:+,.2f}{unit}{share} since the last run ({movement.previous_run_id},"
        f" as of {movement.previous_as_of_date}, reserve {movement.previous_total:,.2f}{unit})."
    )


def _movement_lines(movement: ReserveMovement | None, reserve: pd.DataFrame) -> list[str]:
    if movement is None:
        return []
    lines = ["## How the reserve moved", "", change_since_last_run(movement, reserve), ""]
    table = movement.roll_forward
    if not len(table):
        return lines + [f"Roll-forward: {movement.note}.", ""]
    first = table.iloc[0]
    shown = pd.DataFrame({
        "product": table["product"].astype(str),
        "currency": table["currency"].astype(str),
        "opening reserve": table["opening_reserve"].map(lambda v: f"{v:,.2f}"),
        "+ accruals for units shipped since": table["accruals_for_units_shipped"].map(lambda v: f"{v:,.2f}"),
        "- claims settled": table["claims_settled"].map(lambda v: f"{v:,.2f}"),
        "+ changes in estimate": table["changes_in_estimate"].map(lambda v: f"{v:,.2f}"),
        "= closing reserve": table["closing_reserve"].map(lambda v: f"{v:,.2f}"),
    })
    return lines + [
        f"Roll-forward from run {first['opening_run_id']} (as of {first['opening_as_of_date']}) to this run,"
        " undiscounted:",
        "",
        _table(_text_escaped(shown)),
        "",
        ROLL_FORWARD_NOTE,
        "",
    ]
