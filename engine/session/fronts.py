"""Starting and rebuilding a session's live front: from seeds, an outline, a stroke or a snapshot.

Seeds grow as :func:`engine.segment.segment` grows them (:func:`grow_from_seeds`:
the pixel flood of :mod:`engine.image.growth`, then the front from its outline), so
the window, a batch and the command line give the same outline for the same
seeds and settings.

The session keeps a few front objects alive (keyed by an id carried in its
states), so undo and redo restore a snapshot into the very object that took
it and stepping afterwards reproduces φ bit for bit. A state whose object is
gone (evicted, or read from a working-session file) gets a new object started
from the snapshot's inside and then restored.
"""

from __future__ import annotations

import itertools
from collections import OrderedDict
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.front import Front, FrontSnapshot
from engine.front.geometry import stroke_distance
from engine.image.features import ImageFeatures
from engine.segmenter import EXACT_WITHIN, Segmenter
from engine.session.outline import Outline
from engine.session.settings import FrontSettings
from engine.validation import check_stroke

__all__ = ["FrontCache", "stroke_mask", "stroke_points_mm", "grow_from_seeds", "start_from_seeds", "start_from_outline",
           "start_from_stroke", "window_for_mask"]

_ids = itertools.count(1)


def new_front_id() -> int:
    """A fresh id for a newly made front object."""
    return next(_ids)


class FrontCache:
    """The last few front objects, by id (least recently used dropped first)."""

    def __init__(self, size: int = 6) -> None:
        self.size = int(size)
        self._fronts: OrderedDict[int, Front] = OrderedDict()

    def get(self, front_id: int | None) -> Front | None:
        if front_id is None or front_id not in self._fronts:
            return None
        self._fronts.move_to_end(front_id)
        return self._fronts[front_id]

    def put(self, front_id: int, front: Front) -> None:
        self._fronts[front_id] = front
        self._fronts.move_to_end(front_id)
        while len(self._fronts) > self.size:
            self._fronts.popitem(last=False)

    def clear(self) -> None:
        self._fronts.clear()


def _front_kwargs(settings: FrontSettings) -> dict[str, Any]:
    return dict(settings.front_params, model=settings.model, detail=settings.detail)


def start_from_seeds(image: NDArray[np.floating], seeds: Sequence[Sequence[float]], spacing: Sequence[float],
                     settings: FrontSettings, features: ImageFeatures | None = None) -> Front:
    """A front grown from seed disks ``(row, col, radius_px)`` with ``settings`` (``features``: the image's, kept)."""
    return Front.from_seeds(image, [tuple(s) for s in seeds], spacing=spacing, features=features,
                            **_front_kwargs(settings))


def grow_from_seeds(image: NDArray[np.floating], seeds: Sequence[Sequence[float]], spacing: Sequence[float],
                    settings: FrontSettings, barrier: NDArray[np.bool_] | None = None,
                    features: ImageFeatures | None = None) -> Segmenter:
    """A :class:`engine.segmenter.Segmenter` from seed disks ``(row, col, radius_px)``: the flood first
    (region and window models), then the front from its outline, as :func:`engine.segment.segment` does."""
    return Segmenter(image, [tuple(s) for s in seeds], spacing=spacing, max_steps=settings.max_steps,
                     barrier=barrier, features=features, **_front_kwargs(settings))


