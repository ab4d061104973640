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
import sys
import threading
import zipfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError

#: Spellings of a missing value in text files (compared after stripping white space).
MISSING_SPELLINGS = frozenset(
    {"", "na", "n/a", "nan", "null", "none", "-", "--", "?", ".", "#n/a", "missing", "nil"}
)
MISSING_POLICIES = ("listwise", "mean", "fail")
#: Values beyond this magnitude are refused: their squares overflow double precision.
MAX_MAGNITUDE = 1e150
#: Rows of a Parquet file decoded at a time by the in-memory reader.
PARQUET_BATCH_ROWS = 65_536
#: Cells from which a numeric block is copied by two threads.
COPY_IN_PARALLEL = 4_000_000
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
    row_labels : RowLabels
        A label for each used row: the identifier's value, else ``row N`` (1-based data row);
        indexable like a list, made lazily.
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
    row_labels: RowLabels
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
    #: (minimum, maximum, exact zeros) per used column over the rows used, when the reader
    #: gathered them and no row was dropped or filled in; else None.
    column_extremes: tuple | None = None

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


class RowLabels:
    """The label of each used row, made when asked for: the identifier's value, else
    ``row N`` (N the 1-based data row). A million rows need no million strings.

    ``texts`` holds identifier text, ``numbers`` numeric identifier values (NaN where
    missing); with neither, rows are named by their number.
    """

    def __init__(self, row_numbers: np.ndarray, texts: np.ndarray | None = None, numbers: np.ndarray | None = None):
        self.row_numbers = row_numbers
        self.texts = texts
        self.numbers = numbers

    def __len__(self) -> int:
        return len(self.row_numbers)

    def _one(self, i: int) -> str:
        if self.texts is not None:
            return str(self.texts[i])
        if self.numbers is not None:
            x = self.numbers[i]
            if np.isnan(x):
                return f"row {int(self.row_numbers[i])}"
            return str(int(x)) if np.isfinite(x) and x == int(x) else repr(float(x))
        return f"row {int(self.row_numbers[i])}"

    def __getitem__(self, index):
        if isinstance(index, (int, np.integer)):
            return self._one(int(index))
        if isinstance(index, slice) or isinstance(index, np.ndarray):
            return RowLabels(
                self.row_numbers[index],
                None if self.texts is None else self.texts[index],
                None if self.numbers is None else self.numbers[index],
            )
        raise TypeError(f"row labels are indexed by an integer, a slice or an array, not {type(index).__name__}")

    def __iter__(self):
        return (self._one(i) for i in range(len(self)))

    def __eq__(self, other) -> bool:
        return list(self) == list(other)

    def tolist(self) -> list[str]:
        return list(self)


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


def _pandas():
    """pandas, imported when a column of cells needs it (about 0.6 s of start-up saved
    for Parquet and clean CSV files)."""
    import pandas as pd

    return pd


def _frame_columns(frame) -> list:
    """The columns of a frame of cells, in order, as pandas Series."""
    return [frame.iloc[:, j] for j in range(frame.shape[1])]


#: Cells that pyarrow may read as missing in a numeric column: the spellings of
#: MISSING_SPELLINGS as written, in capitals and capitalised. Anything else that is not a
#: number makes the whole column text, which the text rules below then read.
_ARROW_NULLS = sorted({v for s in MISSING_SPELLINGS for v in (s, s.upper(), s.capitalize())})


def _sample_cells(text: str, delimiter: str, rows: int = 500) -> list[str]:
    """The stripped cells of the first ``rows`` data rows (header excluded)."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    cells: list[str] = []
    try:
        next(reader, None)
        for i, row in enumerate(reader):
            if i >= rows:
                break
            cells.extend(c.strip() for c in row)
    except csv.Error:
        pass
    return cells


def _read_text_arrow(body: bytes, delimiter: str):
    """Parse UTF-8 delimited text with pyarrow: numeric columns come back as float arrays
    (correctly rounded, multi-threaded), every other column as its cells verbatim. Returns
    None when pyarrow refuses the file (ragged rows, for example); the caller then reads it
    with the more lenient text reader."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    parse = pacsv.ParseOptions(delimiter=delimiter, newlines_in_values=b'"' in body, ignore_empty_lines=True)

    def read(text_columns: dict | None = None):
        return pacsv.read_csv(
            pa.py_buffer(body),
            read_options=pacsv.ReadOptions(use_threads=True),
            parse_options=parse,
            convert_options=pacsv.ConvertOptions(
                null_values=_ARROW_NULLS, true_values=[], false_values=[], strings_can_be_null=False,
                column_types=text_columns,
            ),
        )

    try:
        table = read()
        header = [str(c) for c in table.column_names]
        other = [c for c, f in zip(header, table.schema) if not (_arrow_numeric(f.type) or pa.types.is_string(f.type))]
        if other:  # dates and the like: read those columns again as text, the text rules decide
            if len(set(header)) != len(header):
                return None
            table = read({c: pa.string() for c in other})
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError, UnicodeDecodeError):
        return None
    return [h.strip() for h in header], _arrow_columns(table)


