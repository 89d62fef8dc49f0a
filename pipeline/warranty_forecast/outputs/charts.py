"""Static charts of a run. Functions return matplotlib Figures built without pyplot (no global state,
no backend chosen at import, nothing to close); the publisher saves them as PNG.

No fitting or file I/O happens here: the charts draw tables computed by the statistics stages, and the
build-month charts add only arithmetic on the shaped tables (unit-months of exposure per month in
service, rates, and expected returns from a baseline's `cdf`) in small pure functions
(`exposure_by_month_in_service`, `return_rate_cells`) that are tested on their own.
"""

from __future__ import annotations

import calendar
import datetime as dt
import math
from typing import Iterable, Mapping, Protocol

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PatchCollection
from matplotlib.colors import LogNorm, Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.patheffects import withStroke
from matplotlib.ticker import FixedFormatter, FixedLocator, FuncFormatter, LogLocator, MultipleLocator, NullFormatter
from scipy import stats

from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.outputs.safe_text import chart_text

_PER_THOUSAND = 1000.0

# -- the look shared by every chart ---------------------------------------------------------------------

OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
"""The eight colours of Okabe & Ito (2008), "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people" (hex values from that page, from memory): told
apart by readers with any of the common colour-vision deficiencies."""

PALETTE = tuple(OKABE_ITO[name] for name in (
    "blue", "vermillion", "bluish_green", "orange", "reddish_purple", "sky_blue", "black", "yellow",
))
"""Series colours in order. Printed in grey, blue, vermillion and bluish green are all mid-grey (Rec. 709 luma
0.37, 0.44, 0.48), so every series also gets its own line style and marker (LINE_STYLES, MARKERS) or bar
hatch (HATCHES): those carry the difference in grey print."""

LINE_STYLES = ("-", "--", ":", "-.", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 3)), (0, (8, 2)), (0, (3, 1, 1, 1)))
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
HATCHES = ("", "//", "..", "xx", "\\\\", "--", "++", "oo")

EMPHASIS = OKABE_ITO["vermillion"]  # a fit, a flagged month, what the reader should look at
DATA = OKABE_ITO["blue"]  # observed points
MUTED = "#8c8c8c"  # context: other build months, reference lines
TYPE_SIZE = 9.0
"""One type size (points) for every text of every chart: titles differ by weight, not size."""

FOOTER_GID = "run-footer"


def currency_of(reserve_by_product: pd.DataFrame) -> str:
    """The reserve's currency code for a chart's axis label ('' when the table has none or several)."""
    if not len(reserve_by_product) or "currency" not in reserve_by_product:
        return ""
    codes = reserve_by_product["currency"].dropna().astype(str).unique()
    return str(codes[0]) if len(codes) == 1 else ""


def series_style(i: int) -> dict[str, object]:
    """Colour, line style and marker of the i-th series (0-based; they repeat after eight)."""
    return {"color": PALETTE[i % len(PALETTE)], "linestyle": LINE_STYLES[i % len(LINE_STYLES)],
            "marker": MARKERS[i % len(MARKERS)]}


def _finish(figure: Figure) -> Figure:
    """Every text of the figure at TYPE_SIZE (titles bold), tick labels included (also of secondary and
    twin axes); then the layout. Call last in each chart function."""
    for text in figure.findobj(lambda artist: hasattr(artist, "set_fontsize") and hasattr(artist, "get_text")):
        text.set_fontsize(TYPE_SIZE)
    axes = list(figure.axes)
    axes += [child for axis in figure.axes for child in getattr(axis, "child_axes", [])]
    for axis in axes:
        axis.tick_params(labelsize=TYPE_SIZE)
        axis.title.set_fontweight("bold")
        legend = axis.get_legend()
        if legend is not None:
            for text in legend.get_texts():
                text.set_fontsize(TYPE_SIZE)
    figure.tight_layout()
    if figure._suptitle is not None:
        # the panels below the (often several-line) suptitle: tight_layout reserves its height from the top
        # edge, but it hangs from 98% of the figure's height, so in a tall grid (12 product panels of the
        # probability plot) the top titles ran under it; measure where it ends and lay out beneath it
        figure._suptitle.set_fontweight("bold")
        renderer = FigureCanvasAgg(figure).get_renderer()
        bottom = figure._suptitle.get_window_extent(renderer).y0 / figure.bbox.height
        pad = 0.5 * TYPE_SIZE / 72.0 / figure.get_figheight()  # half a line
        figure._suptitle.set_in_layout(False)
        figure.tight_layout(rect=(0.0, 0.0, 1.0, bottom - pad))
    return figure


def with_footer(figure: Figure, run_id: str, as_of_date: object) -> Figure:
    """`figure` with a footer line "as of YYYY-MM-DD, run <run id>" at its bottom left, so a printed or
    pasted chart keeps where it came from; the figure grows by the footer's height (the axes keep their
    size). Drawn once: a second call replaces the text. Returns the same figure."""
    as_of = as_of_date.isoformat() if hasattr(as_of_date, "isoformat") else str(as_of_date)
    as_of = as_of[:10]
    text = f"as of {as_of}, run {run_id}"
    for old in [t for t in figure.texts if t.get_gid() == FOOTER_GID]:
        old.set_text(chart_text(text, 120))
        return figure
    height = figure.get_figheight()
    extra = 0.28  # inches
    for axis in figure.axes:
        box = axis.get_position()
        axis.set_position([box.x0, (box.y0 * height + extra) / (height + extra), box.width,
                           box.height * height / (height + extra)])
    for text_artist in figure.texts:
        x, y = text_artist.get_position()
        text_artist.set_position((x, (y * height + extra) / (height + extra)))
    if figure._suptitle is not None:
        x, y = figure._suptitle.get_position()
        figure._suptitle.set_position((x, (y * height + extra) / (height + extra)))
    figure.set_figheight(height + extra)
    figure.text(0.01, 0.08 / (height + extra), chart_text(text, 120), ha="left", va="bottom",
                fontsize=TYPE_SIZE, color="#4d4d4d", gid=FOOTER_GID)
    return figure


def products_to_draw(
    alerts_table: pd.DataFrame, reserve_by_product: pd.DataFrame, products: Iterable[str], limit: int,
    first: Iterable[str] = (),
) -> list[str]:
    """The product lines the per-product charts draw, at most `limit`: the `first` ones (charts.products:
    named by the user) in their order, then those with flagged build months (the smallest month q-value
    first), then by reserve, largest first, then by name. All of `first` that are among `products` are drawn
    even beyond `limit`. Every product stays in the tables and the reports; a figure of hundreds of panels is
    unreadable and slow to draw."""
    if limit < 1:
        raise ValueError(f"limit must be >= 1, got {limit!r}")
    everyone = sorted({str(product) for product in products})
    present = set(everyone)
    named = [name for name in dict.fromkeys(str(p) for p in first) if name in present]
    flagged_q: dict[str, float] = {}
    if len(alerts_table) and {"product", "is_flagged"} <= set(alerts_table.columns):
        flagged = alerts_table[alerts_table["is_flagged"].fillna(False).astype(bool)]
        q = flagged["month_q_value"] if "month_q_value" in flagged else pd.Series(0.0, index=flagged.index)
        flagged_q = q.groupby(flagged["product"].astype(str)).min().fillna(0.0).to_dict()
    reserve = (
        reserve_by_product.groupby(reserve_by_product["product"].astype(str))["reserve"].sum(min_count=1).to_dict()
        if len(reserve_by_product) and "reserve" in reserve_by_product else {}
    )

    def order(product: str) -> tuple[int, float, float, str]:
        amount = reserve.get(product)
        amount = float(amount) if amount is not None and math.isfinite(float(amount)) else -math.inf
        return (0, flagged_q[product], -amount, product) if product in flagged_q else (1, 0.0, -amount, product)

    rest = sorted(present - set(named), key=order)
    return named + rest[:max(limit - len(named), 0)]


def unknown_chart_products(first: Iterable[str], products: Iterable[str]) -> tuple[str, ...]:
    """One warning naming the charts.products entries that are not product lines of the extracts (a typo, or a
    line with no data yet): none when all are known."""
    known = {str(p) for p in products}
    missing = [str(name) for name in dict.fromkeys(first) if str(name) not in known]
    if not missing:
        return ()
    return (f"charts.products names {', '.join(missing)}: not a product line of the extracts; no chart for it",)


def charted_note(drawn: Iterable[str], count: int) -> str:
    """One sentence for the reports: which product lines the per-product charts show ('' when all)."""
    drawn = list(drawn)
    if len(drawn) >= count:
        return ""
    return (
        f"The per-product charts show {len(drawn)} of {count} product lines (those named in charts.products first,"
        f" then those with flagged build months, then the largest reserves; charts.max_products): {', '.join(drawn)}."
        " Every product line is in the tables."
    )


class LifeCurve(Protocol):
    """Any fitted life distribution that gives F(t)."""

    def cdf(self, t: np.ndarray) -> np.ndarray: ...


def _grid(count: int, width: float = 5.0, height: float = 4.2) -> tuple[Figure, np.ndarray]:
    columns = min(max(count, 1), 3)
    rows = max(1, math.ceil(count / columns))
    figure = Figure(figsize=(width * columns, height * rows))
    axes = figure.subplots(rows, columns, squeeze=False)
    for extra in axes.flat[count:]:
        extra.set_visible(False)
    return figure, axes


# -- return rates and O/E by build month and month in service ------------------------------------------

MIN_EXPOSURE_UNIT_MONTHS = 100.0
"""Cells with less exposure than this are not coloured (drawn hatched grey): at about one return per 1,000
unit-months, 100 unit-months expect 0.1 returns, so one return more or less swings the cell's rate by
10 per 1,000 (common practice, no source: a floor on the denominator of a rate map)."""

