"""The streaming and Dask engines give the in-memory record's figures on the same data.

The reference is the in-memory engine, whose figures are checked against numpy, scipy,
statsmodels and scikit-learn elsewhere; here the engines must agree with it to 1e-9.
"""
from __future__ import annotations

import tempfile

import numpy as np
import pandas as pd
import pytest

import planner
from planner.errors import InputError

from .conftest import load_json


def _table(n=1500, seed=3):
    # Invented data for an equivalence check (the statistics are checked elsewhere).
    rng = np.random.default_rng(seed)
    f = rng.standard_normal((n, 3))
    x = f @ rng.uniform(0.4, 0.9, (3, 7)) + rng.standard_normal((n, 7)) * 0.6
    frame = pd.DataFrame(x, columns=[f"v{j}_mm" for j in range(7)])
    frame.insert(0, "lot", [f"L{i:05d}" for i in range(n)])
    frame["y"] = x[:, 0] - x[:, 3] + rng.standard_normal(n)
    frame.iloc[5, 2] = np.nan
    frame.iloc[77, 4] = np.nan
    return frame


def _compare(a, b, where=""):
    if isinstance(a, dict):
        for key, value in a.items():
            assert key in b, f"{where}.{key} missing"
            _compare(value, b[key], f"{where}.{key}")
    elif isinstance(a, list) and a and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in a if v is not None):
        x = np.array([np.nan if v is None else v for v in a], float)
        y = np.array([np.nan if v is None else v for v in b], float)
        assert x.shape == y.shape, where
        np.testing.assert_allclose(x, y, rtol=1e-9, atol=1e-12, err_msg=where)
    elif isinstance(a, float) and isinstance(b, float):
        assert b == pytest.approx(a, rel=1e-9, abs=1e-12), where
    elif not isinstance(a, list):
        assert a == b, where


FIGURES = ("diagnostics", "decomposition", "components")
PLAN_FIGURES = ("plan_id", "kind", "kept", "variance_retained", "max_vif", "recommended", "chosen")


def _compare_plans(a: dict, b: dict) -> None:
    # The plans come from the Moments alone: the same in every engine (the target fits use
    # a sample and may differ).
    assert len(a["alternatives"]) == len(b["alternatives"]) == 3
    for x, y in zip(a["alternatives"], b["alternatives"]):
        _compare({key: x[key] for key in PLAN_FIGURES}, {key: y[key] for key in PLAN_FIGURES}, x["plan_id"])
        assert x["kept"] == y["kept"], x["plan_id"]
    assert a["plan_choice"]["recommended"] == b["plan_choice"]["recommended"]
DISCARDED = ("variance_fraction", "per_feature_retained", "per_feature_rmse", "spe_limit", "t2_limit",
             "rows_over_spe_limit", "rows_over_t2_limit")


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("engines")
    frame = _table()
    frame.to_csv(folder / "t.csv", index=False)
    frame.to_parquet(folder / "t.parquet")
    parts = folder / "parts"
    parts.mkdir()
    for i, idx in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[idx].to_parquet(parts / f"part{i}.parquet")
    memory = planner.audit(folder / "t.csv", engine="memory", target="y").record
    return folder, memory


@pytest.mark.parametrize("name", ["t.csv", "t.parquet"])
def test_streaming_equals_memory(files, name):
    folder, memory = files
    streamed = planner.audit(folder / name, engine="stream", target="y").record
    for key in FIGURES:
        _compare(memory[key], streamed[key], key)
    for key in DISCARDED:
        _compare(memory["discarded"][key], streamed["discarded"][key], key)
    assert [w["label"] for w in memory["discarded"]["worst_spe"]] == [w["label"] for w in streamed["discarded"]["worst_spe"]]
    _compare_plans(memory, streamed)
    assert streamed["input"]["rows_read"] == 1500 and streamed["input"]["rows_used"] == 1498
    assert streamed["reproducibility"]["engine"]["engine"] == "stream"


def test_dask_equals_memory(files):
    pytest.importorskip("dask.dataframe")
    folder, memory = files
    distributed = planner.audit(folder / "parts", engine="dask", target="y").record
    for key in FIGURES:
        _compare(memory[key], distributed[key], key)
    for key in DISCARDED:
        _compare(memory["discarded"][key], distributed["discarded"][key], key)
    assert [w["row"] for w in memory["discarded"]["worst_spe"]] == [w["row"] for w in distributed["discarded"]["worst_spe"]]
    _compare_plans(memory, distributed)
    _compare(memory["discarded"]["target"], distributed["discarded"]["target"], "target")


