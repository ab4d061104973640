"""HTML rendering of a Record through Jinja2 (autoescape on)."""
from __future__ import annotations

import re

import jinja2

from ..assets import templates_dir
from .formatting import Formatters


def environment() -> jinja2.Environment:
    """A Jinja2 environment over the package's own templates, autoescaping everything."""
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_dir())),
        autoescape=True,
        undefined=jinja2.ChainableUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )


def stylesheet() -> str:
    return (templates_dir() / "record.css").read_text(encoding="utf-8")


#: A run of this many characters without a space is shortened for display (the full text
#: stays in the embedded JSON): unbroken strings of thousands of characters stall layout.
LONG_WORD = 120
_LONG = re.compile(r"\S{%d,}" % LONG_WORD)


def _shorten(match: re.Match) -> str:
    word = match.group(0)
    return f"{word[:80]}\u2026 [{len(word):,} characters]"


def for_display(value):
    """The record with very long unbroken strings shortened, keys included."""
    if isinstance(value, str):
        return _LONG.sub(_shorten, value) if len(value) >= LONG_WORD else value
    if isinstance(value, dict):
        return {for_display(k) if isinstance(k, str) else k: for_display(v) for k, v in value.items()}
    if isinstance(value, list):
        return [for_display(v) for v in value]
    return value


def render_html(record: dict, *, fragment: bool = False, charts: dict | None = None) -> str:
    """The record as HTML. ``fragment`` gives a body with an inline style, for notebooks."""
    env = environment()
    body = env.get_template("record.html").render(r=for_display(record), fmt=Formatters, charts=charts or {})
    if fragment:
        return f"<div class=\"axisledger\"><style>{stylesheet()}</style>{body}</div>"
    return body
