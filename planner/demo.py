"""``axisledger demo``: the full audit on the invented kiln-line scenario.

The data is regenerated from its seeded generator (:mod:`planner.scenario`) into the
output folder, so the record's ``input.sha256`` is the fingerprint of a real file that a
reviewer can check with ``axisledger verify --data``.
"""
from __future__ import annotations

import json
from pathlib import Path

from .pipeline import AuditOptions, run_audit
from .errors import InputError
from .output import RECORD_NAME, write_audit
from .scenario import write_kiln_csv

DEMO_DATA_NAME = "kiln_line.csv"
DEMO_TITLE = "Kiln line 2: reducing the firing-process measurements"
DEMO_ANALYST = "Demo analyst (invented scenario)"


def _holds_foreign_record(out_dir: Path) -> bool:
    path = out_dir / RECORD_NAME
    if not path.exists():
        return False
    try:
        return json.loads(path.read_text(encoding="utf-8")).get("demo") is not True
    except (OSError, ValueError, AttributeError):
        return True


def demo_options(command_line: list[str]) -> AuditOptions:
    return AuditOptions(
        title=DEMO_TITLE,
        analyst=DEMO_ANALYST,
        id_column="batch_id",
        target="flexural_strength_mpa",
        seed=0,
        command_line=command_line,
    )


def run_demo(out_dir: Path, *, pdf: bool = True, command_line: list[str] | None = None):
    """Write the demo data, audit it and write the record; a demo record is replaced."""
    out_dir = Path(out_dir)
    if _holds_foreign_record(out_dir):
        raise InputError(
            f"{out_dir / RECORD_NAME} holds a record that is not a demo record",
            "choose another --out folder for the demo",
        )
    out_dir.mkdir(parents=True, exist_ok=True)
    data_path = out_dir / DEMO_DATA_NAME
    write_kiln_csv(data_path)
    result = run_audit(data_path, demo_options(command_line or ["axisledger", "demo"]))
    result.record["demo"] = True
    from .record import seal

    seal(result.record)
    paths = write_audit(result.record, out_dir, pdf=pdf, force=True)
    paths = {"input": data_path, **paths}
    return paths, result.record