def _arrow_numeric(kind) -> bool:
    import pyarrow as pa

    t = pa.types
    return t.is_integer(kind) or t.is_floating(kind) or t.is_decimal(kind) or t.is_boolean(kind) or t.is_null(kind)


def _arrow_columns(table) -> list:
    """The columns of an Arrow table for :func:`type_column` (see :func:`_arrow_pieces`)."""
    return _arrow_pieces(table.schema, table.num_rows, [table])


def _arrow_pieces(schema, num_rows: int, pieces) -> list:
    """The columns of a table that arrives in pieces of rows (a Parquet file's row groups),
    for :func:`type_column`: numeric ones as float64 views (NaN for missing) into one
    column-major block, filled piece by piece straight from Arrow's buffers, so that a
    numeric value is copied once and only one piece is held at a time; dates and times as
    :class:`DateColumn`; anything else as a pandas Series of its cells."""
    import pyarrow as pa
    import pyarrow.compute as pc

    numeric = [j for j, f in enumerate(schema) if _arrow_numeric(f.type)]
    numeric_set = set(numeric)
    others = [j for j in range(len(schema)) if j not in numeric_set]
    block = np.empty((num_rows, len(numeric)), order="F")
    kept_chunks: dict[int, list] = {j: [] for j in others}
    stats = ColumnStats.empty(len(numeric))

    def fill(table, first_row: int, slots) -> None:
        for slot in slots:
            offset = first_row
            for chunk in table.column(numeric[slot]).chunks:
                end = offset + len(chunk)
                if pa.types.is_null(chunk.type):
                    block[offset:end, slot] = np.nan
                else:
                    # An unsafe cast rounds integers beyond 2^53 to the nearest double, as a text
                    # reader does; a safe one would refuse them.
                    as_float = chunk if pa.types.is_float64(chunk.type) else pc.cast(chunk, pa.float64(), safe=False)
                    if as_float.null_count:
                        as_float = pc.fill_null(as_float, np.nan)
                    block[offset:end, slot] = _arrow_values(as_float)
                offset = end

    first_row = 0
    for table in pieces:
        # Two threads share a large copy (numpy copies without the interpreter lock): most
        # of its cost is the first touch of the block's memory, which the kernel serves per thread.
        if table.num_rows * len(numeric) >= COPY_IN_PARALLEL:
            half = len(numeric) // 2
            with ThreadPoolExecutor(max_workers=1) as pool:
                other_half = pool.submit(fill, table, first_row, range(half, len(numeric)))
                fill(table, first_row, range(half))
                other_half.result()  # re-raises whatever the other thread met
        else:
            fill(table, first_row, range(len(numeric)))
        stats.add(block[first_row : first_row + table.num_rows])  # while the piece is still in cache
        for j in others:
            kept_chunks[j].extend(table.column(j).chunks)
        first_row += table.num_rows
    out: list = [None] * len(schema)
    for slot, j in enumerate(numeric):
        out[j] = ReadColumn(block[:, slot], stats.of(slot))
    for j in others:
        column = pa.chunked_array(kept_chunks[j], type=schema.field(j).type)
        if pa.types.is_temporal(column.type):
            out[j] = DateColumn(len(column), int(column.null_count), column.cast(pa.string()).to_pandas())
        else:
            out[j] = column.to_pandas()
    return out


def _arrow_values(array) -> np.ndarray:
    """The values of a float64 Arrow array without nulls, as a view of its data buffer
    (Arrow's own to_numpy imports pandas, about half a second)."""
    return np.frombuffer(array.buffers()[1], dtype=np.float64, count=len(array), offset=array.offset * 8)


