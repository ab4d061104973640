"""End to end: the command line from a data file to record.json and record.pdf."""
from __future__ import annotations

import io
import json
import os
from pathlib import Path

import pytest
from pypdf import PdfReader

from planner.demo import DEMO_DATA_NAME
from planner.scenario import write_kiln_csv

from .conftest import ROOT, SIMPLE_CSV, assert_clean_refusal, load_json, run_subprocess, write


def _pdf_text(path: Path) -> str:
    reader = PdfReader(str(path))
    return "\n".join(page.extract_text() or "" for page in reader.pages)


def _attachment(path: Path) -> dict:
    reader = PdfReader(str(path))
    files = reader.attachments
    assert "record.json" in files
    return json.loads(files["record.json"][0].decode("utf-8"))


def test_audit_writes_record_and_pdf(cli, tmp_path):
    data = write(tmp_path / "line.csv", SIMPLE_CSV)
    r = cli("audit", data, "--out", "out", "--title", "Line 3 screening", "--analyst", "R. Ortiz")
    assert r.code == 0, r
    record = load_json(tmp_path / "out" / "record.json")
    assert record["title"] == "Line 3 screening" and record["analyst"] == "R. Ortiz"
    assert record["record_id"] in r.out
    text = _pdf_text(tmp_path / "out" / "record.pdf")
    for expected in ("Line 3 screening", record["record_id"], "R. Ortiz", "Data and screening", record["input"]["sha256"][:16]):
        assert expected in text.replace("\n", " ") or expected in text, expected
    assert _attachment(tmp_path / "out" / "record.pdf") == record


def test_record_id_and_page_numbers_on_every_page(cli, tmp_path):
    # A wide table makes the screening section run over more than one page.
    header = ",".join(f"feature_{j:03d}" for j in range(70))
    rows = "\n".join(",".join(str((i * 7 + j * 3) % 11 + j) for j in range(70)) for i in range(12))
    data = write(tmp_path / "wide.csv", header + "\n" + rows + "\n")
    assert cli("audit", data, "--out", "o").code == 0
    record = load_json(tmp_path / "o" / "record.json")
    reader = PdfReader(str(tmp_path / "o" / "record.pdf"))
    assert len(reader.pages) >= 2
    for number, page in enumerate(reader.pages, start=1):
        text = page.extract_text()
        assert record["record_id"] in text
        assert f"page {number} of {len(reader.pages)}" in text


def test_an_existing_record_is_never_overwritten(cli, tmp_path):
    data = write(tmp_path / "line.csv", SIMPLE_CSV)
    assert cli("audit", data, "--out", "out").code == 0
    before = (tmp_path / "out" / "record.json").read_bytes()
    r = cli("audit", data, "--out", "out")
    assert_clean_refusal(r, "already exists", "--force")
    assert (tmp_path / "out" / "record.json").read_bytes() == before
    r = cli("audit", data, "--out", "out", "--force", "--no-pdf")
    assert r.code == 0
    assert (tmp_path / "out" / "record.json").read_bytes() != before
    assert not (tmp_path / "out" / "record.pdf").exists(), "a stale PDF of the replaced record stayed"


def test_a_refused_audit_leaves_no_files(cli, tmp_path):
    data = write(tmp_path / "bad.csv", "a,b\n1,2\n")
    assert cli("audit", data, "--out", "out").code == 2
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_no_pdf_writes_json_only(cli, tmp_path):
    data = write(tmp_path / "line.csv", SIMPLE_CSV)
    assert cli("audit", data, "--no-pdf").code == 0
    assert sorted(p.name for p in (tmp_path / "axisledger-out").iterdir()) == ["record.json"]


def test_shipped_demo_data_equals_its_generator(tmp_path):
    write_kiln_csv(tmp_path / DEMO_DATA_NAME)
    assert (tmp_path / DEMO_DATA_NAME).read_bytes() == (ROOT / "demo" / "kiln_line.csv").read_bytes()


def test_demo_runs_and_replaces_its_own_output(tmp_path):
    first = run_subprocess("demo", "--out", "d", cwd=tmp_path)
    assert first.code == 0, first
    assert (tmp_path / "d" / "record.pdf").exists()
    record = load_json(tmp_path / "d" / "record.json")
    assert record["demo"] is True
    assert {e["column"] for e in record["input"]["excluded"]} >= {"batch_id", "shift", "calibration_offset"}
    again = run_subprocess("demo", "--out", "d", "--no-pdf", cwd=tmp_path)
    assert again.code == 0, again
    assert load_json(tmp_path / "d" / "record.json")["record_id"] != record["record_id"]


def test_demo_refuses_a_folder_holding_a_real_record(cli, tmp_path):
    data = write(tmp_path / "line.csv", SIMPLE_CSV)
    assert cli("audit", data, "--out", "real", "--no-pdf").code == 0
    assert_clean_refusal(cli("demo", "--out", "real"), "not a demo record")


def test_python_m_planner_and_exit_codes(tmp_path):
    r = run_subprocess("--version", cwd=tmp_path)
    assert r.code == 0 and "axisledger" in r.out
    r = run_subprocess("audit", "missing.csv", cwd=tmp_path)
    assert_clean_refusal(r, "no such file")


def test_internal_error_exits_3_and_saves_the_traceback(cli, tmp_path, monkeypatch):
    import planner.cli

    def boom(args, argv):
        raise RuntimeError("forced failure for the test")

    monkeypatch.setitem(planner.cli.COMMANDS, "audit", boom)
    r = cli("audit", "whatever.csv")
    assert r.code == 3
    assert "Traceback" not in r.err and "bug" in r.err
    saved = Path(r.err.strip().rsplit(" ", 1)[-1])
    assert "forced failure for the test" in saved.read_text()
    saved.unlink()


def test_hostile_title_is_escaped_and_fetches_nothing(cli, tmp_path):
    title = '<img src="http://127.0.0.1:9/x.png"> {{ 7*7 }} <script>alert(1)</script>'
    data = write(tmp_path / "line.csv", SIMPLE_CSV.replace("temp_c", "<b>temp</b>"))
    r = cli("audit", data, "--out", "o", "--title", title)
    assert r.code == 0, r
    text = _pdf_text(tmp_path / "o" / "record.pdf").replace("\n", " ")
    assert "{{ 7*7 }}" in text and "<script>alert(1)</script>" in text and "<b>temp</b>" in text
