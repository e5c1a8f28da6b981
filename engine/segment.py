"""One call from an image and seeds to a converged outline."""

from __future__ import annotations

import difflib
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, fields

import numpy as np
from numpy.typing import ArrayLike, NDArray

from engine.coarse_start import (COARSE_MAX_STEPS, COARSE_TOL_FACTOR, MIN_COARSE_SEED, block_mean, coarse_factor,
                                 coarse_seeds, upsample_phi)
from engine.front import Front, validate_seeds
from engine.front_geometry import seed_disks
from engine.setting_limits import check_limits
from engine.speeds import FrontParams


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
    """Grow a front from ``seeds`` until it converges and return the outline.

    Parameters
    ----------
    image : 2-D (or 3-D) array of intensities, any scale.
    seeds : ``(row, col, radius_px)`` disks (3-D: ``(slice, row, col, radius_px)``).
    spacing : pixel spacing in mm, per axis (default 1 mm on every axis).
    model : ``"region"``, ``"edge"``, ``"window"``, ``"curvature"`` or ``"constant"``.
    max_steps : stop after this many steps even if not converged (default 20 000; coarse and fine together).
    detail : lattice nodes per pixel along each axis (1, 2 or 4).
    coarse : block size of a coarse start (1 = none; default: chosen from the image and seed sizes by
        :func:`engine.coarse_start.coarse_factor`). The front first grows on the image averaged over
        blocks of this size, then continues at full resolution from that outline. By default, seeds
        too small for the block size the image allows first grow at full resolution until a disk of
        ``MIN_COARSE_SEED`` blocks fits around each seed centre (a small structure converges there,
        without a coarse start). Lattice nodes only: with ``nodes="scattered"`` the default is 1 and
        any other value is refused.
    nodes : ``"lattice"`` or ``"scattered"`` (edge-adaptive scattered nodes, see
        :meth:`engine.front.Front.from_function`; ``finest`` and ``coarsest`` spacings in mm go in
        ``params``).
    progress : called as ``progress(steps, time)`` after every step.
    **params : front settings (see :class:`engine.speeds.FrontParams`); a name that is none of them is a
        ``ValueError`` naming it. ``outline_averaging``, ``edge_sigma`` and ``local_radius`` may be at most
        half the image's smaller side, and pixels at most 3 times longer one way than another
        (:mod:`engine.setting_limits`).

    Returns
    -------
    Segmentation
        Mask, sub-pixel contours, steps taken, convergence flag (False when the
        front vanished: see ``vanished`` and ``empty``, both failures), the settings
        actually used (including an estimated intensity window and the
        coarse block size) and timings. Parts of the outline that hold no
        seed are dropped (:meth:`engine.front.Front.keep_parts`).

    References
    ----------
    Chan & Vese, IEEE Trans. Image Process. 10(2) (2001) 266-277; Caselles,
    Kimmel & Sapiro, Int. J. Comput. Vis. 22(1) (1997) 61-79; Burt & Adelson,
    IEEE Trans. Commun. 31(4) (1983) 532-540 (coarse to fine).
    """
    t0 = time.perf_counter()
    _check_names(params)
    if max_steps is not None and (isinstance(max_steps, bool) or not isinstance(max_steps, (int, np.integer))
                                  or max_steps < 1):
        raise ValueError(f"max_steps must be a whole number >= 1 (or None for 20 000), got {max_steps!r}")
    img = np.asarray(image, dtype=float)
    if img.ndim not in (2, 3) or img.size == 0:
        raise ValueError(f"image must be a non-empty 2-D or 3-D array, got shape {img.shape}")
    seeds_arr = validate_seeds(seeds, img.shape)
    budget = 20000 if max_steps is None else int(max_steps)
    if nodes not in ("lattice", "scattered"):
        raise ValueError(f"nodes must be 'lattice' or 'scattered', got {nodes!r}")
    if nodes == "scattered" and coarse not in (None, 1):
        raise ValueError(f"coarse start is for lattice nodes; use coarse=1 with nodes='scattered', got {coarse!r}")
    if nodes == "scattered":
        factor = 1
    elif coarse is None:
        factor = coarse_factor(img.shape, seeds_arr, model)
    elif isinstance(coarse, (int, np.integer)) and int(coarse) in (1, 2, 4, 8):
        factor = int(coarse)
    else:
        raise ValueError(f"coarse must be 1, 2, 4 or 8, got {coarse!r}")
    sp = np.ones(img.ndim) if spacing is None else np.asarray(spacing, dtype=float).reshape(-1)
    if sp.shape != (img.ndim,) or np.any(~np.isfinite(sp)) or np.any(sp <= 0):
        raise ValueError(f"spacing must be {img.ndim} positive numbers (mm), got {spacing!r}")
    check_limits(img.shape, sp, params)
    coarse_steps, coarse_time, coarse_s = 0, 0.0, 0.0
    layout = {} if nodes == "lattice" else {"nodes": nodes}
    front: Front | None = None
    target = coarse_factor(img.shape, None, model) if coarse is None and nodes == "lattice" else factor
    if target > factor:
        # seeds too small for the block size the image allows: grow them at full resolution first
        front = Front.from_seeds(img, seeds_arr, spacing=sp, model=model, detail=detail, **params)
        if _grow_until(front, seeds_arr, MIN_COARSE_SEED * target * float(np.max(sp)), budget, progress):
            factor = target
    if factor > 1:
        small = block_mean(img, factor)
        small_seeds = coarse_seeds(seeds_arr, factor)
        tol = params.get("convergence_tol", FrontParams().convergence_tol)
        coarse_params = dict(params, convergence_tol=COARSE_TOL_FACTOR * float(tol))  # type: ignore[arg-type]
        if front is None:
            first = Front.from_seeds(small, small_seeds, spacing=sp * factor, model=model, detail=1,
                                     **coarse_params)
        else:  # continue from the grown seeds
            first = Front.from_pixel_phi(small, block_mean(front.pixel_phi(), factor), spacing=sp * factor,
                                         model=model, detail=1, window_from=seed_disks(small.shape, small_seeds),
                                         **coarse_params)
            first.time, first.steps = front.time, front.steps
        first.run(max_steps=min(max(budget - first.steps, 0), COARSE_MAX_STEPS), progress=progress)
        coarse_steps, coarse_time = first.steps, first.time
        coarse_s = time.perf_counter() - t0
        if first.vanished or first.mask().all():
            factor = 1  # nothing to refine: start again at full resolution
            front = None
    if factor > 1:
        start = upsample_phi(first.pixel_phi(), factor, sp)
        front = Front.from_function(start, img.shape, image=img, spacing=sp, model=model, detail=detail,
                                    signed_distance=True, window_from=seed_disks(img.shape, seeds_arr), **params)
        front.time, front.steps = coarse_time, coarse_steps
    elif front is None:
        front = Front.from_seeds(img, seeds_arr, spacing=sp, model=model, detail=detail, **layout, **params)
    t1 = time.perf_counter()
    front.run(max_steps=max(budget - front.steps, 0), progress=progress)
    if not front.vanished and front.keep_parts(seeds_arr[:, :-1]):
        front.run(max_steps=max(budget - front.steps, 0), progress=progress)
    t2 = time.perf_counter()
    contours = front.contours() if front.ndim == 2 else []
    area = front.area_mm2()
    mask = front.mask()
    t3 = time.perf_counter()
    timings = {"setup_s": t1 - t0, "evolve_s": t2 - t1, "output_s": t3 - t2, "total_s": t3 - t0,
               "rebuilds": front.timings["rebuilds"], "nodes": front.node_count, "coarse_steps": coarse_steps,
               "coarse_s": coarse_s}
    used = dict(front.params.as_dict(), coarse=factor, smoothness_scale=round(front.smoothness_scale, 4))
    if nodes == "scattered":
        used["nodes"] = nodes
    return Segmentation(mask, contours, front.steps, front.converged, used, timings, front.time, area,
                        vanished=front.vanished)