@dataclass
class ColumnStats:
    """Per-column missing count, extremes (NaN ignored) and exact zeros, gathered while a
    reader copies the values, so that no later pass over the whole table is needed for them."""

    missing: np.ndarray
    low: np.ndarray
    high: np.ndarray
    zeros: np.ndarray

    @classmethod
    def empty(cls, p: int) -> "ColumnStats":
        return cls(np.zeros(p, dtype=np.int64), np.full(p, np.inf), np.full(p, -np.inf), np.zeros(p, dtype=np.int64))

    def add(self, rows: np.ndarray) -> None:
        """Fold in a piece of rows (all columns)."""
        if rows.size == 0:
            return
        low, high = rows.min(axis=0), rows.max(axis=0)  # NaN where a column holds one
        holes = np.isnan(low)
        if holes.any():
            piece = rows[:, holes]
            self.missing[holes] += np.count_nonzero(np.isnan(piece), axis=0)
            low[holes], high[holes] = np.fmin.reduce(piece, axis=0), np.fmax.reduce(piece, axis=0)
        self.low = np.fmin(self.low, low)
        self.high = np.fmax(self.high, high)
        self.zeros += np.count_nonzero(rows == 0, axis=0)

    def of(self, slot: int) -> tuple[int, float, float, int]:
        return int(self.missing[slot]), float(self.low[slot]), float(self.high[slot]), int(self.zeros[slot])


@dataclass
class ReadColumn:
    """A numeric column as a reader typed it (float64, NaN for missing), with the
    :class:`ColumnStats` it gathered while copying the values."""

    values: np.ndarray
    stats: tuple[int, float, float, int]  # missing, low, high, zeros

    def __len__(self) -> int:
        return len(self.values)


@dataclass
class DateColumn:
    """A column of dates or times as typed by the reader (never a feature); ``texts`` are
    its values written out, for row labels."""

    length: int
    missing: int
    texts: object = None

    def __len__(self) -> int:
        return self.length


def _read_text_pandas(text: str, name: str, delimiter: str) -> tuple[list[str], list]:
    """Parse delimited text into a header and columns of cells (strings), with pandas."""
    pd = _pandas()
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
    return header, _frame_columns(body)


def read_text_table(raw: bytes, name: str) -> tuple[list[str], list, TextFormat, list[dict]]:
    """Parse a delimited text file into a header and its columns (see :func:`read_table`)."""
    text, encoding, notes = decode_text(raw, name)
    if not text.strip():
        raise InputError(f"{name} is empty", "give a file with a header row and data rows")
    delimiter = detect_delimiter(text)
    decimal = detect_decimal(_sample_cells(text, delimiter), delimiter)
    parsed = None
    if encoding in ("utf-8", "utf-8-sig"):
        parsed = _read_text_arrow(raw[3:] if encoding == "utf-8-sig" else raw, delimiter)
    if parsed is None:
        parsed = _read_text_pandas(text, name, delimiter)
    header, columns = parsed
    if decimal == ",":
        notes.append(note("decimal_comma", "note", f"{name} uses a decimal comma; values such as '3,14' were read as 3.14"))
    return header, columns, TextFormat(encoding, delimiter, decimal), notes


def read_parquet_table(path: Path, name: str) -> tuple[list[str], list]:
    import pyarrow.parquet as pq

    import pyarrow as pa

    def batches(reader):
        for batch in reader.iter_batches(batch_size=PARQUET_BATCH_ROWS, use_threads=True):
            yield pa.Table.from_batches([batch])

    try:
        # The file reader, not read_table's dataset layer (which costs seconds on a table of
        # many thousands of columns), in batches of rows read piece by piece: a whole row
        # group decoded at once holds about twice its size in Arrow's memory.
        reader = pq.ParquetFile(path, pre_buffer=False, buffer_size=1 << 20)
        schema = reader.schema_arrow
        header = [str(c) for c in schema.names]
        return header, _arrow_pieces(schema, reader.metadata.num_rows, batches(reader))
    except InputError:
        raise
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise InputError(f"{name} is not a readable Parquet file ({type(exc).__name__})", "re-export it")


