"""Lazy package attributes: a package names what it exports; modules load on first use.

Keeps ``segreport --help`` and plain imports fast: numpy, reportlab and the pydantic models load only
when a name that needs them is first touched.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from typing import Any


def lazy_attributes(package: str, where: Mapping[str, str]) -> Callable[[str], Any]:
    """A module ``__getattr__`` that imports ``where[name]`` and returns its ``name``."""

    def __getattr__(name: str) -> Any:
        if name in where:
            return getattr(importlib.import_module(where[name]), name)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    return __getattr__