#: Keyword arguments of :func:`segment` besides :class:`engine.speeds.FrontParams`' fields.
LAYOUT_OPTIONS = ("finest", "coarsest", "node_set")


def _check_names(params: dict) -> None:
    """ValueError naming a keyword that is no setting (with the nearest setting's name)."""
    known = {f.name for f in fields(FrontParams)} - {"model", "extra"} | set(LAYOUT_OPTIONS)
    for name in params:
        if name not in known:
            close = difflib.get_close_matches(name, sorted(known), n=1)
            hint = f"; did you mean {close[0]}?" if close else ""
            raise ValueError(f"{name}: not a setting of segment(){hint}")


#: Steps between checks of how far grown seeds have come (before a coarse start).
GROW_CHECK_STEPS = 10


def _grow_until(front: Front, seeds: NDArray[np.floating], radius_mm: float, budget: int,
                progress: Callable[[int, float], None] | None) -> bool:
    """Step ``front`` until a disk of ``radius_mm`` fits inside it around every seed centre.

    Returns False when it converged, vanished or used up ``budget`` first
    (the structure is small; the front then carries on at full resolution).
    """
    centres = seeds[:, :-1]
    while front.steps < budget and not front.converged and not front.vanished:
        front.run(max_steps=min(GROW_CHECK_STEPS, budget - front.steps), progress=progress)
        if not front.vanished and np.min(-front.phi_at(centres)) >= radius_mm:
            return True
    return False
