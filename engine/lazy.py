"""Public names of a package loaded on first use (PEP 562 module ``__getattr__``)."""

from __future__ import annotations

import importlib
import sys
from collections.abc import Callable, Mapping
from typing import Any


def lazy_attributes(package: str, public: Mapping[str, str], names: list[str]
                    ) -> tuple[Callable[[str], Any], Callable[[], list[str]]]:
    """``__getattr__`` and ``__dir__`` for ``package``: ``public`` maps a name to the module defining it."""
    namespace = sys.modules[package].__dict__  # the package being initialised

    def __getattr__(name: str) -> Any:
        module = public.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        namespace[name] = value  # found once; later lookups do not come here
        return value

    def __dir__() -> list[str]:
        return sorted(names)

    return __getattr__, __dir__
