"""Run folders, the history database and the reserve's roll-forward (issue 10).

The roll-forward's lines follow the usual disclosure of product-warranty liabilities (opening, accruals for
warranties issued, settlements, changes in estimate for pre-existing warranties, closing): common practice,
no single source. The two-month demo is the session's demo root (tests/conftest.py): a run as of 2026-10-31,
then the full demo run as of 2026-11-30.
"""

from __future__ import annotations

import datetime as dt
import json
import re
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

from warranty_forecast import exit_codes
from warranty_forecast.cli import main
from warranty_forecast.errors import OutputError
from warranty_forecast.lifecore.data import month_interval_ends
from warranty_forecast.outputs import run_folders
from warranty_forecast.outputs.history import HISTORY_TABLES, record_published_runs
from warranty_forecast.outputs.run_folders import (
    opening_run, point_latest, previous_run, publish_run, published_runs, run_in_effect,
)
from warranty_forecast.stages.roll_forward import (
    AMOUNT_COLUMNS, OpeningReserve, accruals_for_units_shipped, cents, claims_settled_since,
    reconciles_to_the_cent, roll_forward,
)

from conftest import DEMO_CLAIMS, DEMO_MONTH_BEFORE, DEMO_SHIPMENTS, ROOT

OCT, NOV = dt.date(2026, 10, 31), dt.date(2026, 11, 30)


# --- the roll-forward's arithmetic ---------------------------------------------------------------------


def _opening(rows: list[tuple[str, float]], currency: str = "EUR") -> OpeningReserve:
    frame = pd.DataFrame(rows, columns=["product", "reserve"]).assign(currency=currency)
    return OpeningReserve("2026-10-31-aaaaaaaaaaaa", OCT, frame)


def test_each_row_and_the_total_add_up_to_the_cent():
    opening = _opening([("A", 1000.005), ("B", 250.0), ("GONE", 10.0)])
    closing = pd.DataFrame({"product": ["A", "B", "NEW"], "reserve": [990.124, 260.996, 5.0], "currency": "EUR"})
    accruals = pd.DataFrame({"product": ["A", "NEW"], "units_shipped_since_opening": [10.0, 3.0],
                             "accruals_for_units_shipped": [12.345, 5.5]})
    settled = pd.DataFrame({"product": ["A", "GONE"], "settled_claims": [2, 1], "settled_handled_claims": [1, 0],
                            "claims_settled": [30.0, 10.0]})
    table = roll_forward(opening, closing, accruals, settled)
    assert reconciles_to_the_cent(table)
    rows = table.set_index("product")
    # hand-computed in cents (common practice, no source): half away from zero, 1000.005 -> 1000.01, 12.345 ->
    # 12.35; 1000.01 + 12.35 - 30.00 + x = 990.12
    assert rows.loc["A", "opening_reserve"] == 1000.01 and rows.loc["A", "accruals_for_units_shipped"] == 12.35
    assert rows.loc["A", "changes_in_estimate"] == pytest.approx(7.76, abs=1e-9)
    assert rows.loc["GONE", "closing_reserve"] == 0.0 and rows.loc["GONE", "changes_in_estimate"] == 0.0
    assert rows.loc["NEW", "opening_reserve"] == 0.0 and rows.loc["NEW", "changes_in_estimate"] == pytest.approx(-0.5)
    total = rows.loc["(all products)"]
    assert bool(total["is_total"]) and total["closing_reserve"] == pytest.approx(990.12 + 261.0 + 5.0)
    assert int(total["settled_claims"]) == 3 and int(total["settled_handled_claims"]) == 1
    assert set(table["opening_run_id"]) == {"2026-10-31-aaaaaaaaaaaa"} and set(table["currency"]) == {"EUR"}


