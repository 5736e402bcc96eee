"""The store publishes tables atomically by generation and locks batch runs."""

import json
import multiprocessing as mp
import os

import pandas as pd
import pytest

from tracktrue.store import LockHeld, Store, TableMissing, resolve_store_root


def test_store_root_prefers_argument_then_environment_then_default(monkeypatch, tmp_path):
    monkeypatch.setenv("TRACKTRUE_STORE", str(tmp_path / "env"))
    assert resolve_store_root(tmp_path / "arg") == tmp_path / "arg"
    assert resolve_store_root(None) == tmp_path / "env"
    monkeypatch.delenv("TRACKTRUE_STORE")
    assert str(resolve_store_root(None)) == "tracktrue-store"


def test_unpublished_table_raises_table_missing(tmp_path):
    with pytest.raises(TableMissing):
        Store.open(tmp_path).read_table("trips")


def test_publish_switches_generation_and_readers_see_whole_tables(tmp_path):
    store = Store.open(tmp_path)
    g1 = store.publish_table("t", pd.DataFrame({"a": [1, 2], "m": ["x", "y"]}), partition_by="m")
    assert store.read_table("t").sort_values("a")["a"].tolist() == [1, 2]
    g2 = store.publish_table("t", pd.DataFrame({"a": [3], "m": ["x"]}))
    assert g1 != g2 and store.generation("t") == g2
    assert store.read_table("t")["a"].tolist() == [3]
    assert store.generations() == {"t": g2}


def test_empty_table_keeps_its_columns(tmp_path):
    store = Store.open(tmp_path)
    store.publish_table("rejects", pd.DataFrame({"source_file": pd.Series([], dtype=str), "row": pd.Series([], dtype="int64")}))
    assert list(store.read_table("rejects").columns) == ["source_file", "row"]


def test_interrupted_publish_leaves_previous_generation_readable(tmp_path):
    store = Store.open(tmp_path)
    store.publish_table("t", pd.DataFrame({"a": [1]}))
    # a crash after writing the temporary folder but before the rename
    (store.tables_dir("t") / "gen-crashed.tmp").mkdir()
    (store.tables_dir("t") / "gen-crashed.tmp" / "part-0.parquet").write_bytes(b"half")
    assert store.read_table("t")["a"].tolist() == [1]
    store.publish_table("t", pd.DataFrame({"a": [2]}))
    assert not (store.tables_dir("t") / "gen-crashed.tmp").exists()


def test_old_generations_are_pruned(tmp_path):
    store = Store.open(tmp_path)
    for i in range(6):
        store.publish_table("t", pd.DataFrame({"a": [i]}))
    gens = [p for p in store.tables_dir("t").iterdir() if p.is_dir()]
    assert len(gens) == 3  # current + KEEP_OLD_GENERATIONS


def test_table_names_cannot_escape_the_store(tmp_path):
    with pytest.raises(ValueError):
        Store.open(tmp_path).tables_dir("../x")


def _hold_lock(root, ready, release):
    with Store(root).run_lock("update", holder="nightly update"):
        ready.set()
        release.wait(10)


def test_second_run_is_told_who_holds_the_lock(tmp_path):
    ctx = mp.get_context("spawn")
    ready, release = ctx.Event(), ctx.Event()
    proc = ctx.Process(target=_hold_lock, args=(tmp_path, ready, release))
    proc.start()
    try:
        assert ready.wait(20)
        with pytest.raises(LockHeld, match="nightly update"):
            with Store(tmp_path).run_lock("update", holder="second"):
                pass
    finally:
        release.set()
        proc.join(10)
    with Store(tmp_path).run_lock("update", holder="third"):
        pass


def test_lock_left_by_a_dead_process_is_taken_over(tmp_path):
    store = Store.open(tmp_path)
    store.runs_dir.mkdir(parents=True)
    (store.runs_dir / "update.lock").write_text(json.dumps({"pid": 2**22 + 12345, "holder": "gone"}))
    with store.run_lock("update", holder="me"):
        assert json.loads((store.runs_dir / "update.lock").read_text())["pid"] == os.getpid()
