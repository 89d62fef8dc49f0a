"""The run report as one self-contained HTML page (`report.html`), for people to read in a browser.

The page opens offline: inline CSS, charts embedded as `data:image/png;base64,...` (the same PNG bytes
the run publishes beside it), no script, no external reference; a Content-Security-Policy meta tag
forbids anything else (no script, no fetch; images only from data: URIs).

Every text that comes from the data (product names, failure codes, file names, messages quoting them)
is escaped exactly once, where it is written into the page (`html.escape` after `safe_text.one_line`):
formatters below return plain text and the table and paragraph writers escape it.

Pure rendering from the run's tables, like `report.py`; the only arithmetic is totals and the combined
interval of the total reserve (`combined_interval`).
"""

from __future__ import annotations

import base64
import html
import math
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from warranty_forecast.outputs.manifest import RunManifest
from warranty_forecast.outputs.report import ROLL_FORWARD_NOTE, change_since_last_run
from warranty_forecast.stages.roll_forward import ReserveMovement
from warranty_forecast.outputs.safe_text import one_line

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

CAUTIONS = (
    "Every figure here is a statistical estimate from the claims and shipments extracts, for review by"
    " qualified engineers, auditors and finance before anything is booked or decided, under the accounting"
    " rules and local regulations that apply to you.",
    "{reserve_terms} Its prediction intervals carry the fitted model's uncertainty and the counts'"
    " randomness, not the risk that the model itself is wrong.",
    "A flagged build month or a poor fit is a statistical signal, not a finding. Anything that may touch"
    " safety goes to qualified engineers and is handled under local product-safety regulations; do not wait"
    " for this report.",
    "Recalls, design changes and field campaigns are not in the data and can make the forecast too low.",
)

METHOD = (
    "Shipments and claims are validated in DuckDB; rows that break the input contract are quarantined with a"
    " reason and counted below.",
    "Returns are arranged by build month and months in service with the units at risk; a Weibull life is"
    " fitted per product by maximum likelihood on the grouped, censored ages, with likelihood-ratio bounds,"
    " after allowing for failures whose claims are not yet reported (the failure-to-claim delay).",
    "Each build month is tested against its product's life (early-life count, its own Weibull scale, CUSUM"
    " over production order, Benjamini-Hochberg across months); flagged months are left out of the product's"
    " fit and forecast with their own life.",
    "Future first failures until each unit's warranty ends, the claims not yet reported and repeat claims are"
    " priced at the product's cost per claim. Prediction intervals come from seeded draws of each product's"
    " parameters (normal approximation) and of the counts and claim costs. Open claims (filed, not yet"
    " decided) are added at their estimated cost, and rejected and no-fault-found claims at the handling cost"
    " when one is set.",
    "Each run is published in a folder of its own and recorded in the history database; the reserve is rolled"
    " forward from the last month-end run: opening, accruals for units shipped since (their whole-warranty cost"
    " at issue), claims settled, changes in estimate (the rest), closing, to the cent.",
)

CHART_CAPTIONS = {
    "return_rate_heatmap": "Returns per 1,000 unit-months by build month and months in service (top row;"
    " hatched: under 100 unit-months) and observed / expected returns per cell against the alert baseline"
    " (bottom row; red above, blue below; + more and - fewer returns than expected beyond chance, 99% exact"
    " interval).",
    "observed_to_expected_by_build_month": "Observed / expected returns per build month with exact bounds,"
    " whole window and early life; flagged months marked and labelled.",
    "cumulative_returns_per_unit": "Cumulative returns per 1,000 units by months in service, one line per build"
    " month; flagged months in colour.",
    "weibull_probability_plot": "Life-table fraction failed with Greenwood bounds, the fitted Weibull line and"
    " its Wald band; points bending away from the line mean the Weibull does not describe the returns.",
    "expected_returns_by_month": "Claims expected per calendar month after the as-of line, with their prediction"
    " band, beside the returns counted in the 12 months before it; below, the expected cost per month with its"
    " prediction interval over all products.",
    "failure_mode_pareto": "Returns to date by failure code, largest first, with the cumulative share; below, by"
    " build month (a code piled up in a few months is a batch defect).",
    "reserve_for_finance": "The reserve by product (current and non-current, with its prediction interval), the"
    " expected cost by month still to come with each month's prediction interval, and the movement since the"
    " last run.",
}