def test_a_broken_row_is_caught_by_the_check():
    opening = _opening([("A", 100.0)])
    closing = pd.DataFrame({"product": ["A"], "reserve": [90.0], "currency": "EUR"})
    empty_accruals = pd.DataFrame(columns=["product", "units_shipped_since_opening", "accruals_for_units_shipped"])
    empty_settled = pd.DataFrame(columns=["product", "settled_claims", "settled_handled_claims", "claims_settled"])
    table = roll_forward(opening, closing, empty_accruals, empty_settled)
    assert reconciles_to_the_cent(table)
    table.loc[0, "changes_in_estimate"] += 0.01
    assert not reconciles_to_the_cent(table)


def test_no_roll_forward_across_currencies():
    closing = pd.DataFrame({"product": ["A"], "reserve": [90.0], "currency": "USD"})
    none = pd.DataFrame(columns=["product", "units_shipped_since_opening", "accruals_for_units_shipped"])
    with pytest.raises(ValueError, match="EUR and this run in USD"):
        roll_forward(_opening([("A", 100.0)]), closing, none, none)


class _Exponential:
    """A life with R(t) = exp(-t / theta), t in months."""

    def __init__(self, theta: float) -> None:
        self.theta = theta

    def log_survival(self, t):
        return -np.asarray(t, dtype=float) / self.theta


def test_accrual_is_the_whole_warranty_cost_at_issue_of_the_units_shipped_since():
    shipped = pd.DataFrame({
        "product": ["A", "A", "A", "B"],
        "build_month": pd.to_datetime(["2026-10-01", "2026-11-01", "2026-11-01", "2026-11-01"]),
        "warranty_months": [24, 24, 12, 24],
        "ship_date": pd.to_datetime(["2026-10-31", "2026-11-02", "2026-11-20", "2026-11-05"]),
        "units": [1000, 100, 50, 10],
    })
    reserve = pd.DataFrame({
        "product": ["A", "B"], "expected_future_returns": [80.0, 0.0], "expected_repeat_claims": [20.0, 0.0],
        "expected_future_claims": [100.0, 0.0], "reserve_future_claims": [9000.0, 0.0],
        "reserve_handling": [1000.0, 0.0], "cost_per_claim": [90.0, 70.0],
    })
    own = _Exponential(10.0)
    table = accruals_for_units_shipped(
        shipped, OCT, {"A": _Exponential(100.0), "B": _Exponential(50.0)}, {("A", pd.Timestamp("2026-11-01")): own},
        reserve,
    ).set_index("product")
    end24, end12 = month_interval_ends(np.array([24]))[1][0], month_interval_ends(np.array([12]))[1][0]
    # the units shipped on 2026-10-31 were reserved at the opening; the build month 2026-11 has its own life
    first_failures = 100 * (1 - np.exp(-end24 / 10.0)) + 50 * (1 - np.exp(-end12 / 10.0))
    assert table.loc["A", "units_shipped_since_opening"] == 150
    assert table.loc["A", "accruals_for_units_shipped"] == pytest.approx(first_failures * 1.25 * 100.0, rel=1e-12)
    # no claim expected for B: priced at its cost per claim, no repeat claims
    assert table.loc["B", "accruals_for_units_shipped"] == pytest.approx(10 * (1 - np.exp(-end24 / 50.0)) * 70.0)


def test_claims_settled_since_the_opening_with_their_handling():
    claims = pd.DataFrame({
        "product": ["A", "A", "A", "B"],
        "claim_date": pd.to_datetime(["2026-10-31", "2026-11-01", "2026-11-30", "2026-11-15"]).date,
        "settled_claims": [5, 2, 1, 0], "settled_cost": [500.0, 210.0, 99.5, 0.0], "handled_claims": [1, 1, 0, 3],
    })
    table = claims_settled_since(claims, OCT, handling_cost_per_claim=12.5).set_index("product")
    assert table.loc["A", "settled_claims"] == 3 and table.loc["A", "settled_handled_claims"] == 1
    assert table.loc["A", "claims_settled"] == pytest.approx(210.0 + 99.5 + 12.5)
    assert table.loc["B", "claims_settled"] == pytest.approx(37.5)


