"""The streaming engine: audits of CSV and Parquet files larger than memory.

The table is read in bounded chunks with pyarrow. Pass 1 updates the Moments per chunk
(one BLAS cross-product a chunk), keeps a seeded uniform sample of rows for the resampling
figures (bootstrap, cross-validation, robust scale, target check), caches the parsed
feature values in a temporary binary file and, for a CSV, hashes the file's bytes as the
parser reads them. Every matrix-level figure is then computed from the Moments exactly as
in memory. Pass 2 reads the cache in chunks for the per-row figures (Mahalanobis screen,
SPE, Hotelling's T-squared), which are exact over all rows, on every core. Peak memory is
bounded by the chunk size (and a few chunks in flight), the read-ahead of the CSV parser, the sample and
O(p^2), whatever the number of rows; the temporary folder is removed whether the audit succeeds or fails.

Screening decisions (which columns are numeric, identifiers, constant, all missing) are
taken on the first rows, and the record says so.
"""
from __future__ import annotations

import hashlib
import os
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import intake as intake_mod
from .errors import InputError
from .moments import Moments

CHUNK_ROWS = 16_384
#: Bytes the CSV parser takes at a time. pyarrow's reader reads up to 32 blocks ahead of
#: the parser, so this bounds its read-ahead (32 MB); blocks of 1 MB also parse about twice
#: as fast as blocks of 16 MB, which no longer fit the processor's caches.
CSV_BLOCK_BYTES = 1 << 20
#: Cached values the second pass holds in flight at once across its threads (see
#: over_cached_chunks): three chunks at p = 50, one (no threads) above p = 80.
PASS2_BYTES = 20 * 1024 * 1024
#: Read buffer of each Parquet column chunk (see ParquetSource).
PARQUET_BUFFER_BYTES = 1 << 16
HEAD_ROWS = 20_000
#: At most this much of the file is read for the screening rows.
HEAD_BYTES = 16 * 1024 * 1024
SAMPLE_ROWS = 20_000
#: ``--engine auto`` streams a file only above this size, and only when reading it whole
#: would take more than AUTO_STREAM_SHARE of the memory available.
AUTO_STREAM_BYTES = 256 * 1024 * 1024
AUTO_STREAM_SHARE = 0.25
#: Bytes the in-memory engine holds at its peak per byte of a CSV file (the bytes, the
#: decoded text, pyarrow's table, the matrix), about; for Parquet, twice the matrix.
CSV_FOOTPRINT = 4
TOP_ROWS = 10
CHART_ROWS = 5000


def can_stream(path: Path) -> str | None:
    """``csv`` or ``parquet`` when the file can be streamed, else None."""
    with open(path, "rb") as handle:
        head = handle.read(4)
    if head == b"PAR1":
        return "parquet"
    if path.suffix.lower() in (".xlsx", ".xlsm", ".xls"):
        return None
    return "csv"


