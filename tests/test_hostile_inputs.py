"""Hostile input and operations, through the whole command: every kind ends in a clear message naming
the file (and the column where there is one) or in quarantine rows; never a traceback, never a partial
publish. On success, rows read = used + quarantined + after the as-of date for each file, and every
quarantined row is listed in quarantine.parquet. On failure, the previous outputs are untouched.

The base extracts are a small invented scenario written here (two product lines, six build months);
expected outcomes follow the README's input contract (common practice, no source).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from warranty_forecast import exit_codes
from warranty_forecast.cli import main

from small_scenario import (  # noqa: F401  (the small scenario, shared with other command tests)
    CLAIM_COLUMNS, NEWEST_CLAIM_DATE, SHIPMENT_COLUMNS, base_claims, base_shipments, write_csv,
)


@dataclass
class Extracts:
    """The two files of one case and extra command-line arguments."""

    folder: Path
    shipments: list[dict[str, str]] = field(default_factory=base_shipments)
    claims: list[dict[str, str]] = field(default_factory=base_claims)
    shipment_columns: list[str] = field(default_factory=lambda: list(SHIPMENT_COLUMNS))
    claim_columns: list[str] = field(default_factory=lambda: list(CLAIM_COLUMNS))
    arguments: list[str] = field(default_factory=list)
    shipments_path: Path | None = None
    claims_path: Path | None = None

    def write(self) -> tuple[Path, Path]:
        shipments = self.shipments_path or write_csv(
            self.folder / "shipments.csv", self.shipments, self.shipment_columns
        )
        claims = self.claims_path or write_csv(self.folder / "claims.csv", self.claims, self.claim_columns)
        return shipments, claims


@dataclass(frozen=True)
class Expect:
    """What a case must end in: an exit code, words the log must hold, quarantine rows (extract, column, reason)."""

    code: int | tuple[int, ...]  # a tuple where either code is a correct answer
    log_words: tuple[str, ...] = ()
    quarantined: tuple[tuple[str, str, str], ...] = ()


def _claim(**changes: str) -> Callable[[Extracts], None]:
    def change(case: Extracts) -> None:
        case.claims[5].update(changes)
    return change


def _shipment(**changes: str) -> Callable[[Extracts], None]:
    def change(case: Extracts) -> None:
        case.shipments[7].update(changes)
    return change


def _raw_claims(transform: Callable[[str], str | bytes]) -> Callable[[Extracts], None]:
    """Rewrite the claims file's text (or bytes) after it is written."""
    def change(case: Extracts) -> None:
        _, claims = case.write()
        text = claims.read_text(encoding="utf-8")
        new = transform(text)
        path = case.folder / "claims_edited.csv"
        if isinstance(new, bytes):
            path.write_bytes(new)
        else:
            path.write_text(new, encoding="utf-8", newline="")
        case.claims_path = path
    return change


def _append_claim_line(line: str | bytes) -> Callable[[Extracts], None]:
    if isinstance(line, bytes):
        return _raw_claims(lambda text: text.encode("utf-8") + line + b"\n")
    return _raw_claims(lambda text: text + line + "\n")


def _config(text: str | bytes) -> Callable[[Extracts], None]:
    def change(case: Extracts) -> None:
        path = case.folder / "settings.toml"
        path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
        case.arguments += ["--config", str(path)]
    return change


def _arguments(*arguments: str) -> Callable[[Extracts], None]:
    def change(case: Extracts) -> None:
        case.arguments += list(arguments)
    return change


def _claims_file(write: Callable[[Path], None], name: str = "claims.csv") -> Callable[[Extracts], None]:
    def change(case: Extracts) -> None:
        path = case.folder / name
        write(path)
        case.claims_path = path
    return change


def _shipments_parquet(transform: Callable[[bytes], bytes] = lambda b: b, rename: dict | None = None):
    def change(case: Extracts) -> None:
        frame = pd.DataFrame(case.shipments, columns=SHIPMENT_COLUMNS)
        if rename:
            frame = frame.assign(**rename)
        buffer = io.BytesIO()
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), buffer)
        path = case.folder / "shipments.parquet"
        path.write_bytes(transform(buffer.getvalue()))
        case.shipments_path = path
    return change


