"""Atomic publishing of outputs (common practice, no source)."""

from __future__ import annotations

import json

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402

from warranty_forecast.errors import OutputError  # noqa: E402
from warranty_forecast.publish import publish_outputs, sha256_of  # noqa: E402


def test_writes_tables_figures_texts_and_manifest_last(tmp_path):
    out = tmp_path / "run"
    figure = plt.figure()
    written = publish_outputs(out, {"t": pd.DataFrame({"a": [1, 2]})}, {"f": figure}, {"r.md": "# hi"}, {"k": 1})
    plt.close(figure)
    assert sorted(p.name for p in out.iterdir()) == ["f.png", "manifest.json", "r.md", "t.parquet"]
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["k"] == 1
    assert manifest["outputs"]["t.parquet"]["sha256"] == sha256_of(out / "t.parquet") == written["t.parquet"]["sha256"]
    assert manifest["outputs"]["t.parquet"]["rows"] == 2
    assert pd.read_parquet(out / "t.parquet")["a"].tolist() == [1, 2]


def test_replaces_previous_run_and_leaves_nothing_behind(tmp_path):
    out = tmp_path / "run"
    publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {})
    publish_outputs(out, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {})
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "new.parquet"]
    assert [p.name for p in tmp_path.iterdir()] == ["run"]


def test_failure_keeps_previous_outputs(tmp_path):
    out = tmp_path / "run"
    publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {"generation": 1})

    class Unwritable:
        def savefig(self, *args, **kwargs):
            raise OSError("no space left on device")

    with pytest.raises(OutputError, match="no space left"):
        publish_outputs(out, {"new": pd.DataFrame({"a": [2]})}, {"f": Unwritable()}, {}, {"generation": 2})
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "old.parquet"]
    assert json.loads((out / "manifest.json").read_text())["generation"] == 1
    assert [p.name for p in tmp_path.iterdir()] == ["run"]


def test_refuses_foreign_folders_and_files(tmp_path):
    foreign = tmp_path / "home"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("mine")
    with pytest.raises(OutputError, match="refusing"):
        publish_outputs(foreign, {}, {}, {}, {})
    a_file = tmp_path / "file"
    a_file.write_text("x")
    with pytest.raises(OutputError, match="not a folder"):
        publish_outputs(a_file, {}, {}, {}, {})
    assert (foreign / "notes.txt").read_text() == "mine"