def read_excel_table(path: Path, name: str, sheet: str | None) -> tuple[list[str], list, str]:
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
    pd = _pandas()
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
    return header, _frame_columns(body), sheet


# ---------------------------------------------------------------------------- typing
@dataclass
class TypedColumn:
    name: str
    values: np.ndarray | None  # float64 with NaN for missing, None when not numeric
    raw: object  # the cells as text (a pandas Series); None when the reader typed the column
    missing: int
    bad_examples: list[str]
    n_bad: int
    dates: bool = False
    stats: tuple[int, float, float, int] | None = None  # missing, low, high, zeros, when the reader gathered them


def _to_number(cells, decimal: str) -> tuple[np.ndarray, np.ndarray]:
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
    values = _pandas().to_numeric(work.mask(is_missing, np.nan), errors="coerce").to_numpy(dtype=np.float64)
    bad = np.isnan(values) & ~is_missing
    # "nan" spelled out is missing, "inf" parses to inf and is kept for the infinity check.
    return values, bad


def type_column(name: str, cells, decimal: str) -> TypedColumn:
    """Decide whether a column is numeric; keep the non-numeric examples for the message.

    ``cells`` is a :class:`ReadColumn` or a float array when the reader already typed the
    column as numbers, a :class:`DateColumn` for dates, else a pandas Series of cells.
    """
    if isinstance(cells, ReadColumn):
        return TypedColumn(name, cells.values, None, cells.stats[0], [], 0, stats=cells.stats)
    if isinstance(cells, np.ndarray):
        return TypedColumn(name, cells, None, _count_nan(cells), [], 0)
    if isinstance(cells, DateColumn):
        return TypedColumn(name, None, cells.texts, cells.missing, ["(dates)"], cells.length, dates=True)
    pd = _pandas()
    if pd.api.types.is_bool_dtype(cells):
        values = cells.astype(float).to_numpy()
        return TypedColumn(name, values, cells, int(np.isnan(values).sum()), [], 0)
    if pd.api.types.is_numeric_dtype(cells):
        values = pd.to_numeric(cells, errors="coerce").to_numpy(dtype=np.float64)
        return TypedColumn(name, values, cells, int(np.isnan(values).sum()), [], 0)
    if pd.api.types.is_datetime64_any_dtype(cells):
        return TypedColumn(name, None, cells.astype(str), int(cells.isna().sum()), ["(dates)"], len(cells), dates=True)
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
        if col.dates or col.n_bad * 2 <= n_rows - col.missing:
            return None  # dates, or mostly numbers: a numeric column with stray text, not a label
        present = col.raw[col.raw.str.strip().str.lower().map(lambda s: s not in MISSING_SPELLINGS)]
        if len(present) == n_rows and present.nunique() == n_rows:
            return "identifier-like: every value is a distinct text label"
        return None
    v = col.values
    head = v[:64]  # most feature columns show a fraction within their first values
    if col.missing or not np.all(head == np.round(head)):
        return None
    if not np.all(np.isfinite(v)) or not np.all(v == np.round(v)):
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


def _count_nan(v: np.ndarray) -> int:
    """Number of NaN in ``v``; one pass (a minimum is NaN exactly when a NaN is present)."""
    if v.size == 0 or not np.isnan(v.min()):
        return 0
    return int(np.count_nonzero(np.isnan(v)))


def _extremes(v: np.ndarray, missing: int) -> tuple[float, float]:
    """Smallest and largest value, ignoring NaN (the column has a value that is not NaN)."""
    if missing == 0:
        return float(v.min()), float(v.max())
    return float(np.fmin.reduce(v)), float(np.fmax.reduce(v))


def _feature_matrix(columns: list[np.ndarray]) -> np.ndarray:
    """The column-major matrix of the feature columns. When they are, in order, every column
    of one column-major block (a Parquet or CSV file of numbers read by Arrow), that block
    is the matrix and nothing is copied."""
    base = columns[0].base
    if isinstance(base, np.ndarray) and base.ndim == 2 and base.flags.f_contiguous and base.shape == (len(columns[0]), len(columns)):
        start, step = base.ctypes.data, base.strides[1]
        if all(c.base is base and c.ctypes.data == start + j * step for j, c in enumerate(columns)):
            return base
    matrix = np.empty((len(columns[0]), len(columns)), order="F")
    for j, values in enumerate(columns):
        matrix[:, j] = values
    return matrix


