"""Where the package's own files are: the default rulebook and the report templates.

In a source checkout they are the top-level folders ``rules/`` and ``report_templates/``
(DESIGN.md, "Layout"); an installed copy carries them as ``planner._rules`` and
``planner._templates``.
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path

_REPO = Path(__file__).resolve().parent.parent


def _folder(checkout_name: str, package: str) -> Path:
    local = _REPO / checkout_name
    if local.is_dir():
        return local
    return Path(str(resources.files(package)))


def templates_dir() -> Path:
    return _folder("report_templates", "planner._templates")


def rules_dir() -> Path:
    return _folder("rules", "planner._rules")