MIN_EXPECTED_RETURNS = 3.0
"""Observed / expected cells whose baseline expects fewer returns than this are not coloured either: a
cell's ratio is a Poisson count over E, so with E = 1 no return at all (ratio 0, the end colour) happens
in 37% of cells by chance; from E = 3 on it happens in under 5% (exp(-3)) (common practice, no source).
The returns of such cells are still in the rate panel above."""

OBSERVED_TO_EXPECTED_COLOUR_LIMIT = 10.0
"""The O/E colour scale runs from 1/10 to 10 on a log scale, the same in every panel; ratios beyond take
the end colours (a cell with no returns where some were expected takes the lower end)."""

CLEAR_DEPARTURE_LEVEL = 0.99
"""An O/E cell is marked + (more returns than expected) or - (fewer) when its exact two-sided interval at
this level excludes 1: the Poisson tail beyond its count, given the expected returns, is under
(1 - level) / 2 (Garwood's interval, the same test as the alerts' exact bounds). The marks carry what the
colour says in grey print, and only where the count is beyond chance: at 1% a few hundred cells of noise
mark a few. Per cell, not across cells: the alerts, not the map, decide what is flagged."""

_SALE_MONTH_GROUP = ["product", "build_month", "sale_month", "warranty_months"]
_CELL = ["product", "build_month", "months_in_service"]

RETURN_RATE_CELL_COLUMNS = (
    "product",
    "build_month",
    "months_in_service",
    "returns",
    "exposure_unit_months",
    "rate_per_1000_unit_months",
    "expected_returns",
    "observed_to_expected",
    "is_thin",
    "is_ratio_thin",
)