# --- the two-month demo ----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo_root(demo_root_copy) -> Path:
    return demo_root_copy


def _runs_by_date(root: Path) -> dict[dt.date, run_folders.PublishedRun]:
    return {run.as_of_date: run for run in published_runs(root)}


def test_the_demo_root_holds_two_runs_a_month_apart_and_latest_points_at_the_newest(demo_root):
    runs = _runs_by_date(demo_root)
    assert sorted(runs) == [OCT, NOV]
    assert (demo_root / "latest").is_symlink()
    assert Path(run_folders.os.readlink(demo_root / "latest")) == Path("runs") / runs[NOV].run_id
    assert sorted(p.name for p in demo_root.iterdir()) == ["history.duckdb", "latest", "runs"]
    assert opening_run(published_runs(demo_root), NOV).run_id == runs[OCT].run_id
    assert previous_run(published_runs(demo_root), OCT) is None


def test_two_demo_runs_a_month_apart_roll_forward_to_the_cent(demo_root):
    runs = _runs_by_date(demo_root)
    table = pd.read_parquet(demo_root / "latest" / "roll_forward.parquet")
    assert reconciles_to_the_cent(table)
    assert set(table["opening_run_id"]) == {runs[OCT].run_id} and set(table["opening_as_of_date"]) == {OCT}
    products = table[~table["is_total"]].set_index("product")
    opening = pd.read_parquet(runs[OCT].folder / "reserve_by_product.parquet").set_index("product")["reserve"]
    closing = pd.read_parquet(runs[NOV].folder / "reserve_by_product.parquet").set_index("product")["reserve"]
    # the opening is what the October run published, the closing what this run publishes, each to the cent
    assert [cents(v) for v in products["opening_reserve"]] == [cents(opening[p]) for p in products.index]
    assert [cents(v) for v in products["closing_reserve"]] == [cents(closing[p]) for p in products.index]
    # every amount is cents exactly (no fraction of a cent survives)
    for column in AMOUNT_COLUMNS:
        assert np.allclose(table[column] * 100, np.round(table[column] * 100), atol=1e-6)
    # units shipped since the opening: the shipments extract's rows shipped in November (none is quarantined
    # among them in the demo's planted faults? counted independently, less the quarantined rows)
    shipments = pd.read_parquet(DEMO_SHIPMENTS)
    quarantined = pd.read_parquet(runs[NOV].folder / "quarantine.parquet")
    bad_rows = set(quarantined.loc[quarantined["extract"] == "shipments", "row_number"])
    shipments = shipments.assign(source_row_number=np.arange(1, len(shipments) + 1))
    ship_date = pd.to_datetime(shipments["ship_date"], errors="coerce")
    november = shipments[(ship_date > pd.Timestamp(OCT)) & (ship_date <= pd.Timestamp(NOV))
                         & ~shipments["source_row_number"].isin(bad_rows)]
    expected_units = november.groupby("product")["units"].sum()
    assert products["units_shipped_since_opening"].to_dict() == pytest.approx(expected_units.to_dict())
    # the accruals and the settled claims are real amounts, and the change in estimate is what is left
    assert (products["accruals_for_units_shipped"] > 0).all() and (products["claims_settled"] > 0).all()


