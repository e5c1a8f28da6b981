"""Scoring a batch case against a reference label volume: Dice and HD95 over the case's slices.

The reference is any label volume :func:`engine.io.load` reads on the same
grid as the study (``[slice, row, col]``). The label's value in it is found
by name in the label table beside it (``X_dseg.nii.gz`` -> ``X_dseg.tsv``,
BIDS ``dseg.tsv`` columns, names compared without regard to case); a
reference with a single non-zero value needs no table.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

__all__ = ["reference_mask", "label_table_beside", "score"]


def label_table_beside(path: str | os.PathLike[str]) -> Path | None:
    """The ``.tsv`` label table that goes with a label volume, when there is one."""
    p = Path(os.fspath(path))
    name = p.name
    for ext in (".nii.gz", ".nii", ".npy", ".tif", ".tiff", ".png"):
        if name.lower().endswith(ext):
            table = p.with_name(name[: -len(ext)] + ".tsv")
            return table if table.is_file() else None
    return None


def reference_mask(path: str | os.PathLike[str], label: str, shape: Sequence[int]) -> NDArray[np.bool_]:
    """The voxels of ``label`` in the reference volume at ``path`` (shape must be ``shape``).

    Raises
    ------
    ValueError
        ``reference``: unreadable, on another grid, or ``label`` not found in it.
    """
    from engine.io import LoadError, load
    from engine.io.sidecar import read_label_table_tsv

    try:
        volume = load(os.fspath(path))
    except LoadError as exc:
        raise ValueError(f"reference {path}: {' '.join(str(exc).split())}") from None
    if tuple(volume.shape) != tuple(shape):
        raise ValueError(f"reference {path}: its shape {tuple(volume.shape)} differs from the study's {tuple(shape)}")
    values = volume.array
    table = label_table_beside(path)
    if table is not None:
        rows = read_label_table_tsv(table.read_bytes())
        match = [r["index"] for r in rows if str(r["name"]).strip().lower() == label.strip().lower()]
        if not match:
            raise ValueError(f"reference {path}: its label table {table.name} has no label named {label!r}")
        return values == match[0]
    present = np.unique(values[values != 0])
    if len(present) == 1:
        return values != 0
    if len(present) == 0:
        raise ValueError(f"reference {path}: holds no labelled voxel")
    raise ValueError(f"reference {path}: holds {len(present)} label values and no label table (.tsv) "
                     f"to find {label!r} by name")


def score(mask: NDArray[np.bool_], reference: NDArray[np.bool_], slices: tuple[int, int],
          spacing: Sequence[float]) -> tuple[float, float]:
    """Dice and HD95 (mm) of ``mask`` against ``reference`` over the slices ``first..last``.

    Both are taken on the slab of those slices as one volume (one slice:
    in-plane figures), with the study's voxel spacing.

    References
    ----------
    .. [1] L. R. Dice, "Measures of the amount of ecologic association between
       species", Ecology 26(3) (1945) 297-302.
    .. [2] D. P. Huttenlocher, G. A. Klanderman and W. J. Rucklidge,
       "Comparing images using the Hausdorff distance", IEEE Trans. Pattern
       Anal. Mach. Intell. 15(9) (1993) 850-863.
    """
    from engine.analysis.metrics import dice, hd95

    lo, hi = slices
    a = np.asarray(mask[lo:hi + 1], dtype=bool)
    b = np.asarray(reference[lo:hi + 1], dtype=bool)
    sp = tuple(float(s) for s in spacing)
    if a.shape[0] == 1:
        return dice(a[0], b[0]), hd95(a[0], b[0], spacing=sp[1:])
    return dice(a, b), hd95(a, b, spacing=sp)


def plain_figure(value: float | None) -> float | str | None:
    """A figure for a JSON record: NaN -> None, infinity -> ``"inf"``."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    if isinstance(value, float) and math.isinf(value):
        return "inf"
    return float(value)


def figure_from_record(value: float | str | None) -> float:
    """The inverse of :func:`plain_figure` (None -> NaN)."""
    if value is None:
        return math.nan
    return float(value)