def _row_months(fit_suspensions: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Each fit_suspensions row spread over the months in service it was observed in: the row index, the
    month k (1-based), the month's start b_{k-1} and the end of the row's observation in it,
    min(observed_age, b_k), in months ((b_{k-1}, b_k] = month_interval_ends(k), the day grid)."""
    ages = np.nan_to_num(fit_suspensions["observed_age_months"].to_numpy(dtype=float), nan=0.0)
    ages = np.clip(ages, 0.0, None)
    # the month holding age a > 0: the first k with b_k >= a (k <= b_k <= k + 1/L, so ceil(a) or one less)
    months = np.ceil(ages).astype(np.int64)
    months -= (months >= 2) & (month_interval_ends(np.maximum(months - 1, 1))[1] >= ages)
    row = np.repeat(np.arange(len(ages)), months)
    first = np.repeat(np.cumsum(months) - months, months)
    k = np.arange(len(row)) - first + 1
    start, end = month_interval_ends(k)
    return row, k, start, np.minimum(ages[row], end)


def _share_at_risk(
    fit_suspensions: pd.DataFrame, fit_returns: pd.DataFrame | None, row: np.ndarray, k: np.ndarray
) -> np.ndarray:
    """For each (row, k): the share of the row's units not yet returned at the start of month k, 1 - R_<k / U,
    where R_<k is its sale-month group's returns in months before k and U the group's units (the returns
    are known per group, not per row, so they are shared in proportion to units, as age_in_service does)."""
    if fit_returns is None or not len(fit_returns) or not len(row):
        return np.ones(len(row))
    groups = pd.MultiIndex.from_frame(fit_suspensions[_SALE_MONTH_GROUP])
    codes, uniques = pd.factorize(groups)
    group_units = np.bincount(codes, weights=fit_suspensions["units"].to_numpy(dtype=float), minlength=len(uniques))
    returned_group = uniques.get_indexer(pd.MultiIndex.from_frame(fit_returns[_SALE_MONTH_GROUP]))
    returned_month = fit_returns["months_in_service"].to_numpy(dtype=np.int64)
    width = int(max(k.max(), returned_month.max(initial=0)))
    by_month = np.zeros((len(uniques), width + 1))
    kept = (returned_group >= 0) & (returned_month >= 1)
    np.add.at(by_month, (returned_group[kept], returned_month[kept]), fit_returns["returns"].to_numpy(dtype=float)[kept])
    before = np.cumsum(by_month, axis=1) - by_month  # column k: returns in months 1 .. k-1
    units = group_units[codes[row]]
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(units > 0, 1.0 - before[codes[row], k] / np.where(units > 0, units, 1.0), 0.0)
    return np.clip(share, 0.0, 1.0)


def exposure_by_month_in_service(
    fit_suspensions: pd.DataFrame, fit_returns: pd.DataFrame | None = None
) -> pd.DataFrame:
    """Unit-months of exposure per product x build month x month in service k (columns product,
    build_month, months_in_service, exposure_unit_months; only cells with exposure):

        exposure_k = sum over fit_suspensions rows of  units x (1 - R_<k / U) x (min(a, b_k) - b_{k-1})+

    a the row's observed age in months, (b_{k-1}, b_k] month k's ages on the day grid
    (lifecore.data.month_interval_ends: 30 or 31 days, about one month): a unit observed to age 2.5 adds
    about 1 unit-month to months 1 and 2 and half a unit-month to month 3, so the newest month of a build
    month is not divided by its full units.
    With `fit_returns`, units returned before month k leave the exposure (R_<k / U: the sale-month group's
    returns before k over its units, shared among its rows in proportion to units, as age_in_service
    does); without it nothing is subtracted. The units returned in month k itself count for the whole
    month (the actuarial convention would count half): this overstates the exposure by half the month's
    returns, 0.05% at a rate of one return per 1,000 unit-months.
    """
    if not len(fit_suspensions):
        return pd.DataFrame({c: pd.Series(dtype=object) for c in _CELL}).assign(exposure_unit_months=pd.Series(dtype=float))
    row, k, start, observed_end = _row_months(fit_suspensions)
    units = fit_suspensions["units"].to_numpy(dtype=float)[row]
    exposure = units * _share_at_risk(fit_suspensions, fit_returns, row, k) * np.maximum(observed_end - start, 0.0)
    cells = pd.DataFrame({
        "product": fit_suspensions["product"].to_numpy()[row],
        "build_month": fit_suspensions["build_month"].to_numpy()[row],
        "months_in_service": k,
        "exposure_unit_months": exposure,
    })
    return cells.groupby(_CELL, as_index=False, sort=True)["exposure_unit_months"].sum()


def return_rate_cells(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    baselines: Mapping[str, LifeCurve | None] | None = None,
) -> pd.DataFrame:
    """The heat map's numbers, one row per product x build month x month in service with exposure or
    returns (RETURN_RATE_CELL_COLUMNS):

        rate_per_1000_unit_months = 1,000 x returns_k / exposure_k      (see exposure_by_month_in_service)
        expected_returns          = sum over rows with a > b_{k-1} of  units x (F(min(a, b_k)) - F(b_{k-1}))
        observed_to_expected      = returns_k / expected_returns

    F is the product's baseline in `baselines` (any object with `cdf`; NaN without one). units x
    (F(min(a, b_k)) - F(b_{k-1})) is the expected number of the row's units that fail in month k within their
    observation window, so the cells of a build month add up to the alert stage's whole-window expected
    returns (sum of units x F(a)). The rate is NaN without exposure, the ratio NaN when nothing is expected.
    is_thin: exposure below MIN_EXPOSURE_UNIT_MONTHS (not coloured on the chart); is_ratio_thin: is_thin,
    or fewer than MIN_EXPECTED_RETURNS expected, or no ratio (its cell is not coloured either).
    """
    baselines = baselines or {}
    exposure = exposure_by_month_in_service(fit_suspensions, fit_returns)
    if len(fit_suspensions):
        row, k, start, observed_end = _row_months(fit_suspensions)
        products = fit_suspensions["product"].to_numpy()[row]
        units = fit_suspensions["units"].to_numpy(dtype=float)[row]
        expected = np.full(len(row), np.nan)
        for product in pd.unique(products):
            curve = baselines.get(product)
            if curve is None:
                continue
            at = products == product
            expected[at] = units[at] * (np.asarray(curve.cdf(observed_end[at]), dtype=float)
                                        - np.asarray(curve.cdf(start[at]), dtype=float))
        expected_cells = pd.DataFrame({
            "product": products, "build_month": fit_suspensions["build_month"].to_numpy()[row],
            "months_in_service": k, "expected_returns": expected,
        }).groupby(_CELL, as_index=False, sort=True)["expected_returns"].sum(min_count=1)
        exposure = exposure.merge(expected_cells, on=_CELL, how="left")
    else:
        exposure = exposure.assign(expected_returns=pd.Series(dtype=float))
    returned = (
        fit_returns.groupby(_CELL, as_index=False, sort=True)["returns"].sum()
        if len(fit_returns) else pd.DataFrame({c: pd.Series(dtype=object) for c in _CELL}).assign(returns=0.0)
    )
    returned["months_in_service"] = returned["months_in_service"].astype(np.int64)
    exposure["months_in_service"] = exposure["months_in_service"].astype(np.int64)
    cells = exposure.merge(returned, on=_CELL, how="outer").sort_values(_CELL, ignore_index=True)
    cells["returns"] = cells["returns"].fillna(0.0).astype(float)
    cells["exposure_unit_months"] = cells["exposure_unit_months"].fillna(0.0)
    exposure_values = cells["exposure_unit_months"].to_numpy(dtype=float)
    returns = cells["returns"].to_numpy(dtype=float)
    expected = cells["expected_returns"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        cells["rate_per_1000_unit_months"] = np.where(
            exposure_values > 0, _PER_THOUSAND * returns / np.where(exposure_values > 0, exposure_values, 1.0), np.nan
        )
        cells["observed_to_expected"] = np.where(expected > 0, returns / np.where(expected > 0, expected, 1.0), np.nan)
    cells["is_thin"] = exposure_values < MIN_EXPOSURE_UNIT_MONTHS
    cells["is_ratio_thin"] = cells["is_thin"] | ~(np.nan_to_num(expected) >= MIN_EXPECTED_RETURNS)
    return cells[list(RETURN_RATE_CELL_COLUMNS)]


def clear_departures(returns: np.ndarray, expected: np.ndarray, level: float = CLEAR_DEPARTURE_LEVEL) -> np.ndarray:
    """+1 where `returns` (counts) are more than `expected` (Poisson means) beyond chance, -1 where fewer,
    0 otherwise (and where nothing is expected): the exact two-sided interval of returns / expected at
    `level` lies above 1 (P(N >= returns) < (1 - level) / 2 for N ~ Poisson(expected)) or below 1
    (P(N <= returns) < (1 - level) / 2)."""
    if not 0.0 < level < 1.0:
        raise ValueError(f"level must be in (0, 1), got {level!r}")
    returns = np.asarray(returns, dtype=float)
    expected = np.asarray(expected, dtype=float)
    tail = (1.0 - level) / 2.0
    known = np.isfinite(expected) & (expected > 0) & np.isfinite(returns)
    mean = np.where(known, expected, 1.0)
    count = np.where(known, returns, 0.0)
    above = known & (stats.poisson.sf(count - 1.0, mean) < tail)  # P(N >= count)
    below = known & (stats.poisson.cdf(count, mean) < tail)  # P(N <= count)
    return np.where(above, 1, np.where(below, -1, 0))


def return_rate_heatmap(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    baselines: Mapping[str, LifeCurve | None] | None = None,
) -> Figure:
    """Per product, by build month (rows, oldest at the top) and month in service (columns): returns per
    1,000 unit-months of exposure (top panel, "viridis", linear, topped at the panel's 99th percentile),
    and, when `baselines` is given, observed / expected returns against the product's baseline (bottom
    panel, "RdBu_r" on a log scale centred on 1, from 1/OBSERVED_TO_EXPECTED_COLOUR_LIMIT to the limit).
    Numbers from `return_rate_cells`: the newest month of each build month is divided by the unit-months
    it was actually observed for, not by its full units. Cells with less than MIN_EXPOSURE_UNIT_MONTHS
    are hatched grey (not coloured), and so are ratio cells expecting fewer than MIN_EXPECTED_RETURNS;
    cells not yet observed are blank; a build month with no units is a blank row. The ratio row shows what the raw rates hide for a wear-out product (late-life cells are
    always dark): which build months return more than the baseline expects at the same age."""
    cells = return_rate_cells(fit_returns, fit_suspensions, baselines)
    products = _products(fit_returns, fit_suspensions)
    if not products:
        return _message_figure("no units in service: no return rates to show")
    with_ratio = baselines is not None
    figure, panels = _panel_grid(len(products), 2 if with_ratio else 1, width=5.8, height=5.6)
    for product, axes in zip(products, panels):
        rows = cells[cells["product"] == product]
        rate_axis = axes[0]
        ratio_axis = axes[1] if with_ratio else None
        if not (rows["exposure_unit_months"] > 0).any():
            for axis in axes:
                _panel_message(axis, f"{chart_text(product)}", "no units observed in service yet")
            continue
        grid = _cell_grid(rows)
        rate = np.ma.masked_where(grid["thin"] | ~np.isfinite(grid["rate"]), grid["rate"])
        shown = rate.compressed()
        top = float(np.percentile(shown, 99)) if len(shown) else 1.0
        top = top if top > 0 else max(float(shown.max(initial=0.0)), 1.0)
        image = rate_axis.imshow(
            rate, aspect="auto", interpolation="nearest", cmap="viridis", norm=Normalize(0.0, top), origin="upper"
        )
        figure.colorbar(image, ax=rate_axis, shrink=0.85, extend="max" if shown.max(initial=0.0) > top else "neither",
                        label="returns per 1,000 unit-months")
        rate_axis.set_title(f"{chart_text(product)}: returns per 1,000 unit-months")
        _dress_cell_axes(rate_axis, grid, grid["thin"])
        if ratio_axis is None:
            continue
        if baselines.get(product) is None:
            _panel_message(ratio_axis, f"{chart_text(product)}", "no baseline life model: no observed / expected")
            continue
        limit = OBSERVED_TO_EXPECTED_COLOUR_LIMIT
        ratio = np.where(grid["ratio"] == 0.0, 1.0 / (2.0 * limit), grid["ratio"])  # none returned: the lower end
        ratio = np.ma.masked_where(grid["ratio_thin"] | ~np.isfinite(ratio), ratio)
        image = ratio_axis.imshow(
            ratio, aspect="auto", interpolation="nearest", cmap="RdBu_r", norm=LogNorm(1.0 / limit, limit),
            origin="upper",
        )
        bar = figure.colorbar(image, ax=ratio_axis, shrink=0.85, extend="both",
                              label="observed / expected returns (log scale)")
        ticks = [t for t in (0.1, 0.2, 0.5, 1, 2, 5, 10) if 1.0 / limit <= t <= limit]
        bar.set_ticks(ticks, labels=[f"{t:g}" for t in ticks])
        ratio_axis.set_title(f"{chart_text(product)}: observed / expected (baseline)")
        _dress_cell_axes(ratio_axis, grid, grid["ratio_thin"])
        _mark_clear_departures(ratio_axis, grid)
    figure.suptitle(
        "Returns by build month and months in service: a row darker (rates)"
        + (" or red (observed / expected)" if with_ratio else "") + " from its first months on is a bad build month\n"
        + f"hatched grey, not coloured: under {MIN_EXPOSURE_UNIT_MONTHS:,.0f} unit-months of exposure"
        + (f" (observed / expected: or under {MIN_EXPECTED_RETURNS:g} expected returns)" if with_ratio else "")
        + "; blank: not yet observed at that age"
        + (f"\nobserved / expected: + more returns than expected, - fewer, beyond chance"
           f" ({CLEAR_DEPARTURE_LEVEL:.0%} exact interval excludes 1); red more, blue fewer" if with_ratio else "")
    )
    return _finish(figure)


def _mark_clear_departures(axis: Axes, grid: dict[str, np.ndarray]) -> None:
    """A black + on the coloured O/E cells with clearly more returns than expected, a black - on those with
    clearly fewer (`clear_departures`), so the map reads the same in grey print."""
    shown = ~grid["ratio_thin"] & np.isfinite(grid["expected"]) & (grid["expected"] > 0)
    sign = np.where(shown, clear_departures(np.nan_to_num(grid["returns"]), grid["expected"]), 0)
    for value, marker, gid, label in ((1, "+", "more-than-expected", "more than expected"),
                                      (-1, "_", "fewer-than-expected", "fewer than expected")):
        rows, columns = np.nonzero(sign == value)
        if len(rows):
            axis.scatter(columns, rows, marker=marker, s=16, linewidths=1.1, color=OKABE_ITO["black"], gid=gid,
                         label=label, zorder=3, path_effects=[withStroke(linewidth=2.4, foreground="white")])


def _cell_grid(rows: pd.DataFrame) -> dict[str, np.ndarray]:
    """One product's cells as build month x month in service arrays (every calendar month from the first
    to the last build month, so rows are evenly spaced in time)."""
    months = _month_numbers(rows["build_month"])
    first, last = int(months.min()), int(months.max())
    width = int(rows["months_in_service"].max())
    shape = (last - first + 1, width)
    i = months - first
    j = rows["months_in_service"].to_numpy(dtype=np.int64) - 1
    grid = {name: np.full(shape, np.nan) for name in ("rate", "ratio", "exposure", "returns", "expected")}
    grid["returns"][i, j] = rows["returns"].to_numpy(dtype=float)
    grid["expected"][i, j] = rows["expected_returns"].to_numpy(dtype=float)
    grid["rate"][i, j] = rows["rate_per_1000_unit_months"].to_numpy(dtype=float)
    grid["ratio"][i, j] = rows["observed_to_expected"].to_numpy(dtype=float)
    grid["exposure"][i, j] = rows["exposure_unit_months"].to_numpy(dtype=float)
    observed = np.zeros(shape, dtype=bool)
    observed[i, j] = (rows["exposure_unit_months"].to_numpy(dtype=float) > 0) | (rows["returns"].to_numpy(dtype=float) > 0)
    ratio_thin = np.zeros(shape, dtype=bool)
    ratio_thin[i, j] = rows["is_ratio_thin"].to_numpy(dtype=bool)
    grid["thin"] = observed & ~(np.nan_to_num(grid["exposure"]) >= MIN_EXPOSURE_UNIT_MONTHS)
    grid["ratio_thin"] = observed & ratio_thin
    grid["first_month"] = np.array(first)
    return grid


def _dress_cell_axes(axis: Axes, grid: dict[str, np.ndarray], thin: np.ndarray) -> None:
    """Hatch the `thin` cells, label both axes, YYYY-MM ticks on the build months."""
    thin_rows, thin_columns = np.nonzero(thin)
    if len(thin_rows):
        axis.add_collection(PatchCollection(
            [Rectangle((j - 0.5, i - 0.5), 1.0, 1.0) for i, j in zip(thin_rows, thin_columns)],
            facecolor="#e6e6e6", edgecolor="#8c8c8c", hatch="////", linewidth=0.0, label="thin",
        ))
    count, width = grid["thin"].shape
    axis.set_xlabel("months in service")
    axis.set_ylabel("build month")
    step = 1 if width <= 12 else 3 if width <= 36 else 6
    columns = [c for c in range(1, width + 1) if c == 1 or c % step == 0]
    axis.set_xticks([c - 1 for c in columns], [str(c) for c in columns])
    first = int(grid["first_month"])
    numbers, labels = _month_ticks(first, first + count - 1)
    axis.set_yticks([n - first for n in numbers], labels)
    axis.set_xlim(-0.5, width - 0.5)
    axis.set_ylim(count - 0.5, -0.5)


def observed_to_expected_by_build_month(alerts: BuildMonthAlertsLike | pd.DataFrame) -> Figure:
    """Observed / expected returns by build month per product (columns), from the alert stage's table
    (`alerts`: its BuildMonthAlerts or the build_month_alerts table): the whole-window view in the top row
    and the early-life view (the first early_life_months months in service) in the row below, each ratio
    with its exact (Garwood) interval as an error bar, a dashed reference line at 1, and the flagged
    months (flagged in either view) as red diamonds labelled YYYY-MM in both rows.

    Log y-axis. A month with no expected returns (E = 0: ratio and bounds NaN) is not drawn. A month with
    no returns (O = 0: ratio and lower bound 0) is drawn as an open triangle at the bottom of the axis with
    its upper bound; a lower bound below the axis is cut at the bottom.
    """
    table = getattr(alerts, "table", alerts)
    products = sorted(table["product"].unique()) if len(table) else []
    if not products:
        return _message_figure("no build month was checked: no product has a baseline life model")
    figure, panels = _panel_grid(len(products), 2, width=5.8, height=4.2)
    for product, (window_axis, early_axis) in zip(products, panels):
        rows = table[table["product"] == product].sort_values("build_month")
        months = _month_numbers(rows["build_month"])
        flagged = rows["is_flagged"].to_numpy(dtype=bool)
        early_months = int(rows["early_life_months"].iloc[0])
        finding = flagged_finding(months[flagged])
        for axis, view, words in (
            (window_axis, "window", "whole observation window"),
            (early_axis, "early", f"first {early_months} months in service"),
        ):
            axis.set_title(f"{chart_text(product)}: {finding}; {words}")
            _draw_ratio_view(axis, months, rows, view, flagged)
    figure.suptitle("Observed / expected returns by build month, against each product's baseline (exact intervals):"
                    " dots near 1 are build months like the rest; a flagged month stands clear above")
    return _finish(figure)


def flagged_finding(month_numbers: Iterable[int], listed: int = 3) -> str:
    """What a product's panel shows, in words: 'no build month flagged', '2025-02 flagged', or the first
    `listed` flagged months and how many more."""
    labels = [_month_label(int(m)) for m in sorted(month_numbers)]
    if not labels:
        return "no build month flagged"
    if len(labels) <= listed:
        return f"{', '.join(labels)} flagged"
    return f"{', '.join(labels[:listed])} and {len(labels) - listed} more flagged"


def _draw_ratio_view(axis: Axes, months: np.ndarray, rows: pd.DataFrame, view: str, flagged: np.ndarray) -> None:
    ratio = rows[f"{view}_ratio"].to_numpy(dtype=float)
    lower = rows[f"{view}_ratio_lower"].to_numpy(dtype=float)
    upper = rows[f"{view}_ratio_upper"].to_numpy(dtype=float)
    expected = rows[f"{view}_expected_returns"].to_numpy(dtype=float)
    drawn = np.isfinite(ratio) & (expected > 0)
    if not drawn.any():
        axis.text(0.5, 0.5, "no build month with expected returns", ha="center", va="center", transform=axis.transAxes)
        axis.set_xticks([])
        axis.set_yticks([])
        return
    zero = drawn & (ratio <= 0)
    positive = drawn & (ratio > 0)
    lows = np.concatenate([ratio[positive], lower[positive & (lower > 0)]])
    floor = max(min(float(lows.min()) if len(lows) else 1.0, 1.0) / 2.0, 1e-3)
    highs = np.concatenate([ratio[positive], upper[drawn & np.isfinite(upper)]])
    ceiling = max(float(highs.max()) * 2.5, 2.0)
    style = {"markersize": 3.5, "linestyle": "none", "elinewidth": 0.8}
    for where, kwargs in (
        (positive & ~flagged, {"fmt": "o", "color": DATA, "ecolor": OKABE_ITO["sky_blue"], "label": "build month (exact interval)"}),
        (positive & flagged, {"fmt": "D", "color": EMPHASIS, "ecolor": EMPHASIS, "markersize": 5.5,
                              "label": "flagged build month"}),
    ):
        if where.any():
            y = ratio[where]
            axis.errorbar(months[where], y, yerr=np.vstack([y - np.maximum(lower[where], floor), upper[where] - y]),
                          **{**style, **kwargs})
    if zero.any():
        y = np.full(zero.sum(), floor)
        axis.errorbar(months[zero], y, yerr=np.vstack([np.zeros_like(y), upper[zero] - y]), fmt="v",
                      markerfacecolor="white", color=DATA, ecolor=OKABE_ITO["sky_blue"],
                      **{**style, "label": "no returns (drawn at the bottom)"})
    for month, value in zip(months[flagged & drawn], np.where(ratio > 0, ratio, floor)[flagged & drawn]):
        axis.annotate(_month_label(int(month)), (month, value), xytext=(5, 0), textcoords="offset points",
                      ha="left", va="center", color=EMPHASIS,
                      bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "edgecolor": "none", "alpha": 0.8})
    axis.axhline(1.0, color=OKABE_ITO["black"], linestyle="--", linewidth=0.9, label="as expected (1)")
    axis.set_yscale("log")
    axis.set_ylim(floor / 1.25, ceiling)
    axis.yaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    axis.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    axis.yaxis.set_minor_formatter(NullFormatter())
    axis.set_ylabel("observed / expected returns (log scale)")
    axis.set_xlabel("build month")
    numbers, labels = _month_ticks(int(months.min()), int(months.max()))
    axis.set_xticks(numbers, labels, rotation=90)
    axis.set_xlim(months.min() - 1, months.max() + 1)
    axis.grid(True, axis="y", which="major", alpha=0.3)
    axis.legend(loc="upper left")


def cumulative_returns_per_unit(
    fit_returns: pd.DataFrame,
    fit_suspensions: pd.DataFrame,
    flagged: BuildMonthAlertsLike | pd.DataFrame | Iterable[tuple[str, object]],
) -> Figure:
    """Per product, one line per build month: cumulative returns per 1,000 units against months in
    service; unflagged months thin and grey, flagged months coloured, thick and in the legend.

    Estimator: the cumulative hazard, 1,000 x sum over months k of returns_k / exposure_k, with exposure_k
    the unit-months observed in month k (`exposure_by_month_in_service`, units returned earlier taken
    out). Each month's rate is divided only by the units observed at that age, so a young build month
    whose units are still being sold and aged reads the same as an old one with the same life; returns
    over all units would read low for it. While returns are a small share of the units the cumulative
    hazard H equals cumulative returns per unit (the fraction failed is 1 - exp(-H)). A build month's line
    ends before its first month in service with less than MIN_EXPOSURE_UNIT_MONTHS (the rate on a few
    unit-months would throw the sum).

    `flagged`: the build months to pick out, as the alert stage's BuildMonthAlerts, its table (rows with
    is_flagged), or an iterable of (product, build_month) pairs.
    """
    cells = return_rate_cells(fit_returns, fit_suspensions)
    picked = _flagged_keys(flagged)
    products = _products(fit_returns, fit_suspensions)
    if not products:
        return _message_figure("no units in service: no cumulative returns to show")
    figure, axes = _grid(len(products), width=5.6, height=4.6)
    for axis, product in zip(axes.flat, products):
        rows = cells[cells["product"] == product]
        others, lines = 0, 0
        for build_month, month_rows in rows.groupby("build_month", sort=True):
            months, cumulative = _cumulative_hazard(month_rows)
            if len(months) < 2:
                continue
            key = (str(product), int(_month_numbers([build_month])[0]))
            if key in picked:
                axis.plot(months, cumulative, **{**series_style(lines + 1), "marker": None}, linewidth=2.4, zorder=3,
                          label=f"{_month_label(key[1])} (flagged)")
                lines += 1
            else:
                axis.plot(months, cumulative, color=MUTED, linewidth=0.7, alpha=0.7, zorder=2)
                others += 1
        if not lines and not others:
            axis.text(0.5, 0.5, "no build month with enough exposure", ha="center", va="center",
                      transform=axis.transAxes)
        if others:
            axis.plot([], [], color=MUTED, linewidth=0.7, label=f"other build months ({others})")
        axis.set_title(f"{chart_text(product)}: "
                       + flagged_finding(month for name, month in picked if name == str(product)))
        axis.set_xlabel("months in service")
        axis.set_ylabel("cumulative returns per 1,000 units")
        axis.set_xlim(left=0)
        longest = max((len(line.get_xdata()) for line in axis.lines), default=0)
        axis.xaxis.set_major_locator(MultipleLocator(3 if longest <= 25 else 6))  # quarters or half years
        axis.set_ylim(bottom=0)
        axis.grid(True, alpha=0.3)
        if lines or others:
            axis.legend(loc="upper left")
    figure.suptitle("Cumulative returns per 1,000 units by build month (cumulative hazard on unit-months observed):"
                    " a line climbing away from the grey bundle is a build month failing faster than the rest")
    return _finish(figure)


def _cumulative_hazard(month_rows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """(0, 1, .., m) and 1,000 x the running sum of returns_k / exposure_k, m the last month in service
    before the first with less than MIN_EXPOSURE_UNIT_MONTHS."""
    by_month = month_rows.set_index("months_in_service")
    last = int(by_month.index.max())
    exposure = by_month["exposure_unit_months"].reindex(range(1, last + 1), fill_value=0.0).to_numpy(dtype=float)
    returns = by_month["returns"].reindex(range(1, last + 1), fill_value=0.0).to_numpy(dtype=float)
    thin = np.flatnonzero(exposure < MIN_EXPOSURE_UNIT_MONTHS)
    usable = int(thin[0]) if len(thin) else last
    rate = returns[:usable] / exposure[:usable]
    return np.arange(usable + 1), np.concatenate([[0.0], _PER_THOUSAND * np.cumsum(rate)])


class BuildMonthAlertsLike(Protocol):
    """The alert stage's result as the charts use it: its table."""

    table: pd.DataFrame


