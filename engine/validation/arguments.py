"""Checks of what a user gives the Session, the command line and a batch manifest: one function per thing checked.

Each check returns the value in its plain form or raises a ``ValueError``
whose message starts with ``name`` — the argument, keyword, flag or
manifest column the value came from — and says what is wrong on one line.
The command line passes its flag as ``name`` (``--seed``), the Session its
keyword (``seed``), so the same check speaks each caller's words.

- text read from a command line or a manifest: :func:`parse_number`,
  :func:`parse_whole`, :func:`parse_seed`, :func:`parse_window`
- values: :func:`check_seed`, :func:`check_stroke`, :func:`check_slice`,
  :func:`check_steps`, :func:`check_detail`, :func:`check_nodes`,
  :func:`check_coarse`, :func:`check_margin`,
  :func:`check_label_name`, :func:`check_file_name`, :func:`check_colour`
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["parse_number", "parse_whole", "parse_seed", "parse_window", "check_seed", "check_stroke",
           "check_slice", "check_steps", "check_detail", "check_margin", "check_label_name", "check_file_name",
           "check_colour", "check_nodes", "check_coarse", "DETAILS", "NODE_LAYOUTS", "BLOCK_SIZES",
           "MAX_LABEL_NAME", "MAX_FILE_NAME"]

#: Lattice nodes per pixel along each axis that a front may use.
DETAILS = (1, 2, 4)
#: Where a front's nodes lie: a lattice, or scattered nodes finer near edges.
NODE_LAYOUTS = ("lattice", "scattered")
#: Block sizes of the coarse start (1: none).
BLOCK_SIZES = (1, 2, 4, 8)
#: Longest name of a label (characters).
MAX_LABEL_NAME = 64
#: Longest name that becomes part of a file or folder name (characters).
MAX_FILE_NAME = 64
#: Characters a name that becomes part of a file or folder name may not hold (common practice: those Windows
#: refuses; line breaks and tabs would also break the label table).
_FILE_NAME_CHARS = set('/\\:*?"<>|\t\r\n')


def parse_number(text: Any, *, name: str, minimum: float | None = None, strict: bool = False) -> float:
    """A finite number from text; ``minimum`` bounds it from below (excluded when ``strict``).

    Raises
    ------
    ValueError
        ``"<name> '<text>': expected a number"`` (or a finite one, or one above ``minimum``).
    """
    try:
        value = float(str(text).strip())
    except ValueError:
        raise ValueError(f"{name} {text!r}: expected a number") from None
    if not math.isfinite(value):
        raise ValueError(f"{name} {text!r}: expected a finite number")
    if minimum is not None and (value <= minimum if strict else value < minimum):
        raise ValueError(f"{name} {text!r}: must be {'>' if strict else '>='} {minimum:g}")
    return value


def parse_whole(text: Any, *, name: str, minimum: int = 0) -> int:
    """A whole number from text (``"3"`` or ``"3.0"``), at least ``minimum``.

    Raises
    ------
    ValueError
        ``"<name> '<text>': expected a whole number"`` or ``"... must be >= <minimum>"``.
    """
    try:
        value = float(str(text).strip())
    except ValueError:
        raise ValueError(f"{name} {text!r}: expected a whole number") from None
    if not value.is_integer():
        raise ValueError(f"{name} {text!r}: expected a whole number")
    if value < minimum:
        raise ValueError(f"{name} {text!r}: must be >= {minimum}")
    return int(value)


def parse_seed(text: Any, *, name: str = "seed",
               with_slice: bool = False) -> tuple[float, float, float] | tuple[int | None, float, float, float]:
    """A seed disk from ``"ROW,COL,RADIUS"`` (pixels) or a sequence of three numbers.

    With ``with_slice`` a seed may name its slice, ``"K:ROW,COL,RADIUS"`` or
    four numbers, and the result is ``(K or None, row, col, radius)``.
    Where the seed lies is checked by :func:`check_seed` once the image is known.

    Raises
    ------
    ValueError
        Not three finite numbers, a radius <= 0, or a slice that is not a whole number >= 0.
    """
    where: Any = None
    if isinstance(text, (list, tuple)):
        values = list(text)
        if with_slice and len(values) == 4:
            where, values = values[0], values[1:]
        shown = ",".join(str(v) for v in text)
    else:
        shown = str(text).strip()
        rest = shown
        if with_slice and ":" in shown:
            where, _, rest = shown.partition(":")
        values = [v.strip() for v in rest.split(",")]
    try:
        numbers = [float(str(v).strip()) for v in values]
    except ValueError:
        raise ValueError(f"{name} {shown!r}: expected ROW,COL,RADIUS as numbers") from None
    if len(numbers) != 3:
        raise ValueError(f"{name} {shown!r}: expected ROW,COL,RADIUS (three numbers)")
    if not all(math.isfinite(v) for v in numbers):
        raise ValueError(f"{name} {shown!r}: values must be finite numbers")
    if numbers[2] <= 0:
        raise ValueError(f"{name} {shown!r}: radius must be > 0 pixels")
    row, col, radius = numbers
    if not with_slice:
        return row, col, radius
    k = None if where is None else parse_whole(where, name=f"{name} {shown!r}: slice")
    return k, row, col, radius


def parse_window(text: Any, *, name: str = "window") -> tuple[float, float]:
    """An intensity window ``(low, high)`` from ``"LOW,HIGH"`` or two numbers, ``low < high``.

    Raises
    ------
    ValueError
        Not two finite numbers, or LOW not below HIGH.
    """
    values = list(text) if isinstance(text, (list, tuple)) else str(text).split(",")
    try:
        numbers = [float(str(v).strip()) for v in values]
    except ValueError:
        raise ValueError(f"{name} {text!r}: expected LOW,HIGH as numbers") from None
    if len(numbers) != 2 or not all(math.isfinite(v) for v in numbers):
        raise ValueError(f"{name} {text!r}: expected LOW,HIGH (two finite numbers)")
    if numbers[0] >= numbers[1]:
        raise ValueError(f"{name} {text!r}: LOW must be less than HIGH")
    return numbers[0], numbers[1]


def check_seed(row: float, col: float, radius_px: float, shape: Sequence[int], *,
               name: str = "seed") -> tuple[float, float, float]:
    """A seed disk on a slice of ``shape`` (rows, cols): finite, radius > 0, centre within the image.

    A centre may lie up to half a pixel beyond the outermost pixel centres
    (on the image's edge), as pixel centres sit at whole numbers.

    Raises
    ------
    ValueError
        Naming ``name``: non-finite values, a radius <= 0, or a centre outside the image.
    """
    try:
        values = [float(row), float(col), float(radius_px)]
    except (TypeError, ValueError):
        raise ValueError(f"{name}: row, col and radius must be numbers, got {(row, col, radius_px)!r}") from None
    if not all(math.isfinite(v) for v in values):
        raise ValueError(f"{name}: row, col and radius must be finite numbers")
    r, c, radius = values
    if radius <= 0:
        raise ValueError(f"{name}: radius must be > 0 pixels, got {radius_px!r}")
    rows, cols = int(shape[0]), int(shape[1])
    if not (-0.5 <= r <= rows - 0.5 and -0.5 <= c <= cols - 0.5):
        raise ValueError(f"{name}: centre (row {r:g}, col {c:g}) lies outside the image ({rows} rows x {cols} "
                         f"columns: rows 0..{rows - 1}, columns 0..{cols - 1})")
    return r, c, radius


def check_stroke(points_px: ArrayLike, radius_mm: float, *, name: str = "stroke") -> tuple[NDArray[np.floating], float]:
    """A brush stroke: its polyline as an (n, 2) array of pixel coordinates and its radius in mm.

    Raises
    ------
    ValueError
        No point, a non-finite point (naming ``name``), or a radius that is not a positive number (``radius_mm``).
    """
    try:
        pts = np.asarray(points_px, dtype=float).reshape(-1, 2)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: expected one or more finite (row, col) points") from None
    if len(pts) == 0 or not np.all(np.isfinite(pts)):
        raise ValueError(f"{name}: expected one or more finite (row, col) points")
    if isinstance(radius_mm, bool) or not isinstance(radius_mm, (int, float, np.number)) \
            or not np.isfinite(radius_mm) or radius_mm <= 0:
        raise ValueError(f"radius_mm: expected a positive brush radius in mm, got {radius_mm!r}")
    return pts, float(radius_mm)


def check_slice(index: Any, count: int, *, name: str = "slice") -> int:
    """A slice index among ``count`` slices (0..count - 1).

    Raises
    ------
    ValueError
        Not a whole number, or outside the slices.
    """
    if isinstance(index, bool) or not isinstance(index, (int, np.integer)):
        raise ValueError(f"{name}: expected a whole number, got {index!r}")
    if not 0 <= int(index) < count:
        raise ValueError(f"{name} {index}: the image has {count} slice{'s' if count != 1 else ''} (0..{count - 1})")
    return int(index)


def check_steps(steps: Any, *, name: str = "steps") -> int:
    """A step count or limit: a whole number >= 1.

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 1:
        raise ValueError(f"{name}: expected a whole number >= 1, got {steps!r}")
    return int(steps)


def check_detail(detail: Any, *, name: str = "detail") -> int:
    """Lattice nodes per pixel along each axis: one of :data:`DETAILS`.

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    if isinstance(detail, bool) or not isinstance(detail, (int, np.integer)) or int(detail) not in DETAILS:
        raise ValueError(f"{name}: must be 1, 2 or 4, got {detail!r}")
    return int(detail)


def check_nodes(nodes: Any, *, name: str = "nodes") -> str:
    """Where a front's nodes lie: one of :data:`NODE_LAYOUTS`.

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    if nodes not in NODE_LAYOUTS:
        raise ValueError(f"{name}: must be lattice or scattered, got {nodes!r}")
    return str(nodes)


def check_coarse(coarse: Any, *, nodes: str = "lattice", name: str = "coarse", automatic: str = "None"
                 ) -> int | None:
    """The coarse start's block size: one of :data:`BLOCK_SIZES`, or ``None`` (chosen automatically).

    Scattered nodes take no coarse start (only 1 or ``None``). ``automatic``
    is how the caller asks for the automatic choice (the message lists it).

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    if coarse is None:
        return None
    if isinstance(coarse, bool) or not isinstance(coarse, (int, np.integer)) or int(coarse) not in BLOCK_SIZES:
        raise ValueError(f"{name} {coarse!r}: must be {automatic}, 1, 2, 4 or 8")
    if nodes == "scattered" and coarse != 1:
        raise ValueError(f"{name} {coarse!r}: the coarse start is for lattice nodes (use {name} 1 with scattered "
                         "nodes)")
    return int(coarse)


def check_margin(mm: Any, *, limit_mm: float, name: str = "mm") -> float:
    """A margin in mm: non-zero, finite, at most ``limit_mm`` either way (grow > 0, shrink < 0).

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    if isinstance(mm, bool) or not isinstance(mm, (int, float, np.number)) or not np.isfinite(mm) or mm == 0:
        raise ValueError(f"{name}: expected a non-zero finite margin, got {mm!r}")
    if abs(mm) > limit_mm:
        raise ValueError(f"{name}: a margin of {mm:g} mm is larger than {limit_mm:g} mm, a quarter of the slice")
    return float(mm)


def check_label_name(text: Any, *, name: str = "name") -> str:
    """A label's name: one line of 1 to :data:`MAX_LABEL_NAME` characters without tabs (surrounding spaces dropped).

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    value = str(text if text is not None else "").strip()
    if not value or any(c in value for c in "\t\n\r") or len(value) > MAX_LABEL_NAME:
        raise ValueError(f"{name}: expected one line of 1 to {MAX_LABEL_NAME} characters without tabs, got {text!r}")
    return value


def check_file_name(text: Any, *, name: str) -> str:
    """A name that becomes part of a file or folder name: 1 to 64 characters, none of ``/ \\ : * ? " < > |``.

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    value = str(text if text is not None else "").strip()
    if not value or value in (".", "..") or any(c in _FILE_NAME_CHARS for c in value) or len(value) > MAX_FILE_NAME:
        raise ValueError(f"{name} {text!r}: expected a name of 1 to {MAX_FILE_NAME} characters without "
                         "/ \\ : * ? \" < > |")
    return value


def check_colour(colour: Any, *, name: str = "colour") -> str:
    """A colour ``#RRGGBB`` (returned in capitals).

    Raises
    ------
    ValueError
        Naming ``name``.
    """
    text = str(colour).strip()
    if len(text) != 7 or not text.startswith("#") or any(c not in "0123456789abcdefABCDEF" for c in text[1:]):
        raise ValueError(f"{name}: expected #RRGGBB, got {colour!r}")
    return text.upper()
