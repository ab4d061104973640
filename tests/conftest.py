"""Shared helpers for the tests."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from planner.cli import main

ROOT = Path(__file__).resolve().parent.parent


class CliRun:
    def __init__(self, code: int, out: str, err: str):
        self.code, self.out, self.err = code, out, err

    def __repr__(self) -> str:  # shown by pytest on failure
        return f"CliRun(code={self.code}, out={self.out!r}, err={self.err!r})"


@pytest.fixture
def cli(capsys, monkeypatch, tmp_path):
    """Run ``axisledger ARGS`` in-process, in ``tmp_path``; return code, stdout, stderr."""
    monkeypatch.chdir(tmp_path)

    def run(*args: str) -> CliRun:
        code = main([str(a) for a in args])
        captured = capsys.readouterr()
        return CliRun(code, captured.out, captured.err)

    return run


def run_subprocess(*args: str, cwd: Path) -> CliRun:
    """Run ``python -m planner ARGS`` as a separate process."""
    proc = subprocess.run(
        [sys.executable, "-m", "planner", *map(str, args)], cwd=cwd, capture_output=True, text=True, timeout=300
    )
    return CliRun(proc.returncode, proc.stdout, proc.stderr)


def assert_clean_refusal(run: CliRun, *fragments: str) -> None:
    """Exit 2, exactly one stderr line starting 'error:', no traceback, naming the fragments."""
    assert run.code == 2, run
    lines = [line for line in run.err.splitlines() if line.strip()]
    assert len(lines) == 1, run
    assert lines[0].startswith("error: "), run
    assert "Traceback" not in run.err
    for fragment in fragments:
        assert fragment.lower() in lines[0].lower(), (fragment, lines[0])


def write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


def load_json(path: Path) -> dict:
    def refuse(token):
        raise ValueError(f"non-standard token {token}")

    return json.loads(Path(path).read_text(encoding="utf-8"), parse_constant=refuse)


SIMPLE_CSV = (
    "batch,temp_c,speed_m_min,density_g_l,moisture_pct\n"
    "A1,1010.5,2.5,1450,5.1\n"
    "A2,1022.1,2.7,1470,5.4\n"
    "A3,1003.8,2.4,1432,4.8\n"
    "A4,1030.0,2.9,1490,5.9\n"
    "A5,1015.2,2.6,1455,5.0\n"
    "A6,1008.7,2.3,1441,5.3\n"
)
