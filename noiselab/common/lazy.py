"""Lazy package attributes (PEP 562): a package names what its modules export and imports a
module only when one of its names is first used, so importing the package stays cheap."""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from typing import Any


def lazy_exports(package: str, exports: Mapping[str, str]) -> Callable[[str], Any]:
    """A module-level ``__getattr__`` that resolves ``name`` from ``package.<exports[name]>``."""

    def lookup(name: str) -> Any:
        if name in exports:
            return getattr(importlib.import_module(f"{package}.{exports[name]}"), name)
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    return lookup
