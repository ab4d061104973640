"""Sign-off and verification of a decision record.

A sign-off entry holds the signer's printed name, role and the meaning of the signature,
the UTC time, the record's content hash and the SHA-256 of the canonical form of the
previous entry (null for the first), so the entries form a hash chain bound to exactly
this content. With an Ed25519 private key the entry also carries the public key (base64 of
the raw 32 bytes), its fingerprint (SHA-256 hex of those bytes) and a base64 signature
over the canonical form of the entry without ``signature`` (DESIGN.md, "Record contract").

This is tamper evidence, not an electronic-signature system validated for any regulation.
"""
from __future__ import annotations

import base64
import fcntl
import hashlib
import os
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from .errors import InputError
from .record import canonical_bytes, content_sha256, sha256_hex, utc_now

ROLES = ("author", "reviewer", "approver")


def status_for(signoffs: list[dict]) -> str:
    """``approved`` after an approver, ``reviewed`` after a reviewer, else ``draft``."""
    roles = {s.get("role") for s in signoffs}
    if "approver" in roles:
        return "approved"
    if "reviewer" in roles:
        return "reviewed"
    return "draft"


def entry_sha256(entry: dict) -> str:
    return sha256_hex(canonical_bytes(entry))


def _unsigned(entry: dict) -> dict:
    return {k: v for k, v in entry.items() if k != "signature"}


# ---------------------------------------------------------------------- keys
def load_private_key(path: str | Path):
    """An Ed25519 private key from a PEM file (as ``openssl genpkey -algorithm ed25519``)."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    path = Path(path)
    if not path.is_file():
        raise InputError(f"no such key file: {path}", "give the PEM file of an Ed25519 private key")
    try:
        key = serialization.load_pem_private_key(path.read_bytes(), password=None)
    except TypeError:
        raise InputError(f"{path.name} is encrypted with a passphrase", "give an unencrypted Ed25519 PEM key")
    except (ValueError, Exception) as exc:  # cryptography raises ValueError or UnsupportedAlgorithm
        raise InputError(f"{path.name} is not a readable PEM private key ({type(exc).__name__})",
                         "make one with: openssl genpkey -algorithm ed25519 -out key.pem")
    if not isinstance(key, Ed25519PrivateKey):
        raise InputError(f"{path.name} is not an Ed25519 key", "make one with: openssl genpkey -algorithm ed25519 -out key.pem")
    return key


def _raw_public(key) -> bytes:
    from cryptography.hazmat.primitives import serialization

    return key.public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


# ---------------------------------------------------------------------- verification
@dataclass
class Verification:
    """What ``verify`` found: ``ok`` and the list of problems, each in one sentence."""

    problems: list[str] = field(default_factory=list)
    checked: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


def verify_record(record: dict, data_path: str | Path | None = None) -> Verification:
    """Recompute the content hash, walk the sign-off chain, check every signature and,
    with ``data_path``, the SHA-256 of the data file."""
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    v = Verification()
    recorded = (record.get("integrity") or {}).get("content_sha256")
    actual = content_sha256(record)
    if recorded != actual:
        v.problems.append(f"the content hash differs: the record says {recorded}, its content hashes to {actual}")
    else:
        v.checked.append(f"content hash {actual}")
    previous = None
    for i, entry in enumerate(record.get("signoffs") or [], start=1):
        who = f"sign-off {i} ({entry.get('name')}, {entry.get('role')})"
        if entry.get("record_sha256") != actual:
            v.problems.append(f"{who} was given to content {entry.get('record_sha256')}, not to this content {actual}")
        expected_prev = entry_sha256(previous) if previous is not None else None
        if entry.get("previous_sha256") != expected_prev:
            v.problems.append(f"{who} does not follow the entry before it (previous_sha256 {entry.get('previous_sha256')}, expected {expected_prev})")
        if entry.get("record_sha256") == actual and entry.get("previous_sha256") == expected_prev:
            v.checked.append(f"{who}: bound to this content and to the entry before it")
        if "signature" in entry or "public_key" in entry:
            try:
                raw = base64.b64decode(entry.get("public_key", ""), validate=True)
                signature = base64.b64decode(entry.get("signature", ""), validate=True)
                if hashlib.sha256(raw).hexdigest() != entry.get("key_fingerprint"):
                    v.problems.append(f"{who}: the key fingerprint does not match the public key")
                Ed25519PublicKey.from_public_bytes(raw).verify(signature, canonical_bytes(_unsigned(entry)))
                v.checked.append(f"{who}: Ed25519 signature by key {entry.get('key_fingerprint', '')[:16]}")
            except (InvalidSignature, ValueError, TypeError):
                v.problems.append(f"{who}: the Ed25519 signature does not verify")
        previous = entry
    expected_status = status_for(record.get("signoffs") or [])
    if record.get("status") != expected_status:
        v.problems.append(f"the status is {record.get('status')!r} but the sign-offs make it {expected_status!r}")
    if data_path is not None:
        from .intake import sha256_of_file

        path = Path(data_path)
        if not path.is_file():
            raise InputError(f"no such data file: {path}", "check the path given to --data")
        digest = sha256_of_file(path)
        if digest != (record.get("input") or {}).get("sha256"):
            v.problems.append(f"the data file {path.name} has SHA-256 {digest}, the record was made from {(record.get('input') or {}).get('sha256')}")
        else:
            v.checked.append(f"data file {path.name} matches input.sha256")
    return v


# ---------------------------------------------------------------------- signing
@contextmanager
def locked(path: Path):
    """A blocking exclusive lock on ``path``.lock, so that concurrent sign-offs queue up."""
    lock_path = path.with_name(path.name + ".lock")
    fd = os.open(lock_path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)


def make_entry(record: dict, name: str, role: str, meaning: str, key=None, signed_at: str | None = None) -> dict:
    """The next sign-off entry of ``record`` (not yet appended)."""
    if role not in ROLES:
        raise InputError(f"unknown role {role!r}", f"use one of: {', '.join(ROLES)}")
    for label, value in (("--name", name), ("--meaning", meaning)):
        if not value or not value.strip():
            raise InputError(f"{label} is empty", f"give {label} TEXT")
    signoffs = record.get("signoffs") or []
    entry = {
        "name": name.strip(),
        "role": role,
        "meaning": meaning.strip(),
        "signed_at": signed_at or utc_now(),
        "record_sha256": content_sha256(record),
        "previous_sha256": entry_sha256(signoffs[-1]) if signoffs else None,
    }
    if key is not None:
        raw = _raw_public(key)
        entry["public_key"] = base64.b64encode(raw).decode("ascii")
        entry["key_fingerprint"] = hashlib.sha256(raw).hexdigest()
        entry["signature"] = base64.b64encode(key.sign(canonical_bytes(entry))).decode("ascii")
    return entry


def append_signoff(record: dict, entry: dict) -> dict:
    """Append ``entry`` and update the status; the content hash does not change."""
    record.setdefault("signoffs", []).append(entry)
    record["status"] = status_for(record["signoffs"])
    return record