def test_demo_claims_settled_are_the_settled_claims_filed_in_november(demo_root):
    runs = _runs_by_date(demo_root)
    table = pd.read_parquet(demo_root / "latest" / "roll_forward.parquet")
    claims = pd.read_csv(DEMO_CLAIMS, dtype=str)
    claims["source_row_number"] = np.arange(1, len(claims) + 1)
    quarantined = pd.read_parquet(runs[NOV].folder / "quarantine.parquet")
    bad_rows = set(quarantined.loc[quarantined["extract"] == "claims", "row_number"])
    claim_date = pd.to_datetime(claims["claim_date"], errors="coerce")
    status = claims["status"].fillna("").str.strip().str.lower().replace("", "approved")
    filed = claims[(claim_date > pd.Timestamp(OCT)) & (claim_date <= pd.Timestamp(NOV))
                   & ~claims["source_row_number"].isin(bad_rows)]
    approved = filed[status.loc[filed.index] == "approved"]
    handled = filed[status.loc[filed.index].isin(["rejected", "no_fault_found"])]
    # approved claims filed in November: settled, unless past their warranty (then not a warranty cost: at
    # most 1% of them in the demo); every rejected or no-fault-found claim filed then was handled
    total = table[table["is_total"]].iloc[0]
    assert 0.99 * len(approved) <= int(total["settled_claims"]) <= len(approved)
    assert 0.99 * pd.to_numeric(approved["cost"]).sum() <= float(total["claims_settled"])
    assert float(total["claims_settled"]) <= pd.to_numeric(approved["cost"]).sum() + 0.005  # no handling cost set
    assert int(total["settled_handled_claims"]) == len(handled) > 0


def test_the_history_database_holds_both_runs_and_the_readme_queries_run(demo_root):
    runs = _runs_by_date(demo_root)
    with duckdb.connect(str(demo_root / "history.duckdb"), read_only=True) as con:
        recorded = con.execute("select run_id, as_of_date, rerun_of from runs order by as_of_date").fetchall()
        assert recorded == [(runs[OCT].run_id, OCT, None), (runs[NOV].run_id, NOV, None)]
        for table in HISTORY_TABLES:
            ids = {row[0] for row in con.execute(f"select distinct run_id from {table}").fetchall()}
            expected = {runs[NOV].run_id} if table == "roll_forward" else {runs[OCT].run_id, runs[NOV].run_id}
            assert ids == expected, table
        stored = con.execute(
            "select sum(reserve) from reserve_by_product where run_id = ?", [runs[NOV].run_id]
        ).fetchone()[0]
        published = pd.read_parquet(runs[NOV].folder / "reserve_by_product.parquet")["reserve"].sum()
        assert stored == pytest.approx(published, rel=1e-12)
        queries = readme_history_queries()
        assert len(queries) == 3
        results = [con.execute(query).fetchdf() for query in queries]
    assert all(len(result) for result in results[:2])


def readme_history_queries() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## History database"):]
    section = section[:section.index("\n## ", 4)]
    return re.findall(r"```sql\n(.*?)```", section, flags=re.S)


def test_the_report_shows_the_change_since_the_last_run_and_the_roll_forward(demo_root):
    report = (demo_root / "latest" / "report.md").read_text(encoding="utf-8")
    page = (demo_root / "latest" / "report.html").read_text(encoding="utf-8")
    runs = _runs_by_date(demo_root)
    assert f"since the last run ({runs[OCT].run_id}, as of 2026-10-31" in report
    assert "## How the reserve moved" in report and "= closing reserve" in report
    assert "How the reserve moved" in page and "+ accruals for units shipped since" in page
    first = (runs[OCT].folder / "report.md").read_text(encoding="utf-8")
    assert "no earlier run under this output root" in first


