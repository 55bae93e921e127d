"""Packages whose public names are imported on first use (PEP 562 module ``__getattr__``)."""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping, Sequence
from typing import Any

__all__ = ["lazy_names"]


def lazy_names(package: str, namespace: dict[str, Any], where: Mapping[str, str],
               public: Sequence[str]) -> tuple[Callable[[str], Any], Callable[[], list[str]]]:
    """``__getattr__`` and ``__dir__`` for `package`: name -> submodule in `where`.

    A name is imported from its submodule the first time it is asked for and then kept in
    the package's `namespace` (its ``globals()``), so later lookups cost nothing.
    """

    def __getattr__(name: str) -> Any:
        module = where.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f".{module}", package), name)
        namespace[name] = value
        return value

    def __dir__() -> list[str]:
        return sorted(set(namespace) | set(public))

    return __getattr__, __dir__
