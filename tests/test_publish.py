"""Atomic publishing of outputs (common practice, no source)."""

from __future__ import annotations

import hashlib
import json
import os

import pandas as pd
import pytest
from matplotlib.figure import Figure

import warranty_forecast.outputs.publish as publish
from warranty_forecast import __version__
from warranty_forecast.errors import OutputError
from warranty_forecast.outputs.publish import publish_outputs, sha256_of


def beside(folder):
    """Names in the output folder's parent other than the folder: its lock file, and leftovers if any."""
    return sorted(p.name for p in folder.parent.iterdir() if p.name != folder.name)


def test_writes_tables_figures_texts_and_manifest_last(tmp_path):
    out = tmp_path / "run"
    figure = Figure()
    written = publish_outputs(out, {"t": pd.DataFrame({"a": [1, 2]})}, {"f": figure}, {"r.md": "# hi"}, {"k": 1})
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
    assert beside(out) == [".run.lock"]


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
    assert beside(out) == [".run.lock"]


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


def test_manifest_starts_with_the_producer_marker(tmp_path):
    out = tmp_path / "run"
    publish_outputs(out, {}, {}, {"r.md": "x"}, {"producer": "forged", "k": 1})
    manifest = json.loads((out / "manifest.json").read_text())
    assert list(manifest)[0] == "producer"
    assert manifest["producer"] == {"name": "warranty-forecast", "version": __version__}
    assert manifest["k"] == 1 and set(manifest["outputs"]) == {"r.md"}


OURS = {"producer": {"name": "warranty-forecast", "version": "0.1.0"}, "outputs": {"t.parquet": {}}}


@pytest.mark.parametrize(
    ("manifest", "extra", "reason"),
    [
        # the operator's case: another tool's manifest.json in the folder
        ('{"name": "website", "icons": []}', None, "not written by warranty-forecast"),
        ("{not json", None, "not readable JSON"),
        ("[1, 2]", None, "not a JSON object"),
        (json.dumps({"outputs": {"t.parquet": {}}, "versions": {"warranty-forecast": "0.1.0"}}), None,
         "no producer marker"),
        (json.dumps({"producer": {"name": "warranty-forecast"}}), None, "lists no outputs"),
        # ours, but someone dropped a file in (or a folder with a listed name)
        (json.dumps(OURS), "notes.txt", "1 entry the last run did not write (notes.txt)"),
        (json.dumps(OURS), "t.parquet/", "1 entry the last run did not write (t.parquet)"),
    ],
)
def test_replaces_only_folders_holding_nothing_but_its_own_listed_outputs(tmp_path, manifest, extra, reason):
    out = tmp_path / "run"
    out.mkdir()
    (out / "manifest.json").write_text(manifest)
    if extra is None:
        (out / "t.parquet").write_text("t")
    elif extra.endswith("/"):
        (out / extra).mkdir()
        (out / extra / "inside.txt").write_text("keep")
    else:
        (out / "t.parquet").write_text("t")
        (out / extra).write_text("keep")
    before = sorted(str(p.relative_to(out)) for p in out.rglob("*"))
    with pytest.raises(OutputError) as raised:
        publish_outputs(out, {"new": pd.DataFrame({"a": [1]})}, {}, {}, {})
    assert str(out) in str(raised.value) and reason in str(raised.value)
    assert sorted(str(p.relative_to(out)) for p in out.rglob("*")) == before
    assert (out / "manifest.json").read_text() == manifest
    assert beside(out) == [".run.lock"]


def test_replaces_a_folder_of_its_own_listed_outputs(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "manifest.json").write_text(json.dumps(OURS))
    (out / "t.parquet").write_text("t")
    publish_outputs(out, {"new": pd.DataFrame({"a": [1]})}, {}, {}, {})
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "new.parquet"]


def test_replaces_an_earlier_versions_outputs_only_when_every_file_matches_its_checksum(tmp_path):
    # outputs written before manifests carried the producer marker (common practice, no source)
    out = tmp_path / "run"
    out.mkdir()
    (out / "t.parquet").write_text("t")
    listed = {"t.parquet": {"bytes": 1, "sha256": hashlib.sha256(b"t").hexdigest()}}
    (out / "manifest.json").write_text(json.dumps({"outputs": listed, "versions": {"warranty-forecast": "0.1.0"}}))
    (out / "t.parquet").write_text("u")  # edited since: not what that run wrote
    with pytest.raises(OutputError, match="no producer marker"):
        publish_outputs(out, {"new": pd.DataFrame({"a": [1]})}, {}, {}, {})
    (out / "t.parquet").write_text("t")
    publish_outputs(out, {"new": pd.DataFrame({"a": [1]})}, {}, {}, {})
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "new.parquet"]