def test_rerunning_a_closed_as_of_date_records_a_new_run_with_its_reason(demo_root, tmp_path):
    runs = _runs_by_date(demo_root)
    before = {p.name: p.read_bytes() for p in runs[OCT].folder.iterdir()}
    config = tmp_path / "settings.toml"
    config.write_text("[reserve]\nannual_inflation_rate = 0.03\n")
    code = main(["run", "--shipments", str(DEMO_SHIPMENTS), "--claims", str(DEMO_CLAIMS), "--out", str(demo_root),
                 "--as-of", DEMO_MONTH_BEFORE, "--no-charts", "--config", str(config),
                 "--reason", "inflation assumption agreed after the close"])
    assert code == exit_codes.SUCCESS
    # the closed date's run is never overwritten; the new one sits beside it and is now the one in effect
    assert {p.name: p.read_bytes() for p in runs[OCT].folder.iterdir()} == before
    after = published_runs(demo_root)
    rerun = run_in_effect(after, OCT)
    assert rerun.run_id != runs[OCT].run_id and rerun.rerun_of == runs[OCT].run_id
    assert rerun.reason == "inflation assumption agreed after the close (settings changed in [reserve])"
    with duckdb.connect(str(demo_root / "history.duckdb"), read_only=True) as con:
        row = con.execute("select rerun_of, reason from runs where run_id = ?", [rerun.run_id]).fetchone()
        in_effect = con.execute("select run_id from runs_in_effect where as_of_date = ?", [OCT]).fetchone()[0]
    assert row == (runs[OCT].run_id, rerun.reason) and in_effect == rerun.run_id
    # latest still points at the newest as-of date
    assert Path(run_folders.os.readlink(demo_root / "latest")).name == runs[NOV].run_id


# --- publishing mechanics (small stand-in tables) ---------------------------------------------------------


def _document(run_id: str, as_of: dt.date, finished: str) -> dict:
    return {"run_id": run_id, "as_of_date": as_of.isoformat(), "finished_utc": finished}


def _table(run_id: str, as_of: dt.date, reserve: float) -> pd.DataFrame:
    return pd.DataFrame({"run_id": [run_id], "as_of_date": [as_of], "product": ["A"], "currency": ["EUR"],
                         "reserve": [reserve]})


def test_an_identical_rerun_changes_nothing_and_a_different_one_is_refused(tmp_path):
    run_id = "2026-11-30-0123456789ab"
    first = publish_run(tmp_path / "out", run_id, {"reserve_by_product": _table(run_id, NOV, 5.0)}, {}, {"r.md": "x"},
                        _document(run_id, NOV, "2026-12-01T02:00:00+00:00"))
    assert first.changed and first.folder == (tmp_path / "out" / "runs" / run_id).resolve()
    again = publish_run(tmp_path / "out", run_id, {"reserve_by_product": _table(run_id, NOV, 5.0)}, {}, {"r.md": "y"},
                        _document(run_id, NOV, "2026-12-02T02:00:00+00:00"))
    assert not again.changed and (first.folder / "r.md").read_text() == "x"
    with pytest.raises(OutputError, match="tables differ from it \\(reserve_by_product.parquet\\)"):
        publish_run(tmp_path / "out", run_id, {"reserve_by_product": _table(run_id, NOV, 6.0)}, {}, {},
                    _document(run_id, NOV, "2026-12-03T02:00:00+00:00"))
    assert pd.read_parquet(first.folder / "reserve_by_product.parquet")["reserve"].tolist() == [5.0]
    assert sorted(p.name for p in (tmp_path / "out" / "runs").iterdir()) == [run_id]  # no leftover


