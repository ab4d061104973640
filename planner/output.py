"""Writing an audit's files: the record and its PDF, atomically, never over a record.

Everything is produced in memory first and written only when it is all there, so that an
error leaves no partial or stale files behind (DESIGN.md, exit code 2).
"""
from __future__ import annotations

from pathlib import Path

from .atomic import write_bytes_atomic
from .errors import InputError
from .record import dumps

RECORD_NAME = "record.json"
PDF_NAME = "record.pdf"


def check_out_dir(out_dir: Path, force: bool) -> None:
    """Refuse a folder that already holds a record, unless ``force``."""
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out {out_dir} is a file, not a folder", "give a folder for the record")
    if (out_dir / RECORD_NAME).exists() and not force:
        raise InputError(
            f"{out_dir / RECORD_NAME} already exists and a record is never overwritten",
            "choose another --out folder, or pass --force to replace it",
        )


def pdf_bytes(record: dict) -> bytes:
    from .render.charts import charts_for
    from .render.pdf import render_pdf_bytes

    return render_pdf_bytes(record, charts=charts_for(record))


def write_pdf(record: dict, path) -> Path:
    return write_bytes_atomic(path, pdf_bytes(record))


def write_audit(record: dict, out_dir, *, pdf: bool = True, force: bool = False) -> dict:
    """Write ``record.json`` (and ``record.pdf``) into ``out_dir``; return their paths."""
    out_dir = Path(out_dir)
    check_out_dir(out_dir, force)
    json_bytes = dumps(record).encode("utf-8")
    rendered = pdf_bytes(record) if pdf else None
    paths = {"record": out_dir / RECORD_NAME}
    stale_pdf = out_dir / PDF_NAME
    if rendered is not None:
        write_bytes_atomic(out_dir / PDF_NAME, rendered)
        paths["pdf"] = out_dir / PDF_NAME
    elif stale_pdf.exists():
        stale_pdf.unlink()  # a PDF of the replaced record would no longer match it
    write_bytes_atomic(out_dir / RECORD_NAME, json_bytes)
    return paths