def _flagged_keys(flagged: object) -> set[tuple[str, int]]:
    """(product, month number) of the flagged build months, from BuildMonthAlerts, its table or pairs."""
    table = getattr(flagged, "table", flagged)
    if isinstance(table, pd.DataFrame):
        if "is_flagged" in table.columns:
            table = table[table["is_flagged"].astype(bool)]
        pairs = list(zip(table["product"], table["build_month"]))
    else:
        pairs = list(table)  # type: ignore[call-overload]
    if not pairs:
        return set()
    numbers = _month_numbers([month for _, month in pairs])
    return {(str(product), int(number)) for (product, _), number in zip(pairs, numbers)}


def _products(*tables: pd.DataFrame) -> list[str]:
    """Every product of the tables, sorted (a product with no units in service still gets its panel)."""
    return sorted({product for table in tables for product in table["product"].unique()})


def _month_numbers(values: Iterable[object]) -> np.ndarray:
    """Build months as year x 12 + month - 1 (consecutive months are consecutive integers)."""
    stamps = pd.to_datetime(pd.Series(list(values), dtype=object))
    return (stamps.dt.year * 12 + stamps.dt.month - 1).to_numpy(dtype=np.int64)


def _month_label(number: int) -> str:
    return f"{number // 12:04d}-{number % 12 + 1:02d}"


