"""The Jinja2 environment of templates/: module shells and testbench shells, strict about undefined names."""

from __future__ import annotations

from functools import lru_cache
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined


@lru_cache(maxsize=1)
def environment() -> Environment:
    """The templates/ environment (package `qamsmith.templates`)."""
    return Environment(loader=PackageLoader("qamsmith.templates", "."), undefined=StrictUndefined,
                       trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True, autoescape=False)


def render(template: str, **context: Any) -> str:
    return environment().get_template(template).render(**context)


__all__ = ["environment", "render"]