def start_from_outline(image: NDArray[np.floating], outline: Outline, spacing: Sequence[float],
                       settings: FrontSettings, features: ImageFeatures | None = None) -> Front:
    """A front whose zero set is a committed outline (its stored φ), e.g. on the next slice when carried."""
    sp = np.asarray(spacing, dtype=float)
    far = 3.0 * float(np.max(sp)) * 10
    kwargs = _front_kwargs(settings)
    if settings.model == "window" and "window" not in settings.front_params:
        kwargs["window"] = window_for_mask(image, sp, outline.mask)
    values = outline.pixel_phi(far)

    def phi(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
        return ndimage.map_coordinates(values, (points_mm / sp).T, order=1, mode="nearest")

    # the stored φ is the committed front's signed distance: only the nodes near its zero set
    # need Newton closest points (for all nodes they would be most of a carry's time)
    return Front.from_function(phi, image.shape, image=image, spacing=sp, signed_distance=True,
                               exact_within=EXACT_WITHIN * float(np.max(sp)), features=features, **kwargs)


def start_from_stroke(image: NDArray[np.floating], points_px: NDArray[np.floating], radius_mm: float,
                      spacing: Sequence[float], settings: FrontSettings, features: ImageFeatures | None = None
                      ) -> Front:
    """A front whose inside is the area a brush stroke sweeps (a disk around every point of its polyline)."""
    sp = np.asarray(spacing, dtype=float)
    pts_mm = stroke_points_mm(points_px, sp, radius_mm)
    kwargs = _front_kwargs(settings)
    if settings.model == "window" and "window" not in settings.front_params:
        kwargs["window"] = window_for_mask(image, sp, stroke_mask(image.shape, points_px, radius_mm, sp))
    return Front.from_function(lambda mm: stroke_distance(mm, pts_mm, radius_mm), image.shape, image=image,
                               spacing=sp, signed_distance=False, features=features, **kwargs)


def window_for_mask(image: NDArray[np.floating], spacing: Sequence[float], mask: NDArray[np.bool_]
                    ) -> tuple[float, float]:
    """The intensity window the window model estimates from the pixels of ``mask``."""
    from engine.image.statistics import estimate_window_from_mask
    from engine.image.features import compute_features

    feats = compute_features(np.asarray(image, dtype=float), np.asarray(spacing, dtype=float))
    return estimate_window_from_mask(feats.smoothed, np.asarray(mask, dtype=bool))


def restore_front(image: NDArray[np.floating], snapshot: FrontSnapshot, spacing: Sequence[float],
                  settings: FrontSettings, features: ImageFeatures | None = None) -> Front:
    """A new front object in the state ``snapshot`` (started from the snapshot's inside, then restored)."""
    shape = np.shape(image)
    inside = snapshot.inside
    # the flood may have raised the detail for a thin structure: the snapshot's nodes are at its detail
    kwargs = dict(_front_kwargs(settings), detail=snapshot_detail(snapshot, settings.detail))
    if not inside.any() or inside.all():
        inside = np.zeros(shape, dtype=bool)
        inside[shape[0] // 2, shape[1] // 2] = True
    front = Front.from_mask(image, inside, spacing=spacing, features=features,
                            **dict(kwargs, window=snapshot.params.window) if settings.model == "window" else kwargs)
    front.restore(snapshot)
    return front


def snapshot_detail(snapshot: FrontSnapshot, default: int) -> int:
    """Lattice nodes per pixel of the front ``snapshot`` was taken of.

    A snapshot stored before the detail was kept does not say: the detail
    (of 1, 2 and 4, ``default`` first) whose lattice holds every node key
    and whose nodes at pixel centres agree best with the stored inside
    image is taken.
    """
    if snapshot.detail is not None:
        return int(snapshot.detail)
    keys, phi, inside = np.asarray(snapshot.indices), np.asarray(snapshot.phi), np.asarray(snapshot.inside)
    if keys.ndim != 2 or keys.shape[1] != inside.ndim or len(keys) == 0:
        return int(default)  # scattered node ids, or no band
    best, best_share = int(default), -1.0
    for detail in dict.fromkeys((int(default), 1, 2, 4)):
        if keys.min() < 0 or np.any(keys.max(axis=0) > (np.array(inside.shape) - 1) * detail):
            continue
        on_pixel = np.all(keys % detail == 0, axis=1)
        if not on_pixel.any():
            continue
        share = float(np.mean((phi[on_pixel] < 0) == inside[tuple((keys[on_pixel] // detail).T)]))
        if share > best_share:
            best, best_share = detail, share
    return best


def stroke_points_mm(points_px: NDArray[np.floating], spacing: NDArray[np.floating], radius_mm: float
                     ) -> NDArray[np.floating]:
    """A stroke's polyline in mm (checked by :func:`engine.validation.check_stroke`)."""
    pts, _ = check_stroke(points_px, radius_mm)
    return pts * np.asarray(spacing, dtype=float)


def stroke_mask(shape: tuple[int, int], points_px: NDArray[np.floating], radius_mm: float,
                spacing: Sequence[float]) -> NDArray[np.bool_]:
    """Pixels whose centre lies within ``radius_mm`` of a stroke's polyline.

    Only the pixels in the stroke's bounding box are measured.
    """
    sp = np.asarray(spacing, dtype=float)
    pts_mm = stroke_points_mm(points_px, sp, radius_mm)
    reach = np.ceil(radius_mm / sp).astype(int) + 1
    lo = np.maximum(np.floor(pts_mm.min(axis=0) / sp).astype(int) - reach, 0)
    hi = np.minimum(np.ceil(pts_mm.max(axis=0) / sp).astype(int) + reach + 1, np.array(shape))
    out = np.zeros(shape, dtype=bool)
    if np.any(hi <= lo):
        return out
    grid = np.stack(np.meshgrid(np.arange(lo[0], hi[0]), np.arange(lo[1], hi[1]), indexing="ij"), axis=-1)
    d = stroke_distance(grid.reshape(-1, 2) * sp, pts_mm, radius_mm)
    out[lo[0]:hi[0], lo[1]:hi[1]] = (d <= 0).reshape(grid.shape[:2])
    return out