# reserve_by_product columns the product table shows (or folds into another column); any other column
# (added by a later version of the reserve stage) is appended to the table as it is
_RESERVE_KNOWN = frozenset({
    "product", "build_months", "units", "returns_to_date", "repeat_claims_to_date", "cost_to_date",
    "expected_future_returns", "expected_unreported_returns", "expected_repeat_claims", "expected_future_claims",
    "reserve", "reserve_added_by_flagged_months", "cost_per_claim", "cost_basis", "forecast_status",
    "returns_lower", "returns_median", "returns_upper", "reserve_lower", "reserve_median", "reserve_upper",
    "currency", "reserve_future_claims", "open_claims", "reserve_open_claims", "expected_handled_claims",
    "reserve_handling",
    "reserve_current_lower", "reserve_current_median", "reserve_current_upper",  # shown as intervals
    "reserve_non_current_lower", "reserve_non_current_median", "reserve_non_current_upper",
})

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;margin:0;color:#1d2731;
background:#f4f6f8;line-height:1.45;font-size:15px}
main{max-width:1180px;margin:0 auto;padding:24px 28px 48px;background:#fff}
h1{font-size:26px;margin:0 0 4px;color:#1b4965}h2{font-size:20px;margin:32px 0 8px;color:#1b4965;
border-bottom:2px solid #dce3ea;padding-bottom:4px}h3{font-size:16px;margin:20px 0 6px}
.meta{color:#55606b;font-size:13px}
.cautions{background:#fff7e6;border-left:5px solid #d98c00;padding:10px 16px;margin:16px 0}
.cautions li{margin:4px 0}
.warnings{background:#fdecea;border-left:5px solid #c0392b;padding:10px 16px;margin:16px 0}
.warnings li{margin:4px 0;overflow-wrap:anywhere}
.headline{display:flex;flex-wrap:wrap;gap:16px;margin:16px 0}
.figure-box{flex:1 1 260px;border:1px solid #dce3ea;border-radius:6px;padding:12px 16px;background:#f8fafc}
.figure-box .label{font-size:13px;color:#55606b}.figure-box .value{font-size:26px;font-weight:600;color:#1b4965}
.figure-box .range{font-size:13px;color:#1d2731}
table{border-collapse:collapse;margin:8px 0 12px;font-size:13px;display:block;overflow-x:auto;max-width:100%}
th,td{border:1px solid #dce3ea;padding:4px 8px;vertical-align:top}
th{background:#eef2f6;text-align:left}td{min-width:4em}td.num{text-align:right;white-space:nowrap;min-width:0}
tr.flagged td{background:#fdecea}
p.note{font-size:13px;color:#3b4650;max-width:1000px}
figure{margin:16px 0 24px}figure img{max-width:100%;height:auto;border:1px solid #dce3ea}
figcaption{font-size:13px;color:#3b4650;margin-top:4px}
footer{margin-top:32px;font-size:12px;color:#55606b}
"""


def escaped(value: object) -> str:
    """`value` as HTML text: one line (control and bidi characters shown as escapes), `<>&"'` as entities."""
    return html.escape(one_line(value), quote=True)


def combined_interval(medians: Sequence[float], lowers: Sequence[float], uppers: Sequence[float]) -> tuple[float, float]:
    """An interval of a sum of independent quantities from each one's median and interval (same levels).

    Each side combines in quadrature: lower = sum(median) - sqrt(sum((median - lower)^2)), upper likewise.
    Exact for independent normal quantities (the sum's quantile at z is sum(mu) + z sqrt(sum(sigma^2)),
    and median - lower = z sigma for each); one quantity gives its own interval back. The products'
    reserves are drawn independently (seeded per product) and are sums of thousands of claims, so close to
    normal; the sum of the products' bounds would be too wide (it is the interval of fully dependent
    products). Currency units. Raises ValueError when the lists differ in length or hold a non-finite value.
    """
    middle, low, high = (np.asarray(values, dtype=float) for values in (medians, lowers, uppers))
    if not (middle.shape == low.shape == high.shape) or middle.ndim != 1:
        raise ValueError("medians, lowers and uppers must be lists of the same length")
    if not (np.isfinite(middle).all() and np.isfinite(low).all() and np.isfinite(high).all()):
        raise ValueError("medians, lowers and uppers must be finite")
    if (low > middle).any() or (high < middle).any():
        raise ValueError("each lower must be at most its median and each upper at least its median")
    centre = float(middle.sum())
    return centre - float(np.sqrt(np.sum((middle - low) ** 2))), centre + float(np.sqrt(np.sum((high - middle) ** 2)))


def render_html_report(
    *,
    manifest: RunManifest,
    life_model: pd.DataFrame,
    build_month_alerts: pd.DataFrame,
    reserve_totals: pd.DataFrame,
    reconciliation: pd.DataFrame,
    quarantine: pd.DataFrame,
    warnings: Sequence[str],
    charts: Mapping[str, bytes] | None = None,
    charts_drawn: bool = True,
    build_month_causes: pd.DataFrame | None = None,
    flagged_month_lives: pd.DataFrame | None = None,
    reporting_delay: pd.DataFrame | None = None,
    forecast_intervals: pd.DataFrame | None = None,
    safety_term_claims: pd.DataFrame | None = None,
    movement: ReserveMovement | None = None,
    chart_note: str = "",
) -> str:
    """The run report as one self-contained HTML page (UTF-8 text).

    `charts`: chart name -> PNG bytes (the files the run publishes as `<name>.png`), embedded in that
    order; with `charts_drawn` False the page says the charts were not drawn. Money in the currency units
    of the claims extract; ages in months in service. Raises ValueError when a chart is not PNG bytes.
    """
    charts = dict(charts or {})
    for name, data in charts.items():
        if not isinstance(data, (bytes, bytearray)) or not bytes(data).startswith(PNG_SIGNATURE):
            raise ValueError(f"charts[{name!r}] must be PNG bytes")
    levels = manifest.settings.get("forecast", {}).get("prediction_levels") if manifest.settings else None
    level_text = _levels_text(levels)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; img-src data:;'
        ' style-src \'unsafe-inline\'">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>Warranty returns forecast, as of {escaped(manifest.as_of_date)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        "<main>",
        f"<h1>Warranty returns forecast, as of {escaped(manifest.as_of_date)}</h1>",
        _paragraph(
            f"As-of date {manifest.as_of_date} ({manifest.as_of_source}). Run finished"
            f" {manifest.finished_utc.isoformat(timespec='seconds')} (UTC) in {manifest.seconds_total:.1f} s."
            + _freshness_text(manifest.freshness),
            "meta",
        ),
        '<section class="cautions"><strong>Cautions</strong><ul>',
        *[f"<li>{escaped(text.format(reserve_terms=_reserve_terms(manifest.settings)))}</li>" for text in CAUTIONS],
        "</ul></section>",
    ]
    if warnings:
        parts += [
            f'<section class="warnings"><strong>Warnings ({len(warnings)})</strong><ul>',
            *[f"<li>{escaped(text)}</li>" for text in warnings],
            "</ul></section>",
        ]
    parts += _headline(reserve_totals, forecast_intervals, level_text, movement)
    parts += _movement_section(movement, reserve_totals)
    parts += _reserve_section(reserve_totals, level_text)
    parts += _forecast_interval_section(forecast_intervals, level_text)
    parts += _reporting_delay_section(reporting_delay)
    parts += _life_model_section(life_model)
    parts += _alert_section(build_month_alerts, build_month_causes, flagged_month_lives)
    parts += _safety_section(safety_term_claims)
    parts += _data_quality_section(manifest, reconciliation, quarantine)
    parts += _chart_section(charts, charts_drawn, chart_note)
    parts += [
        "<h2>Method in brief</h2>",
        "<ul>",
        *[f"<li>{escaped(text)}</li>" for text in METHOD],
        "</ul>",
        _paragraph(
            "Every table behind this page is published beside it as Parquet (reserve.parquet,"
            " reserve_by_product.parquet, forecast.parquet, life_model.parquet, build_month_alerts.parquet,"
            " quarantine.parquet and others); report.md holds the same report as text, manifest.json the inputs'"
            " checksums, the settings in force and every output's checksum. The README explains every column.",
            "note",
        ),
        "<footer>",
        escaped(
            "warranty-forecast " + str(manifest.versions.get("warranty-forecast", ""))
            + "; inputs: " + "; ".join(f"{item.extract} {item.path} (sha256 {item.sha256[:12]})" for item in manifest.inputs)
        ),
        "</footer>",
        "</main>",
        "</body>",
        "</html>",
        "",
    ]
    return "\n".join(parts)


# -- sections --------------------------------------------------------------------------------------------


def _headline(
    reserve: pd.DataFrame, intervals: pd.DataFrame | None, level_text: str, movement: ReserveMovement | None = None
) -> list[str]:
    boxes = []
    totals = _reserve_totals(reserve)
    for label, total, interval, note in totals:
        range_text = (
            f"{level_text} prediction interval {_money(interval[0])} to {_money(interval[1])}"
            if interval is not None else "prediction interval: n/a (a product has none)"
        )
        boxes.append(_box(label, _money(total), range_text, note))
    if movement is not None and movement.previous_total is not None and len(totals) == 1:
        change = totals[0][1] - movement.previous_total
        share = f" ({change / movement.previous_total:+.2%})" if movement.previous_total else ""
        boxes.append(_box(
            "Change since the last run",
            f"{change:+,.2f}{share}",
            f"from {_money(movement.previous_total)} as of {movement.previous_as_of_date}",
            f"run {movement.previous_run_id}; the roll-forward below explains the movement",
        ))
    if intervals is not None and len(intervals) and {"horizon", "expected", "lower", "upper"} <= set(intervals.columns):
        next_year = intervals[intervals["horizon"] == "next_12_months"]
        if len(next_year):
            boxes.append(_box(
                "Returns expected in the next 12 months (first failures, all products)",
                _count(next_year["expected"].sum()),
                "per product with its interval in the table below",
                "",
            ))
    if not boxes:
        return []
    return ['<section class="headline">', *boxes, "</section>"]


def _reserve_totals(reserve: pd.DataFrame) -> list[tuple[str, float, tuple[float, float] | None, str]]:
    """(label, total, its interval or None, note) per currency (one, unless the table names several)."""
    if not len(reserve) or "reserve" not in reserve:
        return []
    priced = reserve[reserve["reserve"].notna()]
    groups: Iterable[tuple[Any, pd.DataFrame]]
    if "currency" in priced.columns and priced["currency"].nunique(dropna=False) > 1:
        groups = priced.groupby(priced["currency"].astype(str), sort=True)
    else:
        currency = priced["currency"].iloc[0] if "currency" in priced.columns and len(priced) else None
        groups = [(currency, priced)]
    totals = []
    for currency, rows in groups:
        interval = None
        columns = ("reserve_median", "reserve_lower", "reserve_upper")
        if len(rows) and set(columns) <= set(rows.columns) and rows[list(columns)].notna().all().all():
            try:
                interval = combined_interval(*(rows[name].to_numpy(dtype=float) for name in columns))
            except ValueError:
                interval = None
        unit = f" ({currency})" if currency is not None and not pd.isna(currency) else ""
        note = (
            f"{len(rows)} product{'s' if len(rows) != 1 else ''} with a forecast; interval combining the"
            " products' intervals as independent (see Reserve by product)"
        )
        totals.append((f"Total reserve{unit}", float(rows["reserve"].sum()), interval, note))
    return totals


def _movement_section(movement: ReserveMovement | None, reserve: pd.DataFrame) -> list[str]:
    """The change since the last run and the roll-forward from the opening run (stages.roll_forward)."""
    if movement is None:
        return []
    lines = ["<h2>How the reserve moved</h2>", _paragraph(change_since_last_run(movement, reserve))]
    table = movement.roll_forward
    if not len(table):
        return lines + [_paragraph(f"Roll-forward: {movement.note}.", "note")]
    first = table.iloc[0]
    shown = pd.DataFrame({
        "product": table["product"].map(_plain),
        "currency": table["currency"].map(_plain),
        "opening reserve": table["opening_reserve"].map(_money),
        "+ accruals for units shipped since": table["accruals_for_units_shipped"].map(_money),
        "- claims settled": table["claims_settled"].map(_money),
        "+ changes in estimate": table["changes_in_estimate"].map(_money),
        "= closing reserve": table["closing_reserve"].map(_money),
        "units shipped since": table["units_shipped_since_opening"].map(_count),
        "claims settled (count)": (table["settled_claims"] + table["settled_handled_claims"]).map(_count),
    })
    return lines + [
        _paragraph(
            f"Roll-forward from run {first['opening_run_id']} (as of {first['opening_as_of_date']}, the last month-end"
            " close before this run, or the last run when no month end was run) to this run; undiscounted, to the cent."
        ),
        _table(shown, numeric=set(shown.columns) - {"product", "currency"}, row_class=None),
        _paragraph(ROLL_FORWARD_NOTE, "note"),
    ]


def _reserve_section(reserve: pd.DataFrame, level_text: str) -> list[str]:
    lines = ["<h2>Reserve by product</h2>"]
    if not len(reserve):
        return lines + [_paragraph("No product has a reserve (no product has a published life model).")]

    def column(name: str) -> pd.Series:
        return reserve[name] if name in reserve else pd.Series(np.nan, index=reserve.index)

    def interval(lower: str, upper: str, show) -> list[str]:  # type: ignore[no-untyped-def]
        return ["n/a" if pd.isna(a) or pd.isna(b) else f"{show(a)} to {show(b)}" for a, b in zip(column(lower), column(upper))]

    shown = pd.DataFrame({
        "product": column("product"),
        "units": column("units").map(_count),
        "claims to date": (column("returns_to_date").fillna(0) + column("repeat_claims_to_date").fillna(0)).map(_count),
        "cost to date": column("cost_to_date").map(_money),
        "future returns": column("expected_future_returns").map(lambda v: _number(v, 6)),
        "returns interval": interval("returns_lower", "returns_upper", _count),
        "not yet reported": column("expected_unreported_returns").map(lambda v: _number(v, 4)),
        "repeat claims": column("expected_repeat_claims").map(lambda v: _number(v, 4)),
        "cost per claim": column("cost_per_claim").map(_money),
        "future claims reserve": column("reserve_future_claims").map(_money),
        "open claims": column("open_claims").map(_count),
        "open claims reserve": column("reserve_open_claims").map(_money),
        "handled claims": column("expected_handled_claims").map(lambda v: _number(v, 4)),
        "handling reserve": column("reserve_handling").map(_money),
        "reserve": column("reserve").map(_money),
        "reserve interval": interval("reserve_lower", "reserve_upper", _money),
        "added by flagged months": column("reserve_added_by_flagged_months").map(_money),
    }, index=reserve.index)
    if "currency" in reserve:
        shown.insert(1, "currency", reserve["currency"].map(_plain))
    # the second table: how each product was priced, and any column this page does not know
    more = pd.DataFrame({
        "product": column("product"),
        "status": column("forecast_status").map(_plain),
        "cost basis": column("cost_basis").map(_plain),
    }, index=reserve.index)
    for name in reserve.columns:
        if name not in _RESERVE_KNOWN:
            more[name.replace("_", " ")] = reserve[name].map(_any_value)
            if name in ("reserve_current", "reserve_non_current"):  # its interval beside it
                more[f"{name.replace('_', ' ')} interval"] = interval(f"{name}_lower", f"{name}_upper", _money)
    return lines + [
        _table(shown, numeric=set(shown.columns) - {"product", "currency"}),
        _table(more, numeric=set(more.columns) - {"product", "status", "cost basis"}),
        _paragraph(
            "reserve = future claims reserve + open claims reserve + handling reserve, the total to book. Future"
            " claims reserve = (future returns + not yet reported + repeat claims) x cost per claim: the first"
            " failures still to come until the warranties end, the failures already incurred whose claims are not"
            " yet filed, and the repeat claims of repaired units. Open claims: filed, not yet decided (status open"
            " or pending; counted in claims to date), at their estimated cost, due now. Handled claims: the"
            " rejected and no-fault-found claims expected with the future claims, at the configured handling cost"
            f" (reserve.handling_cost_per_claim; 0 when not set). Intervals: {level_text} prediction intervals of"
            " the first failures and of the reserve (the open claims and the handling added at their amounts),"
            " and of its current part (claims due in the as-of month and the 12 after it) and later part."
            " Added by flagged months: the part of the reserve that comes"
            " from forecasting flagged build months with their own life. Money in the currency units of the"
            " claims extract. Per build month: reserve.parquet.",
            "note",
        ),
    ]


def _forecast_interval_section(intervals: pd.DataFrame | None, level_text: str) -> list[str]:
    if intervals is None or not len(intervals):
        return []
    names = {"next_12_months": "next 12 months", "to_warranty_end": "to warranty end"}
    shown = pd.DataFrame({
        "product": intervals["product"],
        "horizon": intervals["horizon"].map(lambda v: names.get(v, v)),
        "expected": intervals["expected"].map(lambda v: _number(v, 6)),
        "interval": [
            "n/a" if pd.isna(a) or pd.isna(b) else f"{_count(a)} to {_count(b)}"
            for a, b in zip(intervals["lower"], intervals["upper"])
        ],
    })
    return [
        "<h3>First failures still to come</h3>",
        _table(shown, numeric={"expected", "interval"}),
        _paragraph(
            f"Expected first failures with their {level_text} prediction interval; next 12 months: the 12"
            " calendar months after the as-of date's month (forecast_intervals.parquet).",
            "note",
        ),
    ]


def _reporting_delay_section(table: pd.DataFrame | None) -> list[str]:
    if table is None or not len(table):
        return []

    def days(value: Any, digits: int) -> str:
        return "n/a" if pd.isna(value) else f"{value:,.{digits}f}"

    shown = pd.DataFrame({
        "product": table["product"],
        "delay from": table["delay_source"],
        "claims": table["delay_claims"].map(_count),
        "mean days": table["delay_mean_days"].map(lambda v: days(v, 1)),
        "median days": table["delay_median_days"].map(lambda v: days(v, 0)),
        "99th percentile days": table["delay_p99_days"].map(lambda v: days(v, 0)),
        "not yet reported": table["expected_unreported"].map(lambda v: days(v, 1)),
        "note": table["note"].map(_plain) if "note" in table else "",
    })
    return [
        "<h2>Claims not yet reported</h2>",
        _paragraph(
            "Failures before the as-of date whose claims are not filed yet, from the failure-to-claim delay of"
            " the counted returns (claim date minus failure date, allowing for the as-of date cutting it short)."
            " The life fits allow for them and the forecast adds them in the month their claims are expected.",
            "note",
        ),
        _table(shown, numeric={"claims", "mean days", "median days", "99th percentile days", "not yet reported"}),
    ]


def _life_model_section(life_model: pd.DataFrame) -> list[str]:
    lines = ["<h2>Life model (Weibull, maximum likelihood on grouped data)</h2>"]
    if not len(life_model):
        return lines + [_paragraph("No product was fitted.")]
    level = life_model["confidence_level"].dropna() if "confidence_level" in life_model else pd.Series(dtype=float)
    level_text = f"{level.iloc[0]:.0%}" if len(level) else "95%"

    def get(row: pd.Series, name: str) -> float:
        value = row.get(name, np.nan)
        return float(value) if value is not None and not pd.isna(value) else math.nan

    rows = []
    for _, row in life_model.iterrows():
        rows.append({
            "product": row["product"],
            "status": row.get("status", ""),
            "shape": _bounded(get(row, "shape"), get(row, "shape_lr_lower"), get(row, "shape_lr_upper")),
            "scale (months)": _bounded(get(row, "scale"), get(row, "scale_lr_lower"), get(row, "scale_lr_upper")),
            "B10 (months)": _bounded(get(row, "b10"), get(row, "b10_lr_lower"), get(row, "b10_lr_upper")),
            "failed by warranty end": _bounded_percent(
                get(row, "fraction_failed_at_warranty_end"),
                get(row, "fraction_failed_at_warranty_end_lr_lower"),
                get(row, "fraction_failed_at_warranty_end_lr_upper"),
            ),
            "returns": _count(get(row, "returns")),
            "fit p-value": "n/a" if math.isnan(get(row, "gof_p_value")) else f"{get(row, 'gof_p_value'):.2g}",
            "AIC Weibull - lognormal": (
                "n/a" if math.isnan(get(row, "delta_aic_weibull_minus_lognormal"))
                else f"{get(row, 'delta_aic_weibull_minus_lognormal'):.1f}"
            ),
        })
    shown = pd.DataFrame(rows)
    lines += [
        _paragraph(
            f"Estimates with {level_text} likelihood-ratio bounds in brackets. Scale and B10 (the age by which 10%"
            " have failed) in months in service; failed by warranty end: the fraction failed at the product's"
            " longest warranty. Fit p-value: chi-square test of observed against expected returns by month in"
            " service (small: the Weibull misses something; read it with the probability plot). AIC Weibull -"
            " lognormal above 10: the lognormal fits clearly better.",
            "note",
        ),
        _table(shown, numeric=set(shown.columns) - {"product", "status"}),
    ]
    if "status" in life_model and "message" in life_model:
        unfitted = life_model[life_model["status"] != "fitted"]
        if len(unfitted):
            lines += ["<ul>", *[
                f"<li><strong>{escaped(r['product'])}</strong>: {escaped(r['status'])}: {escaped(r['message'])}</li>"
                for _, r in unfitted.iterrows()
            ], "</ul>"]
    return lines


def _alert_section(
    alerts: pd.DataFrame, causes: pd.DataFrame | None, lives: pd.DataFrame | None
) -> list[str]:
    lines = ["<h2>Build-month alerts</h2>"]
    if not len(alerts):
        return lines + [_paragraph("No build month was checked (no product has a published life model).")]
    flagged = alerts[alerts["is_flagged"].astype(bool)]
    lines.append(_paragraph(
        f"{len(alerts):,} build months checked against their product's baseline life; {len(flagged):,} flagged."
        " A statistical signal for qualified engineers to review, not a finding. Observed / expected returns"
        " with exact bounds in brackets; hazard ratio: the month's own scale as a multiple of the product's"
        " hazard, with likelihood-ratio bounds. Every month: build_month_alerts.parquet.",
        "note",
    ))
    if not len(flagged):
        return lines
    shown = pd.DataFrame({
        "product": flagged["product"],
        "build month": flagged["build_month"].map(_month_text),
        "units": flagged["units"].map(_count) if "units" in flagged else "",
        "early life": [_observed_expected(r, "early") for _, r in flagged.iterrows()],
        "whole window": [_observed_expected(r, "window") for _, r in flagged.iterrows()],
        "hazard ratio": [
            _bounded(r.get("hazard_ratio", np.nan), r.get("hazard_ratio_lower", np.nan), r.get("hazard_ratio_upper", np.nan))
            for _, r in flagged.iterrows()
        ],
        "q": flagged["month_q_value"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.2g}"),
        "reason": flagged["reason"].map(_plain),
    })
    lines.append(_table(shown, numeric={"units", "early life", "whole window", "hazard ratio", "q"}, row_class="flagged"))
    if lives is not None and len(lives):
        own = []
        for _, row in lives.iterrows():
            if row.get("life_model") == "defective share":
                own.append(
                    f"defective share {row['defective_share']:.2%} of units, mean defect life"
                    f" {row['defect_mean_life_months']:.1f} months"
                )
            else:
                own.append(f"own scale: {row.get('hazard_ratio', math.nan):.2f} x the product's hazard")
        lines += [
            "<h3>Flagged build months in the forecast</h3>",
            _table(pd.DataFrame({
                "product": lives["product"],
                "build month": lives["build_month"].map(_month_text),
                "own life": own,
                "future returns (own life)": lives["expected_future_returns"].map(lambda v: f"{v:,.1f}"),
                "under the product's model": lives["expected_future_returns_product_model"].map(lambda v: f"{v:,.1f}"),
            }), numeric={"future returns (own life)", "under the product's model"}),
        ]
    if causes is not None and len(causes):
        top = causes.groupby(["product", "build_month"], sort=False).head(3)
        lines += [
            "<h3>Top failure codes of each flagged month</h3>",
            _table(pd.DataFrame({
                "product": top["product"],
                "build month": top["build_month"].map(_month_text),
                "failure code": top["failure_code"],
                "observed / expected": [
                    f"{r['observed_returns']:,.0f} / {r['expected_returns']:,.1f}" for _, r in top.iterrows()
                ],
                "p-value": top["p_value"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.2g}"),
                "share of excess": top["share_of_excess"].map(lambda v: "n/a" if pd.isna(v) else f"{v:.0%}"),
            }), numeric={"observed / expected", "p-value", "share of excess"}),
            _paragraph(
                "At most 3 codes per month, by returns above their expected share (all codes:"
                " build_month_causes.parquet).",
                "note",
            ),
        ]
    return lines


def _safety_section(claims: pd.DataFrame | None) -> list[str]:
    if claims is None:
        return []
    lines = [
        "<h2>Claims mentioning safety-relevant terms</h2>",
        _paragraph(
            "A signal for qualified engineers, which may carry reporting duties under local product-safety"
            " regulations; the pipeline does not assess safety. A match is a word in a failure code, not a"
            " finding, and a hazard coded in other words is not caught.",
            "note",
        ),
    ]
    if not len(claims):
        return lines + [_paragraph("No claim's failure code matched a safety-relevant term.")]
    by_term = claims[["product", "matched_terms"]].explode("matched_terms").rename(columns={"matched_terms": "term"})
    counts = by_term.groupby(["product", "term"], sort=True).size().reset_index(name="claims")
    counts["claims"] = counts["claims"].map(_count)
    return lines + [
        _paragraph(f"{len(claims):,} claims matched; by product and term (every claim in safety_term_claims.parquet):"),
        _table(counts, numeric={"claims"}),
    ]


def _data_quality_section(manifest: RunManifest, reconciliation: pd.DataFrame, quarantine: pd.DataFrame) -> list[str]:
    lines = [
        "<h2>Data quality</h2>",
        _paragraph(
            "Every row read is used, quarantined (it breaks the input contract; the reason below, each row in"
            " quarantine.parquet) or after the as-of date.",
            "note",
        ),
    ]
    if len(reconciliation):
        shown = reconciliation.copy()
        numeric = set()
        for name in shown.columns:
            if pd.api.types.is_numeric_dtype(shown[name]):
                shown[name] = shown[name].map(_count)
                numeric.add(name)
        lines.append(_table(shown, numeric=numeric))
    if len(quarantine):
        counts = quarantine.groupby(["extract", "column", "reason"]).size().reset_index(name="rows")
        counts["rows"] = counts["rows"].map(_count)
        lines += ["<h3>Quarantined rows by reason</h3>", _table(counts, numeric={"rows"})]
    else:
        lines.append(_paragraph("No row was quarantined."))
    if manifest.facts:
        facts = pd.DataFrame({
            "fact": [name.replace("_", " ") for name in manifest.facts],
            "count": [_count(value) for value in manifest.facts.values()],
        })
        lines += ["<h3>Facts of the data</h3>", _table(facts, numeric={"count"})]
    return lines


def _chart_section(charts: Mapping[str, bytes], drawn: bool, note: str = "") -> list[str]:
    lines = ["<h2>Charts</h2>"]
    if drawn and note:
        lines.append(_paragraph(note, "note"))
    if not drawn:
        return lines + [_paragraph("Charts not drawn in this run (--no-charts).")]
    if not charts:
        return lines + [_paragraph("No chart was drawn.")]
    for name, data in charts.items():
        caption = CHART_CAPTIONS.get(name, name.replace("_", " "))
        encoded = base64.b64encode(bytes(data)).decode("ascii")
        lines += [
            "<figure>",
            f'<img alt="{escaped(name)}" src="data:image/png;base64,{encoded}">',
            f"<figcaption>{escaped(caption)} ({escaped(name)}.png)</figcaption>",
            "</figure>",
        ]
    return lines


# -- writers (escape here) and formatters (plain text) ----------------------------------------------------


def _paragraph(text: str, css_class: str | None = None) -> str:
    attribute = f' class="{css_class}"' if css_class else ""
    return f"<p{attribute}>{escaped(text)}</p>"


def _box(label: str, value: str, range_text: str, note: str) -> str:
    return (
        '<div class="figure-box">'
        f'<div class="label">{escaped(label)}</div>'
        f'<div class="value">{escaped(value)}</div>'
        f'<div class="range">{escaped(range_text)}</div>'
        + (f'<div class="label">{escaped(note)}</div>' if note else "")
        + "</div>"
    )


def _table(frame: pd.DataFrame, numeric: set[str] | frozenset[str] = frozenset(), row_class: str | None = None) -> str:
    """An HTML table of `frame`'s values as text, every header and cell escaped; `numeric` columns right-aligned."""
    header = "".join(f"<th>{escaped(name)}</th>" for name in frame.columns)
    aligned = [name in numeric for name in frame.columns]
    row_attribute = f' class="{row_class}"' if row_class else ""
    body = [
        f"<tr{row_attribute}>"
        + "".join(
            f'<td class="num">{escaped(_plain(value))}</td>' if right else f"<td>{escaped(_plain(value))}</td>"
            for value, right in zip(row, aligned)
        )
        + "</tr>"
        for row in frame.itertuples(index=False)
    ]
    return "\n".join(["<table>", f"<thead><tr>{header}</tr></thead>", "<tbody>", *body, "</tbody>", "</table>"])


def _plain(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value)


def _any_value(value: Any) -> str:
    """A cell of a column this page does not know: booleans and text as they are, numbers with separators."""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    if isinstance(value, (float, np.floating)):
        return "n/a" if not math.isfinite(value) else f"{value:,.2f}"
    return _plain(value)


def _finite(value: Any) -> bool:
    try:
        return value is not None and math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _money(value: Any) -> str:
    return f"{float(value):,.2f}" if _finite(value) else "n/a"


def _count(value: Any) -> str:
    return f"{float(value):,.0f}" if _finite(value) else "n/a"


def _number(value: Any, digits: int = 4) -> str:
    if not _finite(value):
        return "n/a"
    value = float(value)
    return f"{value:,.{digits}g}" if abs(value) < 1e5 else f"{value:,.0f}"


def _bounded(estimate: Any, lower: Any, upper: Any) -> str:
    if not _finite(estimate):
        return "n/a"
    bounds = f" [{float(lower):.4g}, {float(upper):.4g}]" if _finite(lower) and _finite(upper) else ""
    return f"{float(estimate):.4g}{bounds}"


def _bounded_percent(estimate: float, lower: float, upper: float) -> str:
    if not _finite(estimate):
        return "n/a"
    bounds = f" [{lower:.2%}, {upper:.2%}]" if _finite(lower) and _finite(upper) else ""
    return f"{estimate:.2%}{bounds}"


def _observed_expected(row: pd.Series, view: str) -> str:
    observed, expected = row.get(f"{view}_observed_returns"), row.get(f"{view}_expected_returns")
    ratio, lower, upper = (row.get(f"{view}_ratio{end}") for end in ("", "_lower", "_upper"))
    if not (_finite(observed) and _finite(expected)):
        return "n/a"
    text = f"{float(observed):,.0f} / {float(expected):,.1f}"
    if _finite(ratio):
        text += f" = {float(ratio):.2f}"
        if _finite(lower) and _finite(upper):
            text += f" [{float(lower):.2f}, {float(upper):.2f}]"
    return text


def _month_text(value: Any) -> str:
    return value.strftime("%Y-%m") if hasattr(value, "strftime") else _plain(value)


def _reserve_terms(settings: Mapping[str, Any] | None) -> str:
    """How the reserve is priced, from the [reserve] settings in force (inflation and discounting rates)."""
    reserve = (settings or {}).get("reserve", {}) or {}

    def rate(value: Any) -> float:
        return float(value) if _finite(value) else 0.0

    inflation = rate(reserve.get("annual_inflation_rate"))
    by_year = [rate(value) for value in (reserve.get("discount_rate_by_year") or [])]
    discount = rate(reserve.get("annual_discount_rate"))
    inflated = f"claim costs inflated at {inflation:.2%} a year" if inflation else "no cost inflation"
    if by_year:
        discounted = "reserve discounted at " + ", ".join(f"{r:.2%}" for r in by_year) + " for years 1, 2, ..."
    elif discount:
        discounted = f"reserve discounted at {discount:.2%} a year"
    else:
        discounted = "no discounting"
    handling = rate(reserve.get("handling_cost_per_claim"))
    handled = (
        f"plus {handling:,.2f} per expected rejected or no-fault-found claim" if handling
        else "no handling cost for rejected and no-fault-found claims"
    )
    return (
        f"The reserve is expected future claims x cost per claim ({inflated}; {discounted}), plus the open"
        f" claims at their estimated cost, {handled}."
    )


def _levels_text(levels: Any) -> str:
    """'90% (5% to 95%)' from the prediction levels (lower, median, upper), or 'the' when unknown."""
    try:
        values = sorted(float(v) for v in levels)
        lower, upper = values[0], values[-1]
    except (TypeError, ValueError, IndexError):
        return "the"
    return f"{upper - lower:.0%} ({lower:.0%} to {upper:.0%})"


def _freshness_text(freshness: Mapping[str, Any] | None) -> str:
    if not freshness:
        return ""
    return (
        f" Run date {freshness.get('run_date')}; newest valid claim date {freshness.get('newest_claim_date') or 'none'},"
        f" newest valid ship date {freshness.get('newest_ship_date') or 'none'}."
    )