def _claims_with_columns(columns: list[str], values: Callable[[dict[str, str]], list[str]]):
    def change(case: Extracts) -> None:
        path = case.folder / "claims_columns.csv"
        with open(path, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(columns)
            for row in case.claims:
                writer.writerow(values(row))
        case.claims_path = path
    return change


def _product_everywhere(name: str) -> Callable[[Extracts], None]:
    """Rename product line P2 in both extracts (names from the data reach logs, charts, report, paths)."""
    def change(case: Extracts) -> None:
        for row in case.shipments + case.claims:
            if row["product"] == "P2":
                row["product"] = name
    return change


def _many_bad_claim_dates(case: Extracts) -> None:
    for row in case.claims:  # dates written day/month/year by another export
        day = dt.date.fromisoformat(row["failure_date"])
        row["failure_date"] = f"{day:%d/%m/%Y}"


HOSTILE_CASES: dict[str, tuple[Callable[[Extracts], None], Expect]] = {
    # --- whole files
    "empty claims file": (
        _claims_file(lambda p: p.write_bytes(b"")), Expect(exit_codes.INPUT_CONTRACT, ("claims.csv", "header"))
    ),
    "header-only claims file": (
        _claims_file(lambda p: p.write_text(",".join(CLAIM_COLUMNS) + "\n")), Expect(exit_codes.SUCCESS)
    ),
    "header-only shipments file": (
        lambda case: case.shipments.clear(), Expect(exit_codes.INPUT_CONTRACT, ("shipments.csv",))
    ),
    "binary claims file": (
        _claims_file(lambda p: p.write_bytes(bytes(range(256)) * 40)),
        Expect((exit_codes.INPUT_UNREADABLE, exit_codes.INPUT_CONTRACT), ("claims.csv",)),
    ),
    "truncated Parquet shipments": (
        _shipments_parquet(lambda b: b[: len(b) // 2]), Expect(exit_codes.INPUT_UNREADABLE, ("shipments.parquet",))
    ),
    "semicolon-delimited claims": (
        _raw_claims(lambda text: text.replace(",", ";")),
        Expect(exit_codes.INPUT_CONTRACT, ("claims_edited.csv", "claim_id", "comma")),
    ),
    "missing required column": (
        lambda case: case.claim_columns.remove("cost") or [r.pop("cost") for r in case.claims],
        Expect(exit_codes.INPUT_CONTRACT, ("claims.csv", "cost")),
    ),
    "duplicate header name": (
        _claims_with_columns(CLAIM_COLUMNS + ["cost"], lambda r: [*r.values(), "1.00"]),
        Expect(exit_codes.INPUT_CONTRACT, ("claims_columns.csv", "cost")),
    ),
    "header name with a leading space": (
        _claims_with_columns([" product" if c == "product" else c for c in CLAIM_COLUMNS], lambda r: list(r.values())),
        Expect(exit_codes.INPUT_CONTRACT, ("claims_columns.csv", "product")),
    ),
    "extra columns named like internal ones": (
        _claims_with_columns(
            CLAIM_COLUMNS + ["ordinality", "file_row_number", "source_row_number"],
            lambda r: [*r.values(), "x", "y", "z"],
        ),
        Expect(exit_codes.SUCCESS),
    ),
    "Parquet column named file_row_number": (
        _shipments_parquet(rename={"file_row_number": "7"}), Expect(exit_codes.SUCCESS)
    ),
    "byte-order mark": (_raw_claims(lambda text: "\ufeff" + text), Expect(exit_codes.SUCCESS)),
    "CRLF line ends": (_raw_claims(lambda text: text.replace("\n", "\r\n")), Expect(exit_codes.SUCCESS)),
    "quoted line break in a value": (_claim(failure_code="two\nlines"), Expect(exit_codes.SUCCESS)),
    "unterminated quote": (
        _append_claim_line('X1,P1,2024-01,,2024-03-01,2024-03-02,"5.00,approved,F1,'),
        Expect(exit_codes.SUCCESS, (), (("claims", "", "malformed_line"),)),
    ),
    "ragged row": (
        _append_claim_line("X2,P1,2024-01,,2024-03-01"),
        Expect(exit_codes.SUCCESS, (), (("claims", "", "malformed_line"),)),
    ),
    "bytes that are not UTF-8": (
        _append_claim_line(b"X3,P1,2024-01,,2024-03-01,2024-03-02,5.00,approved,F\xe9\xff,"),
        Expect(exit_codes.SUCCESS, (), (("claims", "", "malformed_line"),)),
    ),
    # --- numbers
    "units 1e19": (_shipment(units="1e19"), Expect(exit_codes.SUCCESS, (), (("shipments", "units", "units_above_limit"),))),
    "negative units": (_shipment(units="-5"), Expect(exit_codes.SUCCESS, (), (("shipments", "units", "units_below_one"),))),
    "units NaN": (_shipment(units="NaN"), Expect(exit_codes.SUCCESS, (), (("shipments", "units", "unparseable_value"),))),
    "warranty_months 2000000000": (
        _shipment(warranty_months="2000000000"),
        Expect(exit_codes.SUCCESS, (), (("shipments", "warranty_months", "warranty_months_above_limit"),)),
    ),
    "warranty_months 3000000000": (
        _shipment(warranty_months="3000000000"),
        Expect(exit_codes.SUCCESS, (), (("shipments", "warranty_months", "warranty_months_above_limit"),)),
    ),
    "warranty_months 100000": (
        _shipment(warranty_months="100000"),
        Expect(exit_codes.SUCCESS, (), (("shipments", "warranty_months", "warranty_months_above_limit"),)),
    ),
    "cost 1e308": (_claim(cost="1e308"), Expect(exit_codes.SUCCESS, (), (("claims", "cost", "unparseable_value"),))),
    "negative cost": (_claim(cost="-0.01"), Expect(exit_codes.SUCCESS, (), (("claims", "cost", "negative_cost"),))),
    # --- dates
    "claim dated 9999-12-31": (
        _claim(claim_date="9999-12-31"),
        Expect(exit_codes.SUCCESS, (), (("claims", "claim_date", "dated_after_run_date"),)),
    ),
    "claim dated 12345-01-01": (
        _claim(claim_date="12345-01-01"),
        Expect(exit_codes.SUCCESS, (), (("claims", "claim_date", "date_out_of_range"),)),
    ),
    "shipment dated after the run day": (
        _shipment(ship_date="2099-01-01", sale_date=""),
        Expect(exit_codes.SUCCESS, (), (("shipments", "ship_date", "dated_after_run_date"),)),
    ),
    "failure in year 1": (
        _claim(failure_date="0001-01-01"),
        Expect(exit_codes.SUCCESS, (), (("claims", "failure_date", "date_out_of_range"),)),
    ),
    "impossible date": (
        _claim(failure_date="2024-02-30"),
        Expect(exit_codes.SUCCESS, (), (("claims", "failure_date", "unparseable_value"),)),
    ),
    "most claim dates in another format": (
        _many_bad_claim_dates, Expect(exit_codes.TOO_MANY_QUARANTINED, ("claims.csv", "failure_date"))
    ),
    # --- text from the data
    "SQL-looking product": (_product_everywhere("P2'); drop table stg_claims; --"), Expect(exit_codes.SUCCESS)),
    "formula-looking failure code": (_claim(failure_code='=HYPERLINK("http://x","y")'), Expect(exit_codes.SUCCESS)),
    "product with path characters": (_product_everywhere("../../etc/P2"), Expect(exit_codes.SUCCESS)),
    "product of 5000 characters": (_product_everywhere("P" * 5000), Expect(exit_codes.SUCCESS)),
    "product with pipe, newline and script": (
        _product_everywhere("P|2\n2026-01-01 INFO forged <script>x</script>"), Expect(exit_codes.SUCCESS)
    ),
    "product with math markup": (_product_everywhere("$\\frac{1}{0}$"), Expect(exit_codes.SUCCESS)),
    # --- arguments and configuration
    "as-of date far in the future": (_arguments("--as-of", "2100-01-01"), Expect(exit_codes.BAD_ARGUMENTS, ("--as-of",))),
    "as-of date after the newest data": (
        _arguments("--as-of", "2025-03-01"), Expect(exit_codes.BAD_ARGUMENTS, ("2024-12-30",))
    ),
    "config file not UTF-8": (_config(b"[warranty]\ndefault_months = 24 # \xff\xfe\n"), Expect(exit_codes.BAD_ARGUMENTS, ("settings.toml",))),
    "config value out of range": (
        _config("[life_model]\nconfidence_level = 2\n"), Expect(exit_codes.BAD_ARGUMENTS, ("confidence_level",))
    ),
    "config value of the wrong type": (
        _config('[warranty]\ndefault_months = "24"\n'), Expect(exit_codes.BAD_ARGUMENTS, ("default_months",))
    ),
    "per-product config key naming no product": (
        _config("[reserve.cost_per_claim_by_product]\nP3 = 90.0\n"), Expect(exit_codes.BAD_ARGUMENTS, ("P3",))
    ),
    "unsupported file type": (
        _claims_file(lambda p: p.write_text("x"), name="claims.xlsx"), Expect(exit_codes.INPUT_UNREADABLE, ("claims.xlsx",))
    ),
    "folder given as an extract": (
        _claims_file(lambda p: p.mkdir(), name="claims_folder.csv"),
        Expect(exit_codes.INPUT_UNREADABLE, ("claims_folder.csv",)),
    ),
}


@pytest.fixture(scope="module")
def previous_outputs(tmp_path_factory) -> Path:
    """A good run of the base case: the output root whose outputs a failed run must leave untouched."""
    folder = tmp_path_factory.mktemp("base")
    shipments, claims = Extracts(folder).write()
    out = folder / "out"
    assert main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out)]) == 0
    return out


