"""The whole command on the shipped demo data, and runs that must fail cleanly.

The demo data's true parameters come from its own seeded generator (data_demo/truth.json).
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import os
import subprocess
import sys
from importlib import metadata
from pathlib import Path

import duckdb
import pandas as pd
import pytest

import warranty_forecast.run as run_module
import warranty_forecast.outputs.publish as publish
import warranty_forecast.outputs.run_folders as run_folders
from warranty_forecast import __version__, exit_codes
from warranty_forecast.cli import EXIT_CODE_HELP, build_parser, configure_logging, main
from warranty_forecast.outputs.history import record_published_runs

from conftest import DEMO_MONTH_BEFORE
from small_scenario import write_small_extracts

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data_demo"
SHIPMENTS = DEMO / "shipments.parquet"
CLAIMS = DEMO / "claims.csv"

EXPECTED_FILES = {
    "age_in_service.parquet", "life_model.parquet", "life_table.parquet", "forecast.parquet",
    "reserve.parquet", "reserve_by_product.parquet", "quarantine.parquet", "fit_returns.parquet",
    "fit_suspensions.parquet", "return_rate_heatmap.png", "weibull_probability_plot.png",
    "expected_returns_by_month.png", "report.md", "manifest.json", "life_model_by_mode.parquet",
    "failure_mode_pareto.png", "build_month_alerts.parquet", "build_month_causes.parquet",
    "safety_term_claims.parquet", "flagged_build_month_lives.parquet", "observed_to_expected_by_build_month.png",
    "reporting_delay.parquet", "forecast_by_calendar_month.parquet", "forecast_intervals.parquet",
    "cumulative_returns_per_unit.png", "report.html", "reserve_by_product.csv", "reserve.csv", "roll_forward.parquet",
    "reserve_for_finance.png", "reserve_by_calendar_month.parquet",
}


def run(*args: str) -> int:
    return main(["run", "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS), *args])


@pytest.fixture(scope="module")
def demo_out(demo_run_copy) -> Path:
    """The full demo run's folder (conftest.py), this module's own copy, reached through <root>/latest."""
    return demo_run_copy


def hidden_beside(root: Path) -> list[str]:
    """Hidden entries beside an output root (its lock file stays there by design)."""
    return sorted(p.name for p in root.parent.iterdir() if p.name.startswith("."))


def snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in folder.iterdir()}


def test_demo_run_writes_every_output(demo_out):
    assert {p.name for p in demo_out.iterdir()} == EXPECTED_FILES
    # the output root (run_folders): runs/<run id>/ for the month-end run before (conftest.py) and this one,
    # `latest` a link to this one, the history database of both; the lock beside the root; no leftovers
    root = demo_out.parent
    run_id = json.loads((demo_out / "manifest.json").read_text())["run_id"]
    assert sorted(p.name for p in root.iterdir()) == ["history.duckdb", "latest", "runs"]
    assert demo_out.is_symlink() and os.readlink(demo_out) == f"runs/{run_id}"
    runs = sorted(p.name for p in (root / "runs").iterdir())
    assert len(runs) == 2 and runs[0].startswith("2026-10-31-") and runs[1] == run_id
    assert hidden_beside(root) == [".out.lock"]
    with duckdb.connect(str(root / "history.duckdb"), read_only=True) as con:
        assert con.execute("select run_id, as_of_date, folder from runs order by as_of_date").fetchall() == [
            (runs[0], dt.date(2026, 10, 31), f"runs/{runs[0]}"), (run_id, dt.date(2026, 11, 30), f"runs/{run_id}"),
        ]
        assert con.execute("select count(*) from reserve_by_product where run_id = ?", [run_id]).fetchone()[0] == len(
            pd.read_parquet(demo_out / "reserve_by_product.parquet")
        )
    assert json.loads((demo_out / "manifest.json").read_text())["producer"]["name"] == "warranty-forecast"
    # every table says which run wrote it (README, Outputs): the manifest's run_id and the as-of date first
    assert run_id.startswith("2026-11-30-") and len(run_id) == len("2026-11-30-") + 12
    for path in demo_out.glob("*.parquet"):
        frame = pd.read_parquet(path)
        assert list(frame.columns[:2]) == ["run_id", "as_of_date"], path.name
        assert (frame["run_id"] == run_id).all() and (frame["as_of_date"] == pd.Timestamp("2026-11-30").date()).all()
    spreadsheet = pd.read_csv(demo_out / "reserve_by_product.csv")
    parquet = pd.read_parquet(demo_out / "reserve_by_product.parquet")
    assert list(spreadsheet.columns) == list(parquet.columns)
    assert spreadsheet["reserve"].tolist() == pytest.approx(parquet["reserve"].tolist(), rel=1e-15)
    manifest = json.loads((demo_out / "manifest.json").read_text())
    assert manifest["as_of_date"] == "2026-11-30"
    assert set(manifest["outputs"]) == EXPECTED_FILES - {"manifest.json"}
    for extract in manifest["reconciliation"]:
        assert extract["rows_read"] == extract["rows_used"] + extract["rows_quarantined"] + extract["rows_after_as_of"]
    assert {i["extract"] for i in manifest["inputs"]} == {"shipments", "claims"}
    assert all(len(i["sha256"]) == 64 for i in manifest["inputs"])
    assert set(manifest["seconds_by_stage"]) >= {"shaping", "fit", "forecast", "reserve", "charts"}
    assert manifest["versions"]["duckdb"] != "not installed"
    report = (demo_out / "report.md").read_text()
    assert "## Cautions" in report and "qualified engineers" in report
    assert "## Build-month alerts" in report and "| QCP-140 | 2025-02 |" in report
    assert "| QCP-140 | 2025-02 | START_CAP_SHORT | 266 / 0.0 |" in report  # the top cause of the planted month
    causes = pd.read_parquet(demo_out / "build_month_causes.parquet")
    planted = causes[causes["build_month"].astype(str).str.startswith("2025-02")]
    assert planted.iloc[0]["failure_code"] == "START_CAP_SHORT"  # sorted by excess within the month
    alerts = pd.read_parquet(demo_out / "build_month_alerts.parquet")
    assert set(alerts.loc[alerts["is_flagged"], "product"]) == {"QCP-140"}
    assert "alerts" in manifest["seconds_by_stage"]
    # the demo's failure codes hold no safety term (its ten codes read by hand): the section says so
    assert pd.read_parquet(demo_out / "safety_term_claims.parquet").empty
    assert "## Claims mentioning safety-relevant terms" in report
    assert "Terms searched in failure_code: overheat, smok, fire, burn, shock" in report
    assert "No claim's failure code matched any of these terms." in report
    assert not any("safety-relevant" in text for text in manifest["warnings"])


def test_quarantine_is_exactly_the_planted_rows(demo_out):
    planted = pd.read_csv(DEMO / "planted_defects.csv")
    quarantine = pd.read_parquet(demo_out / "quarantine.parquet")
    # source_file is the extract's absolute path; the planted list names files
    names = [Path(source_file).name for source_file in quarantine["source_file"]]
    got = set(zip(names, quarantine["row_number"], quarantine["column"], quarantine["reason"]))
    want = set(zip(planted["source_file"], planted["row_number"], planted["column"], planted["reason"]))
    assert got == want


def test_true_parameters_lie_within_the_fitted_bounds(demo_out):
    # the generator's own truth (invented demo data); the defective line is excluded by design
    truth = json.loads((DEMO / "truth.json").read_text())
    defect_line = truth["defect"]["product"]
    life_model = pd.read_parquet(demo_out / "life_model.parquet").set_index("product")
    checked = 0
    for product, line in truth["product_lines"].items():
        row = life_model.loc[product]
        assert row["status"] == "fitted" and row["converged"]
        if product == defect_line:
            continue
        assert row["shape_lower"] <= line["shape"] <= row["shape_upper"], product
        assert row["scale_lower"] <= line["scale_months"] <= row["scale_upper"], product
        checked += 1
    assert checked == 2


def test_demo_tables_are_consistent(demo_out):
    reserve = pd.read_parquet(demo_out / "reserve.parquet")
    forecast = pd.read_parquet(demo_out / "forecast.parquet")
    totals = pd.read_parquet(demo_out / "reserve_by_product.parquet").set_index("product")
    claims = reserve["expected_future_returns"] + reserve["expected_unreported_returns"] + reserve["expected_repeat_claims"]
    assert (reserve["expected_future_claims"] == claims).all()
    # the reserve booked is its future claims priced (the demo's settings discount and inflate nothing, so every
    # factor is exactly 1: stages/reserve.py) plus the open claims and the handling
    assert (reserve["reserve_future_claims"] == reserve["expected_future_claims"] * reserve["cost_per_claim"]).all()
    parts = reserve["reserve_future_claims"] + reserve["reserve_open_claims"] + reserve["reserve_handling"]
    assert (reserve["reserve"] == parts).all()
    for column, total in (("expected_returns", "expected_future_returns"), ("expected_claims", "expected_future_claims"),
                          ("expected_unreported_returns", "expected_unreported_returns")):
        assert forecast[column].sum() == pytest.approx(reserve[total].sum(), rel=1e-9)
    # the demo's claims are filed a few days after the failure (data_demo/README.md): some are not yet in
    assert 0 < reserve["expected_unreported_returns"].sum() < 0.05 * reserve["expected_future_returns"].sum()
    assert totals["reserve"].sum() == pytest.approx(reserve["reserve"].sum(), rel=1e-12)
    assert forecast["calendar_month"].min() >= pd.Timestamp("2026-11-01").date()
    # the cost by calendar month over all products (issue 12): its months add up to the future claims'
    # reserve, each month's interval holds its expectation, and every published month is a calendar_month
    by_month = pd.read_parquet(demo_out / "reserve_by_calendar_month.parquet")
    assert by_month["expected_cost"].sum() == pytest.approx(reserve["reserve_future_claims"].sum(), rel=1e-9)
    busy = by_month[by_month["expected_claims"] > 50]
    assert len(busy) > 24
    assert ((busy["cost_lower"] < busy["expected_cost"]) & (busy["expected_cost"] < busy["cost_upper"])).all()
    assert by_month["is_current"].sum() == 12 and (by_month["currency"] == "XXX").all()
    per_product = pd.read_parquet(demo_out / "forecast_by_calendar_month.parquet")
    assert per_product.groupby("calendar_month")["expected_cost"].sum().to_numpy() == pytest.approx(
        by_month.set_index("calendar_month")["expected_cost"].to_numpy(), rel=1e-9)
    for table in (forecast, per_product, by_month):
        assert "calendar_month" in table and "month" not in table
    matrix = pd.read_parquet(demo_out / "age_in_service.parquet")
    assert matrix["returns"].sum() == reserve["returns_to_date"].sum()
    assert (matrix["returns"] <= matrix["units_at_risk"] + 1e-9).all()
    # the defective build month has the highest month-1 return rate of its line
    first_month = matrix[(matrix["product"] == "QCP-140") & (matrix["months_in_service"] == 1)]
    worst = first_month.sort_values("return_rate").iloc[-1]
    assert f"{worst['build_month']:%Y-%m}" == "2025-02"


def test_identical_rerun_changes_nothing(demo_out, capsys):
    # the same arguments as the session's first demo run (conftest.py: as of 2026-10-31, no charts; the
    # cheaper of its two runs): the same run id, its tables compared byte for byte with the published ones,
    # nothing rewritten, and `latest` stays at the newer as-of date
    root = demo_out.parent
    latest = demo_out.resolve()
    folder = next(p for p in (root / "runs").iterdir() if p.name.startswith(DEMO_MONTH_BEFORE))
    before = snapshot(folder)
    runs_before = sorted(p.name for p in (root / "runs").iterdir())
    assert run("--out", str(root), "--as-of", DEMO_MONTH_BEFORE, "--no-charts") == exit_codes.SUCCESS
    assert snapshot(folder) == before
    assert sorted(p.name for p in (root / "runs").iterdir()) == runs_before  # no new run folder
    assert os.readlink(demo_out) == f"runs/{latest.name}" and hidden_beside(root) == [".out.lock"]
    err = capsys.readouterr().err
    assert f"changed nothing; the outputs stay in {folder}" in err
    assert f"run {folder.name} is already published in {folder} with byte-identical tables" in err


def test_missing_required_column_fails_cleanly_and_keeps_previous_outputs(demo_out, tmp_path):
    claims = pd.read_csv(CLAIMS, dtype=str).drop(columns="failure_date")
    broken = tmp_path / "claims.csv"
    claims.to_csv(broken, index=False)
    root = demo_out.parent
    before = snapshot(demo_out)
    runs_before = sorted(p.name for p in (root / "runs").iterdir())
    code = main(["run", "--shipments", str(SHIPMENTS), "--claims", str(broken), "--out", str(root)])
    assert code == exit_codes.INPUT_CONTRACT
    assert snapshot(demo_out) == before and os.readlink(demo_out) == f"runs/{demo_out.resolve().name}"
    assert sorted(p.name for p in (root / "runs").iterdir()) == runs_before
    assert hidden_beside(root) == [".out.lock"]


def test_failure_while_writing_leaves_no_partial_output(tmp_path, monkeypatch):
    # the last step of publishing fails: every file is written in runs/.<run id>.incoming-*, and the rename
    # that would publish it raises
    rename = os.rename
    attempts = []

    def explode(source, target, *args, **kwargs):
        if ".incoming-" in Path(source).name:
            attempts.append(Path(source))
            raise RuntimeError("disk on fire")
        return rename(source, target, *args, **kwargs)

    monkeypatch.setattr(run_folders.os, "rename", explode)
    extracts = tmp_path / "extracts"
    extracts.mkdir()
    shipments, claims = write_small_extracts(extracts)  # the mechanics need no demo-sized run
    out = tmp_path / "out"
    code = main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out), "--no-charts"])
    assert code == exit_codes.UNEXPECTED_ERROR
    assert len(attempts) == 1 and attempts[0].parent == out / "runs"
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != "out") == [".out.lock", "extracts"]  # the lock stays
    # no run folder, no incoming leftover, no `latest`, no history
    assert [p.name for p in out.iterdir()] == ["runs"] and list((out / "runs").iterdir()) == []


@pytest.mark.parametrize(
    ("args", "code"),
    [
        (["run", "--shipments", "nope.parquet", "--claims", str(CLAIMS)], exit_codes.INPUT_UNREADABLE),
        (["run", "--shipments", str(SHIPMENTS), "--claims", str(CLAIMS), "--as-of", "2026-13-01"],
         exit_codes.BAD_ARGUMENTS),
        (["run", "--shipments", str(SHIPMENTS)], exit_codes.BAD_ARGUMENTS),
        (["frobnicate"], exit_codes.BAD_ARGUMENTS),
    ],
)
def test_exit_codes(args, code, tmp_path):
    try:
        got = main([*args, "--out", str(tmp_path / "o")] if args[0] == "run" and "--claims" in args else args)
    except SystemExit as exit_:  # argparse exits for bad arguments
        got = exit_.code
    assert got == code
    assert not (tmp_path / "o").exists()


def test_bad_config_exits_2(tmp_path):
    config = tmp_path / "settings.toml"
    config.write_text("[warranty]\ndefault_monthz = 12\n")
    code = run("--config", str(config), "--out", str(tmp_path / "o"))
    assert code == exit_codes.BAD_ARGUMENTS


def publish_like_a_run(config, reason=None):
    """Stands in for run_nightly: publishes a small run as its last steps do (run.py: publish_run, then
    record_published_runs, then point_latest)."""
    run_id = "2026-11-30-0123456789ab"
    table = pd.DataFrame({"run_id": [run_id], "as_of_date": [dt.date(2026, 11, 30)], "product": ["QCP-140"],
                          "reserve": [1.0]})
    document = {"run_id": run_id, "as_of_date": "2026-11-30", "finished_utc": "2026-12-01T02:00:00+00:00"}
    outcome = run_folders.publish_run(config.out_dir, run_id, {"reserve_by_product": table}, {}, {}, document)
    assert record_published_runs(outcome.root).error is None
    run_folders.point_latest(outcome.root)
    return run_module.RunResult(outcome.root, dt.date(2026, 11, 30), None, (), run_folder=outcome.folder)


def test_a_root_holding_other_files_is_used_and_they_are_left_alone(tmp_path, monkeypatch):
    # the output root is never replaced (run_folders): someone's files in it are no reason to refuse it
    monkeypatch.setattr(run_module, "run_nightly", publish_like_a_run)
    out = tmp_path / "precious"
    out.mkdir()
    (out / "thesis.txt").write_text("do not delete")
    assert run("--out", str(out)) == exit_codes.SUCCESS
    assert (out / "thesis.txt").read_text() == "do not delete"
    assert sorted(p.name for p in out.iterdir()) == ["history.duckdb", "latest", "runs", "thesis.txt"]
    assert os.readlink(out / "latest") == "runs/2026-11-30-0123456789ab"


def test_a_root_holding_the_single_run_layout_is_refused_and_its_folder_above_is_taken(tmp_path, monkeypatch, capsys):
    # the version before run folders wrote one run into --out (default reports/latest); passing that folder
    # now is refused with nothing changed, and the message says to pass the folder above it, which works
    calls = []

    def stand_in(config, reason=None):
        calls.append(config.out_dir)
        return publish_like_a_run(config, reason)

    monkeypatch.setattr(run_module, "run_nightly", stand_in)
    old = tmp_path / "reports" / "latest"
    publish.publish_outputs(
        old, {"old": pd.DataFrame({"a": [1]})}, {}, {"report.md": "old"},
        {"run_id": "2026-11-29-aaaaaaaaaaaa", "as_of_date": "2026-11-29", "finished_utc": "2026-11-30T02:00:00+00:00"},
    )
    before = snapshot(old)
    assert run("--out", str(old)) == exit_codes.OUTPUT_FAILED
    assert calls == [] and snapshot(old) == before and not old.is_symlink()
    assert sorted(p.name for p in old.parent.iterdir()) == [".latest.lock", "latest"]
    errors = [line for line in capsys.readouterr().err.splitlines() if "ERROR" in line]
    assert len(errors) == 1 and str(old) in errors[0] and "single run" in errors[0]
    assert "pass the folder above it as --out" in errors[0] and "nothing was changed" in errors[0]
    assert run("--out", str(old.parent)) == exit_codes.SUCCESS
    assert snapshot(old.parent / "runs" / "2026-11-29-aaaaaaaaaaaa") == before  # moved into runs/ as it was
    assert os.readlink(old) == "runs/2026-11-30-0123456789ab"


def test_module_entry_point_runs():
    # the console script and `python -m warranty_forecast` share main(); check the module form starts
    result = subprocess.run([sys.executable, "-m", "warranty_forecast", "--help"], capture_output=True, text=True, cwd=ROOT)
    assert result.returncode == 0 and "demo-data" in result.stdout


def test_demo_data_command_writes_the_extracts(tmp_path):
    out = tmp_path / "demo"
    assert main(["demo-data", "--out", str(out), "--seed", "7"]) == exit_codes.SUCCESS
    assert {"shipments.parquet", "claims.csv", "planted_defects.csv", "truth.json", "README.md"} <= {
        p.name for p in out.iterdir()
    }
    assert json.loads((out / "truth.json").read_text())["seed"] == 7


def test_thin_data_configuration_uses_fixed_shapes_and_alternative_forecasts(tmp_path):
    # every product is "thin" under min_returns = 100000; QHT-360 gets a shape from configuration
    config = tmp_path / "settings.toml"
    config.write_text(
        "[life_model]\nmin_returns = 100000\nforecast_model = \"lognormal\"\n"
        "[life_model.fixed_shape_by_product]\nQHT-360 = 2.5\n"
        "[forecast]\nprediction_draws = 200\n"  # the intervals are not what this test reads
    )
    out = tmp_path / "out"
    assert run("--config", str(config), "--out", str(out), "--no-charts") == exit_codes.SUCCESS
    out = out / "latest"
    life_model = pd.read_parquet(out / "life_model.parquet").set_index("product")
    assert life_model.loc["QHT-360", "status"] == "fixed_shape" and life_model.loc["QHT-360", "shape"] == 2.5
    assert life_model.loc["QDS-210", "status"] == "insufficient_data"
    totals = pd.read_parquet(out / "reserve_by_product.parquet").set_index("product")
    # the lognormal alternative is fitted on every product's data (its own min_returns is the same),
    # so lognormal forecasts are absent here and the Weibull (fixed shape) is used where it exists
    assert totals.loc["QHT-360", "forecast_status"] == "forecast (weibull)"
    assert totals.loc["QHT-360", "reserve"] > 0
    assert totals.loc["QDS-210", "forecast_status"].startswith("no forecast")
    manifest = json.loads((out / "manifest.json").read_text())
    assert any("QHT-360" in w and "shape fixed at 2.5" in w for w in manifest["warnings"])
    assert any("QDS-210" in w and "no life model" in w for w in manifest["warnings"])


@pytest.mark.parametrize("forecast_model", ["lognormal", "failure_modes"])
def test_forecast_model_choice(tmp_path, demo_out, forecast_model):
    config = tmp_path / "settings.toml"
    config.write_text(f"[life_model]\nforecast_model = \"{forecast_model}\"\n[forecast]\nprediction_draws = 200\n")
    out = tmp_path / "out"
    assert run("--config", str(config), "--out", str(out), "--no-charts") == exit_codes.SUCCESS
    totals = pd.read_parquet(out / "latest" / "reserve_by_product.parquet").set_index("product")
    weibull = pd.read_parquet(demo_out / "reserve_by_product.parquet").set_index("product")
    expected_name = "lognormal" if forecast_model == "lognormal" else "failure modes"
    # QCP-140 is left out: its flagged build month gets its own life on top of whichever model
    for product in ("QDS-210", "QHT-360"):
        assert totals.loc[product, "forecast_status"] == f"forecast ({expected_name})"
        ratio = totals.loc[product, "expected_future_returns"] / weibull.loc[product, "expected_future_returns"]
        assert 0.5 < ratio < 2.0 and ratio != 1.0


def _exit_code(args: list[str]) -> int:
    try:
        return main(args)
    except SystemExit as exit_:  # argparse exits for bad arguments, --help and --version
        return exit_.code


@pytest.mark.parametrize(
    "args",
    [
        ["run", "--shipment", str(SHIPMENTS), "--claims", str(CLAIMS)],  # the operator's case
        ["run", "--shipments", str(SHIPMENTS), "--claim", str(CLAIMS)],
        ["--verb", "demo-data"],
        ["demo-data", "--se", "7"],
        ["bench", "--size", "2000"],  # the benchmark's own parser too
    ],
)
def test_abbreviated_options_are_refused(args, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # nothing may be written, but if it were, not into the repository
    assert _exit_code(args) == exit_codes.BAD_ARGUMENTS
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("args", "verbose"),
    [
        (["run", "--shipments", "s", "--claims", "c"], False),
        (["-v", "run", "--shipments", "s", "--claims", "c"], True),
        (["run", "-v", "--shipments", "s", "--claims", "c"], True),
        (["run", "--shipments", "s", "--claims", "c", "--verbose"], True),
        (["demo-data", "-v"], True),
        (["bench", "-v", "--sizes", "10"], True),
    ],
)
def test_verbose_before_or_after_the_command(args, verbose):
    arguments, _rest = build_parser().parse_known_args(args)
    assert arguments.verbose is verbose


def test_verbose_after_the_command_logs_debug(tmp_path, monkeypatch):
    def stand_in(config, reason=None):
        return run_module.RunResult(config.out_dir, dt.date(2026, 11, 30), {}, ())

    monkeypatch.setattr(run_module, "run_nightly", stand_in)
    assert run("-v", "--out", str(tmp_path / "o")) == exit_codes.SUCCESS
    assert logging.getLogger().level == logging.DEBUG


def test_version_is_the_package_version(capsys):
    assert _exit_code(["--version"]) == exit_codes.SUCCESS
    assert capsys.readouterr().out == f"warranty-forecast {__version__}\n"
    assert __version__ == metadata.version("warranty-forecast")


def test_help_lists_every_exit_code(capsys):
    assert _exit_code(["--help"]) == exit_codes.SUCCESS
    main_help = capsys.readouterr().out
    assert _exit_code(["run", "--help"]) == exit_codes.SUCCESS
    run_help = capsys.readouterr().out
    constants = {
        name: value for name, value in vars(exit_codes).items() if name.isupper() and isinstance(value, int)
    }
    assert set(constants) == set(EXIT_CODE_HELP)  # a new code needs its line in --help
    for text in (main_help, run_help):
        listed = text[text.index("exit codes:"):].splitlines()[1:]
        assert len(listed) == len(constants)
        for name, value in constants.items():
            label = f"{value}+N" if name == "INTERRUPTED_BASE" else str(value)
            assert f"  {label:<6} {EXIT_CODE_HELP[name]}" in listed
    assert "130 SIGINT, 143 SIGTERM" in main_help


def test_verbose_bench_runs_the_benchmark(capsys):
    # used to crash: `-v` before `bench` sent the benchmark's arguments to the demo-data command
    args = ["-v", "bench", "--sizes", "2000", "--repeats", "1", "--skip-per-unit-above", "1000"]
    assert main(args) == exit_codes.SUCCESS
    captured = capsys.readouterr()
    assert "Targets" in captured.out and "2,000" in captured.out
    assert "DEBUG" in captured.err  # -v reached the logging set-up


def test_bench_help_is_the_benchmarks_own(capsys):
    assert _exit_code(["bench", "-h"]) == exit_codes.SUCCESS
    assert "--skip-per-unit-above" in capsys.readouterr().out


FORGED = "QDS-210\n2026-12-01 00:00:00,000 ERROR warranty_forecast: all clear\r\t\x1b[31m\x85\u2028\u2029\x7f"


def test_log_records_stay_one_line_whatever_the_data_holds(capsys):
    configure_logging(verbose=False)
    logging.getLogger("warranty_forecast.run").warning("product %s: no life model", FORGED)
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert err.endswith(
        "product QDS-210\\n2026-12-01 00:00:00,000 ERROR warranty_forecast: all clear"
        "\\r\\t\\x1b[31m\\x85\\u2028\\u2029\\x7f: no life model\n"
    )


def test_a_traceback_keeps_its_lines_and_its_message_line_is_escaped(capsys):
    configure_logging(verbose=False)
    try:
        raise ValueError("boom")
    except ValueError:
        logging.getLogger("warranty_forecast").exception("unexpected error in %s", "a\nb")
    lines = capsys.readouterr().err.splitlines()
    assert lines[0].endswith("unexpected error in a\\nb")
    assert lines[1] == "Traceback (most recent call last):" and lines[-1] == "ValueError: boom"


def test_product_name_from_the_run_cannot_forge_a_log_line(tmp_path, monkeypatch, capsys):
    def stand_in(config, reason=None):
        logging.getLogger("warranty_forecast.run").warning("product %s: no cost per claim", FORGED)
        return run_module.RunResult(config.out_dir, dt.date(2026, 11, 30), {}, (FORGED,))

    monkeypatch.setattr(run_module, "run_nightly", stand_in)
    assert run("--out", str(tmp_path / "o")) == exit_codes.SUCCESS
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 2 and "WARNING warranty_forecast.run: product QDS-210\\n2026" in lines[0]
    assert "INFO warranty_forecast: done" in lines[1]
