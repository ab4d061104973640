"""HTML rendering of a Record through Jinja2 (autoescape on)."""
from __future__ import annotations

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


def render_html(record: dict, *, fragment: bool = False, charts: dict | None = None) -> str:
    """The record as HTML. ``fragment`` gives a body with an inline style, for notebooks."""
    env = environment()
    body = env.get_template("record.html").render(r=record, fmt=Formatters, charts=charts or {})
    if fragment:
        return f"<div class=\"axisledger\"><style>{stylesheet()}</style>{body}</div>"
    return body
