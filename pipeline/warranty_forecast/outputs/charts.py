"""Static charts of a run. Functions return matplotlib Figures built without pyplot (no global state,
no backend chosen at import, nothing to close); the publisher saves them as PNG.

No fitting or file I/O happens here: every chart draws tables computed by the statistics stages.
"""

from __future__ import annotations

import math
from typing import Mapping, Protocol

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from warranty_forecast.lifecore.result import FitResult
from warranty_forecast.outputs.safe_text import chart_text

_PER_THOUSAND = 1000.0


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


def return_rate_heatmap(age_in_service: pd.DataFrame) -> Figure:
    """Returns per 1,000 units at risk, by build month (rows) and months in service (columns), per product."""
    products = sorted(age_in_service["product"].unique())
    figure, axes = _grid(len(products), width=5.2, height=5.0)
    for axis, product in zip(axes.flat, products):
        rows = age_in_service[(age_in_service["product"] == product) & (age_in_service["units_at_risk"] > 0)]
        matrix = rows.pivot_table(
            index="build_month", columns="months_in_service", values="return_rate", aggfunc="sum"
        ).sort_index()
        values = np.ma.masked_invalid(matrix.to_numpy(dtype=float) * _PER_THOUSAND)
        image = axis.imshow(values, aspect="auto", interpolation="nearest", cmap="magma_r", origin="upper")
        axis.set_title(f"{chart_text(product)}: returns per 1,000 at risk")
        axis.set_xlabel("months in service")
        axis.set_ylabel("build month")
        columns = matrix.columns.to_numpy()
        x_step = max(1, len(columns) // 8)
        axis.set_xticks(np.arange(0, len(columns), x_step), [str(c) for c in columns[::x_step]])
        labels = [f"{m:%Y-%m}" for m in matrix.index]
        y_step = max(1, len(labels) // 12)
        axis.set_yticks(np.arange(0, len(labels), y_step), labels[::y_step])
        figure.colorbar(image, ax=axis, shrink=0.8)
    figure.suptitle("Return rate by build month and months in service")
    figure.tight_layout()
    return figure


def weibull_probability_plot(
    life_table: pd.DataFrame,
    fits: Mapping[str, FitResult | None],
    alternatives: Mapping[str, LifeCurve | None] | None = None,
) -> Figure:
    """Life-table fraction failed (with Greenwood bounds) and the fitted Weibull line with its Wald band.

    Axes: log(months in service) against log(-log(1 - F)); a Weibull is a straight line of slope shape.
    `alternatives` (e.g. the lognormal fits) are drawn dashed for comparison.
    """
    alternatives = alternatives or {}
    products = sorted(life_table["product"].unique())
    figure, axes = _grid(len(products))
    for axis, product in zip(axes.flat, products):
        rows = life_table[(life_table["product"] == product) & (life_table["fraction_failed"] > 0)]
        months = rows["months_in_service"].to_numpy(dtype=float)
        axis.errorbar(
            months,
            _weibull_scale(rows["fraction_failed"]),
            yerr=np.vstack(
                [
                    _weibull_scale(rows["fraction_failed"]) - _weibull_scale(rows["fraction_failed_lower"]),
                    _weibull_scale(rows["fraction_failed_upper"]) - _weibull_scale(rows["fraction_failed"]),
                ]
            ),
            fmt="o",
            markersize=3.5,
            color="#1b4965",
            ecolor="#9fb7c9",
            label="life table (Greenwood bounds)",
        )
        fit = fits.get(product)
        if fit is not None and len(months):
            grid = np.geomspace(max(months.min() * 0.5, 0.25), months.max() * 1.5, 120)
            lower, upper = fit.bounds("cdf", t=grid)
            axis.plot(grid, _weibull_scale(fit.cdf(grid)), color="#c0392b", label=(
                f"Weibull shape {fit.shape:.3g}, scale {fit.scale:.4g} mo"
            ))
            axis.fill_between(grid, _weibull_scale(lower), _weibull_scale(upper), color="#c0392b", alpha=0.15,
                              label=f"{fit.confidence_level:.0%} Wald band")
            alternative = alternatives.get(product)
            if alternative is not None:
                axis.plot(grid, _weibull_scale(alternative.cdf(grid)), color="#5c677d", linestyle="--",
                          linewidth=1.0, label="lognormal alternative")
        axis.set_xscale("log")
        axis.set_title(chart_text(product))
        axis.set_xlabel("months in service (log scale)")
        axis.set_ylabel("log(-log(1 - fraction failed))")
        _fraction_ticks(axis)
        axis.grid(True, which="both", alpha=0.3)
        axis.legend(fontsize=7, loc="upper left")
    figure.suptitle("Weibull probability plot")
    figure.tight_layout()
    return figure


def _weibull_scale(fraction: pd.Series | np.ndarray) -> np.ndarray:
    values = np.clip(np.asarray(fraction, dtype=float), 1e-12, 1 - 1e-12)
    return np.log(-np.log1p(-values))


def _fraction_ticks(axis: Axes) -> None:
    secondary = axis.secondary_yaxis("right", functions=(lambda y: y, lambda y: y))
    fractions = np.array([1e-4, 1e-3, 0.01, 0.05, 0.1, 0.3, 0.632, 0.9, 0.99])
    secondary.set_yticks(_weibull_scale(fractions), [f"{f:.2%}".rstrip("0").rstrip(".") for f in fractions])
    secondary.set_ylabel("fraction failed")


def expected_returns_by_month(forecast: pd.DataFrame) -> Figure:
    """Expected future returns per calendar month, stacked by product."""
    figure = Figure(figsize=(10, 4.5))
    axis = figure.subplots()
    if forecast.empty:
        axis.text(0.5, 0.5, "no forecast: no product has a published life model", ha="center", va="center")
        axis.set_axis_off()
        return figure
    table = forecast.groupby(["month", "product"])["expected_returns"].sum().unstack("product", fill_value=0.0)
    table = table.sort_index()
    months = pd.to_datetime(pd.Series(table.index))
    bottom = np.zeros(len(table))
    for product in table.columns:
        values = table[product].to_numpy(dtype=float)
        axis.bar(months, values, bottom=bottom, width=25, label=chart_text(product))
        bottom += values
    axis.set_title("Expected future returns by calendar month")
    axis.set_xlabel("calendar month")
    axis.set_ylabel("expected returns")
    axis.legend(title="product")
    axis.grid(True, axis="y", alpha=0.3)
    figure.tight_layout()
    return figure


def failure_mode_pareto(returns_by_failure_mode: pd.DataFrame) -> Figure:
    """Counted returns by failure code, largest first, with the cumulative share, per product."""
    by_code = returns_by_failure_mode.groupby(["product", "failure_mode"], as_index=False)["returns"].sum()
    products = sorted(by_code["product"].unique())
    figure, axes = _grid(len(products), width=5.2, height=4.4)
    for axis, product in zip(axes.flat, products):
        rows = by_code[by_code["product"] == product].sort_values(["returns", "failure_mode"], ascending=[False, True])
        counts = rows["returns"].to_numpy(dtype=float)
        positions = np.arange(len(rows))
        axis.bar(positions, counts, color="#1b4965")
        axis.set_xticks(positions, [chart_text(m, 30) for m in rows["failure_mode"]], rotation=35, ha="right", fontsize=8)
        axis.set_ylabel("returns to date")
        axis.set_title(chart_text(product))
        share = axis.twinx()
        share.plot(positions, 100.0 * np.cumsum(counts) / counts.sum(), color="#c0392b", marker="o", markersize=3.5)
        share.set_ylim(0, 105)
        share.set_ylabel("cumulative share of returns (%)")
    figure.suptitle("Returns by failure code (Pareto)")
    figure.tight_layout()
    return figure
