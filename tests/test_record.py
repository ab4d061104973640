"""The Record: strict JSON, canonical form and content hash as DESIGN.md defines them.

The content hash is recomputed here independently from the definition in DESIGN.md
(hashlib over json.dumps(sort_keys=True, separators=(",", ":"), ensure_ascii=False) of the
record without signoffs, status and integrity).
"""
from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pandas as pd
import pytest

import planner
from planner import record as rec
from planner.errors import InputError

from .conftest import SIMPLE_CSV, load_json, write


def _independent_hash(record: dict) -> str:
    body = {k: v for k, v in record.items() if k not in ("signoffs", "status", "integrity")}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def test_jsonable_turns_non_finite_into_null():
    value = rec.jsonable({"a": np.float64("nan"), "b": [np.inf, 1.5], "c": np.int64(3), "d": np.bool_(True)})
    assert value == {"a": None, "b": [None, 1.5], "c": 3, "d": True}
    assert isinstance(value["c"], int)


def test_canonical_form_is_sorted_compact_utf8():
    assert rec.canonical_bytes({"b": 1, "a": "é"}) == '{"a":"é","b":1}'.encode("utf-8")
    with pytest.raises(ValueError):
        rec.canonical_bytes({"x": math.nan})


def test_audit_record_hash_matches_the_definition(tmp_path):
    result = planner.audit(write(tmp_path / "s.csv", SIMPLE_CSV), title="Hash check")
    record = result.record
    assert record["integrity"]["content_sha256"] == _independent_hash(record)
    # Status and sign-offs are outside the hash.
    changed = dict(record, status="approved", signoffs=[{"name": "x"}])
    assert _independent_hash(changed) == record["integrity"]["content_sha256"]
    # Any content change changes it.
    changed = json.loads(json.dumps(record))
    changed["input"]["rows_used"] += 1
    assert _independent_hash(changed) != record["integrity"]["content_sha256"]


def test_record_survives_a_strict_json_round_trip(tmp_path):
    frame = pd.DataFrame({"a": [1.0, 2.0, 4.0, 8.0], "b": [0.5, 0.25, 3.0, 1.0], "mean_zero": [-1.0, 1.0, -2.0, 2.0]})
    record = planner.audit(frame).record
    text = rec.dumps(record)
    assert "NaN" not in text and "Infinity" not in text
    assert rec.loads(text) == record
    # The coefficient of variation of a mean-zero column is undefined: null, not NaN.
    cv = {c["column"]: c["cv"] for c in record["screening"]["columns"]}
    assert cv["mean_zero"] is None


def test_input_section_has_the_contract_keys(tmp_path):
    path = write(tmp_path / "s.csv", SIMPLE_CSV)
    record = planner.audit(path, target="moisture_pct").record
    inp = record["input"]
    assert inp["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert inp["rows_read"] == 6 and inp["rows_used"] == 6
    assert inp["columns_used"] == ["temp_c", "speed_m_min", "density_g_l"]
    assert [e["column"] for e in inp["excluded"]] == ["batch", "moisture_pct"]
    assert record["schema_version"] == rec.SCHEMA_VERSION and record["status"] == "draft"
    assert record["signoffs"] == []


def test_screening_figures_equal_pandas(tmp_path):
    path = write(tmp_path / "s.csv", SIMPLE_CSV)
    record = planner.audit(path).record
    # Reference: pandas' describe (std with n - 1).
    frame = pd.read_csv(path).drop(columns="batch")
    for row in record["screening"]["columns"]:
        col = frame[row["column"]]
        assert row["mean"] == pytest.approx(col.mean(), rel=1e-12)
        assert row["std"] == pytest.approx(col.std(ddof=1), rel=1e-12)
        assert row["minimum"] == col.min() and row["maximum"] == col.max()


@pytest.mark.parametrize(
    "text, problem",
    [
        ('{"schema_version": 1, "x": NaN}', "not a valid JSON"),
        ('{"schema_version": 1', "not a valid JSON"),
        ("[1, 2]", "not a record"),
        ('{"schema_version": 99}', "schema_version 99"),
    ],
)
def test_loading_refuses_bad_records(text, problem):
    with pytest.raises(InputError, match=problem):
        rec.loads(text)


def test_record_ids_are_fresh():
    ids = {rec.new_record_id() for _ in range(50)}
    assert len(ids) == 50 and all(i.startswith("AXL-") for i in ids)