def test_streaming_cli_and_refusals(cli, tmp_path):
    frame = _table(300)
    frame.to_csv(tmp_path / "t.csv", index=False)
    r = cli("audit", tmp_path / "t.csv", "--engine", "stream", "--no-pdf", "--quiet", "--out", "o")
    assert r.code == 0, r
    assert load_json(tmp_path / "o" / "record.json")["input"]["rows_used"] == 298
    r = cli("audit", tmp_path / "t.csv", "--engine", "stream", "--missing", "mean", "--no-pdf", "--out", "o2")
    assert r.code == 2 and r.err.startswith("error:")
    with pytest.raises(InputError, match="no Parquet or CSV parts"):
        planner.audit(tmp_path / "nothing-here-*.parquet", engine="dask")


@pytest.mark.parametrize("name", ["t.csv", "t.parquet"])
def test_streamed_sample_is_the_rows_with_the_smallest_keys(files, name, monkeypatch):
    # Reference: the definition of bottom-k sampling, computed directly with numpy: every
    # complete row, in file order, draws a key from the seeded generator; the sample is the
    # rows with the k smallest keys. Chunks smaller than the sample make it span many chunks.
    import planner.streaming as streaming

    folder, _ = files
    monkeypatch.setattr(streaming, "SAMPLE_ROWS", 50)
    monkeypatch.setattr(streaming, "CHUNK_ROWS", 64)
    result = planner.audit(folder / name, engine="stream", target="y", seed=5)
    frame = _table()
    features = frame[[c for c in frame.columns if c.endswith("_mm")]].to_numpy()
    complete = np.flatnonzero(~np.isnan(features).any(axis=1)) + 1
    keys = np.random.default_rng([5, 41]).random(len(complete))
    expected = np.sort(complete[np.argsort(keys)[:50]])
    np.testing.assert_array_equal(result.intake.row_numbers, expected)
    np.testing.assert_allclose(result.intake.data, features[expected - 1], rtol=0, atol=1e-12)
    np.testing.assert_allclose(result.intake.target, frame["y"].to_numpy()[expected - 1], rtol=0, atol=1e-12)


@pytest.fixture
def private_tmp(tmp_path, monkeypatch):
    """A temporary-files folder for this test alone, to see what an audit leaves in it."""
    folder = tmp_path / "private-tmp"
    folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(folder))
    return folder


@pytest.mark.parametrize("name", ["t.csv", "t.parquet"])
def test_streaming_removes_its_temporary_files(files, name, private_tmp):
    folder, _ = files
    planner.audit(folder / name, engine="stream", target="y")
    assert list(private_tmp.iterdir()) == []


def _damaged(frame: pd.DataFrame, damage: str) -> pd.DataFrame:
    """The frame with one bad cell at data row 200, past the screened head."""
    frame = frame.astype({"v2_mm": object})
    frame.loc[199, "v2_mm"] = {"text": "oops", "infinite": "inf"}[damage]
    return frame


@pytest.mark.parametrize("damage, options, message", [
    ("text", [], "did not prepare for"),
    ("infinite", [], "infinite value at data row 200"),
    (None, ["--missing", "fail"], "missing value at data row 6"),
])
def test_a_streamed_input_error_leaves_no_files(cli, tmp_path, private_tmp, monkeypatch, damage, options, message):
    import planner.streaming as streaming

    monkeypatch.setattr(streaming, "HEAD_ROWS", 50)
    frame = _table(300)
    if damage:
        frame = _damaged(frame, damage)
    frame.to_csv(tmp_path / "t.csv", index=False)
    r = cli("audit", tmp_path / "t.csv", "--engine", "stream", "--no-pdf", "--quiet", "--out", "o", *options)
    assert r.code == 2 and r.err.startswith("error:") and message in r.err, r
    assert not (tmp_path / "o").exists()
    assert list(private_tmp.iterdir()) == []


@pytest.mark.parametrize("name", ["t.csv", "t.parquet"])
def test_streamed_sha256_is_that_of_the_file_bytes(files, name, monkeypatch):
    # Reference: hashlib.sha256 of the file's bytes. Small CSV blocks make the parser read
    # the file in many pieces, each hashed as it is read.
    import hashlib

    import planner.streaming as streaming

    folder, _ = files
    monkeypatch.setattr(streaming, "CSV_BLOCK_BYTES", 4096)
    record = planner.audit(folder / name, engine="stream", target="y").record
    assert record["input"]["sha256"] == hashlib.sha256((folder / name).read_bytes()).hexdigest()