def memory_available() -> int | None:
    """Bytes of memory available to a new allocation (Linux: MemAvailable), or None."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def in_memory_footprint(path: Path, kind: str) -> int:
    """About the peak memory of reading ``path`` whole with the in-memory engine."""
    if kind == "parquet":
        import pyarrow.parquet as pq

        meta = pq.ParquetFile(path).metadata
        return 2 * 8 * meta.num_rows * meta.num_columns
    return CSV_FOOTPRINT * path.stat().st_size


def should_stream(path: Path) -> bool:
    """``--engine auto``: stream a CSV or Parquet file above AUTO_STREAM_BYTES whose whole
    reading would take more than AUTO_STREAM_SHARE of the memory available (4 GB assumed
    where the system does not say); read the others in memory, which is faster."""
    kind = can_stream(path)
    if kind is None or path.stat().st_size <= AUTO_STREAM_BYTES:
        return False
    available = memory_available() or 4 * 1024**3
    try:
        footprint = in_memory_footprint(path, kind)
    except Exception:  # an unreadable Parquet footer: the reader will say what is wrong
        return False
    return footprint > AUTO_STREAM_SHARE * available


def _progress(total: int | None, quiet: bool, unit: str):
    if quiet or not sys.stderr.isatty():
        return None
    try:
        from tqdm import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency
        return None
    return tqdm(total=total, unit=unit, unit_scale=True, file=sys.stderr, leave=False, desc="axisledger")


# ---------------------------------------------------------------------- screening
def _head_bytes(path: Path) -> bytes:
    """The header and up to HEAD_ROWS data lines of a text file, whole lines only.

    A line cut at the byte limit would reach the screening as a short row, so a partial
    last line is left out unless the whole file was read.
    """
    with open(path, "rb") as handle:
        raw = handle.read(HEAD_BYTES)
        whole_file = not handle.read(1)
    lines = raw.split(b"\n", HEAD_ROWS + 1)
    if len(lines) > HEAD_ROWS + 1:
        return b"\n".join(lines[: HEAD_ROWS + 1]) + b"\n"
    if whole_file:
        return raw
    cut = raw.rfind(b"\n")
    return raw[: cut + 1] if cut >= 0 else raw


def _parquet_head(path: Path):
    import pyarrow.parquet as pq

    with pq.ParquetFile(path, pre_buffer=False, buffer_size=PARQUET_BUFFER_BYTES) as source:  # see ParquetSource
        batch = next(source.iter_batches(batch_size=HEAD_ROWS), None)
    if batch is None:
        raise InputError(f"{path.name} has a header but no data rows", "give a file with data rows")
    return batch.to_pandas()


def screen_head(path: Path, kind: str, options):
    """The screening decisions, taken by the ordinary intake on the first rows.

    A CSV head goes through a temporary file of the same name (the intake reads files and
    names them in its messages); the folder is removed as soon as the head is read.
    """
    def load(source):
        return intake_mod.load(
            source, columns=options.columns, exclude=options.exclude, id_column=options.id_column,
            target=options.target, missing="listwise",
        )

    if kind == "parquet":
        return load(_parquet_head(path))
    with tempfile.TemporaryDirectory(prefix="axisledger-head-") as folder:
        head_path = Path(folder) / path.name
        head_path.write_bytes(_head_bytes(path))
        return load(head_path)


# ---------------------------------------------------------------------- reading
class HashingReader:
    """A binary file, read front to back, that hashes every byte it hands out.

    pyarrow's CSV reader reads its input once, in order; giving it this file yields the
    record's SHA-256 of the input's bytes without a second read of a file larger than
    memory. ``close`` (which pyarrow may call) only marks it closed: the owner closes the
    handle, after :meth:`hexdigest`.
    """

    mode = "rb"

    def __init__(self, path: Path):
        self._handle = open(path, "rb")
        self._digest = hashlib.sha256()
        self.bytes_read = 0
        self.closed = False

    def read(self, size: int = -1) -> bytes:
        data = self._handle.read(size)
        self._digest.update(data)
        self.bytes_read += len(data)
        return data

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return False

    def writable(self) -> bool:
        return False

    def tell(self) -> int:
        return self.bytes_read

    def close(self) -> None:
        self.closed = True

    def hexdigest(self) -> str:
        """SHA-256 of the whole file, hashing whatever the parser left unread (normally nothing)."""
        for block in iter(lambda: self._handle.read(1 << 20), b""):
            self._digest.update(block)
        return self._digest.hexdigest()

    def release(self) -> None:
        self._handle.close()
        self.closed = True


class CsvSource:
    """A CSV file as pyarrow record batches, typed by the screening, hashed as it is read."""

    unit = "B"

    def __init__(self, path: Path, head):
        fmt = head.text_format
        if fmt.decimal != "." or fmt.encoding not in ("utf-8", "utf-8-sig"):
            raise InputError(
                f"{path.name} uses a decimal comma or a non-UTF-8 encoding, which the streaming engine does not read",
                "use --engine memory, or save the file as UTF-8 with '.' decimals",
            )
        self.path, self.head = path, head
        self.total = path.stat().st_size
        self._file = HashingReader(path)
        self._reader = None

    def batches(self):
        import pyarrow as pa
        import pyarrow.csv as pacsv

        head = self.head
        numeric = list(head.columns_used) + ([head.target_name] if head.target_name else [])
        types = {c: pa.float64() for c in numeric}
        if head.id_column:
            types[head.id_column] = pa.string()
        spellings = intake_mod.MISSING_SPELLINGS | {s.upper() for s in intake_mod.MISSING_SPELLINGS}
        self._reader = pacsv.open_csv(
            self._file,
            read_options=pacsv.ReadOptions(block_size=CSV_BLOCK_BYTES, encoding="utf8"),
            parse_options=pacsv.ParseOptions(delimiter=head.text_format.delimiter, newlines_in_values=True),
            convert_options=pacsv.ConvertOptions(
                include_columns=_wanted(head), column_types=types, null_values=sorted(spellings),
                strings_can_be_null=True, quoted_strings_can_be_null=True,
            ),
        )
        return self._reader

    def done(self) -> int:
        return self._file.bytes_read

    def sha256(self) -> str:
        return self._file.hexdigest()

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        # The parser first (it may still be reading ahead after an error), then the file.
        if self._reader is not None:
            self._reader.close()
        self._file.release()


class ParquetSource:
    """A Parquet file as pyarrow record batches.

    By default pyarrow loads whole row groups (often a million rows) and more ahead of
    the batches it hands out; without pre-buffering and with a read buffer it reads the
    column chunks piece by piece, so memory does not follow the row-group size. A
    Parquet reader seeks (footer first, then column chunks), so the file's bytes cannot
    be hashed as they are read: its SHA-256 takes a plain read of its own.
    """

    unit = "rows"

    def __init__(self, path: Path, head):
        import pyarrow.parquet as pq

        self.path, self.head = path, head
        self._file = pq.ParquetFile(path, pre_buffer=False, buffer_size=PARQUET_BUFFER_BYTES)
        self.total = self._file.metadata.num_rows
        self._rows = 0

    def batches(self):
        for batch in self._file.iter_batches(batch_size=CHUNK_ROWS, columns=_wanted(self.head)):
            self._rows += batch.num_rows
            yield batch

    def done(self) -> int:
        return self._rows

    def sha256(self) -> str:
        return intake_mod.sha256_of_file(self.path)

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self._file.close()


def _wanted(head) -> list[str]:
    """The columns the stream reads: the features, then the target and the identifier."""
    return list(head.columns_used) + [c for c in (head.target_name, head.id_column) if c]


def _regroup(batches, rows: int):
    """Lists of batches of ``rows`` rows in all (the last may hold fewer).

    The parser's batches follow its byte blocks; the chunks the audit works on have a fixed
    number of rows whatever the width of the lines.
    """
    group, count = [], 0
    for batch in batches:
        while batch.num_rows:
            take = min(rows - count, batch.num_rows)
            group.append(batch.slice(0, take))
            batch = batch.slice(take)
            count += take
            if count == rows:
                yield group
                group, count = [], 0
    if count:
        yield group


def _chunk_arrays(group, features: list[str], target: str | None, id_column: str | None):
    """(features float64 (m, p), target float64 (m,) or None, labels or None) of some batches.

    Batch by batch, so that the columns are written into the row-major matrix while the
    batch's own values are still in the processor's caches.
    """
    m = sum(batch.num_rows for batch in group)
    x = np.empty((m, len(features)))
    y = np.empty(m) if target else None
    labels = [] if id_column else None
    start = 0
    for batch in group:
        end = start + batch.num_rows
        for j, name in enumerate(features):
            x[start:end, j] = batch.column(name).to_numpy(zero_copy_only=False)
        if target:
            y[start:end] = batch.column(target).to_numpy(zero_copy_only=False)
        if id_column:
            labels.extend(batch.column(id_column).to_pylist())
        start = end
    return x, y, labels


def iter_chunks(source, features: list[str], target: str | None, id_column: str | None):
    """Yield the chunks of ``source`` (see :func:`_chunk_arrays`), CHUNK_ROWS rows each."""
    import pyarrow as pa

    try:
        for group in _regroup(source.batches(), CHUNK_ROWS):
            yield _chunk_arrays(group, features, target, id_column)
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        message = str(exc).splitlines()[0][:200]
        raise InputError(
            f"{source.path.name} holds a value the first {HEAD_ROWS:,} rows did not prepare for ({message})",
            "clean that column, or use --engine memory to screen the whole file",
        )


def _one_line(value) -> str:
    return " ".join(str(value if value is not None else "").split())


def complete_rows(x: np.ndarray, numbers: np.ndarray, features: list[str], missing: str) -> np.ndarray:
    """Which rows have every feature value, after refusing what the intake refuses.

    The checks of the in-memory intake (infinity first, then values whose square
    overflows, then a gap under ``--missing fail``), with the data-row number of the first
    offending cell; one absolute value serves both magnitude checks.
    """
    over = np.abs(x) > intake_mod.MAX_MAGNITUDE  # NaN compares False, infinity True
    if over.any():
        infinite = np.isinf(x)
        if infinite.any():
            r, c = np.argwhere(infinite)[0]
            raise InputError(f"column {features[c]!r} holds an infinite value at data row {int(numbers[r])}",
                             "replace it with a finite number or leave the cell empty")
        r, c = np.argwhere(over)[0]
        raise InputError(f"column {features[c]!r} holds {x[r, c]:.3g} at data row {int(numbers[r])}, too large to square in floating point",
                         f"rescale the column (values up to {intake_mod.MAX_MAGNITUDE:.0e} in magnitude are read)")
    holes = np.isnan(x)
    if not holes.any():
        return np.ones(len(x), dtype=bool)
    if missing == "fail":
        r, c = np.argwhere(holes)[0]
        raise InputError(f"column {features[c]!r} has a missing value at data row {int(numbers[r])} and --missing is fail",
                         "fill the gap, or use --missing listwise")
    return ~holes.any(axis=1)


# ---------------------------------------------------------------------- pass 1
class BottomKSample:
    """A seeded uniform sample of at most ``size`` rows, taken in one pass.

    Every row offered draws a uniform key in row order from one generator, and the sample is
    the rows with the ``size`` smallest keys (bottom-k sampling). Memory stays at ``size``
    rows however long the file, and the sample does not depend on where chunks begin and
    end. The arrays are allocated once and rows are replaced in place.
    """

    def __init__(self, size: int, p: int, rng: np.random.Generator, with_target: bool, with_labels: bool):
        self.size, self.rng, self.count = size, rng, 0
        self.keys = np.empty(size)
        self.rows = np.empty((size, p))
        self.target = np.empty(size) if with_target else None
        self.numbers = np.empty(size, dtype=np.int64)
        self.labels: list[str] | None = [""] * size if with_labels else None

    def offer(self, rows: np.ndarray, target, numbers: np.ndarray, labels) -> None:
        """Offer some rows (with their target values, data-row numbers and labels)."""
        keys = self.rng.random(len(rows))
        candidates = np.arange(len(rows)) if self.count < self.size else np.flatnonzero(keys < self.keys.max())
        if not len(candidates):
            return
        pool = np.concatenate([self.keys[: self.count], keys[candidates]])
        stays = np.ones(len(pool), dtype=bool)
        if len(pool) > self.size:
            stays[:] = False
            stays[np.argpartition(pool, self.size - 1)[: self.size]] = True
        entering = candidates[stays[self.count:]]
        free = np.concatenate([np.flatnonzero(~stays[: self.count]), np.arange(self.count, self.size)])[: len(entering)]
        self.keys[free] = keys[entering]
        self.rows[free] = rows[entering]
        self.numbers[free] = numbers[entering]
        if self.target is not None:
            self.target[free] = target[entering]
        if self.labels is not None:
            for slot, i in zip(free.tolist(), entering.tolist()):
                self.labels[slot] = labels[i]
        self.count = int(stays[: self.count].sum()) + len(entering)

    def in_file_order(self):
        """(rows, target or None, labels, data-row numbers), ordered as in the file."""
        order = np.argsort(self.numbers[: self.count])
        numbers = self.numbers[order]
        labels = [self.labels[i] for i in order] if self.labels is not None else [f"row {n}" for n in numbers.tolist()]
        target = self.target[order] if self.target is not None else None
        return self.rows[order], target, labels, numbers


class RowDirectory:
    """The data-row number and the label of every cached row, kept on disk.

    Pass 2 names only the handful of rows it reports; holding a number (and a label) for
    every row in memory would grow with the file. Numbers are int64 at ``8 * index``;
    labels are lines of UTF-8 text whose byte offsets are int64 at ``8 * index``.
    """

    def __init__(self, folder: str, with_labels: bool):
        self.numbers_path = os.path.join(folder, "rownumbers.i64")
        self.labels_path = os.path.join(folder, "labels.txt") if with_labels else None
        self.offsets_path = os.path.join(folder, "labels.i64") if with_labels else None
        self._files: list = []
        self._label_bytes = 0

    def __enter__(self):
        self._numbers = open(self.numbers_path, "wb")
        self._files = [self._numbers]
        if self.labels_path:
            self._labels = open(self.labels_path, "wb")
            self._offsets = open(self.offsets_path, "wb")
            self._files += [self._labels, self._offsets]
        return self

    def __exit__(self, *exc) -> None:
        for handle in self._files:
            handle.close()

    def add(self, numbers: np.ndarray, labels: list[str] | None) -> None:
        numbers.astype(np.int64).tofile(self._numbers)
        if self.labels_path:
            lines = [(label + "\n").encode("utf-8") for label in labels]
            sizes = np.fromiter((len(line) for line in lines), dtype=np.int64, count=len(lines))
            starts = self._label_bytes + np.cumsum(sizes) - sizes
            starts.tofile(self._offsets)
            self._labels.write(b"".join(lines))
            self._label_bytes += int(sizes.sum())

    def describe(self, indices) -> dict[int, tuple[int, str]]:
        """{cache index: (data-row number, label)} of some cached rows."""
        wanted = sorted({int(i) for i in indices})
        numbers = _read_int64_at(self.numbers_path, wanted)
        if not self.labels_path:
            return {i: (n, f"row {n}") for i, n in zip(wanted, numbers)}
        offsets = _read_int64_at(self.offsets_path, wanted)
        found = {}
        with open(self.labels_path, "rb") as handle:
            for i, n, offset in zip(wanted, numbers, offsets):
                handle.seek(offset)
                found[i] = (n, handle.readline().decode("utf-8").rstrip("\n"))
        return found


def _read_int64_at(path: str, indices: list[int]) -> list[int]:
    values = []
    with open(path, "rb") as handle:
        for i in indices:
            handle.seek(8 * i)
            values.append(int(np.fromfile(handle, dtype=np.int64, count=1)[0]))
    return values


@dataclass
class StreamPass:
    moments: Moments
    rows_read: int
    rows_used: int
    sha256: str
    sample: np.ndarray
    sample_target: np.ndarray | None
    sample_labels: list[str]
    sample_row_numbers: np.ndarray
    cache_path: str
    rows: RowDirectory
    missing_per_column: dict[str, int]
    notes: list[dict] = field(default_factory=list)


def first_pass(path: Path, kind: str, head, options, quiet: bool, full: bool, folder: str) -> StreamPass:
    """Moments, a seeded sample, the SHA-256 of the file, and the binary cache (in ``folder``)
    of the complete rows."""
    features = head.columns_used
    moments = Moments(features, full=full)
    sample = BottomKSample(SAMPLE_ROWS, len(features), np.random.default_rng([options.seed, 41]),
                           with_target=head.target_name is not None, with_labels=head.id_column is not None)
    cache_path = os.path.join(folder, "rows.f64")
    rows_read = used = 0
    opened = CsvSource(path, head) if kind == "csv" else ParquetSource(path, head)
    with opened as source, open(cache_path, "wb") as cache, RowDirectory(folder, head.id_column is not None) as rows:
        bar = _progress(source.total, quiet, source.unit)
        try:
            for x, y, labels in iter_chunks(source, features, head.target_name, head.id_column):
                numbers = np.arange(rows_read + 1, rows_read + len(x) + 1)
                complete = complete_rows(x, numbers, features, options.missing)
                moments.update(x)
                if not complete.all():
                    x, numbers = x[complete], numbers[complete]
                    y = y[complete] if y is not None else None
                names = [_one_line(labels[i]) for i in np.flatnonzero(complete)] if labels is not None else None
                x.tofile(cache)
                rows.add(numbers, names)
                sample.offer(x, y, numbers, names)
                rows_read += len(complete)
                used += len(x)
                if bar is not None:
                    bar.update(source.done() - bar.n)
        finally:
            if bar is not None:
                bar.close()
        sha256 = source.sha256()
    rows_kept, target, labels, numbers = sample.in_file_order()
    return StreamPass(
        moments=moments,
        rows_read=rows_read,
        rows_used=used,
        sha256=sha256,
        sample=rows_kept,
        sample_target=target,
        sample_labels=labels,
        sample_row_numbers=numbers,
        cache_path=cache_path,
        rows=rows,
        missing_per_column={c: int(v) for c, v in zip(features, moments.missing)},
    )


# ---------------------------------------------------------------------- pass 2
class TopRows:
    """The rows with the largest values of a figure, kept as (value, index) pairs."""

    def __init__(self, size: int = TOP_ROWS):
        self.size = size
        self.values = np.empty(0)
        self.index = np.empty(0, dtype=np.int64)

    def update(self, values: np.ndarray, offset: int) -> None:
        v = np.concatenate([self.values, values])
        i = np.concatenate([self.index, offset + np.arange(len(values))])
        if len(v) > self.size:
            keep = np.argpartition(-v, self.size)[: self.size]
            v, i = v[keep], i[keep]
        self.values, self.index = v, i

    def ordered(self):
        order = np.lexsort((self.index, -self.values))
        return self.values[order], self.index[order]


def cached_chunks(cache_path: str, p: int, rows: int):
    """The cached rows in chunks, read with plain file reads (a memory map would count the
    whole cache in the resident set)."""
    with open(cache_path, "rb") as handle:
        for start in range(0, rows, CHUNK_ROWS):
            count = min(CHUNK_ROWS, rows - start)
            yield start, np.fromfile(handle, dtype=np.float64, count=count * p).reshape(count, p)


def over_cached_chunks(sp: "StreamPass", work):
    """Yield (start, work(chunk)) for each cached chunk, in order, the chunks worked on by
    as many threads as there are cores (BLAS held to one thread each, as in
    :mod:`planner.parallel`) while the next ones are read. The chunks in flight hold at most
    PASS2_BYTES of cached values (and their temporaries, a few times that), whatever the
    number of rows and of cores; a chunk larger than that is worked on alone."""
    from collections import deque
    from concurrent.futures import ThreadPoolExecutor

    from .parallel import cores, one_blas_thread

    chunk_bytes = CHUNK_ROWS * sp.moments.p * 8
    in_flight = max(1, min(cores() + 1, PASS2_BYTES // chunk_bytes))
    threads = min(cores(), in_flight)
    chunks = cached_chunks(sp.cache_path, sp.moments.p, sp.rows_used)
    try:
        if threads <= 1:
            for start, chunk in chunks:
                yield start, work(chunk)
            return
        with one_blas_thread(), ThreadPoolExecutor(max_workers=threads) as pool:
            pending: deque = deque()
            for start, chunk in chunks:
                pending.append((start, pool.submit(work, chunk)))
                if len(pending) >= in_flight:
                    first, future = pending.popleft()
                    yield first, future.result()
            while pending:
                first, future = pending.popleft()
                yield first, future.result()
    finally:
        chunks.close()  # the cache file is closed now, even after an error in a worker


def cached_rows(cache_path: str, p: int, indices) -> dict[int, np.ndarray]:
    """Some cached rows by index."""
    found = {}
    with open(cache_path, "rb") as handle:
        for i in sorted(int(j) for j in indices):
            handle.seek(i * p * 8)
            found[i] = np.fromfile(handle, dtype=np.float64, count=p)
    return found


def outlier_pass(sp: StreamPass, spec, limit: float):
    """Pass 2a: the number of rows beyond ``limit`` and the largest squared distances."""
    from .analysis.rowpass import mahalanobis_distances

    top, beyond = TopRows(), 0
    for start, d2 in over_cached_chunks(sp, lambda chunk: mahalanobis_distances(chunk, sp.moments, spec)):
        beyond += int((d2 > limit).sum())
        top.update(d2, start)
    return beyond, top


@dataclass
class RowFigurePass:
    counts: dict[str, int]
    top_spe: TopRows
    top_t2: TopRows
    chart_spe: list[float]
    chart_t2: list[float]


def row_figure_pass(sp: StreamPass, transform, figures, limits: dict, chart_rows: np.ndarray) -> RowFigurePass:
    """Pass 2b: SPE and T-squared of every row against the limits of the full-data model.

    ``figures`` maps scaled rows to their row figures; ``chart_rows`` are the sorted cache
    indices whose figures are kept for the chart, in file order.
    """
    from .analysis.monitoring import beyond_limit

    result = RowFigurePass({key: 0 for key in limits}, TopRows(), TopRows(), [], [])
    for start, fig in over_cached_chunks(sp, lambda chunk: figures(transform(chunk))):
        for key, limit in limits.items():
            if limit is not None:
                values = fig.spe if key.startswith("spe") else fig.t2
                result.counts[key] += int(beyond_limit(values, limit).sum())
        result.top_spe.update(fig.spe, start)
        result.top_t2.update(fig.t2, start)
        lo, hi = np.searchsorted(chart_rows, [start, start + len(fig.spe)])
        picked = chart_rows[lo:hi] - start
        result.chart_spe.extend(fig.spe[picked].tolist())
        result.chart_t2.extend(fig.t2[picked].tolist())
    return result


# ---------------------------------------------------------------------- the audit
def run_stream_audit(path, options, quiet: bool = False):
    """The whole audit of a file, streamed (see the module docstring).

    The cache lives in a temporary folder that is removed on the way out, whether the audit
    ends with a record or with an error.
    """
    path = Path(path)
    kind = can_stream(path)
    if kind is None:
        raise InputError(f"{path.name} cannot be streamed (only CSV and Parquet can)", "use --engine memory")
    if options.missing == "mean":
        raise InputError("--missing mean needs two passes over the whole table and is not streamed", "use --missing listwise, or --engine memory")
    with tempfile.TemporaryDirectory(prefix="axisledger-stream-") as folder:
        return _audit_in(folder, path, kind, options, quiet)


def _audit_in(folder: str, path: Path, kind: str, options, quiet: bool):
    import dataclasses

    from .analysis.components import analyse_components, components_section, decomposition_section
    from .analysis.diagnostics import WIDE_FEATURES, diagnostics_section, run_diagnostics
    from .analysis.discarded import discarded_section
    from .analysis.distributions import chi2_ppf
    from .analysis.monitoring import contributions, row_figures
    from .analysis.outliers import FlaggedRow, OutlierScreen
    from .pipeline import (AuditResult, alternatives_for, build_record, choose_components, feature_plans_of, plan_sections,
                           scaling_for, thresholds_from)
    from .record import seal
    from .rulebook import load_rulebook

    rulebook = load_rulebook(options.rules)
    head = screen_head(path, kind, options)
    p = len(head.columns_used)
    full = p <= WIDE_FEATURES
    sp = first_pass(path, kind, head, options, quiet, full, folder)
    moments = sp.moments
    n = moments.n
    if n < intake_mod.MIN_ROWS:
        raise InputError(f"{path.name} has {n} usable row(s), at least {intake_mod.MIN_ROWS} are needed", "give more complete rows")
    if p >= n or not full:
        raise InputError(f"{path.name} has {p} features for {n} rows: a wide table", "use --engine memory (wide tables are small in rows)")
    thresholds = thresholds_from(rulebook)
    rows_dropped = sp.rows_read - sp.rows_used
    diagnostics = run_diagnostics(moments, None, [], np.empty(0), thresholds, rows_dropped=rows_dropped, rows_read=sp.rows_read)

    # Pass 2a: the Mahalanobis screen over every row.
    spec = diagnostics.spectrum
    keep = spec.values > spec.tolerance
    df = int(keep.sum())
    limit = float(chi2_ppf(thresholds.outlier_quantile, df))
    beyond, top_d2 = outlier_pass(sp, spec, limit)
    values, index = top_d2.ordered()
    named = sp.rows.describe(index)
    diagnostics.outliers = OutlierScreen(
        "classical Mahalanobis distance", thresholds.outlier_quantile, df, limit, beyond, beyond / n,
        [FlaggedRow(named[int(i)][0], named[int(i)][1], float(v)) for v, i in zip(values, index) if v > limit],
        None if keep.all() else f"R is singular: distances use its {df} non-null directions",
    )
    diag_section = diagnostics_section(diagnostics)
    scaling = scaling_for(options.scaling, moments, sp.sample, diag_section, rulebook)
    evidence = analyse_components(
        moments, sp.sample, scaling, seed=options.seed, share=float(rulebook.threshold("kept_share_low", 0.80)),
        permutation=options.parallel_null == "permutation",
    )
    chosen, override = choose_components(evidence, options)
    alternatives = alternatives_for(evidence, chosen, moments, rulebook)
    disc = discarded_section(
        evidence, chosen, moments, sp.sample, sp.sample_labels, sp.sample_row_numbers,
        floor=float(rulebook.threshold("feature_poorly_represented", 0.5)), seed=options.seed,
        target=sp.sample_target, target_name=head.target_name,
        signal_share=float(rulebook.threshold("target_signal_discarded", 0.05)),
        feature_plans=feature_plans_of(alternatives),
    )
    # Pass 2b: SPE and T-squared of every row, with the limits of the full-data model.
    d = evidence.decomposition
    rng = np.random.default_rng([options.seed, 43])
    chart_rows = np.sort(rng.choice(sp.rows_used, min(CHART_ROWS, sp.rows_used), replace=False))
    limits = {"spe": disc["spe_limit"], "t2": disc["t2_limit"], "spe99": disc["spe_limit_99"], "t299": disc["t2_limit_99"]}
    figures = lambda z: row_figures(z, d.loadings, d.eigenvalues, chosen)  # noqa: E731
    rf = row_figure_pass(sp, scaling.transform, figures, limits, chart_rows)
    spe_v, spe_i = rf.top_spe.ordered()
    t2_v, t2_i = rf.top_t2.ordered()
    named = sp.rows.describe(np.concatenate([spe_i, t2_i]))
    by_index = cached_rows(sp.cache_path, p, spe_i)
    disc["rows_over_spe_limit"] = rf.counts["spe"]
    disc["rows_over_t2_limit"] = rf.counts["t2"]
    disc["rows_over_spe_limit_99"] = rf.counts["spe99"]
    disc["rows_over_t2_limit_99"] = rf.counts["t299"]
    disc["share_rows_over_spe_limit"] = rf.counts["spe"] / n
    worst = []
    for v, i in zip(spe_v, spe_i):
        fig = figures(scaling.transform(by_index[int(i)][None, :]))
        number, label = named[int(i)]
        worst.append({"row": number, "label": label, "spe": float(v),
                      "t2": float(fig.t2[0]), "contributions": contributions(fig.residual[0], list(moments.columns))})
    disc["worst_spe"] = worst
    disc["worst_t2"] = [{"row": named[int(i)][0], "label": named[int(i)][1], "t2": float(v), "spe": None} for v, i in zip(t2_v, t2_i)]
    disc["row_figures_for_chart"] = {"spe": rf.chart_spe, "t2": rf.chart_t2}
    disc["per_row_source"] = f"all {n:,} rows used, streamed"
    disc["resampling_sample"] = f"target check and loading stability on a seeded sample of {len(sp.sample):,} of the {n:,} rows"
    sections = {
        "diagnostics": diag_section,
        "decomposition": decomposition_section(evidence, list(moments.columns)),
        "components": components_section(evidence, chosen, override),
        "discarded": disc,
        **plan_sections(alternatives, options, rulebook, list(moments.columns), disc.get("target")),
    }
    notes = list(head.notes) + [intake_mod.note(
        "streamed", "note",
        f"streamed in chunks of {CHUNK_ROWS:,} rows; the screening of columns was decided on the first {HEAD_ROWS:,} rows",
    )]
    notes = [n_ for n_ in notes if n_["id"] != "rows_dropped"]
    if rows_dropped:
        notes.append(intake_mod.note("rows_dropped", "note", f"{rows_dropped} row(s) with a missing feature value were dropped (listwise deletion)"))
    result = dataclasses.replace(
        head, source=path.name, sha256=sp.sha256, file_type=kind, rows_read=sp.rows_read, rows_used=sp.rows_used,
        data=sp.sample, row_labels=sp.sample_labels, row_numbers=sp.sample_row_numbers, target=sp.sample_target,
        missing_per_column=sp.missing_per_column, rows_dropped_missing=rows_dropped, notes=notes,
        missing_policy=options.missing,
    )
    record = build_record(result, moments, options, rulebook, sections)
    record_engine = {"engine": "stream", "chunk_rows": CHUNK_ROWS, "head_rows": HEAD_ROWS, "sample_rows": int(len(sp.sample))}
    record["reproducibility"]["engine"] = record_engine
    seal(record)
    return AuditResult(record=record, intake=result, moments=moments)