@pytest.mark.parametrize("umask", [0o022, 0o027, 0o002])
def test_folders_and_files_follow_the_umask(tmp_path, umask):
    out = tmp_path / "deep" / "run"
    figure = Figure()
    previous = os.umask(umask)
    try:
        publish_outputs(out, {"t": pd.DataFrame({"a": [1]})}, {"f": figure}, {"r.md": "x"}, {})
        publish_outputs(out, {"t": pd.DataFrame({"a": [1]})}, {"f": figure}, {"r.md": "x"}, {})  # a replacement too
    finally:
        os.umask(previous)
    for folder in (out, out.parent):
        assert folder.stat().st_mode & 0o777 == 0o777 & ~umask, folder
    for path in [*out.iterdir(), tmp_path / "deep" / ".run.lock"]:
        assert path.stat().st_mode & 0o777 == 0o666 & ~umask, path


def test_a_symbolic_link_is_kept_and_its_target_replaced(tmp_path):
    real = tmp_path / "volume" / "forecast-2026"
    real.parent.mkdir()
    link = tmp_path / "latest"
    link.symlink_to(os.path.relpath(real, tmp_path))  # a relative link, to a target not yet there
    publish_outputs(link, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {})
    publish_outputs(link, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {})
    assert link.is_symlink() and os.readlink(link) == os.path.join("volume", "forecast-2026")
    assert real.is_dir() and not real.is_symlink()
    assert sorted(p.name for p in real.iterdir()) == ["manifest.json", "new.parquet"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["latest", "volume"]
    assert beside(real) == [".forecast-2026.lock"]  # the lock and the swap live beside the real folder


def test_a_link_loop_is_refused(tmp_path):
    loop = tmp_path / "loop"
    loop.symlink_to("loop")
    with pytest.raises(OutputError, match="symbolic link that never reaches a folder"):
        publish_outputs(loop, {}, {}, {}, {})
    assert loop.is_symlink()


def test_exchange_swaps_two_folders_in_one_step(tmp_path):
    first, second = tmp_path / "a", tmp_path / "b"
    first.mkdir()
    second.mkdir()
    (first / "one").write_text("1")
    (second / "two").write_text("2")
    if not publish._exchange_folders(first, second):
        pytest.skip("renameat2(RENAME_EXCHANGE) is not supported here; the two-rename fallback is tested below")
    assert [p.name for p in first.iterdir()] == ["two"] and [p.name for p in second.iterdir()] == ["one"]


def test_two_rename_fallback_replaces_previous_run(tmp_path, monkeypatch):
    monkeypatch.setattr(publish, "_exchange_folders", lambda first, second: False)
    out = tmp_path / "run"
    publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {})
    publish_outputs(out, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {})
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "new.parquet"]
    assert beside(out) == [".run.lock"]


def test_fallback_failing_between_the_renames_puts_the_previous_outputs_back(tmp_path, monkeypatch):
    monkeypatch.setattr(publish, "_exchange_folders", lambda first, second: False)
    out = tmp_path / "run"
    publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {"generation": 1})

    def fail(incoming, folder):
        raise OSError("device went away")

    monkeypatch.setattr(publish, "_move_in", fail)
    with pytest.raises(OutputError, match="device went away"):
        publish_outputs(out, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {"generation": 2})
    assert json.loads((out / "manifest.json").read_text())["generation"] == 1
    assert beside(out) == [".run.lock"]


def test_replacement_uses_the_exchange_where_supported(tmp_path, monkeypatch):
    results = []
    exchange = publish._exchange_folders

    def spy(first, second):
        results.append(exchange(first, second))
        return results[-1]

    monkeypatch.setattr(publish, "_exchange_folders", spy)
    out = tmp_path / "run"
    publish_outputs(out, {"old": pd.DataFrame({"a": [1]})}, {}, {}, {})
    assert results == []  # nothing to exchange with: one rename
    publish_outputs(out, {"new": pd.DataFrame({"a": [2]})}, {}, {}, {})
    if results == [False]:
        pytest.skip("renameat2(RENAME_EXCHANGE) is not supported here")
    assert results == [True]
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "new.parquet"]
    assert beside(out) == [".run.lock"]
