"""Isotide engine: numerics and file formats for level-set outlining.

The engine is the functional core of Isotide: arrays in, arrays out, no Qt and
no global state. Everything the window can do, a script can do through it::

    from engine import Front, Session, load, segment

The public names are loaded on first use, so ``import engine`` stays light
(the command line imports it for its version).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from engine.lazy import lazy_attributes

__version__ = "0.1.0"

#: Public name -> module that defines it.
_PUBLIC = {
    "Front": "engine.front",
    "FrontSnapshot": "engine.front",
    "FrontParams": "engine.front",
    "segment": "engine.segment",
    "Segmentation": "engine.segment",
    "Session": "engine.session",
    "open_result": "engine.session",
    "load": "engine.io",
    "list_series": "engine.io",
    "Volume": "engine.io",
    "save_result": "engine.io",
    "verify": "engine.io",
}

__all__ = ["__version__", *_PUBLIC]

if TYPE_CHECKING:  # pragma: no cover
    from engine.front import Front, FrontSnapshot
    from engine.io import Volume, list_series, load, save_result, verify
    from engine.segment import Segmentation, segment
    from engine.session import Session, open_result
    from engine.front import FrontParams


__getattr__, __dir__ = lazy_attributes(__name__, _PUBLIC, __all__)
