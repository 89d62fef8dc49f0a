"""Claims whose failure code mentions a safety-relevant term (alerts.safety_terms): the report section and a
run on the demo data with one failure code changed. The matching rule itself is tested on hand-written rows
in tests/test_sql_models.py (test_safety_term_claims), the key's validation in tests/test_config.py.
"""

from __future__ import annotations

import csv
import datetime as dt
import json
from pathlib import Path

import pandas as pd

from warranty_forecast.cli import main
from warranty_forecast.outputs.report import SAFETY_CAUTION, _safety_term_lines

from small_scenario import write_small_extracts

ROOT = Path(__file__).resolve().parents[1]
TERMS = ["overheat", "smok", "fire", "burn", "shock"]


def claims_frame(rows: list[dict]) -> pd.DataFrame:
    """safety_term_claims as the SQL stage returns it (only the columns the report reads vary here)."""
    base = {"product": "A", "build_month": dt.date(2024, 1, 1), "failure_date": dt.date(2024, 3, 1),
            "months_in_service": 2, "status": "approved", "is_return": True, "cost": 10.0}
    return pd.DataFrame([{**base, **row} for row in rows])


def test_report_section_counts_per_product_and_term_lists_the_newest_and_escapes_data_text():
    rows = [
        {"claim_id": f"C{n:02d}", "claim_date": dt.date(2024, 3, 1) + dt.timedelta(days=n), "failure_code": "BURNT",
         "matched_terms": ["burn"], "source_row_number": n}
        for n in range(1, 25)
    ]
    rows.append({"product": "P|<script>", "claim_id": "K*1", "claim_date": dt.date(2024, 1, 5),
                 "failure_code": "FIRE`|`SHOCK", "status": "rejected", "is_return": False,
                 "matched_terms": ["fire", "shock"], "source_row_number": 99})
    text = "\n".join(_safety_term_lines(claims_frame(rows), TERMS))
    assert text.startswith("## Claims mentioning safety-relevant terms")
    assert SAFETY_CAUTION in text
    assert "qualified engineers" in SAFETY_CAUTION and "reporting duties" in SAFETY_CAUTION
    assert "does not assess safety" in SAFETY_CAUTION
    assert "Terms searched in failure_code: overheat, smok, fire, burn, shock (any case" in text
    assert "25 claims matched" in text
    # counts: 24 claims of A with burn; the hostile product's one claim under each of its two terms (hand count)
    assert "| A | burn | 24 |" in text
    assert "| P\\|&lt;script&gt; | fire | 1 |" in text and "| P\\|&lt;script&gt; | shock | 1 |" in text
    # 20 listed, newest first: C24 (2024-03-25) down to C05; C04 and older, and the January claim, left out
    listed = [line for line in text.splitlines() if line.startswith("| 2024-")]
    assert len(listed) == 20
    assert listed[0].startswith("| 2024-03-25 | A | 2024-01 | C24 | BURNT | approved | yes | burn |")
    assert listed[-1].startswith("| 2024-03-06 | A | 2024-01 | C05 |")
    assert "Newest first, 20 of 25" in text
    assert "<script>" not in text and "K\\*1" not in text  # the hostile claim is not among the 20 shown
    hostile_first = "\n".join(_safety_term_lines(claims_frame(rows[-1:]), TERMS))
    assert "| 2024-01-05 | P\\|&lt;script&gt; | 2024-01 | K\\*1 | FIRE\\`\\|\\`SHOCK | rejected | no | fire, shock |" in (
        hostile_first
    )


def test_report_section_says_what_was_searched_when_nothing_matched_or_when_turned_off():
    empty = claims_frame([]).assign(matched_terms=[], claim_id=[], claim_date=[], failure_code=[],
                                    source_row_number=[])
    none_matched = "\n".join(_safety_term_lines(empty, TERMS))
    assert SAFETY_CAUTION in none_matched
    assert "overheat, smok, fire, burn, shock" in none_matched
    assert "No claim's failure code matched any of these terms." in none_matched
    off = "\n".join(_safety_term_lines(empty, []))
    assert "turned off (`alerts.safety_terms` is empty)" in off


def test_a_run_with_one_smoke_code_lists_exactly_that_claim(tmp_path):
    # the small scenario (tests/small_scenario.py: its codes F1, F2 hold no safety term) with one claim's code
    # changed; the whole command, without the demo's size
    shipments, claims = write_small_extracts(tmp_path)
    with open(claims, newline="") as handle:
        rows = list(csv.reader(handle))
    header = rows[0]
    changed = rows[1]
    changed[header.index("failure_code")] = "WIRING_SMOKE"
    with open(claims, "w", newline="") as handle:
        csv.writer(handle).writerows(rows)
    out = tmp_path / "out"
    code = main(["run", "--shipments", str(shipments), "--claims", str(claims), "--out", str(out), "--no-charts"])
    assert code == 0
    out = out / "latest"
    listed = pd.read_parquet(out / "safety_term_claims.parquet")
    # the one changed row, as the file holds it (data row 1)
    assert len(listed) == 1
    row = listed.iloc[0]
    assert (row["claim_id"], row["product"], row["failure_code"], row["status"], int(row["source_row_number"])) == (
        changed[header.index("claim_id")], changed[header.index("product")], "WIRING_SMOKE", "approved", 1,
    )
    assert list(row["matched_terms"]) == ["smok"]
    warnings = json.loads((out / "manifest.json").read_text())["warnings"]
    product = changed[header.index("product")]
    assert (
        f"product {product}: 1 claim mentions safety-relevant terms (smok): listed in safety_term_claims.parquet;"
        " for qualified engineers to review"
    ) in warnings
    report = (out / "report.md").read_text()
    assert f"| {product} | smok | 1 |" in report
    assert f"| {changed[header.index('claim_id')]} | WIRING_SMOKE | approved | yes | smok |" in report


def test_no_section_without_the_frame():
    assert _safety_term_lines(None, TERMS) == []  # a caller that does not pass the frame: no claim is said to match