def _month_ticks(first: int, last: int) -> tuple[list[int], list[str]]:
    """Month numbers to label between first and last and their YYYY-MM labels: every month up to 24
    months, else January, April, July and October (up to 6 years), January and July (up to 12), January."""
    count = last - first + 1
    months_shown = (
        range(12) if count <= 24 else (0, 3, 6, 9) if count <= 72 else (0, 6) if count <= 144 else (0,)
    )
    numbers = [n for n in range(first, last + 1) if n % 12 in months_shown]
    return numbers, [_month_label(n) for n in numbers]


def _panel_grid(count: int, rows_per_product: int, width: float, height: float) -> tuple[Figure, list[list[Axes]]]:
    """Products side by side (at most 3 to a row of products), each with `rows_per_product` panels stacked."""
    columns = min(max(count, 1), 3)
    blocks = max(1, math.ceil(count / columns))
    figure = Figure(figsize=(width * columns, height * rows_per_product * blocks))
    axes = figure.subplots(rows_per_product * blocks, columns, squeeze=False)
    panels = [
        [axes[(i // columns) * rows_per_product + r, i % columns] for r in range(rows_per_product)]
        for i in range(count)
    ]
    used = {id(axis) for panel in panels for axis in panel}
    for axis in axes.flat:
        if id(axis) not in used:
            axis.set_visible(False)
    return figure, panels


def _panel_message(axis: Axes, title: str, text: str) -> None:
    axis.set_title(title)
    axis.text(0.5, 0.5, text, ha="center", va="center", transform=axis.transAxes)
    axis.set_xticks([])
    axis.set_yticks([])


def _message_figure(text: str) -> Figure:
    figure = Figure(figsize=(8, 3))
    axis = figure.subplots()
    axis.text(0.5, 0.5, text, ha="center", va="center")
    axis.set_axis_off()
    return _finish(figure)


PROBABILITY_PLOT_GUIDE = (
    "How to read: dots along the line, the Weibull describes the returns. Dots bending down away from it"
    " (flattening): a subpopulation that fails early and is used up (a bad batch, a mix of failure modes);"
    " a kink or an S, two mechanisms; the first months far above it, infant failures. Judge by the dots"
    " with short bars."
)
"""The reading guide's words (README, 'Life table and probability plot'), printed under the title."""

AGE_TICKS_MONTHS = (1, 2, 3, 6, 12, 18, 24, 36, 48, 60, 84, 120, 180, 240)
"""Months in service labelled on a probability plot's log axis (those inside the axis)."""

FRACTION_TICKS = (1e-5, 1e-4, 2e-4, 5e-4, 1e-3, 2e-3, 5e-3, 0.01, 0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 0.632, 0.8, 0.9,
                  0.99)
"""Fractions failed labelled on the right axis (those inside the axis, thinned so no two labels touch)."""

_MIN_LABEL_GAP = 0.075  # of the axis height: about two lines of TYPE_SIZE on a 4-inch panel


def percent_label(fraction: float) -> str:
    """A fraction as a percent with only the digits it needs: 0.001 -> '0.1%', 0.1 -> '10%', 0.632 -> '63.2%'."""
    if not math.isfinite(fraction):
        raise ValueError(f"fraction must be finite, got {fraction!r}")
    return f"{100.0 * fraction:.4g}%"


def weibull_probability_plot(
    life_table: pd.DataFrame,
    fits: Mapping[str, FitResult | None],
    alternatives: Mapping[str, LifeCurve | None] | None = None,
    warranty_months: Mapping[str, float] | None = None,
) -> Figure:
    """Life-table fraction failed (with Greenwood bounds) and the fitted Weibull line with its Wald band.

    Axes: months in service (the end of each month in service, `age_months`) on a log scale, labelled
    1, 2, 3, 6, 12, 24 ... (AGE_TICKS_MONTHS), against log(-log(1 - F)); the right axis gives F as a
    percent (FRACTION_TICKS). A Weibull is a straight line of slope shape. The line and its band stop at
    the end of the warranty's cover (`warranty_months`: product -> W months, the longest warranty of the
    product; its end on the day grid, `month_interval_ends(W)`), marked by a dotted vertical line; without
    it they stop at the oldest age in the life table. `alternatives` (e.g. the lognormal fits) are drawn
    dashed. The reading guide (PROBABILITY_PLOT_GUIDE) is printed under the title.
    """
    alternatives = alternatives or {}
    warranty_months = warranty_months or {}
    products = sorted(life_table["product"].unique())
    if not products:
        return _message_figure("no life table: no product has units in service")
    figure, axes = _grid(len(products), width=5.4, height=4.6)
    for axis, product in zip(axes.flat, products):
        _probability_panel(axis, product, life_table, fits.get(product), alternatives.get(product),
                           warranty_months.get(product))
    figure.suptitle(
        "Weibull probability plot: dots on the straight line mean the fitted Weibull describes the returns\n"
        + _wrapped(PROBABILITY_PLOT_GUIDE, 40 * min(len(products), 3) + 20)
    )
    return _finish(figure)


def _wrapped(text: str, width: int) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width=width))


def _probability_panel(axis: Axes, product: str, life_table: pd.DataFrame, fit: FitResult | None,
                       alternative: LifeCurve | None, warranty: float | None) -> None:
    rows = life_table[(life_table["product"] == product) & (life_table["fraction_failed"] > 0)]
    months = (rows["age_months"] if "age_months" in rows else rows["months_in_service"]).to_numpy(dtype=float)
    y = _weibull_scale(rows["fraction_failed"])
    low = _weibull_scale(rows["fraction_failed_lower"])
    high = _weibull_scale(rows["fraction_failed_upper"])
    axis.errorbar(months, y, yerr=np.vstack([y - low, high - y]), fmt="o", markersize=3.5, color=DATA,
                  ecolor=OKABE_ITO["sky_blue"], elinewidth=1.0, label="life table (Greenwood bounds)", zorder=3)
    shown = [y, low, high]
    if warranty is not None and math.isfinite(float(warranty)) and warranty > 0:
        end = float(month_interval_ends(np.array([float(warranty)]))[1][0])
        end_label = f"warranty end ({float(warranty):g} months)"
    else:
        end = float(months.max()) if len(months) else None
        end_label = "oldest age observed"
    if fit is not None and len(months) and end is not None:
        grid = np.geomspace(max(months.min() * 0.5, 0.25), end, 120)
        lower, upper = fit.bounds("cdf", t=grid)
        line = _weibull_scale(fit.cdf(grid))
        axis.fill_between(grid, _weibull_scale(lower), _weibull_scale(upper), color=EMPHASIS, alpha=0.28,
                          linewidth=0.0, label=f"{fit.confidence_level:.0%} Wald band", zorder=1)
        for edge in (lower, upper):
            axis.plot(grid, _weibull_scale(edge), color=EMPHASIS, linewidth=0.6, alpha=0.8, zorder=1)
        axis.plot(grid, line, color=EMPHASIS, linewidth=1.8, zorder=2,
                  label=f"Weibull shape {fit.shape:.3g}, scale {fit.scale:.4g} months")
        shown += [line, _weibull_scale(lower), _weibull_scale(upper)]
        if alternative is not None:
            curve = _weibull_scale(alternative.cdf(grid))
            axis.plot(grid, curve, color=OKABE_ITO["bluish_green"], linestyle="--", linewidth=1.2,
                      label="lognormal alternative")
            shown.append(curve)
    if end is not None and len(months):
        axis.axvline(end, color=OKABE_ITO["black"], linestyle=":", linewidth=1.2, label=end_label, gid="warranty-end")
    axis.set_xscale("log")
    if len(months):
        left = max(months.min() * 0.4, 0.2)
        right = max(end or months.max(), months.max()) * 1.25
        axis.set_xlim(left, right)
        ticks = [t for t in AGE_TICKS_MONTHS if left <= t <= right]
        axis.xaxis.set_major_locator(FixedLocator(ticks))
        axis.xaxis.set_major_formatter(FixedFormatter([str(t) for t in ticks]))
        axis.xaxis.set_minor_formatter(NullFormatter())
        values = np.concatenate([np.asarray(v, dtype=float) for v in shown])
        values = values[np.isfinite(values)]
        if len(values):
            bottom, top = float(values.min()), float(values.max())
            pad = max(0.08 * (top - bottom), 0.15)
            axis.set_ylim(bottom - 2.5 * pad, top + pad)  # room for the legend below the line's right end
    axis.set_title(chart_text(product))
    axis.set_xlabel("months in service (log scale)")
    axis.set_ylabel("log(-log(1 - fraction failed))")
    _fraction_ticks(axis)
    axis.grid(True, which="major", alpha=0.3)
    axis.legend(loc="lower right")


def _weibull_scale(fraction: pd.Series | np.ndarray) -> np.ndarray:
    values = np.clip(np.asarray(fraction, dtype=float), 1e-12, 1 - 1e-12)
    return np.log(-np.log1p(-values))


def fraction_ticks(bottom: float, top: float) -> list[float]:
    """The FRACTION_TICKS inside (bottom, top) on the log(-log(1 - F)) scale, thinned from the top down
    so that no two are closer than _MIN_LABEL_GAP of the span (their labels would overlap)."""
    span = top - bottom
    if not (math.isfinite(span) and span > 0):
        return []
    inside = [f for f in FRACTION_TICKS if bottom <= float(_weibull_scale(np.array([f]))[0]) <= top]
    kept: list[float] = []
    for fraction in sorted(inside, reverse=True):
        position = float(_weibull_scale(np.array([fraction]))[0])
        if all(abs(position - float(_weibull_scale(np.array([k]))[0])) >= _MIN_LABEL_GAP * span for k in kept):
            kept.append(fraction)
    return sorted(kept)


def _fraction_ticks(axis: Axes) -> None:
    secondary = axis.secondary_yaxis("right", functions=(lambda y: y, lambda y: y))
    bottom, top = axis.get_ylim()
    fractions = fraction_ticks(bottom, top)
    secondary.set_yticks(_weibull_scale(np.array(fractions)), [percent_label(f) for f in fractions])
    secondary.set_ylabel("fraction failed")


# -- the calendar-month forecast -------------------------------------------------------------------------


def expected_returns_by_month(
    forecast: pd.DataFrame,
    products: Iterable[str] | None = None,
    *,
    as_of_date: dt.date | None = None,
    returns_to_date: pd.DataFrame | None = None,
    intervals: pd.DataFrame | None = None,
    costs: pd.DataFrame | None = None,
    currency: str = "",
    interval_label: str = "5-95%",
    history_months: int = 12,
    cost_by_month: pd.DataFrame | None = None,
    max_series: int = len(PALETTE) - 1,
) -> Figure:
    """Claims per calendar month: the returns counted in the `history_months` months to the as-of date's
    month (hollow markers, thin line) and the forecast after it (filled markers, thick line), one series
    per product (`products` only, the first `max_series` of them, so each has a colour of its own; the
    others summed into one series), a dashed vertical line at the end of
    the as-of date; below, the expected cost per calendar month stacked by product (when `costs` is given).

    `forecast`: product x (build month x) calendar month `month` (first day) with expected_returns and,
    when present, expected_claims (first failures + claims not yet reported + repeat claims; drawn when
    present). `intervals`: the forecast_by_calendar_month table (product, month, expected_returns,
    returns_lower, returns_upper: the first failures' prediction interval); the band is that interval plus
    the other claims at their expected values. `returns_to_date`: counted returns with product,
    claim_month, returns (returns_by_failure_month). `costs`: product, month, expected_cost (the published
    forecast). `cost_by_month`: the reserve_by_calendar_month table (month, expected_cost, cost_lower,
    cost_upper: every product's cost in the month): its interval as a whisker on each month's stack.
    Months are calendar months; the x axis holds month numbers (year x 12 + month - 1), each
    month's value drawn at its middle (+ 0.5), the as-of line at as-of month + day / days in the month.
    """
    if forecast.empty:
        return _message_figure("no forecast: no product has a published life model")
    with_cost = costs is not None and len(costs) and "expected_cost" in costs
    figure = Figure(figsize=(10.5, 7.8 if with_cost else 4.8))
    axes = figure.subplots(2 if with_cost else 1, 1, squeeze=False, sharex=True)[:, 0]
    count_axis = axes[0]
    value = "expected_claims" if "expected_claims" in forecast else "expected_returns"
    table = _by_month_product(forecast, value)
    shown, others = _shown_products(table.columns, products, most=max_series)
    series = _grouped_series(table, shown, others)
    band = _interval_band(intervals, forecast, value, shown) if intervals is not None else {}
    past = _returns_by_claim_month(returns_to_date, as_of_date, history_months) if returns_to_date is not None else None
    past_series = _grouped_series(past, shown, others) if past is not None and len(past.columns) else {}
    for i, (name, values) in enumerate(series.items()):
        style = series_style(i)
        x = _month_numbers(values.index) + 0.5
        if name in band:
            low, high = band[name]
            count_axis.fill_between(x, low, high, color=style["color"], alpha=0.22, linewidth=0.0, step=None,
                                    gid=f"band:{name}")
        count_axis.plot(x, values.to_numpy(dtype=float), color=style["color"], linestyle=style["linestyle"],
                        marker=style["marker"], markersize=3.5, linewidth=1.8, label=chart_text(name),
                        gid=f"forecast:{name}")
        if name in past_series:
            history = past_series[name]
            count_axis.plot(_month_numbers(history.index) + 0.5, history.to_numpy(dtype=float), color=style["color"],
                            linestyle=style["linestyle"], marker=style["marker"], markersize=3.5, linewidth=0.9,
                            markerfacecolor="white",
                            gid=f"returns:{name}")
    count_axis.set_ylabel("claims per month")
    count_axis.set_ylim(bottom=0)
    total = float(forecast[value].sum())
    what = "claims" if value == "expected_claims" else "returns"
    count_axis.set_title(
        f"{total:,.0f} {what} still expected (right of the as-of line"
        + (f"; band: {interval_label} prediction interval" if band else "") + "); returns counted so far on its left"
    )
    if with_cost:
        _cost_panel(axes[1], costs, shown, others, currency)
        if cost_by_month is not None and _cost_whiskers(axes[1], cost_by_month, 0.5, f"{interval_label} prediction interval"):
            axes[1].legend(loc="upper right", title="product", ncol=2 if len(axes[1].get_legend_handles_labels()[0]) > 5 else 1)
    months = np.concatenate([_month_numbers(v.index) for v in [*series.values(), *past_series.values()]])
    first, last = int(months.min()), int(months.max())
    if as_of_date is not None:
        at = as_of_line_x(as_of_date)
        first = min(first, int(at))
        for axis in axes:
            axis.axvline(at, color=OKABE_ITO["black"], linestyle="--", linewidth=1.2, gid="as-of",
                         label=f"as of {as_of_date.isoformat()}")
    numbers, labels = _month_ticks(first, last)
    axes[-1].set_xticks([n + 0.5 for n in numbers], labels, rotation=90)
    axes[-1].set_xlim(first, last + 1)
    axes[-1].set_xlabel("calendar month (YYYY-MM): of the failure for expected first failures, of the claim for"
                        " returns counted and claims not yet reported")
    for axis in axes:
        axis.grid(True, axis="y", alpha=0.3)
    # one entry per product (its colour, line and marker), then what filled / hollow / shaded mean
    keys = [
        Line2D([], [], color=OKABE_ITO["black"], marker="o", linewidth=1.8, markersize=3.5, label="expected"),
        *([Line2D([], [], color=OKABE_ITO["black"], marker="o", linewidth=0.9, markersize=3.5, markerfacecolor="white",
                  label="returns counted")] if past_series else []),
        *([Patch(facecolor=MUTED, alpha=0.4, label=f"{interval_label} prediction interval")] if band else []),
    ]
    handles, _ = count_axis.get_legend_handles_labels()
    count_axis.legend(handles=[*handles, *keys], loc="upper right", ncol=2)
    figure.suptitle("Claims by calendar month, counted and expected")
    return _finish(figure)


def as_of_line_x(as_of_date: dt.date) -> float:
    """The as-of marker's x on the calendar-month axis: the end of the as-of day, as month number (year x 12
    + month - 1) + day / days in the month (2026-11-30 -> 24322 + 30 / 30 = 24323.0, the start of December)."""
    days = calendar.monthrange(as_of_date.year, as_of_date.month)[1]
    return as_of_date.year * 12 + as_of_date.month - 1 + as_of_date.day / days


def _by_month_product(frame: pd.DataFrame, value: str, month: str = "month") -> pd.DataFrame:
    """value summed to calendar month (index, first days as dates) x product (columns)."""
    table = frame.assign(**{month: pd.to_datetime(frame[month]).dt.date, value: frame[value].astype(float)})
    table = table.groupby([month, "product"])[value].sum()
    return table.unstack("product", fill_value=0.0).sort_index()


def _shown_products(columns: Iterable[str], products: Iterable[str] | None,
                    most: int | None = None) -> tuple[list[str], list[str]]:
    """(shown, others): the `products` among `columns` (all when None), in `products`' order (the run
    passes the most important first), at most `most` of them; the rest are others."""
    names = [str(c) for c in columns]
    wanted = len(names)
    if products is not None:
        present = set(names)
        order = list(dict.fromkeys(str(p) for p in products if str(p) in present))
        chosen = set(order)
        names = order + [n for n in names if n not in chosen]
        wanted = len(order)
    if most is not None:
        wanted = min(wanted, most)
    return names[:wanted], names[wanted:]


def _grouped_series(table: pd.DataFrame, shown: list[str], others: list[str]) -> dict[str, pd.Series]:
    """One series per shown product present in `table`, and the others' sum under 'N other products'."""
    table = table.rename(columns=str)
    series = {name: table[name] for name in shown if name in table.columns}
    rest = [name for name in others if name in table.columns]
    if rest:
        series[f"{len(others)} other products"] = table[rest].sum(axis=1)
    return series


def _interval_band(intervals: pd.DataFrame, forecast: pd.DataFrame, value: str,
                   shown: list[str]) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per shown product: (lower, upper) per forecast month: the first failures' returns_lower / _upper plus
    the claims beyond first failures (value - expected_returns) at their expected values. Products without
    interval rows get no band; a month missing from the intervals takes its expected value on both sides."""
    if not len(intervals) or not {"returns_lower", "returns_upper"} <= set(intervals.columns):
        return {}
    extra = _by_month_product(forecast.assign(_extra=forecast[value] - forecast["expected_returns"]), "_extra")
    main = _by_month_product(forecast, value)
    bounds = intervals.assign(month=pd.to_datetime(intervals["month"]).dt.date, product=intervals["product"].astype(str))
    band = {}
    for name in shown:
        rows = bounds[bounds["product"] == name].set_index("month")
        if not len(rows) or name not in main.rename(columns=str).columns:
            continue
        months = main.index
        own_extra = extra.rename(columns=str)[name].reindex(months, fill_value=0.0).to_numpy(dtype=float)
        centre = main.rename(columns=str)[name].to_numpy(dtype=float)
        low = rows["returns_lower"].reindex(months).to_numpy(dtype=float) + own_extra
        high = rows["returns_upper"].reindex(months).to_numpy(dtype=float) + own_extra
        band[name] = (np.where(np.isfinite(low), low, centre), np.where(np.isfinite(high), high, centre))
    return band


def _returns_by_claim_month(returns: pd.DataFrame, as_of_date: dt.date | None, history_months: int) -> pd.DataFrame:
    """Counted returns per claim month x product, the `history_months` months up to the as-of date's month."""
    if not len(returns):
        return pd.DataFrame()
    table = _by_month_product(returns, "returns", month="claim_month")
    if as_of_date is not None and len(table):
        last = as_of_date.year * 12 + as_of_date.month - 1
        numbers = _month_numbers(table.index)
        table = table[(numbers <= last) & (numbers > last - history_months)]
    return table


def _cost_whiskers(axis: Axes, cost_by_month: pd.DataFrame, offset: float, label: str) -> bool:
    """Each month's cost interval (cost_lower to cost_upper, all products) as a black whisker at month number
    + `offset`; False (nothing drawn) when the table has no interval."""
    if not len(cost_by_month) or not {"cost_lower", "cost_upper", "expected_cost"} <= set(cost_by_month.columns):
        return False
    rows = cost_by_month[np.isfinite(cost_by_month["cost_lower"].astype(float))
                         & np.isfinite(cost_by_month["cost_upper"].astype(float))]
    if not len(rows):
        return False
    x = _month_numbers(rows["month"]) + offset
    centre = rows["expected_cost"].to_numpy(dtype=float)
    low, high = rows["cost_lower"].to_numpy(dtype=float), rows["cost_upper"].to_numpy(dtype=float)
    axis.errorbar(x, centre, yerr=np.vstack([np.maximum(centre - low, 0.0), np.maximum(high - centre, 0.0)]),
                  fmt="none", ecolor=OKABE_ITO["black"], elinewidth=0.9, capsize=1.5, label=label, gid="cost-interval")
    return True


def _cost_panel(axis: Axes, costs: pd.DataFrame, shown: list[str], others: list[str], currency: str) -> None:
    table = _by_month_product(costs, "expected_cost")
    series = _grouped_series(table, shown, others)
    bottom = np.zeros(len(table))
    x = _month_numbers(table.index) + 0.5
    for i, (name, values) in enumerate(series.items()):
        heights = values.to_numpy(dtype=float)
        axis.bar(x, heights, bottom=bottom, width=0.8, color=PALETTE[i % len(PALETTE)], hatch=HATCHES[i % len(HATCHES)],
                 edgecolor="white", linewidth=0.4, label=chart_text(name), gid=f"cost:{name}")
        bottom += heights
    unit = f" ({chart_text(currency, 12)})" if currency else " (currency units)"
    axis.set_ylabel(f"expected cost{unit}")
    axis.yaxis.set_major_formatter(FuncFormatter(lambda amount, _: f"{amount:,.0f}"))
    axis.set_title(f"Expected cost of those claims: {float(bottom.sum()):,.0f}{unit} still to pay, by month")
    axis.legend(loc="upper right", title="product", ncol=2 if len(series) > 4 else 1)


PARETO_CODES = 7
"""Failure codes coloured on the Pareto's build-month panel (the largest of the product); the rest are one
grey 'other codes' band."""


def failure_mode_pareto(returns_by_failure_mode: pd.DataFrame) -> Figure:
    """Per product (columns): counted returns by failure code, largest first, with the cumulative share
    (top), and the same returns by build month stacked by failure code (below; the PARETO_CODES largest
    codes in the top panel's colours and hatches, the rest grey), so a code concentrated in one build month,
    invisible in the Pareto over all history, stands out as a spike of one colour.

    `returns_by_failure_mode`: product, failure_mode, returns and, for the lower panel, build_month (rows
    per product x build month x code x month in service; summed here)."""
    by_code = returns_by_failure_mode.groupby(["product", "failure_mode"], as_index=False)["returns"].sum()
    products = sorted(by_code["product"].unique())
    if not products:
        return _message_figure("no returns with a failure code yet: no Pareto to show")
    by_month = "build_month" in returns_by_failure_mode.columns
    figure, panels = _panel_grid(len(products), 2 if by_month else 1, width=5.6, height=4.0)
    for product, axes in zip(products, panels):
        axis = axes[0]
        rows = by_code[by_code["product"] == product].sort_values(["returns", "failure_mode"], ascending=[False, True])
        counts = rows["returns"].to_numpy(dtype=float)
        codes = [str(code) for code in rows["failure_mode"]]
        positions = np.arange(len(rows))
        for i, (position, count, code) in enumerate(zip(positions, counts, codes)):
            colour, hatch = _code_style(i)
            axis.bar(position, count, color=colour, hatch=hatch, edgecolor="white", linewidth=0.4, gid=f"code:{code}")
        axis.set_xticks(positions, [chart_text(m, 30) for m in codes], rotation=35, ha="right")
        axis.set_ylabel("returns to date")
        axis.set_title(f"{chart_text(product)}: all build months")
        share = axis.twinx()
        share.plot(positions, 100.0 * np.cumsum(counts) / counts.sum(), color=OKABE_ITO["black"], marker="o",
                   markersize=3.5, linewidth=1.2)
        share.set_ylim(0, 105)
        share.set_ylabel("cumulative share of returns (%)")
        if by_month:
            _codes_by_build_month(axes[1], returns_by_failure_mode[returns_by_failure_mode["product"] == product], codes)
            axes[1].set_title(f"{chart_text(product)}: by build month")
    figure.suptitle(
        "Returns by failure code, largest first (top); by build month (below): a code piled up in a few build"
        " months is a batch defect, not the product's life"
    )
    return _finish(figure)


def _code_style(rank: int) -> tuple[str, str]:
    """Colour and hatch of the failure code ranked `rank` (0 = most returns) in the Pareto."""
    if rank >= PARETO_CODES:
        return MUTED, ""
    return PALETTE[rank % len(PALETTE)], HATCHES[rank % len(HATCHES)]


def _codes_by_build_month(axis: Axes, rows: pd.DataFrame, ranked_codes: list[str]) -> None:
    table = rows.assign(failure_mode=rows["failure_mode"].astype(str), returns=rows["returns"].astype(float))
    table = table.groupby(["build_month", "failure_mode"])["returns"].sum().unstack("failure_mode", fill_value=0.0)
    months = _month_numbers(table.index)
    bottom = np.zeros(len(table))
    shown = ranked_codes[:PARETO_CODES]
    for rank, code in enumerate(shown):
        if code not in table.columns:
            continue
        colour, hatch = _code_style(rank)
        heights = table[code].to_numpy(dtype=float)
        axis.bar(months, heights, bottom=bottom, width=0.85, color=colour, hatch=hatch, edgecolor="white",
                 linewidth=0.3, label=chart_text(code, 30), gid=f"month-code:{code}")
        bottom += heights
    rest = [code for code in table.columns if code not in shown]
    if rest:
        heights = table[rest].sum(axis=1).to_numpy(dtype=float)
        axis.bar(months, heights, bottom=bottom, width=0.85, color=MUTED, linewidth=0.0,
                 label=f"{len(rest)} other codes", gid="month-code:other")
    numbers, labels = _month_ticks(int(months.min()), int(months.max()))
    axis.set_xticks(numbers, labels, rotation=90)
    axis.set_xlim(months.min() - 1, months.max() + 1)
    axis.set_ylim(0, max(float(table.sum(axis=1).max()), 1.0) * 1.4)  # the legend above the bars
    axis.set_xlabel("build month")
    axis.set_ylabel("returns to date")
    axis.grid(True, axis="y", alpha=0.3)
    axis.legend(loc="upper left", ncol=2)


# -- finance: the reserve ---------------------------------------------------------------------------------


def reserve_for_finance(
    reserve_by_product: pd.DataFrame,
    costs: pd.DataFrame,
    roll_forward: pd.DataFrame | None = None,
    *,
    as_of_date: dt.date,
    currency: str = "",
    products: Iterable[str] | None = None,
    current_months: int = 12,
    interval_label: str = "5-95%",
    cost_by_month: pd.DataFrame | None = None,
) -> Figure:
    """The reserve as finance reads it, in three panels:

    * by product (top left): the reserve to book split into current (claims in the as-of date's month and
      the `current_months` calendar months after it) and non-current, with the reserve's prediction
      interval (reserve_lower / reserve_upper) as a whisker; `products` only, the others as one row.
    * by month still to come (top right): the forecast's expected cost per calendar month (`costs`:
      product, month, expected_cost), current months solid, later months hatched, a dotted line where the
      current part ends (after as-of month + current_months); with `cost_by_month` (the
      reserve_by_calendar_month table: month, expected_cost, cost_lower, cost_upper), each month's
      prediction interval as a whisker. Open claims and handling are in the reserve but not in any month:
      the title gives them.
    * movement since the last run (bottom): the roll-forward's total row as a waterfall, opening reserve +
      accruals for units shipped - claims settled +/- changes in estimate = closing reserve (a sentence when
      there is no earlier run).

    Amounts in the reserve's currency (`currency`, a label only), undiscounted.
    """
    if not len(reserve_by_product) or "reserve" not in reserve_by_product:
        return _message_figure("no reserve: no product has a forecast")
    figure = Figure(figsize=(12.0, 8.6))
    grid = figure.add_gridspec(2, 2, height_ratios=(1.15, 1.0))
    product_axis = figure.add_subplot(grid[0, 0])
    month_axis = figure.add_subplot(grid[0, 1])
    movement_axis = figure.add_subplot(grid[1, :])
    unit = f" ({chart_text(currency, 12)})" if currency else " (currency units)"
    _reserve_by_product_panel(product_axis, reserve_by_product, products, unit, interval_label)
    _reserve_by_month_panel(month_axis, reserve_by_product, costs, as_of_date, current_months, unit,
                            cost_by_month, interval_label)
    _movement_panel(movement_axis, roll_forward, unit)
    total = float(reserve_by_product["reserve"].sum())
    current = float(reserve_by_product["reserve_current"].sum()) if "reserve_current" in reserve_by_product else math.nan
    figure.suptitle(
        f"Warranty reserve to book as of {as_of_date.isoformat()}: {total:,.2f}{unit}"
        + (f", {current:,.2f} of it current (claims to {_month_label(as_of_date.year * 12 + as_of_date.month - 1 + current_months)})"
           if math.isfinite(current) else "")
    )
    return _finish(figure)


def _money(amount: float, _: object = None) -> str:
    return f"{amount:,.0f}"


def _reserve_by_product_panel(axis: Axes, table: pd.DataFrame, products: Iterable[str] | None, unit: str,
                              interval_label: str) -> None:
    table = table.assign(product=table["product"].astype(str))
    numeric = [c for c in ("reserve", "reserve_current", "reserve_non_current", "reserve_lower", "reserve_upper",
                           "reserve_current_lower", "reserve_current_upper") if c in table]
    shown, others = _shown_products(sorted(table["product"].unique()), products)
    rows = table[table["product"].isin(shown)].groupby("product")[numeric].sum(min_count=1)
    rows = rows.sort_values("reserve", ascending=True)
    if others:
        rest = table[table["product"].isin(others)][numeric].sum()
        rest[[c for c in numeric if c.endswith(("_lower", "_upper"))]] = np.nan  # quantiles do not add up
        rows = pd.concat([rest.to_frame(f"{len(others)} other products").T, rows])
    positions = np.arange(len(rows))
    if {"reserve_current", "reserve_non_current"} <= set(rows.columns):
        current = rows["reserve_current"].to_numpy(dtype=float)
        later = rows["reserve_non_current"].to_numpy(dtype=float)
        axis.barh(positions, current, color=DATA, label="current", gid="reserve-current")
        axis.barh(positions, later, left=current, color=OKABE_ITO["sky_blue"], hatch="//", edgecolor="white",
                  linewidth=0.4, label="non-current", gid="reserve-non-current")
    else:
        axis.barh(positions, rows["reserve"].to_numpy(dtype=float), color=DATA, label="reserve", gid="reserve")
    _bar_whisker(axis, rows, "reserve", positions, ecolor=OKABE_ITO["black"], capsize=4,
                 label=f"{interval_label} prediction interval", gid="reserve-interval")
    bars = _bar_whisker(axis, rows, "reserve_current", positions, ecolor="white", capsize=3.5,
                        label=f"{interval_label} interval of the current part", gid="current-interval")
    if bars is not None:  # at the end of the solid part: white outlined in black, seen on both parts' colours
        for artist in (*bars.lines[1], *bars.lines[2]):
            artist.set_path_effects([withStroke(linewidth=2.8, foreground=OKABE_ITO["black"])])
    ends = rows["reserve"].to_numpy(dtype=float)
    if "reserve_upper" in rows:  # the label right of the whisker, level with its bar
        ends = np.fmax(ends, rows["reserve_upper"].to_numpy(dtype=float))
    for position, amount, end in zip(positions, rows["reserve"].to_numpy(dtype=float), ends):
        axis.annotate(_money(amount), (end, position), xytext=(6, 0), textcoords="offset points", va="center",
                      gid="reserve-label")
    axis.set_yticks(positions, [chart_text(p) for p in rows.index])
    axis.xaxis.set_major_formatter(FuncFormatter(_money))
    amounts = np.concatenate([rows["reserve"].to_numpy(dtype=float),
                              rows.get("reserve_upper", rows["reserve"]).to_numpy(dtype=float)])
    finite = amounts[np.isfinite(amounts)]
    largest = float(finite.max()) if finite.size else 0.0  # no product with a reserve: an empty scale, not NaN
    axis.set_xlim(0, largest * 1.3 if largest > 0 else 1.0)
    axis.set_xlabel(f"reserve{unit}")
    axis.set_title("By product: current part solid, non-current hatched")
    axis.legend(loc="best")
    axis.grid(True, axis="x", alpha=0.3)


def _bar_whisker(axis: Axes, rows: pd.DataFrame, amount: str, positions: np.ndarray, **style: object) -> object:
    """The interval `amount`_lower to `amount`_upper of each horizontal bar as a whisker around `amount`
    (rows where all three are finite); the errorbar container, or None when there is nothing to draw."""
    if not {amount, f"{amount}_lower", f"{amount}_upper"} <= set(rows.columns):
        return None
    middle = rows[amount].to_numpy(dtype=float)
    low, high = rows[f"{amount}_lower"].to_numpy(dtype=float), rows[f"{amount}_upper"].to_numpy(dtype=float)
    has = np.isfinite(low) & np.isfinite(high) & np.isfinite(middle)
    if not has.any():
        return None
    spread = np.vstack([np.maximum(middle[has] - low[has], 0.0), np.maximum(high[has] - middle[has], 0.0)])
    return axis.errorbar(middle[has], positions[has], xerr=spread, fmt="none", elinewidth=1.2, **style)


def _reserve_by_month_panel(axis: Axes, reserve: pd.DataFrame, costs: pd.DataFrame, as_of_date: dt.date,
                            current_months: int, unit: str, cost_by_month: pd.DataFrame | None = None,
                            interval_label: str = "5-95%") -> None:
    if costs is None or not len(costs) or "expected_cost" not in costs:
        _panel_message(axis, "By month still to come", "no expected cost by month")
        return
    by_month = costs.assign(month=pd.to_datetime(costs["month"]).dt.date).groupby("month")["expected_cost"].sum()
    months = _month_numbers(by_month.index)
    amounts = by_month.to_numpy(dtype=float)
    last_current = as_of_date.year * 12 + as_of_date.month - 1 + current_months
    current = months <= last_current
    axis.bar(months[current], amounts[current], width=0.85, color=DATA, label="current", gid="month-current")
    axis.bar(months[~current], amounts[~current], width=0.85, color=OKABE_ITO["sky_blue"], hatch="//",
             edgecolor="white", linewidth=0.4, label="non-current", gid="month-non-current")
    axis.axvline(last_current + 0.5, color=OKABE_ITO["black"], linestyle=":", linewidth=1.2, gid="current-end",
                 label=f"current ends with {_month_label(last_current)}")
    if cost_by_month is not None:
        _cost_whiskers(axis, cost_by_month, 0.0, f"{interval_label} prediction interval")
    numbers, labels = _month_ticks(int(months.min()), int(months.max()))
    axis.set_xticks(numbers, labels, rotation=90)
    axis.yaxis.set_major_formatter(FuncFormatter(_money))
    axis.set_ylabel(f"expected cost{unit}")
    outside = [c for c in ("reserve_open_claims", "reserve_handling") if c in reserve]
    extra = float(np.nansum(reserve[outside].to_numpy(dtype=float))) if outside else 0.0  # a product without: 0
    axis.set_title(f"By month still to come (open claims, handling: {extra:,.0f})")
    axis.legend(loc="upper right")
    axis.grid(True, axis="y", alpha=0.3)


def movement_steps(total: pd.Series) -> list[tuple[str, float]]:
    """The roll-forward's total row as signed movements (label, amount): accruals for units shipped (+),
    claims settled (-), changes in estimate (+/-) and their sum, the net change (closing - opening)."""
    steps = [
        ("+ accruals for units shipped", float(total["accruals_for_units_shipped"])),
        ("- claims settled", -float(total["claims_settled"])),
        ("+/- changes in estimate", float(total["changes_in_estimate"])),
    ]
    steps.append(("= net change", float(total["closing_reserve"]) - float(total["opening_reserve"])))
    return steps


def _movement_panel(axis: Axes, roll_forward: pd.DataFrame | None, unit: str) -> None:
    """The movements as bars from 0 (the opening and closing reserves, far larger, are in the title: bars of
    them would flatten the movements to nothing)."""
    if roll_forward is None or not len(roll_forward):
        _panel_message(axis, "Movement since the last run", "no earlier run under this output root: no movement yet")
        return
    totals = roll_forward[roll_forward["is_total"].astype(bool)] if "is_total" in roll_forward else roll_forward
    total = totals.iloc[0] if len(totals) else roll_forward.sum(numeric_only=True)
    steps = movement_steps(total)
    for i, (label, amount) in enumerate(steps):
        net = i == len(steps) - 1
        colour = DATA if net else (OKABE_ITO["orange"] if amount >= 0 else OKABE_ITO["sky_blue"])
        axis.bar(i, amount, width=0.6, color=colour, hatch="" if amount >= 0 or net else "//", edgecolor="white",
                 linewidth=0.4, gid=f"movement:{label}")
        axis.annotate(f"{amount:+,.2f}", (i, amount), xytext=(0, 3 if amount >= 0 else -3), textcoords="offset points",
                      ha="center", va="bottom" if amount >= 0 else "top")
    axis.axhline(0.0, color=OKABE_ITO["black"], linewidth=0.8)
    axis.set_xticks(range(len(steps)), [label for label, _ in steps])
    axis.yaxis.set_major_formatter(FuncFormatter(_money))
    axis.set_ylabel(f"change in reserve{unit}")
    low, high = min(0.0, *(a for _, a in steps)), max(0.0, *(a for _, a in steps))
    axis.set_ylim(low * 1.25 if low < 0 else 0.0, high * 1.25 if high > 0 else 1.0)
    since = str(total.get("opening_as_of_date", ""))[:10]
    axis.set_title(
        f"Movement since the run as of {since}: reserve {float(total['opening_reserve']):,.2f} ->"
        f" {float(total['closing_reserve']):,.2f}{unit}"
    )
    axis.grid(True, axis="y", alpha=0.3)
