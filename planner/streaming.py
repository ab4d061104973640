"""The streaming engine: audits of CSV and Parquet files larger than memory.

The table is read in bounded chunks with pyarrow. Pass 1 updates the Moments per chunk
(one BLAS cross-product a chunk), keeps a seeded uniform sample of rows for the resampling
figures (bootstrap, cross-validation, robust scale, target check), and caches the parsed
feature values in a temporary binary file. Every matrix-level figure is then computed from
the Moments exactly as in memory. Pass 2 reads the cache in chunks for the per-row figures
(Mahalanobis screen, SPE, Hotelling's T-squared), which are exact over all rows. Peak memory
is bounded by the chunk size, the sample and O(p^2), whatever the number of rows.

Screening decisions (which columns are numeric, identifiers, constant, all missing) are
taken on the first rows, and the record says so.
"""
from __future__ import annotations

import os
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import intake as intake_mod
from .errors import InputError
from .moments import Moments

CHUNK_ROWS = 65_536
HEAD_ROWS = 20_000
SAMPLE_ROWS = 20_000
#: ``--engine auto`` streams files larger than this.
AUTO_STREAM_BYTES = 256 * 1024 * 1024
TOP_ROWS = 10


def can_stream(path: Path) -> str | None:
    """``csv`` or ``parquet`` when the file can be streamed, else None."""
    with open(path, "rb") as handle:
        head = handle.read(4)
    if head == b"PAR1":
        return "parquet"
    if path.suffix.lower() in (".xlsx", ".xlsm", ".xls"):
        return None
    return "csv"


def _progress(total: int | None, quiet: bool, unit: str):
    if quiet or not sys.stderr.isatty():
        return None
    try:
        from tqdm import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency
        return None
    return tqdm(total=total, unit=unit, unit_scale=True, file=sys.stderr, leave=False, desc="axisledger")


# ---------------------------------------------------------------------- reading
def _head_frame(path: Path, kind: str, options):
    """The first rows, through the ordinary intake, to take the screening decisions.

    A CSV head goes through a temporary file of the same name (the intake reads files and
    names them in its messages); its folder is removed as soon as the head is read.
    """
    def load(source):
        return intake_mod.load(
            source, columns=options.columns, exclude=options.exclude, id_column=options.id_column,
            target=options.target, missing="listwise",
        )

    if kind == "parquet":
        import pyarrow.parquet as pq

        batch = next(pq.ParquetFile(path).iter_batches(batch_size=HEAD_ROWS), None)
        if batch is None:
            raise InputError(f"{path.name} has a header but no data rows", "give a file with data rows")
        return load(batch.to_pandas())
    with open(path, "rb") as handle:
        raw = handle.read(16 * 1024 * 1024)
    lines = raw.split(b"\n")
    keep = b"\n".join(lines[: HEAD_ROWS + 1]) if len(lines) > HEAD_ROWS + 1 else raw
    with tempfile.TemporaryDirectory(prefix="axisledger-head-") as folder:
        head_path = Path(folder) / path.name
        head_path.write_bytes(keep if keep.endswith(b"\n") or len(lines) <= HEAD_ROWS + 1 else keep + b"\n")
        return load(head_path)


def iter_chunks(path: Path, kind: str, features: list[str], id_column: str | None, target: str | None, fmt, quiet: bool):
    """Yield (features float64 (m, p), target float64 (m,) or None, labels or None) chunks."""
    import pyarrow as pa

    wanted = list(features) + [c for c in (target,) if c] + [c for c in (id_column,) if c]
    bar = None
    # pyarrow parses the first block when the reader opens: errors there are the user's too.
    try:
        if kind == "parquet":
            import pyarrow.parquet as pq

            pf = pq.ParquetFile(path)
            bar = _progress(pf.metadata.num_rows, quiet, "rows")
            batches = pf.iter_batches(batch_size=CHUNK_ROWS, columns=wanted)
        else:
            import pyarrow.csv as pacsv

            if fmt.decimal != "." or fmt.encoding not in ("utf-8", "utf-8-sig"):
                raise InputError(
                    f"{path.name} uses a decimal comma or a non-UTF-8 encoding, which the streaming engine does not read",
                    "use --engine memory, or save the file as UTF-8 with '.' decimals",
                )
            types = {c: pa.float64() for c in list(features) + [c for c in (target,) if c]}
            if id_column:
                types[id_column] = pa.string()
            reader = pacsv.open_csv(
                path,
                read_options=pacsv.ReadOptions(block_size=1 << 24, encoding="utf8"),
                parse_options=pacsv.ParseOptions(delimiter=fmt.delimiter, newlines_in_values=True),
                convert_options=pacsv.ConvertOptions(
                    include_columns=wanted,
                    column_types=types,
                    null_values=sorted(intake_mod.MISSING_SPELLINGS | {s.upper() for s in intake_mod.MISSING_SPELLINGS}),
                    strings_can_be_null=True,
                    quoted_strings_can_be_null=True,
                ),
            )
            bar = _progress(path.stat().st_size, quiet, "B")
            batches = reader
        for batch in batches:
            table = pa.Table.from_batches([batch]) if not isinstance(batch, pa.Table) else batch
            x = np.column_stack([table.column(c).to_numpy(zero_copy_only=False).astype(np.float64) for c in features])
            y = table.column(target).to_numpy(zero_copy_only=False).astype(np.float64) if target else None
            labels = table.column(id_column).to_pylist() if id_column else None
            if bar is not None:
                bar.update(batch.num_rows if kind == "parquet" else batch.nbytes)
            yield x, y, labels
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        message = str(exc).splitlines()[0][:200]
        raise InputError(
            f"{path.name} holds a value the first {HEAD_ROWS:,} rows did not prepare for ({message})",
            "clean that column, or use --engine memory to screen the whole file",
        )
    finally:
        if bar is not None:
            bar.close()