def labels_of(column: TypedColumn, row_numbers: np.ndarray) -> RowLabels:
    """Row labels from an identifier column: its numbers, else its text, as written."""
    if column.values is not None:
        return RowLabels(row_numbers, numbers=column.values)
    return RowLabels(row_numbers, texts=np.array(column.raw.astype(str).str.strip().tolist(), dtype=object))


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


class FileDigest:
    """SHA-256 of a file's bytes, computed on a second thread while the file is parsed
    (hashlib releases the interpreter lock on large buffers)."""

    def __init__(self, path: Path | None = None, data: bytes | None = None):
        self._value: str | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, args=(path, data), daemon=True)
        self._thread.start()

    def _run(self, path, data) -> None:
        try:
            if data is not None:
                self._value = hashlib.sha256(data).hexdigest()
            else:
                self._value = sha256_of_file(path)
        except BaseException as exc:  # handed to the caller by hexdigest()
            self._error = exc

    def hexdigest(self) -> str:
        self._thread.join()
        if self._error is not None:
            raise InputError(f"cannot read the input to hash it ({self._error})", "check the file")
        return self._value


def read_table(source, *, sheet: str | None = None):
    """Read ``source`` (path or DataFrame) into (header, columns, metadata).

    Each column is a float array (NaN for missing) when the reader typed it as numbers, a
    :class:`DateColumn`, or a pandas Series of cells for :func:`type_column` to read.
    ``meta["sha256"]`` is a :class:`FileDigest` (None for a DataFrame).
    """
    meta: dict = {"notes": [], "text_format": None, "sheet": None, "sha256": None}
    pd = sys.modules.get("pandas")  # a DataFrame can only exist once pandas is imported
    if pd is not None and isinstance(source, pd.DataFrame):
        header = [str(c) for c in source.columns]
        frame = source.reset_index(drop=True)
        meta.update(source="<DataFrame>", file_type="dataframe")
        return header, _frame_columns(frame), meta
    path = Path(source)
    name = path.name or str(path)
    if not path.exists():
        raise InputError(f"no such file: {source}", "check the path")
    if path.is_dir():
        raise InputError(f"{source} is a folder, not a file", "give the path of a CSV, Parquet or .xlsx file")
    try:
        with open(path, "rb") as handle:
            head = handle.read(65536)
            size = path.stat().st_size
    except OSError as exc:
        raise InputError(f"cannot read {source} ({exc.strerror})", "check the file's permissions")
    meta["source"] = name
    if size == 0 or (size <= len(head) and head.isspace()):
        raise InputError(f"{name} is empty", "give a file with a header row and data rows")
    kind = sniff_kind(head[:16])
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm") and kind != "zip":
        what = "text" if kind == "text" else kind
        if kind == "text" and b"\x00" in head:
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
        meta["sha256"] = FileDigest(path=path)
        header, columns = read_parquet_table(path, name)
        meta["file_type"] = "parquet"
    elif kind == "zip":
        meta["sha256"] = FileDigest(path=path)
        header, columns, used_sheet = read_excel_table(path, name, sheet)
        meta.update(file_type="xlsx", sheet=used_sheet)
    else:
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise InputError(f"cannot read {source} ({exc.strerror})", "check the file's permissions")
        meta["sha256"] = FileDigest(data=raw)
        if raw.isspace():
            raise InputError(f"{name} is empty", "give a file with a header row and data rows")
        header, columns, fmt, notes = read_text_table(raw, name)
        meta.update(file_type="csv", text_format=fmt)
        meta["notes"].extend(notes)
    return header, columns, meta


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
    header, cells, meta = read_table(source, sheet=sheet)
    name = meta["source"]
    header = _unique_header(header, name)
    n_rows = len(cells[0]) if cells else 0
    if n_rows == 0:
        raise InputError(f"{name} has a header but no data rows", "give a file with data rows")
    while len(cells) < len(header):  # a header longer than its rows: the extra columns are empty
        cells.append(np.full(n_rows, np.nan))
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
        typed[col] = type_column(col, cells[j], decimal)

    # Identifier: the named one, else the first column that looks like one.
    labels_from: TypedColumn | None = None
    if id_column is not None:
        labels_from = type_column(id_column, cells[header.index(id_column)], decimal)
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
    # overflows, since every second moment would be infinite. Both show in the extremes.
    extremes = {
        col: typed[col].stats[1:3] if typed[col].stats else _extremes(typed[col].values, typed[col].missing) for col in kept
    }
    for col in kept:
        low, high = extremes[col]
        v = typed[col].values
        if low == -np.inf or high == np.inf:
            row = int(np.argmax(np.isinf(v))) + 1
            raise InputError(
                f"column {col!r} holds an infinite value at data row {row}",
                "replace it with a finite number or leave the cell empty",
            )
        if max(abs(low), abs(high)) > MAX_MAGNITUDE:
            row = int(np.argmax(np.abs(np.nan_to_num(v)) > MAX_MAGNITUDE)) + 1
            raise InputError(
                f"column {col!r} holds {v[row - 1]:.3g} at data row {row}, too large to square in floating point",
                f"rescale the column (values up to {MAX_MAGNITUDE:.0e} in magnitude are read)",
            )

    # Constant columns (among the non-missing values).
    still: list[str] = []
    for col in kept:
        low, high = extremes[col]
        if low == high:
            excluded.append({"column": col, "reason": f"constant: every value is {_format_value(low)}"})
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

    matrix = _feature_matrix([typed[c].values for c in kept])
    missing_per_column = {c: typed[c].missing for c in kept}
    row_numbers = np.arange(1, n_rows + 1)

    target_values = None
    if target is not None:
        tc = type_column(target, cells[header.index(target)], decimal)
        if tc.values is None:
            examples = ", ".join(repr(e) for e in tc.bad_examples)
            raise InputError(f"target column {target!r} is not numeric (e.g. {examples})", "code it as numbers (0/1 for a binary outcome)")
        if np.isinf(tc.values).any():
            row = int(np.argmax(np.isinf(tc.values))) + 1
            raise InputError(f"target column {target!r} holds an infinite value at data row {row}", "replace it with a finite number")
        target_values = tc.values

    labels = RowLabels(row_numbers) if labels_from is None else labels_of(labels_from, row_numbers)

    rows_dropped = 0
    imputed = 0
    if any(missing_per_column.values()):
        holes = np.isnan(matrix)
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
            matrix = np.asfortranarray(np.where(holes, means, matrix))
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
    if rows_dropped:
        low, high = matrix.min(axis=0), matrix.max(axis=0)
    else:
        low = np.array([extremes[c][0] for c in kept])
        high = np.array([extremes[c][1] for c in kept])
    if np.any(low == high):
        for j in np.flatnonzero(low == high)[::-1]:
            excluded.append(
                {"column": kept[j], "reason": f"constant on the rows used: every value is {_format_value(matrix[0, j])}"}
            )
            del missing_per_column[kept[j]]
        keep_cols = low != high
        kept = [c for c, k in zip(kept, keep_cols) if k]
        matrix, low, high = np.asfortranarray(matrix[:, keep_cols]), low[keep_cols], high[keep_cols]
        if len(kept) < 2:
            raise InputError(
                f"{name} has {len(kept)} non-constant column(s) on the rows used, at least 2 are needed",
                "give a table with two or more varying numeric columns",
            )

    # Binary 0/1 columns: only those whose extremes are 0 and 1 need the full look.
    binary = [
        c for j, c in enumerate(kept)
        if low[j] == 0.0 and high[j] == 1.0 and np.all((matrix[:, j] == 0.0) | (matrix[:, j] == 1.0))
    ]
    for c in binary:
        notes.append(note("binary_column", "caution", f"column {c!r} is binary (0/1); PCA treats it as continuous, read its loadings with care", c))
    order = {c: i for i, c in enumerate(header)}
    excluded.sort(key=lambda e: order.get(e["column"], len(order)))
    return IntakeResult(
        source=name,
        sha256=meta["sha256"].hexdigest() if meta["sha256"] is not None else None,
        file_type=meta["file_type"],
        rows_read=n_rows,
        rows_used=int(matrix.shape[0]),
        columns_used=kept,
        excluded=excluded,
        data=matrix,
        row_labels=labels,
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
        column_extremes=(
            (low, high, np.array([typed[c].stats[3] for c in kept]))
            if not rows_dropped and not imputed and all(typed[c].stats for c in kept) else None
        ),
    )
