"""The layers keep their promises: the statistics core imports no pandas, DuckDB, matplotlib or config, nothing imports
the command line, and no module outside the DuckDB stage imports duckdb (common practice, no source).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "pipeline" / "warranty_forecast"
DUCKDB_STAGE = {"stages/sql_runner.py", "stages/extracts.py", "stages/shaping.py"}
# the history database is written at the publishing edge; it runs no model and reads no extract
DUCKDB_WRITERS = {"outputs/history.py"}
# the whole-job benchmark times two plain DuckDB queries (the floors) beside the run
DUCKDB_BENCH = {"tools/bench_job.py"}


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
    return names


def modules(folder: str = "") -> list[Path]:
    return sorted((PACKAGE / folder).rglob("*.py"))


FORBIDDEN_IN_THE_CORE = ("pandas", "duckdb", "matplotlib", "pyarrow", "warranty_forecast.config",
                         "warranty_forecast.stages", "warranty_forecast.outputs", "warranty_forecast.tools",
                         "warranty_forecast.run", "warranty_forecast.cli")


@pytest.mark.parametrize("path", modules("lifecore"), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_the_statistics_core_imports_no_tables_database_charts_or_configuration(path):
    for name in imported_modules(path):
        assert not any(name == f or name.startswith(f + ".") for f in FORBIDDEN_IN_THE_CORE), f"{path.name} imports {name}"


def test_only_the_duckdb_stage_imports_duckdb_and_nothing_imports_the_command_line():
    for path in modules():
        relative = str(path.relative_to(PACKAGE))
        names = imported_modules(path)
        if relative not in DUCKDB_STAGE | DUCKDB_WRITERS | DUCKDB_BENCH:
            assert "duckdb" not in names, relative
        if relative not in {"cli.py", "__main__.py"}:
            assert "warranty_forecast.cli" not in names, relative