def _snapshot(root: Path) -> dict[str, bytes | str]:
    """Every file's bytes, link's target and folder under an output root (links not followed)."""
    seen: dict[str, bytes | str] = {}
    for folder, names, files in os.walk(root):
        for name in names + files:
            path = Path(folder) / name
            key = str(path.relative_to(root))
            if path.is_symlink():
                seen[key] = "-> " + os.readlink(path)
            else:
                seen[key] = "folder" if path.is_dir() else path.read_bytes()
    return seen


def _run_folders(root: Path) -> set[str]:
    return {p.name for p in (root / "runs").iterdir()}


@pytest.mark.parametrize("kind", sorted(HOSTILE_CASES))
def test_hostile_input_ends_cleanly(kind, tmp_path, previous_outputs, capsys):
    change, expect = HOSTILE_CASES[kind]
    case = Extracts(tmp_path)
    change(case)
    shipments, claims = case.write()
    out_parent = tmp_path / "published"
    out_parent.mkdir()
    out = out_parent / "out"
    shutil.copytree(previous_outputs, out, symlinks=True)
    before = _snapshot(out)
    runs_before = _run_folders(out)

    # charts (and their place in report.html) are drawn in the one case whose product name holds a pipe,
    # a newline and a script tag together; elsewhere skipped to keep the suite fast (the charts' own
    # escaping of every kind of hostile name is tested in test_safe_text and test_charts)
    charts = [] if kind == "product with pipe, newline and script" else ["--no-charts"]
    code = main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out), *case.arguments,
                 *charts])
    log = capsys.readouterr().err

    codes = expect.code if isinstance(expect.code, tuple) else (expect.code,)
    assert code in codes, log[-3000:]
    assert "Traceback" not in log
    for words in expect.log_words:
        assert words in log, (words, log[-3000:])
    leftovers = [p.name for p in out_parent.iterdir() if p.name != "out" and not p.name.endswith(".lock")]
    assert leftovers == []  # no half-published folder beside the outputs
    assert [p.name for p in (out / "runs").iterdir() if p.name.startswith(".")] == []  # nor in runs/
    assert [p.name for p in out.iterdir() if p.name.startswith(".")] == []  # no half-made latest link
    if code != exit_codes.SUCCESS:
        assert _snapshot(out) == before  # nothing published
        return
    # this run's own folder (`latest` may stay at the previous run when this run's as-of date is older); an
    # identical run publishes nothing new
    new = _run_folders(out) - runs_before
    assert len(new) <= 1
    out = out / "runs" / new.pop() if new else (out / "latest").resolve()
    manifest = json.loads((out / "manifest.json").read_text())
    quarantine = pd.read_parquet(out / "quarantine.parquet")
    for extract in manifest["reconciliation"]:
        assert extract["rows_read"] == extract["rows_used"] + extract["rows_quarantined"] + extract["rows_after_as_of"]
        listed = quarantine[quarantine["extract"] == extract["extract"]]
        assert len(listed) == extract["rows_quarantined"]
        assert listed["row_number"].is_unique
    found = set(zip(quarantine["extract"], quarantine["column"], quarantine["reason"]))
    for extract, column, reason in expect.quarantined:  # column "" for a malformed line: whichever DuckDB names
        assert any(f[0] == extract and f[2] == reason and (f[1] == column or not column) for f in found), found
    assert manifest["as_of_date"] <= dt.date.today().isoformat()
    report = (out / "report.md").read_text(encoding="utf-8")
    assert "<script>" not in report
    page = (out / "report.html").read_text(encoding="utf-8")  # the HTML report: no tag from the data survives
    assert "<script" not in page.lower() and "onerror=" not in page.lower()
    for line in log.splitlines():  # every log record is one line that starts with its timestamp
        assert line[:4].isdigit() or line.startswith(("usage:", "warranty-forecast:")), line


def test_no_charts_writes_the_tables_report_and_manifest_without_any_png(tmp_path, capsys):
    shipments, claims = Extracts(tmp_path).write()
    out = tmp_path / "out"
    assert main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out), "--no-charts"]) == 0
    out = out / "latest"
    names = {p.name for p in out.iterdir()}
    assert not any(name.endswith(".png") for name in names)
    assert {"forecast.parquet", "reserve.parquet", "build_month_alerts.parquet", "report.md", "manifest.json"} <= names
    manifest = json.loads((out / "manifest.json").read_text())
    assert set(manifest["outputs"]) == names - {"manifest.json"}
    assert "Not drawn in this run (`--no-charts`)." in (out / "report.md").read_text(encoding="utf-8")
    assert "charts    not drawn (--no-charts)" in capsys.readouterr().err
