"""Intake: read a table, type and screen its columns, apply the missing-value policy.

This is the imperative shell of the flow in DESIGN.md. It turns a file (CSV/TSV, Parquet,
Excel) or a pandas DataFrame into an :class:`IntakeResult`: a float matrix of the columns
used, the row labels, the target set aside, and every screening decision with its reason.
Every problem the user can fix raises :class:`planner.errors.InputError` with one line
that says what is wrong and what to do.
"""
from __future__ import annotations

import csv
import hashlib
import io
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError

#: Spellings of a missing value in text files (compared after stripping white space).
MISSING_SPELLINGS = frozenset(
    {"", "na", "n/a", "nan", "null", "none", "-", "--", "?", ".", "#n/a", "missing", "nil"}
)
MISSING_POLICIES = ("listwise", "mean", "fail")
#: Values beyond this magnitude are refused: their squares overflow double precision.
MAX_MAGNITUDE = 1e150
#: How many rows a usable table needs at the least.
MIN_ROWS = 3
#: Distinct integers count as an identifier by their order alone from this many rows on.
ID_MIN_ROWS = 10
#: Column names that suggest an identifier when the values are distinct integers.
_ID_NAME = re.compile(r"(^|[_\W])(id|key|code|no|nr|number|serial|index)($|[_\W])|(?-i:[a-z]Id$)", re.I)
#: Column names of time counters, which stay features even when distinct and in order.
_TIME_NAME = re.compile(r"year|yr|date|time|month|week|day|period|quarter", re.I)
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+$")
_THOUSANDS_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d+)?$")
_THOUSANDS_POINT = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d+)?$")
_THOUSANDS_SPACE = re.compile(r"^[+-]?\d{1,3}([ \u00a0\u202f']\d{3})+([.,]\d+)?$")


@dataclass
class TextFormat:
    """How a delimited text file was read."""

    encoding: str
    delimiter: str
    decimal: str


@dataclass
class IntakeResult:
    """The table as the analysis sees it, and every decision taken to get there.

    Attributes
    ----------
    source : str
        File name (or ``"<DataFrame>"``).
    sha256 : str or None
        SHA-256 of the file's bytes; None for a DataFrame.
    file_type : str
        ``csv``, ``parquet``, ``xlsx`` or ``dataframe``.
    rows_read : int
        Data rows in the input (header excluded).
    rows_used : int
        Rows that enter the analysis after the missing-value policy.
    columns_used : list of str
        The numeric feature columns, in file order.
    excluded : list of dict
        ``{"column", "reason"}`` for every column set aside.
    data : ndarray (rows_used, p)
        The feature values (imputed where ``missing_policy`` is ``mean``).
    row_labels : list of str
        A label for each used row: the identifier's value, else ``row N`` (1-based data row).
    row_numbers : ndarray of int
        The 1-based data-row number of each used row in the input.
    """

    source: str
    sha256: str | None
    file_type: str
    rows_read: int
    rows_used: int
    columns_used: list[str]
    excluded: list[dict]
    data: np.ndarray
    row_labels: list[str]
    row_numbers: np.ndarray
    id_column: str | None
    target_name: str | None
    target: np.ndarray | None
    missing_policy: str
    missing_per_column: dict[str, int]
    rows_dropped_missing: int
    values_imputed: int
    binary_columns: list[str]
    text_format: TextFormat | None = None
    notes: list[dict] = field(default_factory=list)
    sheet: str | None = None

    def input_section(self) -> dict:
        """The ``input`` section of the record."""
        section = {
            "source": self.source,
            "sha256": self.sha256,
            "file_type": self.file_type,
            "rows_read": self.rows_read,
            "rows_used": self.rows_used,
            "columns_used": list(self.columns_used),
            "excluded": [dict(e) for e in self.excluded],
            "id_column": self.id_column,
            "target": self.target_name,
            "missing": {
                "policy": self.missing_policy,
                "per_column": dict(self.missing_per_column),
                "rows_dropped": self.rows_dropped_missing,
                "values_imputed": self.values_imputed,
            },
            "binary_columns": list(self.binary_columns),
            "notes": [n["message"] for n in self.notes],
        }
        if self.text_format is not None:
            section["text_format"] = {
                "encoding": self.text_format.encoding,
                "delimiter": self.text_format.delimiter,
                "decimal": self.text_format.decimal,
            }
        if self.sheet is not None:
            section["sheet"] = self.sheet
        return section


