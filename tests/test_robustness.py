"""Robustness and security: bad inputs, fuzzing, hostile names, no data lost, determinism.

Every expected answer here comes from the command line contract of DESIGN.md (exit codes,
one ``error:`` line, no partial output, strict JSON, atomic writes) or from arithmetic on
the invented tables below, never from the program's own output. The tables are invented
for these tests (tile-press style measurements, 30-60 rows, 4-6 numeric columns).
"""
from __future__ import annotations

import contextlib
import copy
import csv
import io
import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import threading
import time
import zipfile
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from pypdf import PdfReader

import planner
from planner.cli import main
from planner.errors import InputError

from .conftest import assert_clean_refusal, load_json, write

# --------------------------------------------------------------------------- helpers
FEATURES = ["kiln_temp_c", "belt_speed_m_min", "glaze_density_g_l", "press_bar", "moisture_pct"]


def invented_rows(n: int = 40, seed: int = 5, p: int = 5) -> np.ndarray:
    """An invented table: two latent drivers plus noise, in mixed units, rounded to 3 places."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, 2))
    noise = rng.normal(size=(n, max(p, 5)))
    cols = [
        1010 + 12 * z[:, 0] + 2 * noise[:, 0],
        2.5 + 0.2 * z[:, 0] + 0.05 * noise[:, 1],
        1450 + 18 * z[:, 1] + 4 * noise[:, 2],
        300 + 6 * (z[:, 0] + z[:, 1]) + 3 * noise[:, 3],
        5.0 + 0.4 * z[:, 1] + 0.2 * noise[:, 4],
    ]
    for j in range(5, p):
        cols.append(50 + 5 * noise[:, j])
    return np.round(np.column_stack(cols[:p]), 3)


def cells(rows: np.ndarray, decimal: str = ".") -> list[list[str]]:
    out = [[f"{v:.3f}" for v in row] for row in rows]
    if decimal == ",":
        out = [[c.replace(".", ",") for c in row] for row in out]
    return out


def csv_text(header: list[str], body: list[list[str]], sep: str = ",") -> str:
    return "\n".join(sep.join(r) for r in [header, *body]) + "\n"


def simple_csv(n: int = 40, seed: int = 5) -> str:
    return csv_text(FEATURES, cells(invented_rows(n, seed)))


def only_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    return lines[0]


def files_under(root: Path) -> dict[str, bytes]:
    """Every file below ``root`` with its bytes (folders are not files)."""
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def strict_loads(text: str) -> dict:
    def refuse(token):
        raise ValueError(f"non-standard JSON token {token}")

    return json.loads(text, parse_constant=refuse)


def pdf_text(path: Path) -> str:
    return "\n".join(page.extract_text() or "" for page in PdfReader(str(path)).pages)


def compact(text: str) -> str:
    """Text without any white space: a line break in the PDF must not hide a literal."""
    return "".join(text.split())


def pdf_attachment(path: Path) -> dict:
    files = PdfReader(str(path)).attachments
    assert "record.json" in files, sorted(files)
    return strict_loads(files["record.json"][0].decode("utf-8"))


def saved_traceback_path(err: str) -> Path | None:
    for token in err.replace("'", " ").split():
        candidate = Path(token.rstrip(".,;:"))
        if candidate.is_absolute() and candidate.is_file():
            return candidate
    return None


def make_record(cli, tmp: Path, name: str = "plant.csv", out: str = "rec") -> tuple[Path, Path]:
    """A real record made by ``audit --no-pdf`` from a small invented CSV."""
    data = write(tmp / name, simple_csv())
    r = cli("audit", data, "--out", tmp / out, "--no-pdf")
    assert r.code == 0, r
    return data, tmp / out / "record.json"


# --------------------------------------------------------------------------- 1. the corpus
@dataclass
class Bad:
    id: str
    build: Callable  # (tmp_path, cli) -> (args, fragments)


def _audit(data, *extra) -> list:
    return ["audit", data, "--out", "out", "--no-pdf", *extra]


def _file(name: str, content, encoding: str = "utf-8"):
    def build(tmp, cli):
        path = tmp / name
        path.write_bytes(content if isinstance(content, bytes) else content.encode(encoding))
        return _audit(path), [name]

    return build


def _with_option(*option, fragments=()):
    def build(tmp, cli):
        data = write(tmp / "plant.csv", simple_csv())
        return _audit(data, *option), list(fragments)

    return build


def _missing_file(tmp, cli):
    return _audit(tmp / "no_such_table.csv"), ["no_such_table.csv"]


def _folder(tmp, cli):
    (tmp / "data_folder").mkdir()
    return _audit(tmp / "data_folder"), ["data_folder"]


def _zip_without_workbook(tmp, cli):
    path = tmp / "archive.xlsx"
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("notes/readme.txt", "not a workbook")
        archive.writestr("data.csv", simple_csv())
    return _audit(path), ["archive.xlsx"]


def _cell(row_index: int, col: str, token: str, n: int = 40):
    body = cells(invented_rows(n))
    body[row_index][FEATURES.index(col)] = token
    return csv_text(FEATURES, body)


def _rules(name: str, text: str, fragments=()):
    def build(tmp, cli):
        data = write(tmp / "plant.csv", simple_csv())
        rules = write(tmp / name, text)
        return _audit(data, "--rules", rules), [name, *fragments]

    return build


RULE_OK = """
[[rule]]
id = "vif_very_high"
figure = "diagnostics.vif"
compare = ">"
threshold = 20
severity = "caution"
message = "{subject} has a VIF of {value}"
source = "common practice"
"""


def _damaged(command: str, damage: str):
    def build(tmp, cli):
        data, record = make_record(cli, tmp)
        raw = record.read_bytes()
        damaged = tmp / f"damaged_{damage}.json"
        if damage == "truncated":
            damaged.write_bytes(raw[: len(raw) // 2])
        elif damage == "not_json":
            damaged.write_bytes(b"record: this is not JSON {\n")
        else:
            doc = json.loads(raw)
            doc["schema_version"] = 99
            damaged.write_text(json.dumps(doc, indent=2), encoding="utf-8")
        args = {
            "verify": ["verify", damaged],
            "sign": ["sign", damaged, "--name", "R. Ortiz", "--role", "reviewer", "--meaning", "checked the method"],
            "apply": ["apply", damaged, data, "--out", tmp / "out" / "reduced.csv", "--allow-draft"],
        }[command]
        return args, [damaged.name]

    return build


def _constant_csv() -> str:
    body = [["1.5", "7", "300.25", "0"] for _ in range(40)]
    return csv_text(["a_mm", "b_bar", "c_c", "d_pct"], body)


def _text_csv() -> str:
    body = [[f"lot-{i % 7}", ["red", "blue", "green"][i % 3], "ok"] for i in range(40)]
    return csv_text(["lot", "colour", "state"], body)


def _one_numeric_csv() -> str:
    rows = invented_rows()
    body = [[f"{rows[i, 0]:.3f}", ["red", "blue", "green"][i % 3]] for i in range(40)]
    return csv_text(["kiln_temp_c", "colour"], body)


def _duplicate_csv() -> str:
    header = ["kiln_temp_c", "belt_speed_m_min", "kiln_temp_c", "press_bar", "moisture_pct"]
    return csv_text(header, cells(invented_rows()))


def _gap_csv() -> str:
    return _cell(7, "press_bar", "")


REFUSED = [
    Bad("missing-file", _missing_file),
    Bad("folder", _folder),
    Bad("empty-file", _file("empty.csv", b"")),
    Bad("whitespace-only-file", _file("blank.csv", b"  \n\n \n")),
    Bad("header-only", _file("header_only.csv", ",".join(FEATURES) + "\n")),
    Bad("one-row", _file("one_row.csv", csv_text(FEATURES, cells(invented_rows(1))))),
    Bad("two-rows", _file("two_rows.csv", csv_text(FEATURES, cells(invented_rows(2))))),
    Bad("text-only", _file("text_only.csv", _text_csv())),
    Bad("one-numeric-column", _file("one_numeric.csv", _one_numeric_csv())),
    Bad("duplicate-column-names", lambda tmp, cli: (_audit(write(tmp / "dupes.csv", _duplicate_csv())), ["dupes.csv", "kiln_temp_c"])),
    Bad("binary-garbage", _file("garbage.csv", bytes(np.random.default_rng(9).integers(0, 256, 4096, dtype=np.uint8)) + b"\x00\x01")),
    Bad("csv-named-xlsx", _file("table.xlsx", simple_csv())),
    Bad("zip-without-workbook-named-xlsx", _zip_without_workbook),
    Bad("random-bytes-named-xlsx", _file("noise.xlsx", bytes(np.random.default_rng(3).integers(0, 256, 2048, dtype=np.uint8)))),
    Bad("text-named-parquet", _file("table.parquet", simple_csv())),
    Bad("all-columns-constant", _file("constant.csv", _constant_csv())),
    Bad("infinite-inf", lambda tmp, cli: (_audit(write(tmp / "inf.csv", _cell(4, "press_bar", "inf"))), ["press_bar"])),
    Bad("infinite-minus-Infinity", lambda tmp, cli: (_audit(write(tmp / "ninf.csv", _cell(9, "kiln_temp_c", "-Infinity"))), ["kiln_temp_c"])),
    Bad("missing-fail-with-gap", lambda tmp, cli: (_audit(write(tmp / "gap.csv", _gap_csv()), "--missing", "fail"), ["press_bar", "fail"])),
    Bad("components-0", _with_option("--components", "0", "--because", "spec", fragments=["--components"])),
    Bad("components-abc", _with_option("--components", "abc", fragments=["--components"])),
    Bad("components-above-p", _with_option("--components", "9", "--because", "the model spec says nine", fragments=["--components", "9"])),
    Bad("components-without-because", _with_option("--components", "2", fragments=["--because"])),
    Bad("because-without-components", _with_option("--because", "no reason", fragments=["--because"])),
    Bad("seed-abc", _with_option("--seed", "abc", fragments=["--seed", "abc"])),
    Bad("seed-negative", _with_option("--seed", "-1", fragments=["--seed"])),
    Bad("scaling-unknown", _with_option("--scaling", "zscore", fragments=["--scaling", "zscore"])),
    Bad("missing-unknown", _with_option("--missing", "drop", fragments=["--missing", "drop"])),
    Bad("target-unknown", _with_option("--target", "yield_pct", fragments=["--target", "yield_pct"])),
    Bad("columns-unknown", _with_option("--columns", "kiln_temp_c,ghost_col", fragments=["--columns", "ghost_col"])),
    Bad("exclude-unknown", _with_option("--exclude", "phantom", fragments=["--exclude", "phantom"])),
    Bad("id-column-unknown", _with_option("--id-column", "batch_ref", fragments=["--id-column", "batch_ref"])),
    Bad("title-empty", _with_option("--title", "  ", fragments=["--title"])),
    Bad("unknown-option", _with_option("--colour", "red", fragments=["--colour"])),
    Bad("out-is-a-file", lambda tmp, cli: (["audit", write(tmp / "plant.csv", simple_csv()), "--out", write(tmp / "occupied", "x"), "--no-pdf"], ["--out"])),
    Bad("rules-toml-syntax-error", _rules("bad_syntax.toml", RULE_OK.replace("threshold = 20", "threshold = = 20"))),
    Bad("rules-threshold-text", _rules("threshold_text.toml", RULE_OK.replace("threshold = 20", 'threshold = "ten"'), ["threshold"])),
    Bad("rules-severity-number", _rules("severity_number.toml", RULE_OK.replace('severity = "caution"', "severity = 7"), ["severity"])),
    Bad("rules-unknown-figure", _rules("unknown_figure.toml", RULE_OK.replace("diagnostics.vif", "diagnostics.crystal_ball"), ["diagnostics.crystal_ball"])),
    Bad("rules-missing-file", lambda tmp, cli: (_audit(write(tmp / "plant.csv", simple_csv()), "--rules", tmp / "absent_rules.toml"), ["absent_rules.toml"])),
    *[Bad(f"{command}-record-{damage}", _damaged(command, damage))
      for command in ("verify", "sign", "apply") for damage in ("truncated", "not_json", "schema_version")],
]


@pytest.mark.parametrize("case", REFUSED, ids=[c.id for c in REFUSED])
def test_bad_input_is_refused_cleanly(case, cli, tmp_path):
    args, fragments = case.build(tmp_path, cli)
    before = files_under(tmp_path)
    r = cli(*args)
    assert_clean_refusal(r, *fragments)
    line = only_line(r.err)
    # What is wrong and what to do: "error: WHAT; FIX" (planner.errors.InputError).
    what, _, fix = line[len("error: "):].partition("; ")
    assert what.strip() and fix.strip(), f"the message does not say what to do: {line!r}"
    after = files_under(tmp_path)
    if args[0] == "sign":  # a lock file beside the record is how concurrent sign-offs queue
        after = {k: v for k, v in after.items() if not k.endswith(".lock")}
    assert after == before, f"files changed or were written: {sorted(set(after) ^ set(before))}"


# READ: the oddity is read, the record written and the oddity reported.
def _findings(record, prefix="intake."):
    return [f for f in record["findings"] if f["rule_id"].startswith(prefix)]


def _excluded(record) -> dict:
    return {e["column"]: e["reason"] for e in record["input"]["excluded"]}


def _screen_mean(record, column) -> float:
    for entry in record["screening"]["columns"]:
        if entry["column"] == column:
            return entry["mean"]
    raise AssertionError(f"{column} not profiled")


@dataclass
class Odd:
    id: str
    build: Callable  # tmp_path -> (args, check(record))


def _nan_spelling(spelling):
    def build(tmp):
        body = cells(invented_rows())
        j = FEATURES.index("press_bar")
        for i in (3, 17, 30):
            body[i][j] = spelling
        data = write(tmp / "gaps.csv", csv_text(FEATURES, body))

        def check(record):
            assert record["input"]["rows_read"] == 40
            assert "press_bar" in record["input"]["columns_used"]
            assert record["input"]["missing"]["per_column"]["press_bar"] == 3
            assert record["input"]["missing"]["rows_dropped"] == 3
            assert record["input"]["rows_used"] == 37
            assert _findings(record), "the dropped rows are not reported as an intake finding"

        return _audit(data), check

    return build


def _thousands(tmp):
    rows = invented_rows()
    body = cells(rows)
    j = FEATURES.index("glaze_density_g_l")
    for i, row in enumerate(body):
        row[j] = f'"{rows[i, j]:,.3f}"'  # e.g. "1,452.125"
    assert any("," in row[j] for row in body)
    data = write(tmp / "thousands.csv", csv_text(FEATURES, body))

    def check(record):
        assert record["input"]["columns_used"] == FEATURES
        assert _screen_mean(record, "glaze_density_g_l") == pytest.approx(rows[:, j].mean(), rel=1e-12)

    return _audit(data), check


def _mixed(tmp):
    body = cells(invented_rows())
    j = FEATURES.index("press_bar")
    body[5][j], body[21][j] = "broken", "12 bar"
    data = write(tmp / "mixed.csv", csv_text(FEATURES, body))

    def check(record):
        reason = _excluded(record).get("press_bar")
        assert reason is not None, record["input"]["excluded"]
        assert "mixed" in reason.lower() and "broken" in reason and "12 bar" in reason, reason
        assert record["input"]["columns_used"] == [c for c in FEATURES if c != "press_bar"]

    return _audit(data), check


def _newlines(tmp):
    notes = ['"kiln door\nopened twice"', '"ok"', '"glaze, thin\non the left"']
    body = [[*row, notes[i % 3]] for i, row in enumerate(cells(invented_rows()))]
    data = write(tmp / "remarks.csv", csv_text([*FEATURES, "remark"], body))

    def check(record):
        assert record["input"]["rows_read"] == 40
        assert record["input"]["columns_used"] == FEATURES
        assert "remark" in _excluded(record)

    return _audit(data), check


def _encoded(name, encoding, header=FEATURES, expect_encoding=None, latin=False):
    def build(tmp):
        text = csv_text(list(header), cells(invented_rows()))
        data = tmp / name
        data.write_bytes(text.encode(encoding))

        def check(record):
            assert record["input"]["columns_used"] == list(header)
            got = record["input"]["text_format"]["encoding"].lower().replace("_", "-")
            if expect_encoding:
                assert expect_encoding in got, got
            if latin:
                said = [f["message"] for f in _findings(record)] + record["input"]["notes"]
                assert any("latin-1" in m.lower() for m in said), said

        return _audit(data), check

    return build


def _semicolon(tmp):
    rows = invented_rows()
    data = write(tmp / "european.csv", csv_text(FEATURES, cells(rows, decimal=","), sep=";"))

    def check(record):
        fmt = record["input"]["text_format"]
        assert fmt["decimal"] == "," and fmt["delimiter"] == ";", fmt
        assert record["input"]["columns_used"] == FEATURES
        for j, c in enumerate(FEATURES):
            assert _screen_mean(record, c) == pytest.approx(rows[:, j].mean(), rel=1e-12), c

    return _audit(data), check


LONG_NAME = ("moisture_probe_" + "abcdefghij" * 500)[:5000]


def _long_header(tmp):
    header = [*FEATURES[:-1], LONG_NAME]
    data = write(tmp / "long_name.csv", csv_text(header, cells(invented_rows())))

    def check(record):
        assert record["input"]["columns_used"] == header
        assert LONG_NAME in record["decomposition"]["loadings"]

    return _audit(data), check


def _all_missing(tmp):
    spellings = ["", "NA", "null", "-", "N/A", "NaN"]
    body = [[*row, spellings[i % 6]] for i, row in enumerate(cells(invented_rows()))]
    data = write(tmp / "spare.csv", csv_text([*FEATURES, "spare_probe"], body))

    def check(record):
        assert _excluded(record).get("spare_probe", "").lower() == "all values missing"
        assert record["input"]["columns_used"] == FEATURES
        assert record["input"]["rows_used"] == 40

    return _audit(data), check


def _constant_target(tmp):
    body = [[*row, "42.0"] for row in cells(invented_rows())]
    data = write(tmp / "target.csv", csv_text([*FEATURES, "strength_mpa"], body))

    def check(record):
        assert record["input"]["target"] == "strength_mpa"
        assert "strength_mpa" not in record["input"]["columns_used"]
        target = record["discarded"].get("target")
        assert isinstance(target, dict), record["discarded"].keys()
        assert "constant" in str(target.get("reason", "")).lower(), target

    return _audit(data, "--target", "strength_mpa"), check


READ = [
    *[Odd(f"nan-spelling-{label}", _nan_spelling(s)) for label, s in
      (("NA", "NA"), ("empty", ""), ("null", "null"), ("dash", "-"), ("N-slash-A", "N/A"), ("NaN", "NaN"))],
    Odd("thousands-separators", _thousands),
    Odd("mixed-types-column", _mixed),
    Odd("quoted-fields-with-newlines", _newlines),
    Odd("utf8-with-bom", _encoded("bom.csv", "utf-8-sig", expect_encoding="utf-8")),
    Odd("utf16-with-bom", _encoded("utf16.csv", "utf-16", expect_encoding="16")),
    Odd("latin1", _encoded("latin1.csv", "latin-1", header=["température_°C", *FEATURES[1:]], latin=True)),
    Odd("semicolon-decimal-comma", _semicolon),
    Odd("header-5000-characters", _long_header),
    Odd("all-missing-column", _all_missing),
    Odd("constant-target", _constant_target),
]


@pytest.mark.parametrize("case", READ, ids=[c.id for c in READ])
def test_odd_input_is_read_and_reported(case, cli, tmp_path):
    args, check = case.build(tmp_path)
    r = cli(*args)
    assert r.code == 0, r
    assert "Traceback" not in r.err
    record = load_json(tmp_path / "out" / "record.json")
    check(record)
    v = cli("verify", tmp_path / "out" / "record.json")
    assert v.code == 0, v


def test_header_with_bom_is_clean(cli, tmp_path):
    data = tmp_path / "bom.csv"
    data.write_bytes(simple_csv().encode("utf-8-sig"))
    assert cli(*_audit(data)).code == 0
    first = load_json(tmp_path / "out" / "record.json")["input"]["columns_used"][0]
    assert first == "kiln_temp_c" and "\ufeff" not in first


def test_ten_thousand_columns_by_twelve_rows(cli, tmp_path):
    p, n = 10_000, 12
    rng = np.random.default_rng(21)
    header = [f"probe_{j:05d}" for j in range(p)]
    body = [[f"{v:.3f}" for v in row] for row in rng.normal(size=(n, p))]
    data = write(tmp_path / "wide.csv", csv_text(header, body))
    r = cli(*_audit(data))
    assert r.code == 0, r
    record = load_json(tmp_path / "out" / "record.json")
    assert record["input"]["columns_used"] == header
    vif = record["diagnostics"]["vif"]
    assert len(vif) == p and all(v is None for v in vif.values())
    assert isinstance(record["diagnostics"].get("vif_reason"), str) and record["diagnostics"]["vif_reason"].strip()


# --------------------------------------------------------------------------- 2. fuzzing
FUZZ = settings(max_examples=25, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

HOSTILE_TOKENS = ["", " ", "NA", "null", "-", "N/A", "NaN", "nan", "inf", "-Infinity", "1,234.5", "3,14",
                  '"', '""', "'", ";", ",", "\t", "|", "\n", "x", "text", "1e308", "1e-320", "-0", "0x1F",
                  "١٢٣", "½", "\u00a0", "=1+1", "<b>", "{{ 7*7 }}", "é", "\ufeff"]
wild_name = st.text(
    alphabet=st.characters(blacklist_categories=("Cs",), max_codepoint=0x2FFF) | st.sampled_from(list(',;"\'|\t<>{}%#')),
    max_size=10,
)
printable_name = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc"), max_codepoint=0x2FFF) | st.sampled_from(list(',;"\'|<>{}%# ')),
    min_size=1, max_size=12,
)
name_text = wild_name | printable_name


@st.composite
def csv_documents(draw) -> bytes:
    # Three documents in four are well-formed CSV with dirty cells (they reach the analysis);
    # the fourth is wild: any size, any names, hand-joined with unbalanced quotes.
    wild = draw(st.sampled_from([False, False, False, True]))
    n = draw(st.integers(0, 40) if wild else st.integers(5, 40))
    p = draw(st.integers(1, 6) if wild else st.integers(2, 6))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    numeric = rng.normal(size=(n, p)) * rng.choice([1e-3, 1, 1e3, 1e6], size=p) + rng.choice([0, 10, 1e5], size=p)
    grid = [[repr(float(v)) for v in row] for row in numeric]
    names = st.lists(printable_name | st.sampled_from(HOSTILE_TOKENS[6:]), min_size=p, max_size=p, unique=True)
    header = draw(st.lists(name_text | st.sampled_from(HOSTILE_TOKENS), min_size=p, max_size=p) if wild else names)
    for _ in range(draw(st.integers(0, 8)) if n else 0):
        i, j = draw(st.integers(0, n - 1)), draw(st.integers(0, p - 1))
        grid[i][j] = draw(st.sampled_from(HOSTILE_TOKENS) | st.text(max_size=6))
    if draw(st.booleans()) and n:  # a whole text column
        word = draw(st.text(min_size=1, max_size=5))
        header.append(draw(name_text.filter(lambda h: h not in header)))
        for row in grid:
            row.append(word)
    sep = draw(st.sampled_from([",", ";", "\t", "|"]))
    if not wild or draw(st.booleans()):
        buffer = io.StringIO()
        csv.writer(buffer, delimiter=sep, quoting=draw(st.sampled_from([csv.QUOTE_MINIMAL, csv.QUOTE_ALL, csv.QUOTE_NONNUMERIC]))).writerows([header, *grid])
        text = buffer.getvalue()
    else:  # hand-joined, quotes and separators inside cells left unbalanced
        text = "\n".join(sep.join(r) for r in [header, *grid]) + draw(st.sampled_from(["", "\n", "\n\n"]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "latin-1", "cp1252"]))
    return text.encode(encoding, errors="replace")


def run_main(*args) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


def _crash_details(err: str) -> str:
    """The saved traceback of an exit 3 (the file is removed once read)."""
    path = saved_traceback_path(err)
    if path is None:
        return "(no traceback file found)"
    text = path.read_text(encoding="utf-8")
    path.unlink(missing_ok=True)
    return text


def _huge_value_table() -> str:
    body = cells(invented_rows())
    body[3][FEATURES.index("glaze_density_g_l")] = "1e200"  # finite, but its square overflows
    return csv_text(FEATURES, body)


def test_a_huge_finite_value_is_refused_or_read_never_a_crash(cli, tmp_path):
    data = write(tmp_path / "huge.csv", _huge_value_table())
    r = cli("audit", data, "--out", "out", "--no-pdf")
    assert r.code in (0, 2), f"exit {r.code}: {r.err}\n{_crash_details(r.err)}"
    if r.code == 2:
        assert_clean_refusal(r, "glaze_density_g_l")
    else:
        load_json(tmp_path / "out" / "record.json")


def test_a_huge_finite_value_through_the_api_is_an_input_error_or_a_record(tmp_path):
    frame = pd.read_csv(io.StringIO(_huge_value_table()))
    try:
        record = planner.audit(frame).record
    except InputError:
        return
    json.dumps(record, allow_nan=False)


@FUZZ
@given(document=csv_documents())
def test_fuzzed_csv_exits_0_or_2_and_writes_strict_json(document):
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "fuzz.csv"
        data.write_bytes(document)
        out = Path(tmp) / "out"
        code, stdout, err = run_main("audit", data, "--out", out, "--no-pdf")
        assert code in (0, 2), f"exit {code} for {document[:300]!r}\n{err}\n{_crash_details(err)}"
        assert "Traceback" not in err
        if code == 2:
            line = only_line(err)
            assert line.startswith("error: "), err
            assert not (out / "record.json").exists()
        else:
            record = strict_loads((out / "record.json").read_text(encoding="utf-8"))
            assert record["input"]["sha256"] is not None


KINDS = ["normal", "normal", "duplicate", "collinear", "near_collinear", "constant", "offset", "tiny",
         "huge", "small_integers", "skewed"]
SHARE_SLACK = 1e-12


@st.composite
def matrices(draw):
    n = draw(st.integers(5, 60))
    p = draw(st.integers(2, 8))
    seed = draw(st.integers(0, 2**31 - 1))
    kinds = draw(st.lists(st.sampled_from(KINDS), min_size=p, max_size=p))
    scaling = draw(st.sampled_from(["auto", "standardize", "center", "robust", "pareto"]))
    rng = np.random.default_rng(seed)
    cols: list[np.ndarray] = []
    for kind in kinds:
        base = rng.normal(size=n)
        if kind == "duplicate" and cols:
            x = cols[int(rng.integers(len(cols)))].copy()
        elif kind == "collinear" and len(cols) >= 2:
            a, b = rng.choice(len(cols), size=2, replace=False)
            x = 2.0 * cols[a] - 0.5 * cols[b]
        elif kind == "near_collinear" and cols:
            x = cols[-1] + 1e-9 * base
        elif kind == "constant":
            x = np.full(n, 3.25)
        elif kind == "offset":
            x = 1e8 + base
        elif kind == "tiny":
            x = 1e-9 * base
        elif kind == "huge":
            x = 1e9 * base
        elif kind == "small_integers":
            x = rng.integers(0, 4, size=n).astype(float)
        elif kind == "skewed":
            x = np.exp(2.0 * base)
        else:
            x = base
        cols.append(x)
    frame = pd.DataFrame(np.column_stack(cols), columns=[f"m{j}_{k}" for j, k in enumerate(kinds)])
    return frame, scaling


def _in_unit(value, label):
    assert value is not None, f"{label} is null"
    assert -SHARE_SLACK <= value <= 1 + SHARE_SLACK, f"{label} = {value!r} is outside [0, 1]"


@settings(FUZZ, max_examples=40)
@given(case=matrices())
def test_fuzzed_matrices_keep_the_invariants(case):
    frame, scaling = case
    try:
        record = planner.audit(frame, scaling=scaling, seed=0).record
    except InputError:
        return  # a clean refusal (e.g. fewer than two usable columns) is an acceptable answer
    json.dumps(record, allow_nan=False)
    used = record["input"]["columns_used"]
    dec = record["decomposition"]
    eig = np.array(dec["eigenvalues"], dtype=float)
    assert np.all(np.isfinite(eig)), dec["eigenvalues"]
    assert np.all(np.diff(eig) <= 1e-12 * max(1.0, abs(eig[0]))), "eigenvalues are not descending"
    trace = dec["trace"]
    assert abs(eig.sum() - trace) <= 1e-8 * abs(trace), (eig.sum(), trace)
    loadings = np.array([dec["loadings"][c] for c in used], dtype=float)
    m = loadings.shape[1]
    assert 1 <= m <= len(used)
    np.testing.assert_allclose(loadings.T @ loadings, np.eye(m), atol=1e-8)
    diag = record["diagnostics"]
    vifs = list(diag["vif"].values()) + list(((diag.get("without_dependents") or {}).get("vif") or {}).values())
    for v in vifs:
        if v is not None:
            assert v >= 1 - 1e-9, vifs
    kmo = diag["kmo"]
    for label, value in [("kmo.overall", kmo.get("overall")), *[(f"kmo[{c}]", v) for c, v in (kmo.get("per_variable") or {}).items()]]:
        if value is not None:
            _in_unit(value, label)
    for i, value in enumerate(dec["explained_ratio"]):
        _in_unit(value, f"explained_ratio[{i}]")
    for c, value in record["discarded"]["per_feature_retained"].items():
        _in_unit(value, f"per_feature_retained[{c}]")
    _in_unit(record["components"]["kept_share"], "components.kept_share")
    _in_unit(record["discarded"]["variance_fraction"], "discarded.variance_fraction")
    assert 1 <= record["components"]["chosen"] <= len(eig)
    assert 1 <= record["components"]["recommended"] <= len(eig)


# --------------------------------------------------------------------------- 3. hostile names
class _Recorder(BaseHTTPRequestHandler):
    seen: list = []

    def setup(self):
        type(self).seen.append(("connect", self.client_address))
        super().setup()

    def _answer(self):
        type(self).seen.append((self.command, self.path))
        body = b"body{background:url(http://127.0.0.1/)}" if self.path.endswith(".css") else b"GIF89a"
        self.send_response(200)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    do_GET = do_POST = do_HEAD = _answer

    def log_message(self, *args):  # keep the test output quiet
        pass


@pytest.fixture
def loopback_server():
    class Handler(_Recorder):
        seen = []

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield server.server_address[1], Handler.seen
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=5)


def _hostile_csv(path: Path, names: list[str]) -> Path:
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows([names, *cells(invented_rows(n=40, p=len(names)))])
    return write(path, buffer.getvalue())


def test_hostile_names_and_title_are_text_and_fetch_nothing(cli, tmp_path, loopback_server):
    port, seen = loopback_server
    names = [
        "<b>x</b>",
        "<script>alert(1)</script>",
        f'<img src="http://127.0.0.1:{port}/img.png">',
        f'<link rel=stylesheet href="http://127.0.0.1:{port}/x.css">',
        "<iframe src=file:///etc/passwd>",
        f"url(http://127.0.0.1:{port}/u)",
        "{{ 7*7 }}",
        "{% raw %}",
    ]
    data = _hostile_csv(tmp_path / "hostile.csv", names)
    title = ("Hostile review {{ 7*7 }} {% raw %} <b>x</b> <script>alert(1)</script> "
             f'<img src="http://127.0.0.1:{port}/t.png"> <link rel=stylesheet href="http://127.0.0.1:{port}/t.css"> '
             f"<iframe src=file:///etc/passwd> <div style=\"background:url(http://127.0.0.1:{port}/bg)\">x</div>")
    r = cli("audit", data, "--out", "o", "--title", title)
    assert r.code == 0, r
    record = load_json(tmp_path / "o" / "record.json")
    assert record["input"]["columns_used"] == names and record["title"] == title
    assert seen == [], f"the renderer reached the network: {seen}"

    text = pdf_text(tmp_path / "o" / "record.pdf")
    flat = compact(text)
    assert compact(title) in flat, "the title does not appear literally in the PDF"
    assert compact("Hostile review 49") not in flat, "template syntax in the title was evaluated"
    for name in names:
        assert compact(name) in flat, f"{name!r} does not appear literally in the PDF"
    assert "root:" not in text, "a local file was read into the PDF"
    assert pdf_attachment(tmp_path / "o" / "record.pdf") == record

    from planner.render.html import render_html

    html = render_html(record)
    assert "<script>alert(1)</script>" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert f'<img src="http://127.0.0.1:{port}' not in html


#: A guard against a stalled renderer (not a speed measurement): an ordinary PDF of this
#: size renders in a few seconds; a hostile name must not hold the process for minutes.
STALL_GUARD_S = 90


def test_a_3000_character_name_renders_without_stalling(tmp_path, loopback_server):
    port, seen = loopback_server
    long_name = f'<img src="http://127.0.0.1:{port}/long.png">' + "0123456789" * 300
    assert len(long_name) > 3000
    names = [*FEATURES[:4], long_name]
    data = _hostile_csv(tmp_path / "long.csv", names)
    try:
        proc = subprocess.run([sys.executable, "-m", "planner", "audit", str(data), "--out", "o"],
                              cwd=tmp_path, capture_output=True, text=True, timeout=STALL_GUARD_S)
    except subprocess.TimeoutExpired:
        pytest.fail(f"audit with the PDF did not finish within {STALL_GUARD_S} s for a {len(long_name)}-character "
                    "column name (a 40 x 5 table): a long name stalls the renderer")
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    record = load_json(tmp_path / "o" / "record.json")
    assert record["input"]["columns_used"] == names
    assert seen == [], f"the renderer reached the network: {seen}"
    assert compact(long_name[:80]) in compact(pdf_text(tmp_path / "o" / "record.pdf"))


# --------------------------------------------------------------------------- 4. no data lost
def test_an_audit_never_replaces_a_record_without_force(cli, tmp_path):
    data = write(tmp_path / "plant.csv", simple_csv())
    assert cli("audit", data, "--out", "o").code == 0
    before = files_under(tmp_path / "o")
    assert set(before) == {"record.json", "record.pdf"}
    other = write(tmp_path / "other.csv", simple_csv(seed=8))
    for extra in ([], ["--no-pdf"]):
        r = cli("audit", other, "--out", "o", *extra)
        assert_clean_refusal(r, "--force")
        assert files_under(tmp_path / "o") == before
    r = cli("audit", other, "--out", "o", "--force")
    assert r.code == 0, r
    after = files_under(tmp_path / "o")
    assert after["record.json"] != before["record.json"] and after["record.pdf"] != before["record.pdf"]
    assert pdf_attachment(tmp_path / "o" / "record.pdf") == load_json(tmp_path / "o" / "record.json")


def _bigger_csv(path: Path, n: int, p: int) -> Path:
    rng = np.random.default_rng(n + p)
    z = rng.normal(size=(n, 4))
    x = z @ rng.normal(size=(4, p)) + rng.normal(size=(n, p))
    return write(path, csv_text([f"sensor_{j:03d}" for j in range(p)], [[f"{v:.4f}" for v in row] for row in x]))


def _leftovers(folder: Path) -> list[str]:
    return [name for name in os.listdir(folder) if name not in ("record.json", "record.pdf")]


def test_killing_an_audit_mid_render_keeps_the_previous_files(cli, tmp_path):
    """SIGKILL 2.5 s into ``audit --force``: the previous record and PDF stay byte for byte.

    On the first table the computation ends after about 1.5 s and the PDF render runs for
    several more, so the kill lands in the render; a machine fast enough to finish first
    gets a bigger table, and every finished run must have left complete, matching files.
    """
    data = write(tmp_path / "plant.csv", simple_csv())
    assert cli("audit", data, "--out", "o").code == 0
    out = tmp_path / "o"
    # Small tables: the computation ends early and the PDF render takes the next seconds.
    sizes = [(60, 8), (200, 20), (400, 40)]
    for attempt, (n, p) in enumerate(sizes, start=1):
        before = files_under(out)
        big = _bigger_csv(tmp_path / f"bigger_{attempt}.csv", n, p)
        proc = subprocess.Popen([sys.executable, "-m", "planner", "audit", str(big), "--out", str(out), "--force"],
                                cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        deadline = time.monotonic() + 2.5
        while time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.05)
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
            assert proc.wait(timeout=30) == -signal.SIGKILL
            proc.stderr.close()
            assert files_under(out) == before, "a killed audit changed the previous record or PDF"
            for name in _leftovers(out):
                assert re.fullmatch(r"\..+\.tmp", name), f"a killed audit left {name!r} behind"
            return
        err = proc.stderr.read().decode()
        proc.stderr.close()
        assert proc.returncode == 0, err
        # It finished before the kill: the new files must be complete and agree.
        assert _leftovers(out) == []
        v = cli("verify", out / "record.json")
        assert v.code == 0, v
        assert pdf_attachment(out / "record.pdf") == load_json(out / "record.json")
    pytest.skip(f"every audit finished within 2.5 s ({sizes}); the kill could not land mid-render")


def test_signing_a_record_that_fails_verification_is_refused(cli, tmp_path):
    data, record_path = make_record(cli, tmp_path)
    doc = json.loads(record_path.read_text(encoding="utf-8"))
    doc["title"] = doc["title"] + " (edited by hand)"
    record_path.write_text(json.dumps(doc, indent=2), encoding="utf-8")
    assert cli("verify", record_path).code == 1
    before = files_under(tmp_path)
    r = cli("sign", record_path, "--name", "R. Ortiz", "--role", "reviewer", "--meaning", "reviewed")
    assert_clean_refusal(r, record_path.name)
    after = {k: v for k, v in files_under(tmp_path).items() if not k.endswith(".lock")}
    assert after == before


# --------------------------------------------------------------------------- 5. determinism
VOLATILE = ("record_id", "created_at", "integrity")


def _stable(record: dict) -> dict:
    record = copy.deepcopy(record)
    for key in VOLATILE:
        record.pop(key, None)
    for event in record.get("audit_trail", []):
        event.pop("at", None)
    for key in list(record.get("reproducibility", {})):
        if key.endswith("_at") or key in ("timestamp", "time", "date"):
            del record["reproducibility"][key]
    return record


def _differences(a, b, path="") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for key in sorted(set(a) | set(b)):
            out += _differences(a.get(key, "<absent>"), b.get(key, "<absent>"), f"{path}.{key}")
        return out
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in _differences(x, y, f"{path}[{i}]")]
    return [] if a == b else [f"{path}: {str(a)[:80]} != {str(b)[:80]}"]


def test_same_data_options_and_seed_give_the_same_record(cli, tmp_path):
    rows = invented_rows(n=50, seed=13)
    strength = np.round(30 + 0.05 * (rows[:, 0] - 1010) - 2 * (rows[:, 4] - 5) + np.random.default_rng(4).normal(size=50), 3)
    body = [[*r, f"{s:.3f}"] for r, s in zip(cells(rows), strength)]
    data = write(tmp_path / "plant.csv", csv_text([*FEATURES, "strength_mpa"], body))
    argv = ("audit", data, "--out", "o", "--force", "--no-pdf", "--seed", "7", "--target", "strength_mpa")
    first = cli(*argv)
    assert first.code == 0, first
    a = load_json(tmp_path / "o" / "record.json")
    time.sleep(1.1)  # the clock moves on: only the timestamps may differ
    assert cli(*argv).code == 0
    b = load_json(tmp_path / "o" / "record.json")
    assert a["record_id"] != b["record_id"]
    diffs = _differences(_stable(a), _stable(b))
    assert not diffs, "\n".join(diffs[:20])


def test_same_frame_and_seed_give_the_same_record_through_the_api():
    frame = pd.DataFrame(invented_rows(n=45, seed=17), columns=FEATURES)
    a = planner.audit(frame, seed=11, scaling="standardize").record
    b = planner.audit(frame.copy(), seed=11, scaling="standardize").record
    diffs = _differences(_stable(a), _stable(b))
    assert not diffs, "\n".join(diffs[:20])


# --------------------------------------------------------------------------- 6. internal errors
def test_a_deep_internal_error_exits_3_and_saves_the_traceback(cli, tmp_path, monkeypatch):
    import planner.analysis.retention as retention

    def broken(*args, **kwargs):
        raise RuntimeError("injected failure deep in the broken-stick rule")

    monkeypatch.setattr(retention, "broken_stick", broken)
    data = write(tmp_path / "plant.csv", simple_csv())
    r = cli("audit", data, "--out", "o", "--no-pdf")
    assert r.code == 3, r
    line = only_line(r.err)
    assert "Traceback" not in r.err
    saved = saved_traceback_path(line)
    assert saved is not None, f"the message does not name an existing traceback file: {line!r}"
    try:
        content = saved.read_text(encoding="utf-8")
        assert "Traceback (most recent call last)" in content
        assert "RuntimeError: injected failure deep in the broken-stick rule" in content
        for frame in ("run_audit", "analyse_components", "evaluate_rules"):
            assert frame in content, f"{frame} is not in the saved traceback"
    finally:
        saved.unlink(missing_ok=True)
    assert not (tmp_path / "o" / "record.json").exists()


# --------------------------------------------------------------------------- 7. safe loading
PICKLE_PAYLOAD = "cos\nsystem\n(S'touch {sentinel}'\ntR."


def _payload_variants(doc: dict, sentinel: Path) -> dict[str, bytes]:
    command = f"touch {sentinel}"
    variants = {}
    extra = copy.deepcopy(doc)
    extra["__class__"] = {"py/object": "os.system", "args": [command]}
    variants["top-level-__class__"] = json.dumps(extra).encode()
    title = copy.deepcopy(doc)
    title["title"] = {"__class__": "subprocess.Popen", "__init__": {"args": ["sh", "-c", command]}}
    variants["title-as-object"] = json.dumps(title).encode()
    reduce_ = copy.deepcopy(doc)
    reduce_["input"]["excluded"].append({"column": "x", "reason": {"__reduce__": ["os.system", [command]]}})
    variants["__reduce__-in-excluded"] = json.dumps(reduce_).encode()
    pickled = copy.deepcopy(doc)
    pickled["title"] = PICKLE_PAYLOAD.format(sentinel=sentinel)
    variants["pickle-text-in-title"] = json.dumps(pickled).encode()
    yaml_tag = copy.deepcopy(doc)
    yaml_tag["analyst"] = f"!!python/object/apply:os.system ['{command}']"
    variants["yaml-tag-in-analyst"] = json.dumps(yaml_tag).encode()
    variants["raw-pickle-file"] = PICKLE_PAYLOAD.format(sentinel=sentinel).encode()
    return variants


def test_records_with_object_payloads_are_only_data(cli, tmp_path):
    data, record_path = make_record(cli, tmp_path)
    doc = json.loads(record_path.read_text(encoding="utf-8"))
    sentinel = tmp_path / "EXECUTED"
    for label, payload in _payload_variants(doc, sentinel).items():
        hostile = tmp_path / f"hostile_{label}.json"
        hostile.write_bytes(payload)
        r = cli("verify", hostile)
        assert r.code in (1, 2), (label, r)
        assert "Traceback" not in r.err
        prefix = "error: " if r.code == 2 else "verify: "
        assert only_line(r.err).startswith(prefix), (label, r)
        s = cli("sign", hostile, "--name", "R. Ortiz", "--role", "reviewer", "--meaning", "reviewed")
        assert_clean_refusal(s)
        assert hostile.read_bytes() == payload, label
        assert not sentinel.exists(), f"{label}: a payload was executed"


def test_rulebook_with_an_extra_rule_key_is_refused_naming_file_and_line(cli, tmp_path):
    text = RULE_OK + '\n[[rule]]\nid = "sneaky"\nfigure = "diagnostics.vif"\ncompare = ">"\nthreshold = 5\n' \
        'severity = "note"\nmessage = "m"\nsource = "common practice"\nexec = "__import__(\'os\').system(\'touch EXECUTED\')"\n'
    rules = write(tmp_path / "team_rules.toml", text)
    lines = text.splitlines()
    header_line = [i for i, line in enumerate(lines, start=1) if line.strip() == "[[rule]]"][1]
    key_line = next(i for i, line in enumerate(lines, start=1) if line.startswith("exec ="))
    for args in (("rules", "--rules", rules), _audit(write(tmp_path / "plant.csv", simple_csv()), "--rules", rules)):
        r = cli(*args)
        assert_clean_refusal(r, "team_rules.toml", "exec")
        numbers = {int(m) for m in re.findall(r"line (\d+)", r.err)}
        assert numbers & {header_line, key_line}, f"no line number (expected {header_line} or {key_line}): {r.err!r}"
    assert not (tmp_path / "EXECUTED").exists()
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_rulebook_with_an_extra_top_level_key_is_refused_naming_file(cli, tmp_path):
    rules = write(tmp_path / "team_rules.toml", '[hooks]\non_load = "rm -rf /"\n' + RULE_OK)
    r = cli("rules", "--rules", rules)
    assert_clean_refusal(r, "team_rules.toml", "hooks")
