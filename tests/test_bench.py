"""Tests of the benchmark (warranty_forecast.tools.bench) at a tiny size: the report's shape and the agreement of
the grouped fit with a per-unit fit. No timing assertions (speed lives in the benchmark itself).

Every external check names its source beside it.
"""

from __future__ import annotations

import numpy as np
import pytest

from warranty_forecast.tools import bench, bench_fits

TINY = ["--sizes", "2000", "--seed", "7", "--repeats", "1"]


def _table(stdout: str) -> tuple[list[str], list[list[str]]]:
    """Header and data rows of the first table in the report (columns separated by '|')."""
    lines = stdout.splitlines()
    start = next(i for i, line in enumerate(lines) if line.strip().startswith("units |"))
    header = [c.strip() for c in lines[start].split("|")]
    rows = []
    for line in lines[start + 2 :]:
        if not line.strip():
            break
        rows.append([c.strip() for c in line.split("|")])
    return header, rows


def test_report_has_the_columns_and_grouped_agrees_with_scipy_per_unit(capsys: pytest.CaptureFixture[str]) -> None:
    assert bench.main(TINY) == 0
    out = capsys.readouterr().out
    header, rows = _table(out)
    assert header == list(bench.COLUMNS)
    assert len(rows) == 1
    row = dict(zip(header, rows[0]))
    assert row["units"] == "2,000"
    assert int(row["returns"].replace(",", "")) > 0
    assert int(row["grouped cells"].replace(",", "")) > 0
    float(row["aggregation ms"])
    float(row["grouped fit ms"])
    float(row["scipy per-unit s"])
    # Source: scipy.stats reference fit (weibull_min.fit on the per-unit CensoredData, same likelihood).
    assert float(row["max rel diff scipy"]) < 1e-4
    if row["lifelines per-unit s"] == bench.LIFELINES_MISSING:
        assert row["max rel diff lifelines"] == "n/a"
    else:
        # Source: lifelines reference fit (WeibullFitter.fit_interval_censoring on the per-unit rows).
        assert float(row["max rel diff lifelines"]) < 1e-4
    assert "Targets" in out
    assert "grouped fit < 20 ms at every N:" in out


def test_lifelines_absent_is_reported_not_an_error(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setattr(bench, "import_lifelines", lambda: None)
    assert bench.main([*TINY, "--skip-per-unit-above", "100000"]) == 0
    header, rows = _table(capsys.readouterr().out)
    assert dict(zip(header, rows[0]))["lifelines per-unit s"] == "lifelines: not installed (run `make bench`)"


def test_skip_per_unit_above(capsys: pytest.CaptureFixture[str]) -> None:
    assert bench.main([*TINY, "--skip-per-unit-above", "1000"]) == 0
    out = capsys.readouterr().out
    header, rows = _table(out)
    row = dict(zip(header, rows[0]))
    assert row["scipy per-unit s"].startswith("skipped")
    assert row["scipy/grouped"] == "n/a"
    assert "not measured" in out


def test_aggregation_keeps_every_unit_and_matches_the_per_unit_rows() -> None:
    # Source: common practice, no source (grouping must neither lose nor move units).
    sim = bench_fits.Simulation()
    units = bench_fits.simulate_units(5000, np.random.default_rng(3), sim)
    cells = bench_fits.aggregate(units, sim)
    rows = bench_fits.per_unit_rows(units, sim)
    assert cells.return_counts.sum() + cells.suspension_counts.sum() == 5000
    assert cells.n_returns == len(rows.upper)
    months, counts = np.unique(rows.upper, return_counts=True)
    np.testing.assert_array_equal(cells.return_months, months)
    np.testing.assert_array_equal(cells.return_counts, counts)
    ages, counts = np.unique(rows.suspension_ages, return_counts=True)
    np.testing.assert_array_equal(cells.suspension_ages, ages)  # exactly equal floats, not approx
    np.testing.assert_array_equal(cells.suspension_counts, counts)
    assert cells.suspension_ages.max() == sim.warranty_months
    assert np.all(rows.lower == rows.upper - 1.0) and rows.lower.min() >= 0.0


def test_bad_sizes_exit_non_zero() -> None:
    assert bench.main(["--sizes", "0"]) == 2