def test_history_catches_up_with_runs_it_missed_and_never_rewrites_a_run(tmp_path):
    root = tmp_path / "out"
    ids = ["2026-10-31-aaaaaaaaaaaa", "2026-11-30-bbbbbbbbbbbb"]
    for run_id, as_of, reserve in ((ids[0], OCT, 5.0), (ids[1], NOV, 7.0)):
        publish_run(root, run_id, {"reserve_by_product": _table(run_id, as_of, reserve)}, {}, {},
                    _document(run_id, as_of, f"{as_of}T23:00:00+00:00"))
    # another process holds the database (an analyst's session): the runs are published all the same and
    # recorded by a later run
    holder = subprocess.Popen(
        [sys.executable, "-c", "import duckdb, sys, time; c = duckdb.connect(sys.argv[1]); print('open', flush=True);"
         " time.sleep(60)", str(root / "history.duckdb")],
        stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "open"
        blocked = record_published_runs(root)
    finally:
        holder.kill()
        holder.wait()
    assert blocked.error is not None and blocked.recorded == ()
    update = record_published_runs(root)
    assert update.error is None
    assert point_latest(root.resolve()).run_id == ids[1]
    assert record_published_runs(root).recorded == ()  # nothing twice
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        assert con.execute("select run_id, reserve_total, currency from runs order by as_of_date").fetchall() == [
            (ids[0], 5.0, "EUR"), (ids[1], 7.0, "EUR")]


def test_a_table_that_gains_a_column_gains_it_in_the_history(tmp_path):
    root = tmp_path / "out"
    old, new = "2026-10-31-aaaaaaaaaaaa", "2026-11-30-bbbbbbbbbbbb"
    publish_run(root, old, {"reserve_by_product": _table(old, OCT, 5.0)}, {}, {}, _document(old, OCT, "2026-11-01T00:00:00+00:00"))
    assert record_published_runs(root).error is None
    wider = _table(new, NOV, 7.0).assign(reserve_handling=[1.5])
    publish_run(root, new, {"reserve_by_product": wider}, {}, {}, _document(new, NOV, "2026-12-01T00:00:00+00:00"))
    assert record_published_runs(root).recorded == (new,)
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        rows = con.execute("select run_id, reserve_handling from reserve_by_product order by run_id").fetchall()
    assert rows == [(old, None), (new, 1.5)]


def test_what_changed_names_the_extracts_the_settings_and_the_program():
    earlier = run_folders.PublishedRun(
        run_id="2026-10-31-aaaaaaaaaaaa", as_of_date=OCT, finished_utc="", folder=Path("x"),
        inputs={"shipments": "s1", "claims": "c1"}, settings={"reserve": {"currency": "XXX"}, "alerts": {"min_ratio": 1.5}},
        version="1.0", code="abc",
    )
    same_settings = {"reserve": {"currency": "XXX"}, "alerts": {"min_ratio": 1.5}}
    assert run_folders.what_changed(earlier, {"shipments": "s1", "claims": "c2"}, same_settings, "1.0", "abc") == (
        "the claims extract changed")
    assert run_folders.what_changed(
        earlier, {"shipments": "s1", "claims": "c1"}, {"reserve": {"currency": "EUR"}, "alerts": {"min_ratio": 1.5}},
        "1.0", "abc") == "settings changed in [reserve]"
    assert run_folders.what_changed(earlier, earlier.inputs, same_settings, "1.0", "def") == (
        "the program changed (code abc -> def)")
    assert run_folders.what_changed(earlier, earlier.inputs, same_settings, "1.1", "def") == "version 1.0 -> 1.1"


def test_the_run_id_carries_a_fingerprint_of_the_program(demo_root):
    from warranty_forecast.outputs.manifest import CODE_KEY, code_fingerprint

    document = json.loads((demo_root / "latest" / "manifest.json").read_text(encoding="utf-8"))
    assert document["versions"][CODE_KEY] == code_fingerprint() and re.fullmatch(r"[0-9a-f]{12}", code_fingerprint())


def test_the_readme_shows_the_demo_roll_forward_as_the_demo_computes_it(demo_root):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Roll-forward of the reserve"):text.index("## History database")]
    rows = [line.strip("|").split("|") for line in section.splitlines() if line.startswith("| QCP-140")
            or line.startswith("| QDS-210") or line.startswith("| QHT-360") or line.startswith("| (all products)")]
    shown = {cells[0].strip(): [float(c.replace(",", "")) for c in cells[2:7]] for cells in rows}
    table = pd.read_parquet(demo_root / "latest" / "roll_forward.parquet").set_index("product")
    assert set(shown) == set(table.index)
    for product, amounts in shown.items():
        assert [cents(v) for v in amounts] == [cents(table.loc[product, c]) for c in AMOUNT_COLUMNS], product
