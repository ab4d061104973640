"""The Record: the versioned, strict-JSON decision record and its integrity hash.

The Record is a plain dict of JSON values, the single source of truth for every renderer,
for sign-off and for verification (DESIGN.md, "Record contract"):

* strict JSON: no NaN or Infinity tokens, a non-finite number is ``null``;
* canonical form: ``json.dumps(sort_keys=True, separators=(",", ":"), ensure_ascii=False)``
  encoded as UTF-8;
* ``integrity.content_sha256``: SHA-256 of the canonical record without ``signoffs``,
  ``status`` and ``integrity``, so that signing never changes the content hash.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import secrets
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from .errors import InputError

SCHEMA_VERSION = 1
#: Keys left out of the content hash: the events after creation and the seal itself.
UNHASHED_KEYS = ("signoffs", "status", "integrity")


def utc_now() -> str:
    """Current UTC time as an ISO 8601 string with a ``Z`` suffix, to the second."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def new_record_id(now: datetime | None = None) -> str:
    """A fresh record id: ``AXL-YYYYMMDD-`` and 8 random hex digits."""
    now = now or datetime.now(timezone.utc)
    return f"AXL-{now:%Y%m%d}-{secrets.token_hex(4)}"


_FIELD_NAMES: dict[type, tuple[str, ...]] = {}


def jsonable(value):
    """Convert numpy and dataclass values to plain JSON values; non-finite floats to None."""
    kind = type(value)
    if kind is float:
        return value if math.isfinite(value) else None
    if value is None or kind is str or kind is bool or kind is int:
        return value
    if kind is dict:
        return {str(k): jsonable(v) for k, v in value.items()}
    if kind is list or kind is tuple:
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind == "f":
            values = value.astype(np.float64)
            if np.isfinite(values).all():
                return values.tolist()
        return [jsonable(v) for v in value.tolist()]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        names = _FIELD_NAMES.get(kind)
        if names is None:
            names = _FIELD_NAMES[kind] = tuple(f.name for f in dataclasses.fields(value))
        return jsonable({name: getattr(value, name) for name in names})
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, str):
        return str(value)
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    raise TypeError(f"not JSON-serialisable: {type(value).__name__}")


def canonical_bytes(obj) -> bytes:
    """The canonical form of DESIGN.md, as UTF-8 bytes."""
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    ).encode("utf-8")


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def hashed_body(record: dict) -> dict:
    """The part of the record that the content hash covers."""
    return {k: v for k, v in record.items() if k not in UNHASHED_KEYS}


def content_sha256(record: dict) -> str:
    """SHA-256 hex of the canonical record without signoffs, status and integrity."""
    return sha256_hex(canonical_bytes(hashed_body(record)))


def seal(record: dict) -> dict:
    """Set ``integrity.content_sha256`` from the current content; return the record."""
    record["integrity"] = {
        "content_sha256": content_sha256(record),
        "algorithm": "sha256",
        "canonical_form": "json.dumps(sort_keys=True, separators=(',', ':'), ensure_ascii=False), UTF-8",
        "excludes": list(UNHASHED_KEYS),
    }
    return record


def dumps(record: dict) -> str:
    """Pretty strict JSON for the file on disk (the hash uses the canonical form): objects
    indented two spaces a level, a list of plain values on one line. Each such list goes
    through json's C encoder; ``indent=`` would send the whole record through its much
    slower Python encoder."""
    parts: list[str] = []
    _pretty(record, 0, parts)
    parts.append("\n")
    return "".join(parts)


_CONTAINERS = {dict, list}


def _flat(value) -> bool:
    """Written on one line: a scalar, a list of scalars, an object of scalars (a map of a
    figure by feature), or a small object of scalars and lists of scalars (a finding, a
    row, a column's profile). The type sets are built in C (map), not value by value."""
    if isinstance(value, list):
        return _CONTAINERS.isdisjoint(set(map(type, value)))
    if isinstance(value, dict):
        kinds = set(map(type, value.values()))
        if _CONTAINERS.isdisjoint(kinds):
            return True
        return (
            len(value) <= 16 and dict not in kinds
            and all(_CONTAINERS.isdisjoint(set(map(type, v))) for v in value.values() if type(v) is list)
        )
    return True


def _pretty(value, level: int, out: list[str]) -> None:
    if _flat(value):
        out.append(json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(", ", ": ")))
        return
    pad = "  " * (level + 1)
    if isinstance(value, dict):
        out.append("{")
        for i, (key, item) in enumerate(value.items()):
            out.append(("," if i else "") + "\n" + pad + json.dumps(str(key), ensure_ascii=False) + ": ")
            _pretty(item, level + 1, out)
        out.append("\n" + "  " * level + "}")
    else:
        out.append("[")
        for i, item in enumerate(value):
            out.append(("," if i else "") + "\n" + pad)
            _pretty(item, level + 1, out)
        out.append("\n" + "  " * level + "]")


def _refuse_constant(token: str):
    raise ValueError(f"non-standard JSON token {token}")


def loads(text: str, name: str = "record") -> dict:
    """Parse a record strictly (data only: no NaN/Infinity tokens, an object at the top)."""
    try:
        record = json.loads(text, parse_constant=_refuse_constant)
    except (json.JSONDecodeError, ValueError) as exc:
        raise InputError(f"{name} is not a valid JSON record ({exc})", "give a record.json written by axisledger")
    if not isinstance(record, dict):
        raise InputError(f"{name} is not a record (the top level is not an object)", "give a record.json written by axisledger")
    version = record.get("schema_version")
    if version != SCHEMA_VERSION:
        raise InputError(
            f"{name} has schema_version {version!r}, this axisledger reads version {SCHEMA_VERSION}",
            "use the axisledger version that wrote it",
        )
    validate(record, name)
    return record


def schema() -> dict:
    """The JSON Schema of the record (``planner/schema/record.schema.json``)."""
    return json.loads((Path(__file__).parent / "schema" / "record.schema.json").read_text(encoding="utf-8"))


def validate(record: dict, name: str = "record") -> None:
    """Check ``record`` against the schema; an error names the file and the field."""
    import jsonschema

    validator = jsonschema.Draft202012Validator(schema())
    errors = sorted(validator.iter_errors(record), key=lambda e: list(e.absolute_path))
    if errors:
        first = errors[0]
        where = ".".join(str(p) for p in first.absolute_path) or "(top level)"
        raise InputError(
            f"{name} does not match the record schema at {where}: {first.message[:200]}",
            "give a record written by axisledger, unchanged",
        )


def load(path: str | Path) -> dict:
    path = Path(path)
    if not path.is_file():
        raise InputError(f"no such record: {path}", "check the path")
    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{path.name} is not UTF-8 JSON", "give a record.json written by axisledger")
    return loads(text, path.name)
