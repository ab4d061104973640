"""Operations on record files: read (JSON or the PDF's attachment), sign, verify, apply."""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from .atomic import write_bytes_atomic
from .errors import InputError, VerificationFailed
from .record import dumps, load as load_json_record, loads
from .signing import append_signoff, load_private_key, locked, make_entry, verify_record

ATTACHMENT = "record.json"


def record_from_pdf(path: Path) -> dict:
    """The JSON record embedded in an axisledger PDF."""
    from pypdf import PdfReader
    from pypdf.errors import PdfReadError

    try:
        reader = PdfReader(str(path))
        files = reader.attachments
    except (PdfReadError, OSError, ValueError, KeyError) as exc:
        raise InputError(f"{path.name} is not a readable PDF ({type(exc).__name__})", "give a record.pdf written by axisledger")
    if ATTACHMENT not in files or not files[ATTACHMENT]:
        raise InputError(f"{path.name} has no embedded {ATTACHMENT}", "give a record.pdf written by axisledger")
    try:
        text = files[ATTACHMENT][0].decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"the record embedded in {path.name} is not UTF-8", "give a record.pdf written by axisledger")
    return loads(text, f"{path.name} (embedded {ATTACHMENT})")


def read_record(path: str | Path) -> dict:
    path = Path(path)
    if not path.exists():
        raise InputError(f"no such record: {path}", "check the path")
    if path.is_dir():
        raise InputError(f"{path} is a folder", "give the path of record.json or record.pdf")
    with open(path, "rb") as handle:
        head = handle.read(5)
    if head.startswith(b"%PDF"):
        return record_from_pdf(path)
    return load_json_record(path)


def verify_file(path: str | Path, data: str | Path | None = None) -> list[str]:
    """Verify a record file; return what was checked, raise VerificationFailed otherwise."""
    record = read_record(path)
    result = verify_record(record, data)
    if not result.ok:
        raise VerificationFailed(f"{Path(path).name}: " + "; ".join(result.problems))
    return result.checked


def sign_file(path: str | Path, name: str, role: str, meaning: str, key_path: str | None = None) -> dict:
    """Append a sign-off to a record.json under a file lock, atomically; re-render its PDF."""
    path = Path(path)
    if path.suffix.lower() == ".pdf":
        raise InputError("sign takes the record.json, not the PDF", "sign record.json; its PDF is re-rendered beside it")
    key = load_private_key(key_path) if key_path else None
    if not path.is_file():
        raise InputError(f"no such record: {path}", "check the path")
    with locked(path):
        record = load_json_record(path)
        result = verify_record(record)
        if not result.ok:
            raise InputError(
                f"{path.name} fails verification and was not signed: {result.problems[0]}",
                "sign only an unchanged record; run axisledger verify for details",
            )
        entry = make_entry(record, name, role, meaning, key)
        append_signoff(record, entry)
        pdf_path = path.with_suffix(".pdf")
        from .output import pdf_bytes

        rendered = pdf_bytes(record)
        write_bytes_atomic(path, dumps(record).encode("utf-8"))
        write_bytes_atomic(pdf_path, rendered)
    return record


def apply_file(record_path: str | Path, data_path: str | Path, out: str | Path, allow_draft: bool = False, force: bool = False) -> dict:
    """Score new rows with the recorded plan and write them as CSV; return a summary."""
    from .intake import read_table
    from .plan import plan_from_record

    record = read_record(record_path)
    result = verify_record(record)
    if not result.ok:
        raise InputError(f"{Path(record_path).name} fails verification: {result.problems[0]}", "apply only an unchanged record")
    if record["status"] == "draft" and not allow_draft:
        raise InputError(
            f"{Path(record_path).name} is a draft (not yet reviewed or approved)",
            "have it signed, or pass --allow-draft to apply it anyway",
        )
    out = Path(out)
    if out.exists() and not force:
        raise InputError(f"{out} already exists", "choose another --out file, or pass --force to replace it")
    header, cells, _meta = read_table(data_path)
    if len(set(header)) != len(header):
        raise InputError(f"{Path(data_path).name} has duplicate column names", "give every column a distinct name")
    plan = plan_from_record(record)
    missing = [c for c in plan.required_columns() if c not in header]
    if missing:
        raise InputError(
            f"{Path(data_path).name} lacks {len(missing)} feature column(s) of the plan: {', '.join(missing[:10])}",
            "give a table with the columns the record was made from",
        )
    from .intake import labels_of, type_column

    fmt = _meta.get("text_format")
    decimal = fmt.decimal if fmt else "."
    import pandas as pd

    numeric = {}
    for c in (c for c in plan.columns if c in header):
        typed = type_column(c, cells[header.index(c)], decimal)
        if typed.values is None:
            raise InputError(f"column {c!r} of {Path(data_path).name} is not numeric (e.g. {typed.bad_examples[0]!r})", "fix the values")
        numeric[c] = typed.values
    scored = plan.score_rows(pd.DataFrame(numeric))
    if plan.id_column and plan.id_column in header:
        ids = type_column(plan.id_column, cells[header.index(plan.id_column)], decimal)
        scored.insert(0, plan.id_column, labels_of(ids, np.arange(1, len(scored) + 1)).tolist())
    buffer = io.StringIO()
    scored.to_csv(buffer, index=False, lineterminator="\n", float_format="%.10g")
    write_bytes_atomic(out, buffer.getvalue().encode("utf-8"))
    extra = [c for c in header if c not in plan.columns and c != plan.id_column]
    # A plan on original features needs only its kept columns; without the others, no SPE.
    spe_not_computed = not plan.spe_computable(header)
    incomplete = 0 if spe_not_computed else int(scored["spe"].isna().sum())
    return {"rows": len(scored), "components": plan.k, "plan": plan.plan_id,
            "spe_not_computed": spe_not_computed,
            "kept": list(plan.get_feature_names_out()), "extra_columns": extra, "incomplete_rows": incomplete,
            "beyond_limit": int(scored["beyond_limit"].fillna(0).sum()), "out": str(out)}
