"""Intake: every input error gets one clear line and exit 2; odd but valid files are read.

These are behaviour tests of our own contract (DESIGN.md, "Command line contract" and
issue text), on small invented tables.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from planner import intake
from planner.errors import InputError

from .conftest import SIMPLE_CSV, assert_clean_refusal, write


# ------------------------------------------------------------------ refused, one line each
def test_missing_file(cli, tmp_path):
    r = cli("audit", tmp_path / "nope.csv")
    assert_clean_refusal(r, "no such file")
    assert not (tmp_path / "axisledger-out").exists()


def test_folder_instead_of_file(cli, tmp_path):
    (tmp_path / "d").mkdir()
    assert_clean_refusal(cli("audit", tmp_path / "d"), "folder")


def test_empty_file(cli, tmp_path):
    assert_clean_refusal(cli("audit", write(tmp_path / "e.csv", "")), "empty")


def test_whitespace_only_file(cli, tmp_path):
    assert_clean_refusal(cli("audit", write(tmp_path / "e.csv", "\n\n  \n")), "empty")


def test_header_only(cli, tmp_path):
    assert_clean_refusal(cli("audit", write(tmp_path / "h.csv", "a,b,c\n")), "no data rows")


@pytest.mark.parametrize("rows", [1, 2])
def test_fewer_than_three_rows(cli, tmp_path, rows):
    body = "".join(f"{i},{i * 2 + 1},{i * i}\n" for i in range(rows))
    r = cli("audit", write(tmp_path / "few.csv", "a,b,c\n" + body))
    assert_clean_refusal(r, "data row(s), at least 3")


def test_one_numeric_column(cli, tmp_path):
    r = cli("audit", write(tmp_path / "one.csv", "label,x\nu,1.5\nv,2.5\nw,0.5\nz,4.0\n"))
    assert_clean_refusal(r, "numeric column")


def test_text_only(cli, tmp_path):
    r = cli("audit", write(tmp_path / "t.csv", "a,b\nred,blue\ngreen,red\nblue,green\nred,red\n"))
    assert_clean_refusal(r, "numeric column")


def test_duplicate_column_names_are_named(cli, tmp_path):
    r = cli("audit", write(tmp_path / "d.csv", "x,y,x\n1,2,3\n4,5,7\n7,8,8\n2,1,1\n"))
    assert_clean_refusal(r, "duplicate column names", "'x'")


def test_binary_garbage(cli, tmp_path):
    rng = np.random.default_rng(0)
    path = tmp_path / "g.csv"
    path.write_bytes(bytes(rng.integers(0, 256, 4096, dtype=np.uint8)) + b"\x00\x01")
    assert_clean_refusal(cli("audit", path), "binary")


def test_csv_named_xlsx(cli, tmp_path):
    r = cli("audit", write(tmp_path / "sheet.xlsx", SIMPLE_CSV))
    assert_clean_refusal(r, ".xlsx", "rename")


def test_zip_that_is_not_a_workbook(cli, tmp_path):
    import zipfile

    path = tmp_path / "fake.xlsx"
    with zipfile.ZipFile(path, "w") as z:
        z.writestr("hello.txt", "not a workbook")
    assert_clean_refusal(cli("audit", path), "not an .xlsx workbook")


def test_parquet_name_without_parquet_content(cli, tmp_path):
    assert_clean_refusal(cli("audit", write(tmp_path / "x.parquet", SIMPLE_CSV)), "not a Parquet")


def test_infinite_value_names_column_and_row(cli, tmp_path):
    r = cli("audit", write(tmp_path / "inf.csv", "a,b,c\n1,2,3\n2,inf,4\n3,1,9\n5,4,1\n"))
    assert_clean_refusal(r, "'b'", "row 2", "infinite")


def test_all_columns_constant(cli, tmp_path):
    r = cli("audit", write(tmp_path / "c.csv", "a,b,c\n1,2,3\n1,2,3\n1,2,3\n1,2,3\n"))
    assert_clean_refusal(r, "usable numeric column")


def test_missing_fail_names_first_gap(cli, tmp_path):
    path = write(tmp_path / "m.csv", "a,b,c\n1,2,3\n2,5,4\n3,,9\n5,4,1\n")
    assert_clean_refusal(cli("audit", path, "--missing", "fail"), "'b'", "row 3", "--missing")


@pytest.mark.parametrize(
    "options, fragment",
    [
        (["--scaling", "wild"], "--scaling"),
        (["--missing", "guess"], "--missing"),
        (["--components", "0"], "--components"),
        (["--components", "two"], "--components"),
        (["--components", "2"], "--because"),
        (["--seed", "abc"], "--seed"),
        (["--columns", "temp_c,nope"], "nope"),
        (["--exclude", "ghost"], "ghost"),
        (["--target", "ghost"], "ghost"),
        (["--id-column", "ghost"], "ghost"),
        (["--frobnicate"], "unrecognized"),
    ],
)
def test_bad_option_values(cli, tmp_path, options, fragment):
    path = write(tmp_path / "ok.csv", SIMPLE_CSV)
    r = cli("audit", path, *options)
    assert_clean_refusal(r, fragment)
    assert not (tmp_path / "axisledger-out").exists()


def test_components_above_p(cli, tmp_path):
    path = write(tmp_path / "ok.csv", SIMPLE_CSV)
    r = cli("audit", path, "--components", "9", "--because", "spec")
    assert_clean_refusal(r, "more than the 4 features")


def test_unknown_column_error_lists_the_available_ones(cli, tmp_path):
    r = cli("audit", write(tmp_path / "ok.csv", SIMPLE_CSV), "--columns", "nope")
    assert "temp_c" in r.err and "density_g_l" in r.err


# ------------------------------------------------------------------ read, with a note
def test_semicolon_and_decimal_comma():
    text = "a;b;c\n1,5;2,25;10\n2,5;3,75;11\n0,5;1,0;14\n4,0;0,5;12\n"
    res = intake.load(_tmp_file(text, "sc.csv"))
    assert res.columns_used == ["a", "b", "c"]
    np.testing.assert_allclose(res.data[:, 0], [1.5, 2.5, 0.5, 4.0])
    np.testing.assert_allclose(res.data[:, 1], [2.25, 3.75, 1.0, 0.5])
    assert res.text_format.delimiter == ";" and res.text_format.decimal == ","


def _tmp_file(text, name, encoding="utf-8", prefix=b""):
    import tempfile
    from pathlib import Path

    folder = Path(tempfile.mkdtemp())
    path = folder / name
    path.write_bytes(prefix + text.encode(encoding))
    return path


def test_tab_separated():
    res = intake.load(_tmp_file(SIMPLE_CSV.replace(",", "\t"), "t.tsv"))
    assert res.text_format.delimiter == "\t"
    assert len(res.columns_used) == 4


def test_utf8_bom_header_is_clean():
    res = intake.load(_tmp_file(SIMPLE_CSV, "bom.csv", prefix=b"\xef\xbb\xbf"))
    assert res.text_format.encoding == "utf-8-sig"
    assert res.excluded[0]["column"] == "batch"


def test_latin1_fallback_is_noted():
    text = "lot,température,débit\nA,1.5,2\nB,2.5,3.5\nC,0.5,1\nD,4.0,2.5\n"
    res = intake.load(_tmp_file(text, "l1.csv", encoding="latin-1"))
    assert res.columns_used == ["température", "débit"]
    assert any("Latin-1" in n["message"] for n in res.notes)


def test_utf16_with_bom():
    res = intake.load(_tmp_file(SIMPLE_CSV, "u16.csv", encoding="utf-16"))
    assert res.text_format.encoding == "utf-16"
    assert len(res.columns_used) == 4


def test_nan_spellings_are_missing():
    text = "a,b,c\n1,2,3\nNA,5,4\n3,null,9\n5,4,-\n6,,2\n7,3,1\n8,1,5\n"
    res = intake.load(_tmp_file(text, "nan.csv"))
    assert res.missing_per_column == {"a": 1, "b": 2, "c": 1}
    assert res.rows_used == 3 and res.rows_dropped_missing == 4


def test_thousands_separators():
    text = 'a,b\n"1,250.5",3\n"2,001",4\n"12,000.25",1\n"950",2\n'
    res = intake.load(_tmp_file(text, "k.csv"))
    np.testing.assert_allclose(res.data[:, 0], [1250.5, 2001, 12000.25, 950])


def test_mixed_types_column_is_excluded_with_examples():
    text = "a,b,c\n1,2,x1\n2,5,4\n3,1,9\n5,4,oops\n6,2,1\n"
    res = intake.load(_tmp_file(text, "mixed.csv"))
    reason = {e["column"]: e["reason"] for e in res.excluded}["c"]
    assert "mixed types" in reason and "'x1'" in reason and "'oops'" in reason


def test_quoted_fields_with_newlines():
    text = 'note,a,b\n"line one\nline two",1,2\n"x",2,3.5\n"y",3,1\n"z",4,0.5\n'
    res = intake.load(_tmp_file(text, "q.csv"))
    assert res.rows_read == 4 and res.columns_used == ["a", "b"]


def test_all_missing_and_constant_columns_are_excluded():
    text = "a,b,c,d\n1,,7,2\n2,,7,5\n3,,7,1\n5,,7,4\n"
    res = intake.load(_tmp_file(text, "x.csv"), id_column=None)
    reasons = {e["column"]: e["reason"] for e in res.excluded}
    assert reasons["b"] == "all values missing"
    assert reasons["c"].startswith("constant")


def test_binary_column_stays_with_a_note():
    text = "a,b,flag\n1.5,2,0\n2.5,5,1\n3.25,1,1\n5.5,4,0\n"
    res = intake.load(_tmp_file(text, "b.csv"))
    assert "flag" in res.columns_used and res.binary_columns == ["flag"]
    assert any("binary" in n["message"] for n in res.notes)


def test_identifier_columns_name_the_rows():
    res = intake.load(_tmp_file(SIMPLE_CSV, "s.csv"))
    assert res.id_column == "batch"
    assert res.row_labels[:2] == ["A1", "A2"]
    assert "identifier" in res.excluded[0]["reason"]


def test_sequential_integer_id_is_excluded():
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"seq": np.arange(100, 130), "x": rng.normal(size=30), "y": rng.normal(size=30)})
    res = intake.load(frame)
    assert res.id_column == "seq" and res.columns_used == ["x", "y"]


def test_target_is_set_aside():
    res = intake.load(_tmp_file(SIMPLE_CSV, "s.csv"), target="moisture_pct")
    assert "moisture_pct" not in res.columns_used
    np.testing.assert_allclose(res.target, [5.1, 5.4, 4.8, 5.9, 5.0, 5.3])


def test_mean_imputation_is_noted():
    text = "a,b,c\n1,2,3\n2,,4\n3,1,9\n5,4,1\n"
    res = intake.load(_tmp_file(text, "m.csv"), missing="mean")
    assert res.rows_used == 4 and res.values_imputed == 1
    assert res.data[1, 1] == pytest.approx(7 / 3)
    assert any("shrinks" in n["message"] for n in res.notes)


def test_parquet_and_dataframe_read_the_same(tmp_path):
    frame = pd.read_csv(_tmp_file(SIMPLE_CSV, "s.csv"))
    path = tmp_path / "s.parquet"
    frame.to_parquet(path)
    from_parquet = intake.load(path)
    from_frame = intake.load(frame)
    assert from_parquet.file_type == "parquet" and from_frame.file_type == "dataframe"
    np.testing.assert_array_equal(from_parquet.data, from_frame.data)
    assert from_frame.sha256 is None and len(from_parquet.sha256) == 64


def test_xlsx_with_sheet(tmp_path):
    frame = pd.read_csv(_tmp_file(SIMPLE_CSV, "s.csv"))
    path = tmp_path / "s.xlsx"
    with pd.ExcelWriter(path) as writer:
        frame.to_excel(writer, sheet_name="first", index=False)
        (frame * 1).to_excel(writer, sheet_name="line3", index=False)
    res = intake.load(path, sheet="line3")
    assert res.file_type == "xlsx" and res.sheet == "line3" and len(res.columns_used) == 4
    with pytest.raises(InputError, match="sheet 'none' is not in"):
        intake.load(path, sheet="none")


def test_sha256_is_of_the_file_bytes():
    import hashlib

    path = _tmp_file(SIMPLE_CSV, "s.csv")
    assert intake.load(path).sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


# ------------------------------------------------------------------ the two text readers
def test_clean_numeric_csv_values_equal_pandas_to_the_bit(tmp_path):
    # Reference: Python's float() on each cell (correctly rounded decimal-to-binary
    # conversion, IEEE 754). Clean files are parsed by pyarrow; every value must be the
    # same double.
    rng = np.random.default_rng(11)
    n = 400
    frame = pd.DataFrame({
        "a": rng.standard_normal(n) * 1e-7,
        "b": rng.integers(-50_000, 50_000, n),
        "c": rng.standard_normal(n) * 1e12,
        "d": np.round(rng.uniform(0, 1, n), 3),
    })
    path = tmp_path / "clean.csv"
    text = frame.to_csv(index=False, float_format="%.17g")
    lines = text.splitlines()
    lines[5] = lines[5].split(",", 1)[0] + ",NA," + lines[5].split(",", 2)[2]  # one missing value
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    import csv

    with open(path, newline="") as handle:
        body = list(csv.reader(handle))[1:]
    reference = np.array([[float(c) if c != "NA" else np.nan for c in row] for row in body])
    res = intake.load(path, missing="mean")
    assert res.columns_used == ["a", "b", "c", "d"]
    complete = ~np.isnan(reference).any(axis=1)
    assert np.array_equal(res.data[complete], reference[complete])
    assert res.missing_per_column == {"a": 0, "b": 1, "c": 0, "d": 0}


def test_dates_and_words_for_true_and_false_stay_text_in_csv(tmp_path):
    # Our contract: only numbers are features; a column of dates or of true/false words
    # is set aside with examples of its cells, as written.
    text = "day,flag,x,y\n" + "".join(
        f"2024-01-{i // 2 + 1:02d},{'true' if i % 2 else 'false'},{i * 1.5},{(i * 7) % 5 + 0.25}\n" for i in range(12)
    )
    res = intake.load(_tmp_file(text, "dates.csv"))
    reasons = {e["column"]: e["reason"] for e in res.excluded}
    assert "'2024-01-01'" in reasons["day"]
    assert "'false'" in reasons["flag"] and "'true'" in reasons["flag"]
    assert res.columns_used == ["x", "y"]


def test_short_rows_are_read_by_the_lenient_reader(tmp_path):
    # A row with a missing trailing field: the cell is empty (missing), not an error.
    text = "a,b,c\n1,2,3\n4,5\n6,7,8.5\n9,1,2\n3,3,1\n"
    res = intake.load(_tmp_file(text, "short.csv"))
    assert res.rows_read == 5 and res.rows_used == 4
    assert res.missing_per_column == {"a": 0, "b": 0, "c": 1}


def test_parquet_typed_columns_are_read_by_their_types(tmp_path):
    import hashlib

    # Dates are set aside as dates (not a crash), integers with gaps are numbers with
    # missing values, numbers stored as text are read as numbers.
    n = 12
    frame = pd.DataFrame({
        "when": pd.date_range("2025-03-01", periods=n, freq="D"),
        "count": pd.array([i % 5 if i != 3 else None for i in range(n)], dtype="Int64"),
        "level": [str(0.5 * i + (i % 3)) for i in range(n)],
        "ratio": np.linspace(0.1, 0.9, n) ** 2,
    })
    path = tmp_path / "typed.parquet"
    frame.to_parquet(path)
    res = intake.load(path)
    reasons = {e["column"]: e["reason"] for e in res.excluded}
    assert "dates" in reasons["when"]
    assert res.columns_used == ["count", "level", "ratio"]
    assert res.missing_per_column["count"] == 1 and res.rows_used == n - 1
    np.testing.assert_array_equal(res.data[:, 1], [0.5 * i + (i % 3) for i in range(n) if i != 3])
    # Source: hashlib.sha256 of the file's bytes.
    assert res.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    from_frame = intake.load(frame)
    assert "dates" in {e["column"]: e["reason"] for e in from_frame.excluded}["when"]
    np.testing.assert_array_equal(from_frame.data, res.data)


def test_extremes_gathered_while_reading_equal_those_of_the_matrix(tmp_path):
    # The reader's per-column minimum, maximum and zero count (gathered while copying) are
    # those numpy finds on the matrix of the rows used.
    from planner.moments import Moments

    rng = np.random.default_rng(21)
    frame = pd.DataFrame({"a": np.round(rng.standard_normal(70_000), 1), "b": rng.integers(-3, 4, 70_000).astype(float),
                          "c": rng.uniform(1, 2, 70_000)})
    frame.to_parquet(tmp_path / "z.parquet")
    res = intake.load(tmp_path / "z.parquet")
    assert res.column_extremes is not None
    low, high, zeros = res.column_extremes
    np.testing.assert_array_equal(low, res.data.min(axis=0))
    np.testing.assert_array_equal(high, res.data.max(axis=0))
    np.testing.assert_array_equal(zeros, (res.data == 0).sum(axis=0))
    plain = Moments.from_array(res.data, res.columns_used)
    given = Moments.from_array(res.data, res.columns_used, extremes=res.column_extremes)
    np.testing.assert_array_equal(plain.minimum, given.minimum)
    np.testing.assert_array_equal(plain.zeros, given.zeros)
    np.testing.assert_array_equal(plain.comoment, given.comoment)


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_integers_beyond_two_to_the_53_are_rounded_like_text(tmp_path, monkeypatch, kind):
    # Python's float() of the integer's text is the reference (correctly rounded); the copy
    # is forced onto two threads, so that an error on the second one would surface.
    monkeypatch.setattr(intake, "COPY_IN_PARALLEL", 1)
    big = [1234567890123456789 + 7919 * i for i in range(60)]
    frame = pd.DataFrame({"order_id": big, "a": np.linspace(0, 1, 60) ** 2, "b": np.cos(np.arange(60))})
    path = tmp_path / f"big.{kind}"
    if kind == "csv":
        frame.to_csv(path, index=False)
    else:
        frame.to_parquet(path)
    res = intake.load(path, columns=["order_id", "a", "b"])
    np.testing.assert_array_equal(res.data[:, 0], [float(v) for v in big])


def test_a_file_that_cannot_be_read_for_its_hash_is_an_input_error(tmp_path):
    digest = intake.FileDigest(path=tmp_path / "gone.csv")
    with pytest.raises(InputError, match="cannot read the input to hash it"):
        digest.hexdigest()