def _one_line(value) -> str:
    return " ".join(str(value if value is not None else "").split())


# ---------------------------------------------------------------------- pass 1
@dataclass
class StreamPass:
    moments: Moments
    rows_read: int
    rows_used: int
    sample: np.ndarray
    sample_target: np.ndarray | None
    sample_labels: list[str]
    sample_row_numbers: np.ndarray
    cache_path: str
    label_cache_path: str | None
    number_cache_path: str
    missing_per_column: dict[str, int]
    notes: list[dict] = field(default_factory=list)


def first_pass(path, kind, head, options, quiet: bool, full: bool, folder: str) -> StreamPass:
    """Moments, a seeded sample, and the binary cache (in ``folder``) of the complete rows."""
    features = head.columns_used
    p = len(features)
    moments = Moments(features, full=full)
    rng = np.random.default_rng([options.seed, 41])
    cache_path = os.path.join(folder, "rows.f64")
    label_path = os.path.join(folder, "labels.txt") if head.id_column else None
    sample_keys = np.empty(0)
    sample = np.empty((0, p))
    sample_y = np.empty(0)
    sample_lab: list[str] = []
    sample_num = np.empty(0, dtype=np.int64)
    rows_read = 0
    used = 0
    number_path = os.path.join(folder, "rownumbers.i64")
    id_column = head.id_column
    with open(cache_path, "wb") as cache, open(number_path, "wb") as numbers_file, \
            open(label_path or os.devnull, "w", encoding="utf-8") as lab:
        for x, y, labels in iter_chunks(path, kind, features, id_column, head.target_name, head.text_format, quiet):
            m = x.shape[0]
            numbers = np.arange(rows_read + 1, rows_read + m + 1)
            if np.isinf(x).any():
                r, c = np.argwhere(np.isinf(x))[0]
                raise InputError(f"column {features[c]!r} holds an infinite value at data row {int(numbers[r])}",
                                 "replace it with a finite number or leave the cell empty")
            huge = np.abs(np.nan_to_num(x)) > intake_mod.MAX_MAGNITUDE
            if huge.any():
                r, c = np.argwhere(huge)[0]
                raise InputError(f"column {features[c]!r} holds {x[r, c]:.3g} at data row {int(numbers[r])}, too large to square in floating point",
                                 f"rescale the column (values up to {intake_mod.MAX_MAGNITUDE:.0e} in magnitude are read)")
            holes = np.isnan(x)
            if holes.any() and options.missing == "fail":
                r, c = np.argwhere(holes)[0]
                raise InputError(f"column {features[c]!r} has a missing value at data row {int(numbers[r])} and --missing is fail",
                                 "fill the gap, or use --missing listwise")
            moments.update(x)
            complete = ~holes.any(axis=1)
            xc = x[complete]
            xc.tofile(cache)
            numbers[complete].astype(np.int64).tofile(numbers_file)
            if label_path:
                lab.write("".join(_one_line(labels[i]) + "\n" for i in np.flatnonzero(complete)))
            # Seeded uniform sample: the SAMPLE_ROWS complete rows with the smallest keys.
            idx_c = np.flatnonzero(complete)
            keys = rng.random(len(idx_c))
            all_keys = np.concatenate([sample_keys, keys])
            keep = np.argpartition(all_keys, SAMPLE_ROWS)[:SAMPLE_ROWS] if len(all_keys) > SAMPLE_ROWS else np.arange(len(all_keys))
            old = keep[keep < len(sample_keys)]
            new = keep[keep >= len(sample_keys)] - len(sample_keys)
            # The keys in the order of the rows kept below (old rows first, then new ones).
            sample_keys = np.concatenate([sample_keys[old], keys[new]])
            sample = np.vstack([sample[old], xc[new]])
            if y is not None:
                sample_y = np.concatenate([sample_y[old], y[complete][new]])
            new_labels = [_one_line(labels[idx_c[i]]) for i in new] if labels is not None else [f"row {numbers[idx_c[i]]}" for i in new]
            sample_lab = [sample_lab[i] for i in old] + new_labels
            sample_num = np.concatenate([sample_num[old], numbers[idx_c[new]]])
            rows_read += m
            used += int(complete.sum())
    order = np.argsort(sample_num)
    missing = {c: int(v) for c, v in zip(features, moments.missing)}
    return StreamPass(
        moments=moments,
        rows_read=rows_read,
        rows_used=used,
        sample=sample[order],
        sample_target=(sample_y[order] if head.target_name else None),
        sample_labels=[sample_lab[i] for i in order],
        sample_row_numbers=sample_num[order],
        cache_path=cache_path,
        label_cache_path=label_path,
        number_cache_path=number_path,
        missing_per_column=missing,
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


def cached_rows(cache_path: str, p: int, indices) -> dict[int, np.ndarray]:
    """Some cached rows by index."""
    found = {}
    with open(cache_path, "rb") as handle:
        for i in sorted(int(j) for j in indices):
            handle.seek(i * p * 8)
            found[i] = np.fromfile(handle, dtype=np.float64, count=p)
    return found


def read_labels(label_path: str | None, indices: set[int]) -> dict[int, str]:
    found: dict[int, str] = {}
    if label_path is None:
        return found
    with open(label_path, encoding="utf-8") as handle:
        for i, line in enumerate(handle):
            if i in indices:
                found[i] = line.rstrip("\n")
                if len(found) == len(indices):
                    break
    return found


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

    import scipy.stats

    from .analysis.components import analyse_components, components_section, decomposition_section
    from .analysis.diagnostics import WIDE_FEATURES, diagnostics_section, run_diagnostics, wide_diagnostics_section
    from .analysis.discarded import discarded_section
    from .analysis.monitoring import contributions, row_figures
    from .analysis.outliers import FlaggedRow, OutlierScreen, mahalanobis_d2
    from .pipeline import AuditResult, build_record, choose_components, scaling_for, thresholds_from
    from .rulebook import load_rulebook

    rulebook = load_rulebook(options.rules)
    head = _head_frame(path, kind, options)
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

    numbers = np.fromfile(sp.number_cache_path, dtype=np.int64)  # 8 bytes a row
    # Pass 2a: the Mahalanobis screen over every row.
    spec = diagnostics.spectrum
    keep = spec.values > spec.tolerance
    df = int(keep.sum())
    limit = float(scipy.stats.chi2.ppf(thresholds.outlier_quantile, df))
    top_d2, beyond = TopRows(), 0
    for start, chunk in cached_chunks(sp.cache_path, p, sp.rows_used):
        d2 = mahalanobis_d2(chunk, moments, spec)
        beyond += int((d2 > limit).sum())
        top_d2.update(d2, start)
    values, index = top_d2.ordered()
    labels = read_labels(sp.label_cache_path, set(int(i) for i in index))
    diagnostics.outliers = OutlierScreen(
        "classical Mahalanobis distance", thresholds.outlier_quantile, df, limit, beyond, beyond / n,
        [FlaggedRow(int(numbers[i]), labels.get(int(i), f"row {int(numbers[i])}"), float(v)) for v, i in zip(values, index) if v > limit],
        None if keep.all() else f"R is singular: distances use its {df} non-null directions",
    )
    diag_section = diagnostics_section(diagnostics)
    scaling = scaling_for(options.scaling, moments, sp.sample, diag_section, rulebook)
    evidence = analyse_components(
        moments, sp.sample, scaling, seed=options.seed, share=float(rulebook.threshold("kept_share_low", 0.80)),
        permutation=options.parallel_null == "permutation",
    )
    chosen, override = choose_components(evidence, options)
    disc = discarded_section(
        evidence, chosen, moments, sp.sample, sp.sample_labels, sp.sample_row_numbers,
        floor=float(rulebook.threshold("feature_poorly_represented", 0.5)), seed=options.seed,
        target=sp.sample_target, target_name=head.target_name,
        signal_share=float(rulebook.threshold("target_signal_discarded", 0.05)),
    )
    # Pass 2b: SPE and T-squared of every row, with the limits of the full-data model.
    d = evidence.decomposition
    counts = {"spe": 0, "t2": 0, "spe99": 0, "t299": 0}
    top_spe, top_t2 = TopRows(), TopRows()
    rng = np.random.default_rng([options.seed, 43])
    chart_pick = set(rng.choice(sp.rows_used, min(5000, sp.rows_used), replace=False).tolist())
    chart_spe, chart_t2 = [], []
    for start, chunk in cached_chunks(sp.cache_path, p, sp.rows_used):
        fig = row_figures(scaling.transform(chunk), d.loadings, d.eigenvalues, chosen)
        for key, vals, lim in (("spe", fig.spe, disc["spe_limit"]), ("t2", fig.t2, disc["t2_limit"]),
                               ("spe99", fig.spe, disc["spe_limit_99"]), ("t299", fig.t2, disc["t2_limit_99"])):
            if lim is not None:
                counts[key] += int((vals > lim).sum())
        top_spe.update(fig.spe, start)
        top_t2.update(fig.t2, start)
        picked = [i for i in range(len(chunk)) if start + i in chart_pick]
        chart_spe.extend(fig.spe[picked].tolist())
        chart_t2.extend(fig.t2[picked].tolist())
    spe_v, spe_i = top_spe.ordered()
    t2_v, t2_i = top_t2.ordered()
    labels = read_labels(sp.label_cache_path, set(int(i) for i in np.concatenate([spe_i, t2_i])))
    by_index = cached_rows(sp.cache_path, p, spe_i)
    disc["rows_over_spe_limit"] = counts["spe"]
    disc["rows_over_t2_limit"] = counts["t2"]
    disc["rows_over_spe_limit_99"] = counts["spe99"]
    disc["rows_over_t2_limit_99"] = counts["t299"]
    disc["share_rows_over_spe_limit"] = counts["spe"] / n
    worst = []
    for v, i in zip(spe_v, spe_i):
        fig = row_figures(scaling.transform(by_index[int(i)][None, :]), d.loadings, d.eigenvalues, chosen)
        worst.append({"row": int(numbers[i]), "label": labels.get(int(i), f"row {int(numbers[i])}"), "spe": float(v),
                      "t2": float(fig.t2[0]), "contributions": contributions(fig.residual[0], list(moments.columns))})
    disc["worst_spe"] = worst
    disc["worst_t2"] = [{"row": int(numbers[i]), "label": labels.get(int(i), f"row {int(numbers[i])}"), "t2": float(v),
                         "spe": None} for v, i in zip(t2_v, t2_i)]
    disc["row_figures_for_chart"] = {"spe": chart_spe, "t2": chart_t2}
    disc["per_row_source"] = f"all {n:,} rows used, streamed"
    disc["resampling_sample"] = f"target check and loading stability on a seeded sample of {len(sp.sample):,} of the {n:,} rows"
    sections = {
        "diagnostics": diag_section,
        "decomposition": decomposition_section(evidence, list(moments.columns)),
        "components": components_section(evidence, chosen, override),
        "discarded": disc,
    }
    from .intake import sha256_of_file

    notes = list(head.notes) + [intake_mod.note(
        "streamed", "note",
        f"streamed in chunks of {CHUNK_ROWS:,} rows; the screening of columns was decided on the first {HEAD_ROWS:,} rows",
    )]
    notes = [n_ for n_ in notes if n_["id"] != "rows_dropped"]
    if rows_dropped:
        notes.append(intake_mod.note("rows_dropped", "note", f"{rows_dropped} row(s) with a missing feature value were dropped (listwise deletion)"))
    result = dataclasses.replace(
        head, source=path.name, sha256=sha256_of_file(path), file_type=kind, rows_read=sp.rows_read, rows_used=sp.rows_used,
        data=sp.sample, row_labels=sp.sample_labels, row_numbers=sp.sample_row_numbers, target=sp.sample_target,
        missing_per_column=sp.missing_per_column, rows_dropped_missing=rows_dropped, notes=notes,
        missing_policy=options.missing,
    )
    record = build_record(result, moments, options, rulebook, sections)
    record_engine = {"engine": "stream", "chunk_rows": CHUNK_ROWS, "head_rows": HEAD_ROWS, "sample_rows": int(len(sp.sample))}
    record["reproducibility"]["engine"] = record_engine
    from .record import seal

    seal(record)
    return AuditResult(record=record, intake=result, moments=moments)