@pytest.mark.parametrize("name", ["t.csv", "t.parquet"])
def test_small_blocks_and_chunks_give_the_in_memory_figures(files, name, monkeypatch):
    # The reference is the in-memory engine (see the module docstring); chunks of 100 rows
    # from 4 kB parser blocks split batches across chunks and rows across blocks.
    import planner.streaming as streaming

    folder, _ = files
    monkeypatch.setattr(streaming, "CSV_BLOCK_BYTES", 4096)
    monkeypatch.setattr(streaming, "CHUNK_ROWS", 100)
    memory = planner.audit(folder / "t.csv", engine="memory", target="y", id_column="lot").record
    streamed = planner.audit(folder / name, engine="stream", target="y", id_column="lot").record
    for key in FIGURES:
        _compare(memory[key], streamed[key], key)
    for key in DISCARDED:
        _compare(memory["discarded"][key], streamed["discarded"][key], key)
    for key in ("worst_spe", "worst_t2"):
        assert [(w["row"], w["label"]) for w in memory["discarded"][key]] == \
            [(w["row"], w["label"]) for w in streamed["discarded"][key]]
    assert [(w["row"], w["label"]) for w in memory["diagnostics"]["outliers"]["worst"]] == \
        [(w["row"], w["label"]) for w in streamed["diagnostics"]["outliers"]["worst"]]
    assert streamed["reproducibility"]["engine"]["chunk_rows"] == 100


def test_the_screened_head_holds_whole_lines_only(tmp_path, monkeypatch):
    # Reference: the file's own lines (bytes.splitlines); a line cut at the byte limit
    # must not reach the screening as a short row.
    import planner.streaming as streaming

    frame = _table(300)
    frame.to_csv(tmp_path / "t.csv", index=False)
    raw = (tmp_path / "t.csv").read_bytes()
    monkeypatch.setattr(streaming, "HEAD_BYTES", 5000)
    head = streaming._head_bytes(tmp_path / "t.csv")
    assert head.endswith(b"\n") and raw.startswith(head)
    assert head.splitlines() == raw.splitlines()[: len(head.splitlines())]
    monkeypatch.setattr(streaming, "HEAD_BYTES", len(raw) + 1)
    monkeypatch.setattr(streaming, "HEAD_ROWS", 20)
    assert streaming._head_bytes(tmp_path / "t.csv").splitlines() == raw.splitlines()[:21]


def test_auto_streams_only_what_would_crowd_the_memory(tmp_path, monkeypatch):
    # Our contract: --engine auto reads a file whole unless it is above 256 MB and its whole
    # reading would take more than a quarter of the memory available.
    import planner.streaming as streaming

    path = tmp_path / "t.csv"
    _table(200).to_csv(path, index=False)
    monkeypatch.setattr(streaming, "AUTO_STREAM_BYTES", 1024)
    monkeypatch.setattr(streaming, "memory_available", lambda: 10**12)
    assert not streaming.should_stream(path)
    monkeypatch.setattr(streaming, "memory_available", lambda: 4 * path.stat().st_size)
    assert streaming.should_stream(path)
    monkeypatch.setattr(streaming, "AUTO_STREAM_BYTES", 10**9)
    assert not streaming.should_stream(path)


def test_the_second_pass_keeps_the_order_and_closes_the_cache_after_a_worker_error(tmp_path, monkeypatch):
    # Property (invented rows): the threaded pass yields what a plain loop over the chunks
    # gives, in order; an error in a worker reaches the caller and leaves no open file.
    import os
    from types import SimpleNamespace

    import planner.streaming as streaming

    monkeypatch.setattr(streaming, "CHUNK_ROWS", 7)
    rows = np.arange(100 * 3, dtype=float).reshape(100, 3)
    cache = tmp_path / "rows.f64"
    rows.tofile(cache)
    sp = SimpleNamespace(cache_path=str(cache), moments=SimpleNamespace(p=3), rows_used=100)
    got = list(streaming.over_cached_chunks(sp, lambda chunk: chunk.sum(axis=1)))
    assert [start for start, _ in got] == list(range(0, 100, 7))
    np.testing.assert_array_equal(np.concatenate([v for _, v in got]), rows.sum(axis=1))

    def failing(chunk):
        if chunk[0, 0] >= 42:
            raise ValueError("worker failed")
        return chunk

    def open_cache() -> int:
        fds = os.listdir("/proc/self/fd")
        return sum(1 for fd in fds if os.path.realpath(f"/proc/self/fd/{fd}") == str(cache.resolve()))

    with pytest.raises(ValueError, match="worker failed"):
        for _ in streaming.over_cached_chunks(sp, failing):
            pass
    assert open_cache() == 0