def note(code: str, severity: str, message: str, subject: str | None = None) -> dict:
    """An intake observation; it becomes a finding of the record (rule id ``intake.CODE``)."""
    return {"id": code, "severity": severity, "message": message, "subject": subject}


# ---------------------------------------------------------------------------- reading
def sha256_of_file(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def sniff_kind(head: bytes) -> str:
    """Decide the file type from its first bytes: ``parquet``, ``zip``, ``ole2`` or ``text``."""
    if head.startswith(b"PAR1"):
        return "parquet"
    if head.startswith(b"PK\x03\x04"):
        return "zip"
    if head.startswith(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"):
        return "ole2"
    return "text"


def decode_text(raw: bytes, name: str) -> tuple[str, str, list[dict]]:
    """Decode a text file: UTF-8 (with or without BOM), UTF-16 with BOM, else Latin-1.

    Returns the text, the encoding used and notes. Binary content is refused.
    """
    notes: list[dict] = []
    if raw.startswith(b"\xef\xbb\xbf"):
        return raw[3:].decode("utf-8", errors="strict"), "utf-8-sig", notes
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16"), "utf-16", notes
        except UnicodeDecodeError:
            raise InputError(f"{name} starts like UTF-16 but does not decode", "save it as UTF-8 CSV")
    if b"\x00" in raw[:65536]:
        raise InputError(
            f"{name} holds binary content, not a table",
            "give a CSV, TSV, Parquet or .xlsx file",
        )
    try:
        return raw.decode("utf-8"), "utf-8", notes
    except UnicodeDecodeError:
        pass
    text = raw.decode("latin-1")
    control = sum(1 for ch in text[:65536] if ord(ch) < 32 and ch not in "\r\n\t")
    if control > 0:
        raise InputError(
            f"{name} holds binary content, not a table",
            "give a CSV, TSV, Parquet or .xlsx file",
        )
    notes.append(note("latin1_fallback", "note", f"{name} is not valid UTF-8; it was read as Latin-1 (ISO-8859-1)"))
    return text, "latin-1", notes


def detect_delimiter(text: str) -> str:
    """Pick the delimiter among , ; tab | that splits the first lines most consistently."""
    sample_lines = text.splitlines()[:200]
    sample = "\n".join(sample_lines)
    best, best_score = ",", (-1, -1)
    for delim in (",", ";", "\t", "|"):
        try:
            rows = [r for r in csv.reader(io.StringIO(sample), delimiter=delim) if r]
        except csv.Error:
            continue
        if not rows:
            continue
        widths = [len(r) for r in rows]
        header_width = widths[0]
        if header_width < 2:
            continue
        consistent = sum(1 for w in widths if w == header_width)
        score = (consistent, header_width)
        if score > best_score:
            best, best_score = delim, score
    return best


def detect_decimal(cells: list[str], delimiter: str) -> str:
    """Decimal comma when the delimiter is not a comma and '3,14' style values dominate."""
    if delimiter == ",":
        return "."
    commas = sum(1 for c in cells if _DECIMAL_COMMA.match(c))
    points = sum(1 for c in cells if _DECIMAL_POINT.match(c))
    thousands_point = sum(1 for c in cells if _THOUSANDS_POINT.match(c) and "," in c)
    return "," if commas + thousands_point > points else "."


def read_text_table(raw: bytes, name: str) -> tuple[list[str], pd.DataFrame, TextFormat, list[dict]]:
    """Parse a delimited text file into a header and a frame of strings."""
    text, encoding, notes = decode_text(raw, name)
    if not text.strip():
        raise InputError(f"{name} is empty", "give a file with a header row and data rows")
    delimiter = detect_delimiter(text)
    try:
        frame = pd.read_csv(
            io.StringIO(text),
            sep=delimiter,
            header=None,
            dtype=str,
            keep_default_na=False,
            skip_blank_lines=True,
            engine="c",
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error, ValueError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(
            f"{name} could not be read as a delimited table ({first})",
            "check that every row has the same number of fields and quotes are balanced",
        )
    if frame.shape[0] == 0:
        raise InputError(f"{name} is empty", "give a file with a header row and data rows")
    header = [str(h).strip() for h in frame.iloc[0].tolist()]
    body = frame.iloc[1:].reset_index(drop=True)
    body.columns = range(body.shape[1])
    sample_cells = [
        str(v).strip() for v in body.head(500).to_numpy().ravel().tolist() if isinstance(v, str)
    ]
    decimal = detect_decimal(sample_cells, delimiter)
    if decimal == ",":
        notes.append(note("decimal_comma", "note", f"{name} uses a decimal comma; values such as '3,14' were read as 3.14"))
    return header, body, TextFormat(encoding, delimiter, decimal), notes


def read_parquet_table(path: Path, name: str) -> tuple[list[str], pd.DataFrame]:
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(path)
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise InputError(f"{name} is not a readable Parquet file ({type(exc).__name__})", "re-export it")
    header = [str(c) for c in table.column_names]
    frame = table.to_pandas()
    frame.columns = range(frame.shape[1])
    return header, frame


def read_excel_table(path: Path, name: str, sheet: str | None) -> tuple[list[str], pd.DataFrame, str]:
    try:
        import openpyxl  # noqa: F401
    except ImportError:
        raise InputError(
            f"{name} is an Excel workbook and the excel extra is not installed",
            "install it with: pip install 'axisledger[excel]'",
        )
    try:
        with zipfile.ZipFile(path) as archive:
            if "xl/workbook.xml" not in archive.namelist():
                raise InputError(f"{name} is a zip archive but not an .xlsx workbook", "give an .xlsx, CSV or Parquet file")
    except zipfile.BadZipFile:
        raise InputError(f"{name} is not a valid .xlsx workbook", "re-save it from the spreadsheet program")
    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except Exception as exc:
        raise InputError(f"{name} is not a readable .xlsx workbook ({type(exc).__name__})", "re-save it")
    sheets = book.sheet_names
    if sheet is None:
        sheet = sheets[0]
    elif sheet not in sheets:
        raise InputError(f"sheet {sheet!r} is not in {name}", f"choose one of: {', '.join(sheets)}")
    frame = pd.read_excel(book, sheet_name=sheet, header=None, dtype=object)
    frame = frame.dropna(how="all")
    if frame.shape[0] == 0:
        raise InputError(f"sheet {sheet!r} of {name} is empty", "give a sheet with a header row and data rows")
    header = ["" if pd.isna(h) else str(h).strip() for h in frame.iloc[0].tolist()]
    body = frame.iloc[1:].reset_index(drop=True)
    body.columns = range(body.shape[1])
    return header, body, sheet


# ---------------------------------------------------------------------------- typing
@dataclass
class TypedColumn:
    name: str
    values: np.ndarray | None  # float64 with NaN for missing, None when not numeric
    raw: pd.Series
    missing: int
    bad_examples: list[str]
    n_bad: int


def _to_number(cells: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Convert strings to floats; returns values and a mask of cells that are not numbers."""
    text = cells.astype(str).str.strip()
    lowered = text.str.lower()
    is_missing = lowered.isin(MISSING_SPELLINGS).to_numpy()
    work = text.mask(is_missing, "")
    if decimal == ",":
        thousands = work.str.match(_THOUSANDS_POINT.pattern) & work.str.contains(",", regex=False)
        work = work.where(~thousands, work.str.replace(".", "", regex=False))
        work = work.str.replace(",", ".", regex=False)
    else:
        thousands = work.str.match(_THOUSANDS_COMMA.pattern)
        work = work.where(~thousands, work.str.replace(",", "", regex=False))
    spaced = work.str.match(_THOUSANDS_SPACE.pattern)
    if spaced.any():
        work = work.where(~spaced, work.str.replace(r"[ \u00a0\u202f']", "", regex=True))
    values = pd.to_numeric(work.mask(is_missing, np.nan), errors="coerce").to_numpy(dtype=np.float64)
    bad = np.isnan(values) & ~is_missing
    # "nan" spelled out is missing, "inf" parses to inf and is kept for the infinity check.
    return values, bad


def type_column(name: str, cells: pd.Series, decimal: str) -> TypedColumn:
    """Decide whether a column is numeric; keep the non-numeric examples for the message."""
    if pd.api.types.is_bool_dtype(cells):
        values = cells.astype(float).to_numpy()
        return TypedColumn(name, values, cells, int(np.isnan(values).sum()), [], 0)
    if pd.api.types.is_numeric_dtype(cells):
        values = pd.to_numeric(cells, errors="coerce").to_numpy(dtype=np.float64)
        return TypedColumn(name, values, cells, int(np.isnan(values).sum()), [], 0)
    if pd.api.types.is_datetime64_any_dtype(cells):
        return TypedColumn(name, None, cells, int(cells.isna().sum()), ["(dates)"], len(cells))
    as_text = cells.map(lambda v: "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v))
    values, bad = _to_number(as_text, decimal)
    missing = int((np.isnan(values) & ~bad).sum())
    n_bad = int(bad.sum())
    if n_bad:
        examples = list(dict.fromkeys(as_text[bad].str.strip().tolist()))[:3]
        return TypedColumn(name, None, as_text, missing, examples, n_bad)
    return TypedColumn(name, values, as_text, missing, [], 0)


# ---------------------------------------------------------------------------- screening
def _looks_like_identifier(col: TypedColumn, n_rows: int) -> str | None:
    """Reason why a column looks like a row identifier, or None."""
    if n_rows < MIN_ROWS:
        return None
    if col.values is None:
        if col.n_bad * 2 <= n_rows - col.missing:
            return None  # mostly numbers: a numeric column with stray text, not a label
        present = col.raw[col.raw.str.strip().str.lower().map(lambda s: s not in MISSING_SPELLINGS)]
        if len(present) == n_rows and present.nunique() == n_rows:
            return "identifier-like: every value is a distinct text label"
        return None
    v = col.values
    if np.isnan(v).any() or not np.all(np.isfinite(v)) or not np.all(v == np.round(v)):
        return None
    if len(np.unique(v)) != n_rows:
        return None
    diffs = np.diff(v)
    # Distinct integers alone are common in small tables of counts; an identifier also
    # runs in order, covers a consecutive range of a longer table, or is named like one.
    consecutive = (v.max() - v.min()) == n_rows - 1 and n_rows >= ID_MIN_ROWS
    monotone = bool(np.all(diffs > 0) or np.all(diffs < 0)) and n_rows >= ID_MIN_ROWS
    if _ID_NAME.search(col.name):
        return "identifier-like: every value is a distinct integer"
    if _TIME_NAME.search(col.name):
        return None  # a year or period counter is a feature, e.g. a trend
    if consecutive or monotone:
        return "identifier-like: every value is a distinct integer"
    return None


def _format_value(x: float) -> str:
    return f"{x:.6g}"


def _unique_header(header: list[str], name: str) -> list[str]:
    names = []
    for i, h in enumerate(header):
        names.append(h if h != "" else f"column_{i + 1}")
    seen: dict[str, int] = {}
    duplicates = []
    for h in names:
        seen[h] = seen.get(h, 0) + 1
        if seen[h] == 2:
            duplicates.append(h)
    if duplicates:
        listed = ", ".join(repr(d) for d in duplicates[:5])
        raise InputError(f"{name} has duplicate column names: {listed}", "give every column a distinct name")
    return names


def split_names(value: str | list[str] | None) -> list[str] | None:
    if value is None:
        return None
    if isinstance(value, str):
        items = [v.strip() for v in value.split(",")]
    else:
        items = [str(v).strip() for v in value]
    return [v for v in items if v]


def _check_known(names: list[str], available: list[str], option: str) -> None:
    unknown = [n for n in names if n not in available]
    if unknown:
        shown = ", ".join(available[:30]) + (" ..." if len(available) > 30 else "")
        raise InputError(
            f"{option} names unknown column(s): {', '.join(unknown)}",
            f"the columns are: {shown}",
        )


def read_table(source, *, sheet: str | None = None):
    """Read ``source`` (path or DataFrame) into (header, frame of cells, metadata)."""
    meta: dict = {"notes": [], "text_format": None, "sheet": None, "sha256": None}
    if isinstance(source, pd.DataFrame):
        header = [str(c) for c in source.columns]
        frame = source.reset_index(drop=True).copy()
        frame.columns = range(frame.shape[1])
        meta.update(source="<DataFrame>", file_type="dataframe")
        return header, frame, meta
    path = Path(source)
    name = path.name or str(path)
    if not path.exists():
        raise InputError(f"no such file: {source}", "check the path")
    if path.is_dir():
        raise InputError(f"{source} is a folder, not a file", "give the path of a CSV, Parquet or .xlsx file")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {source} ({exc.strerror})", "check the file's permissions")
    meta.update(source=name, sha256=hashlib.sha256(raw).hexdigest())
    if not raw.strip():
        raise InputError(f"{name} is empty", "give a file with a header row and data rows")
    kind = sniff_kind(raw[:16])
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm") and kind != "zip":
        what = "text" if kind == "text" else kind
        if kind == "text" and b"\x00" in raw[:65536]:
            what = "binary content"
        raise InputError(
            f"{name} is named {suffix} but holds {what}, not a workbook",
            "rename it to match its content (for a CSV: .csv)",
        )
    if suffix == ".xls" or kind == "ole2":
        raise InputError(f"{name} is a legacy .xls workbook", "save it as .xlsx or CSV")
    if suffix == ".parquet" and kind != "parquet":
        raise InputError(f"{name} is named .parquet but is not a Parquet file", "rename it to match its content")
    if kind == "parquet":
        header, frame = read_parquet_table(path, name)
        meta["file_type"] = "parquet"
    elif kind == "zip":
        header, frame, used_sheet = read_excel_table(path, name, sheet)
        meta.update(file_type="xlsx", sheet=used_sheet)
    else:
        header, frame, fmt, notes = read_text_table(raw, name)
        meta.update(file_type="csv", text_format=fmt)
        meta["notes"].extend(notes)
    return header, frame, meta


def load(
    source,
    *,
    columns=None,
    exclude=None,
    id_column: str | None = None,
    target: str | None = None,
    missing: str = "listwise",
    sheet: str | None = None,
) -> IntakeResult:
    """Read and screen ``source``; see the module docstring."""
    if missing not in MISSING_POLICIES:
        raise InputError(f"unknown missing-value policy {missing!r}", f"use one of: {', '.join(MISSING_POLICIES)}")
    header, frame, meta = read_table(source, sheet=sheet)
    name = meta["source"]
    header = _unique_header(header, name)
    n_rows = int(frame.shape[0])
    if n_rows == 0:
        raise InputError(f"{name} has a header but no data rows", "give a file with data rows")
    if frame.shape[1] < len(header):
        for j in range(frame.shape[1], len(header)):
            frame[j] = ""
    if n_rows < MIN_ROWS:
        raise InputError(
            f"{name} has {n_rows} data row(s), at least {MIN_ROWS} are needed",
            "give a table with more rows",
        )
    fmt: TextFormat | None = meta["text_format"]
    decimal = fmt.decimal if fmt else "."

    columns = split_names(columns)
    exclude = split_names(exclude) or []
    for option, names in (("--columns", columns or []), ("--exclude", exclude)):
        _check_known(names, header, option)
    if id_column is not None:
        _check_known([id_column], header, "--id-column")
    if target is not None:
        _check_known([target], header, "--target")
    if target is not None and target == id_column:
        raise InputError("--target and --id-column name the same column", "choose different columns")

    excluded: list[dict] = []
    notes: list[dict] = list(meta["notes"])
    typed: dict[str, TypedColumn] = {}
    candidates: list[str] = []
    for j, col in enumerate(header):
        if col == target:
            excluded.append({"column": col, "reason": "target (--target): set aside for the target check, never reduced"})
            continue
        if col == id_column:
            excluded.append({"column": col, "reason": "row identifier (--id-column): used to name rows"})
            continue
        if columns is not None and col not in columns:
            excluded.append({"column": col, "reason": "not selected by --columns"})
            continue
        if col in exclude:
            excluded.append({"column": col, "reason": "excluded by --exclude"})
            continue
        candidates.append(col)
        typed[col] = type_column(col, frame[j], decimal)

    # Identifier: the named one, else the first column that looks like one.
    labels_from: TypedColumn | None = None
    if id_column is not None:
        labels_from = type_column(id_column, frame[header.index(id_column)], decimal)
    kept: list[str] = []
    for col in candidates:
        tc = typed[col]
        missing_count = tc.missing
        if tc.values is not None and missing_count == n_rows:
            excluded.append({"column": col, "reason": "all values missing"})
            continue
        # Columns named with --columns are features by the user's word: no id heuristic.
        id_reason = None if columns is not None else _looks_like_identifier(tc, n_rows)
        if id_reason is not None:
            if labels_from is None:
                labels_from = tc
                id_reason += "; used to name rows"
            excluded.append({"column": col, "reason": id_reason})
            continue
        if tc.values is None:
            examples = ", ".join(repr(e) for e in tc.bad_examples)
            share = tc.n_bad / max(1, n_rows - tc.missing)
            kind = "non-numeric text" if share > 0.5 else "mixed types"
            excluded.append(
                {"column": col, "reason": f"{kind}: {tc.n_bad} value(s) are not numbers, e.g. {examples}"}
            )
            continue
        kept.append(col)

    # Infinity is an error, not a value (DESIGN.md, intake); so is a value whose square
    # overflows, since every second moment would be infinite.
    for col in kept:
        v = typed[col].values
        bad = np.isinf(v)
        if bad.any():
            row = int(np.argmax(bad)) + 1
            raise InputError(
                f"column {col!r} holds an infinite value at data row {row}",
                "replace it with a finite number or leave the cell empty",
            )
        huge = np.abs(np.nan_to_num(v)) > MAX_MAGNITUDE
        if huge.any():
            row = int(np.argmax(huge)) + 1
            raise InputError(
                f"column {col!r} holds {v[row - 1]:.3g} at data row {row}, too large to square in floating point",
                f"rescale the column (values up to {MAX_MAGNITUDE:.0e} in magnitude are read)",
            )

    # Constant columns (among the non-missing values).
    still: list[str] = []
    for col in kept:
        v = typed[col].values
        present = v[~np.isnan(v)]
        if present.size and np.all(present == present[0]):
            excluded.append({"column": col, "reason": f"constant: every value is {_format_value(present[0])}"})
            continue
        still.append(col)
    kept = still

    if len(kept) < 2:
        shown = "; ".join(f"{e['column']}: {e['reason']}" for e in excluded[:4])
        detail = f" (set aside: {shown})" if shown else ""
        raise InputError(
            f"{name} has {len(kept)} usable numeric column(s), at least 2 are needed{detail}",
            "give a table with two or more numeric, non-constant feature columns",
        )

    matrix = np.column_stack([typed[c].values for c in kept]).astype(np.float64)
    missing_per_column = {c: int(np.isnan(typed[c].values).sum()) for c in kept}
    row_numbers = np.arange(1, n_rows + 1)

    target_values = None
    if target is not None:
        tc = type_column(target, frame[header.index(target)], decimal)
        if tc.values is None:
            examples = ", ".join(repr(e) for e in tc.bad_examples)
            raise InputError(f"target column {target!r} is not numeric (e.g. {examples})", "code it as numbers (0/1 for a binary outcome)")
        if np.isinf(tc.values).any():
            row = int(np.argmax(np.isinf(tc.values))) + 1
            raise InputError(f"target column {target!r} holds an infinite value at data row {row}", "replace it with a finite number")
        target_values = tc.values

    if labels_from is not None:
        raw_labels = labels_from.raw.astype(str).str.strip().tolist()
        if labels_from.values is not None:
            raw_labels = [
                (str(int(x)) if np.isfinite(x) and x == int(x) else repr(float(x))) if not np.isnan(x) else f"row {i + 1}"
                for i, x in enumerate(labels_from.values)
            ]
        labels = np.array(raw_labels, dtype=object)
    else:
        labels = np.array([f"row {i}" for i in row_numbers], dtype=object)

    holes = np.isnan(matrix)
    rows_dropped = 0
    imputed = 0
    if holes.any():
        if missing == "fail":
            r, c = np.argwhere(holes)[0]
            raise InputError(
                f"column {kept[c]!r} has a missing value at data row {int(row_numbers[r])} and --missing is fail",
                "fill the gap, or use --missing listwise or --missing mean",
            )
        if missing == "listwise":
            keep = ~holes.any(axis=1)
            rows_dropped = int((~keep).sum())
            matrix, row_numbers, labels = matrix[keep], row_numbers[keep], labels[keep]
            if target_values is not None:
                target_values = target_values[keep]
            if rows_dropped:
                notes.append(note("rows_dropped", "note", f"{rows_dropped} row(s) with a missing feature value were dropped (listwise deletion)"))
        else:  # mean imputation
            means = np.nanmean(matrix, axis=0)
            imputed = int(holes.sum())
            matrix = np.where(holes, means, matrix)
            notes.append(
                note(
                    "mean_imputation",
                    "caution",
                    f"{imputed} missing value(s) were replaced by their column mean; mean imputation "
                    "shrinks variances and correlations",
                )
            )
    if matrix.shape[0] < MIN_ROWS:
        raise InputError(
            f"{name} has {matrix.shape[0]} usable row(s), at least {MIN_ROWS} are needed",
            "give more complete rows, or use --missing mean",
        )
    # A column can turn constant once incomplete rows are gone.
    spread = matrix.max(axis=0) - matrix.min(axis=0)
    if np.any(spread == 0):
        for j in np.flatnonzero(spread == 0)[::-1]:
            excluded.append(
                {"column": kept[j], "reason": f"constant on the rows used: every value is {_format_value(matrix[0, j])}"}
            )
            del missing_per_column[kept[j]]
        keep_cols = spread > 0
        kept = [c for c, k in zip(kept, keep_cols) if k]
        matrix = matrix[:, keep_cols]
        if len(kept) < 2:
            raise InputError(
                f"{name} has {len(kept)} non-constant column(s) on the rows used, at least 2 are needed",
                "give a table with two or more varying numeric columns",
            )

    binary = [c for j, c in enumerate(kept) if np.all((matrix[:, j] == 0.0) | (matrix[:, j] == 1.0))]
    for c in binary:
        notes.append(note("binary_column", "caution", f"column {c!r} is binary (0/1); PCA treats it as continuous, read its loadings with care", c))
    order = {c: i for i, c in enumerate(header)}
    excluded.sort(key=lambda e: order.get(e["column"], len(order)))
    return IntakeResult(
        source=name,
        sha256=meta["sha256"],
        file_type=meta["file_type"],
        rows_read=n_rows,
        rows_used=int(matrix.shape[0]),
        columns_used=kept,
        excluded=excluded,
        data=matrix,
        row_labels=[str(x) for x in labels],
        row_numbers=row_numbers,
        id_column=labels_from.name if labels_from is not None else None,
        target_name=target,
        target=target_values,
        missing_policy=missing,
        missing_per_column=missing_per_column,
        rows_dropped_missing=rows_dropped,
        values_imputed=imputed,
        binary_columns=binary,
        text_format=fmt,
        notes=notes,
        sheet=meta["sheet"],
    )
