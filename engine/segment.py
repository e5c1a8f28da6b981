"""One call from an image and seeds to a converged outline."""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.front import Front


@dataclass(frozen=True)
class Segmentation:
    """Result of :func:`segment`."""

    mask: NDArray[np.bool_]
    contours: list[NDArray[np.floating]]  # 2-D: (k, 2) pixel (row, col); 3-D: empty
    steps: int
    converged: bool
    params: dict
    timings: dict = field(default_factory=dict)
    time: float = 0.0  # evolution time reached
    area_mm2: float = 0.0  # 2-D area (3-D: volume in mm³)


def segment(
    image: ArrayLike,
    seeds: Sequence[Sequence[float]],
    *,
    spacing: ArrayLike = (1.0, 1.0),
    model: str = "region",
    max_steps: int | None = None,
    detail: int = 1,
    progress: Callable[[int, float], None] | None = None,
    **params: object,
) -> Segmentation:
    """Grow a front from ``seeds`` until it converges and return the outline.

    Parameters
    ----------
    image : 2-D (or 3-D) array of intensities, any scale.
    seeds : ``(row, col, radius_px)`` disks (3-D: ``(slice, row, col, radius_px)``).
    spacing : pixel spacing in mm, per axis.
    model : ``"region"``, ``"edge"``, ``"window"``, ``"curvature"`` or ``"constant"``.
    max_steps : stop after this many steps even if not converged (default 20 000).
    detail : lattice nodes per pixel along each axis (1, 2 or 4).
    progress : called as ``progress(steps, time)`` after every step.
    **params : front settings (see :class:`engine.speeds.FrontParams`).

    Returns
    -------
    Segmentation
        Mask, sub-pixel contours, steps taken, convergence flag, the settings
        actually used (including an estimated intensity window) and timings.

    References
    ----------
    Chan & Vese, IEEE Trans. Image Process. 10(2) (2001) 266-277; Caselles,
    Kimmel & Sapiro, Int. J. Comput. Vis. 22(1) (1997) 61-79.
    """
    t0 = time.perf_counter()
    front = Front.from_seeds(image, seeds, spacing=spacing, model=model, detail=detail, **params)
    t1 = time.perf_counter()
    front.run(max_steps=20000 if max_steps is None else int(max_steps), progress=progress)
    t2 = time.perf_counter()
    contours = front.contours() if front.ndim == 2 else []
    area = front.area_mm2()
    mask = front.mask()
    t3 = time.perf_counter()
    timings = {"setup_s": t1 - t0, "evolve_s": t2 - t1, "output_s": t3 - t2, "total_s": t3 - t0,
               "rebuilds": front.timings["rebuilds"], "nodes": front.node_count}
    return Segmentation(mask, contours, front.steps, front.converged, front.params.as_dict(), timings,
                        front.time, area)
