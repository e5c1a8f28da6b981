"""One call from an image and seeds to a converged outline (a loop over :class:`engine.segmenter.Segmenter`)."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.segmenter import LAYOUT_OPTIONS, STAGES, Segmenter

__all__ = ["LAYOUT_OPTIONS", "STAGES", "Segmentation", "Segmenter", "segment"]


@dataclass(frozen=True)
class Segmentation:
    """Result of :func:`segment` (and of :meth:`engine.segmenter.Segmenter.result`)."""

    mask: NDArray[np.bool_]
    contours: list[NDArray[np.floating]]  # 2-D: (k, 2) pixel (row, col); 3-D: empty
    steps: int
    converged: bool
    params: dict
    timings: dict = field(default_factory=dict)
    time: float = 0.0  # evolution time reached
    area_mm2: float = 0.0  # 2-D area (3-D: volume in mm³)
    #: the front shrank to nothing or filled the whole image: there is no outline (``converged`` is False)
    vanished: bool = False

    @property
    def empty(self) -> bool:
        """True when no pixel lies inside the outline: nothing was outlined, whatever ``converged`` says."""
        return not bool(np.any(self.mask))


def segment(
    image: ArrayLike,
    seeds: Sequence[Sequence[float]],
    *,
    spacing: ArrayLike | None = None,
    model: str = "region",
    max_steps: int | None = None,
    detail: int = 1,
    coarse: int | None = None,
    nodes: str = "lattice",
    progress: Callable[[int, float], None] | None = None,
    **params: object,
) -> Segmentation:
    """Grow a front from ``seeds`` until its outline stops moving and return it.

    Parameters
    ----------
    image : 2-D (or 3-D) array of intensities, any scale.
    seeds : ``(row, col, radius_px)`` disks (3-D: ``(slice, row, col, radius_px)``).
    spacing : pixel spacing in mm, per axis (default 1 mm on every axis).
    model : ``"region"``, ``"edge"``, ``"window"``, ``"curvature"`` or ``"constant"``.
    max_steps : stop after this many steps even if not converged (default 20 000; flood passes, coarse
        and fine steps together).
    detail : lattice nodes per pixel along each axis (1, 2 or 4).
    coarse : block size of a coarse stage (1: none, 2, 4 or 8; default: the block the image resolves,
        :func:`engine.image.resolution.resolved_block`, 1 on an image that resolves its pixels). The region
        and window models first flood the seeds' structure at pixel level (:mod:`engine.image.growth`);
        with a block size the front then grows on the image averaged over blocks of that size before it
        finishes at full resolution. A block size the flooded structure cannot hold (a core of
        :data:`engine.image.coarse_start.MIN_COARSE_SEED` blocks) is lowered to one it can
        (:func:`engine.image.coarse_start.resolvable_factor`); the block size used is ``params["coarse"]`` of the
        result and the one asked for ``params["coarse_requested"]``. Lattice nodes only: with
        ``nodes="scattered"`` any value other than 1 is refused.
    nodes : ``"lattice"`` or ``"scattered"`` (edge-adaptive scattered nodes, see
        :meth:`engine.front.core.Front.from_function`; ``finest`` and ``coarsest`` spacings in mm go in
        ``params``).
    progress : called as ``progress(steps, time)`` after every step.
    **params : front settings (see :class:`engine.front.speeds.FrontParams`).

    Returns
    -------
    Segmentation
        Mask, sub-pixel contours, steps taken, convergence flag (False when the
        front vanished: see ``vanished`` and ``empty``, both failures), the settings
        actually used (including an estimated intensity window, the block
        size and what the flood did, ``params["growth"]``) and timings. Parts
        of the outline that hold no seed are dropped
        (:meth:`engine.front.core.Front.keep_parts`).

    References
    ----------
    Chan & Vese, IEEE Trans. Image Process. 10(2) (2001) 266-277; Caselles,
    Kimmel & Sapiro, Int. J. Comput. Vis. 22(1) (1997) 61-79; Adams &
    Bischof, IEEE Trans. PAMI 16(6) (1994) 641-647 (seeded region growing);
    Burt & Adelson, IEEE Trans. Commun. 31(4) (1983) 532-540 (coarse to fine).
    """
    runner = Segmenter(image, seeds, spacing=spacing, model=model, max_steps=max_steps, detail=detail,
                       coarse=coarse, nodes=nodes, **params)
    runner.run(progress=progress)
    return runner.result()
