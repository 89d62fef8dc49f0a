"""Text from the data is escaped at every sink: log lines, the Markdown report, chart labels.

Common practice, no source: one log record is one line; Markdown table cells cannot hold a raw pipe
or line break; HTML in a report is shown, not run; matplotlib reads `$...$` as math markup.
"""

from __future__ import annotations

import datetime as dt
import io

import pandas as pd
import pytest

from warranty_forecast.outputs import charts
from warranty_forecast.outputs.safe_text import chart_text, markdown_text, one_line

HOSTILE_NAMES = [
    "QX|1",
    "line\nbreak 2026-01-01 INFO forged: done",
    "<script>alert(1)</script>",
    "$\\frac{1}{0}$",
    "$x",
    "_hidden",
    "tab\tand\rcarriage",
    "sep\u2028arator\x1b[31m",
    "Ünïcødé ✓",
    "x" * 5000,
]


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_one_line_never_breaks_a_line(name):
    text = one_line(name)
    assert text.splitlines() == [text] or text == ""
    assert "\x1b" not in text and "\u2028" not in text


def test_one_line_shows_what_it_escaped():
    assert one_line("a\nb\tc\x1bd\u2028e") == "a\\nb\\tc\\x1bd\\u2028e"
    assert one_line("plain QCP-140") == "plain QCP-140"


def test_markdown_text_keeps_table_cells_whole_and_html_inert():
    assert markdown_text("QX|1") == "QX\\|1"
    assert markdown_text("<script>alert(1)</script>") == "&lt;script&gt;alert(1)&lt;/script&gt;"
    assert markdown_text("a\nb") == "a\\\\nb"  # the escape's own backslash is escaped for Markdown
    assert markdown_text("[link](javascript:x)") == "\\[link\\](javascript:x)"
    assert markdown_text("QCP-140") == "QCP-140"


def test_chart_text_escapes_math_cuts_long_names_and_keeps_legend_entries():
    assert chart_text("$x$") == r"\$x\$"
    assert len(chart_text("x" * 5000)) == 60 and chart_text("x" * 5000).endswith("\u2026")
    assert not chart_text("_hidden").startswith("_")


def _fit_tables(products):
    """fit_returns and fit_suspensions: per product 1,000 units of one build month observed to age 4, 3 returns in month 2."""
    group = {"build_month": dt.date(2024, 1, 1), "sale_month": dt.date(2024, 1, 1), "warranty_months": 24}
    returns = pd.DataFrame({"product": products, **group, "months_in_service": 2, "returns": 3})
    units = pd.DataFrame({"product": products, **group, "warranty_start_date": dt.date(2024, 1, 1),
                          "observed_age_months": 4.0, "units": 1000, "suspensions": 997.0})
    return returns, units


def test_charts_draw_hostile_product_and_failure_code_names():
    # without escaping, "$\\frac{1}{0}$" and "$x" raise while the figure is drawn
    names = HOSTILE_NAMES
    heatmap = charts.return_rate_heatmap(*_fit_tables(names))
    modes = pd.DataFrame(
        {"product": names, "failure_mode": list(reversed(names)), "months_in_service": 1, "returns": 3}
    )
    pareto = charts.failure_mode_pareto(modes)
    forecast = pd.DataFrame(
        {"product": names, "build_month": dt.date(2024, 1, 1), "month": dt.date(2024, 6, 1), "expected_returns": 1.0}
    )
    by_month = charts.expected_returns_by_month(forecast, max_series=len(names))  # every name its own series
    for figure in (heatmap, pareto, by_month):
        figure.savefig(io.BytesIO(), format="png", dpi=30)  # drawing is where math markup fails
    titles = {a.get_title() for a in heatmap.axes if a.get_visible()}
    assert r"\$x: returns per 1,000 unit-months" in titles
    legend = [t.get_text() for t in by_month.axes[0].get_legend().get_texts()]
    # one legend entry per product, "_hidden" (a name matplotlib would leave out) included, after which the
    # chart's own entries explain its marks
    assert sorted(legend[:len(names)]) == sorted(chart_text(name) for name in names)
    assert not set(legend[len(names):]) & {chart_text(name) for name in names}


def test_one_line_escapes_bidirectional_overrides():
    # a right-to-left override can make a log line read as something else (common practice, no source)
    assert one_line("ok\u202egnp.exe\u2066") == "ok\\u202egnp.exe\\u2066"
