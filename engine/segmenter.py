"""The whole way from seeds to an outline as one object that advances a step at a time.

:class:`Segmenter` holds the stages of :func:`engine.segment.segment`:

``"growing"``
    the flood of :mod:`engine.image.growth` (region and window models), one pass
    a step: it takes the outline most of the way at pixel level;
``"coarse"``
    a front on the image averaged over f × f blocks: the block size asked
    for (``coarse``), or by default on an oversampled image the block it
    resolves (:func:`engine.image.resolution.resolved_block`), where the
    front settles in a fraction of the steps; lowered to what the structure
    found by the flood holds (:func:`engine.image.coarse_start.resolvable_factor`);
``"fine"``
    the front at full resolution, started from the flood's (or the coarse
    front's) outline, until its outline stops moving (:mod:`engine.front.convergence`);
``"done"``
    converged, vanished, or out of steps.

Each :meth:`Segmenter.step` returns after one flood pass, one front step or
one hand-over between stages (building the next stage's front), so a viewer
can draw between steps; read-outs (:meth:`~Segmenter.contours`,
:meth:`~Segmenter.mask`, areas) work at every stage and never change the
evolving state.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

from engine.front import FrontParams
from engine.front.constants import DEFAULT_LOCAL_RADIUS, RIM_PIXELS, RING_PIXELS
from engine.front.core import Front
from engine.front.finer_lattice import THIN_DETAIL, at_thin_detail, cannot_hold_distance
from engine.front.geometry import seed_disks
from engine.front.speeds import SETTING_NAMES
from engine.image.boxes import occupied_box
from engine.image.coarse_start import (COARSE_MAX_STEPS, COARSE_TOL_FACTOR, block_mean, coarse_seeds,
                                       resolvable_factor, upsample_phi)
from engine.image.features import ImageFeatures, check_features, compute_features
from engine.image.growth import GROWTH_MODELS, RegionGrowth
from engine.image.resolution import resolved_block
from engine.image.statistics import estimate_window
from engine.image.thickness import THIN_FLOOD_HALF_WIDTH, THIN_LENGTH, thin_length
from engine.validation import (
    check_coarse,
    check_detail,
    check_limits,
    check_names,
    check_nodes,
    check_spacing,
    check_steps,
    validate_seeds,
)

if TYPE_CHECKING:
    from engine.segment import Segmentation

#: Stages in order.
STAGES = ("growing", "coarse", "fine", "done")
#: The fine front starts this far (pixel spacings) beyond the outermost flooded pixel centres.
START_BEYOND = 0.1
#: The fine front's nodes within this many pixels of the flood's outline get Newton closest-point
#: distances; those farther keep the distance between pixel centres.
EXACT_WITHIN = 2.5
#: Default step budget (flood passes, coarse and fine steps together).
DEFAULT_MAX_STEPS = 20000
#: Keyword arguments of :func:`engine.segment.segment` besides :class:`engine.front.speeds.FrontParams`' fields.
LAYOUT_OPTIONS = ("finest", "coarsest", "node_set")


def fine_tolerance(asked: object, block: int) -> float:
    """The fine front's ``convergence_tol`` (pixel spacings) for the one ``asked`` for (None: the default).

    The asked tolerance is a fraction of the pixel the image resolves
    (:func:`engine.image.resolution.resolved_block`), ``block`` pixels a side.
    """
    tol = FrontParams().convergence_tol if asked is None else float(asked)  # type: ignore[arg-type]
    return int(block) * tol


class Segmenter:
    """Image and seeds to an outline, step by step (see module docstring).

    Built like :func:`engine.segment.segment` (same arguments, without
    ``progress``), plus ``barrier``: a mask of pixels no stage enters (other
    labels' locked outlines; the flood never takes them and every front
    holds them), and ``features``: the image's
    :func:`~engine.image.features.compute_features`, kept by a caller that
    starts several fronts on one image (used where they fit the settings'
    edge scale and contrast). Attributes: ``stage``, ``finished``, ``steps``,
    ``time``, ``converged``, ``vanished``.
    """

    def __init__(self, image: ArrayLike, seeds: Sequence[Sequence[float]], *, spacing: ArrayLike | None = None,
                 model: str = "region", max_steps: int | None = None, detail: int = 1, coarse: int | None = None,
                 nodes: str = "lattice", barrier: ArrayLike | None = None, features: ImageFeatures | None = None,
                 **params: object) -> None:
        t0 = time.perf_counter()
        check_names(params, SETTING_NAMES | set(LAYOUT_OPTIONS), "segment()")
        if max_steps is not None:
            check_steps(max_steps, name="max_steps")
        img = np.asarray(image, dtype=float)
        if img.ndim not in (2, 3) or img.size == 0:
            raise ValueError(f"image must be a non-empty 2-D or 3-D array, got shape {img.shape}")
        self._seeds = validate_seeds(seeds, img.shape)
        check_nodes(nodes)
        check_detail(detail)
        check_coarse(coarse, nodes=nodes)
        sp = check_spacing(spacing, img.ndim)
        check_limits(img.shape, sp, params)
        settings = FrontParams(model=model, **params)  # validates every setting once, here
        if features is not None:
            check_features(features, img, sp, sigma_mm=features.sigma_mm, contrast=features.contrast_given)
        self._features = features
        self._image, self._spacing, self._model, self._detail, self._nodes = img, sp, model, detail, nodes
        self._barrier = None
        if barrier is not None:
            self._barrier = np.asarray(barrier, dtype=bool)
            if self._barrier.shape != img.shape:
                raise ValueError(f"barrier: expected a mask of the image's shape {img.shape}, "
                                 f"got {self._barrier.shape}")
            if not self._barrier.any():
                self._barrier = None
        self._budget = DEFAULT_MAX_STEPS if max_steps is None else int(max_steps)
        self._params = dict(params)
        if model == "window" and settings.window is None:
            kept = self._kept_features(settings)
            smoothed = (kept if kept is not None else compute_features(img, sp, sigma_mm=settings.edge_sigma)).smoothed
            self._params["window"] = estimate_window(smoothed, self._seeds)
        self._requested = None if coarse is None else int(coarse)
        self._asked_detail = detail  # the detail asked for, when the flood found a thin part and raised it
        self._raised_at: int | None = None  # the step at which a front that kept flattening was rebuilt finer
        self._factor = 1
        # the pixel the image resolves, in pixels (engine.image.resolution): the fine front's tolerance is a
        # fraction of it, since finer motion of the outline follows interpolated values, not detail
        self._resolved = resolved_block(img, self._seeds[:, :-1]) if nodes == "lattice" else 1
        self._growth: RegionGrowth | None = None
        self._coarse: Front | None = None
        self._fine: Front | None = None
        self._passes = 0
        self._extra_steps = 0  # coarse steps carried into the fine front's count
        self._timings = {"growth_s": 0.0, "coarse_s": 0.0, "setup_s": 0.0, "evolve_s": 0.0}
        self._kept_parts = False
        if model in GROWTH_MODELS:
            radius = settings.local_radius if settings.local_radius is not None else DEFAULT_LOCAL_RADIUS
            coarsest = float(np.max(sp))
            self._growth = RegionGrowth(img, self._seeds, sp, model=model, window=self._params.get("window"),
                                        window_sigma_mm=settings.edge_sigma, local_radius_mm=radius,
                                        rim_mm=RIM_PIXELS * coarsest, ring_mm=RING_PIXELS * coarsest,
                                        barrier=self._barrier, resolved=self._resolved)
            self.stage = "growing"
        else:
            self.stage = "fine"
            self._factor = 1 if self._requested is None else self._requested
            if self._factor > 1:
                self.stage = "coarse"
        self._timings["setup_s"] += time.perf_counter() - t0

    # ------------------------------------------------------------------ state
    @property
    def finished(self) -> bool:
        """Converged, vanished or out of steps."""
        return self.stage == "done"

    @property
    def steps(self) -> int:
        """Flood passes plus front steps taken so far."""
        front = self._fine if self._fine is not None else self._coarse
        return self._passes + (front.steps if front is not None else 0)

    @property
    def passes(self) -> int:
        """Flood passes taken so far."""
        return self._passes

    @property
    def time(self) -> float:
        """Evolution time reached by the fronts (the flood takes none)."""
        front = self._fine if self._fine is not None else self._coarse
        return float(front.time) if front is not None else 0.0

    @property
    def converged(self) -> bool:
        """True once the full-resolution outline stopped moving (:mod:`engine.front.convergence`)."""
        return self._fine is not None and self.stage == "done" and bool(self._fine.converged)

    @property
    def vanished(self) -> bool:
        """True once the outline shrank to nothing or filled the image."""
        front = self._fine if self._fine is not None else self._coarse
        return front is not None and front.vanished

    @property
    def block_size(self) -> int:
        """Block size of the coarse stage in use (1: none)."""
        return self._factor

    # ------------------------------------------------------------------ stepping
    def step(self, n: int = 1) -> None:
        """Advance the current stage by ``n`` steps (flood passes or front steps); a hand-over counts as one."""
        if n < 0:
            raise ValueError(f"n must be >= 0, got {n}")
        self._resume()
        for _ in range(int(n)):
            if self.finished:
                return
            self._advance()

    def _resume(self) -> None:
        """Back to the fine stage when the finished front was changed (an edit, pins) and has steps left."""
        front = self._fine
        if (self.stage == "done" and front is not None and not front.converged and not front.vanished
                and self.steps < self._budget):
            self.stage = "fine"
            self._kept_parts = False

    def run(self, *, cancel: Callable[[], bool] | None = None,
            progress: Callable[[int, float], None] | None = None) -> None:
        """Step until finished, or until ``cancel()`` returns True; ``progress(steps, time)`` after every step."""
        self._resume()
        while not self.finished:
            if cancel is not None and cancel():
                return
            self._advance()
            if progress is not None:
                progress(self.steps, self.time)

    def _advance(self) -> None:
        t0 = time.perf_counter()
        if self.stage == "growing":
            if self._growth is not None and not self._growth.finished and self.steps < self._budget:
                self._growth.step()
                self._passes += 1
                self._timings["growth_s"] += time.perf_counter() - t0
            else:
                self._leave_growth()
                self._timings["setup_s"] += time.perf_counter() - t0
        elif self.stage == "coarse":
            front = self._coarse
            if front is None:
                self._start_coarse()
                self._timings["setup_s"] += time.perf_counter() - t0
            elif (front.converged or front.vanished or self.steps >= self._budget
                  or front.steps >= COARSE_MAX_STEPS):
                self._leave_coarse()
                self._timings["setup_s"] += time.perf_counter() - t0
            else:
                front.step(1)
                self._timings["coarse_s"] += time.perf_counter() - t0
        elif self.stage == "fine":
            front = self._fine
            if front is None:
                self._start_fine(None)
                self._timings["setup_s"] += time.perf_counter() - t0
                return
            if front.converged or front.vanished or self.steps >= self._budget:
                if (not self._kept_parts and not front.vanished and front.keep_parts(self._seeds[:, :-1])
                        and self.steps < self._budget):
                    self._kept_parts = True  # parts holding no seed went: settle what is left
                else:
                    self.stage = "done"
                self._timings["evolve_s"] += time.perf_counter() - t0
                return
            front.step(1)
            if cannot_hold_distance(front):
                # one node per pixel cannot hold a distance next to this outline (engine.front.finer_lattice)
                self._fine = at_thin_detail(front)
                self._detail = THIN_DETAIL
                self._raised_at = front.steps
            self._timings["evolve_s"] += time.perf_counter() - t0

    # ------------------------------------------------------------------ hand-overs
    def _front_params(self) -> dict:
        return dict(self._params)

    def _kept_features(self, settings: FrontParams) -> ImageFeatures | None:
        """The image features given to the segmenter, when they fit ``settings``' edge scale and contrast."""
        f = self._features
        if f is None or f.sigma_mm != settings.edge_sigma or f.contrast_given != settings.edge_contrast:
            return None
        return f

    def _leave_growth(self) -> None:
        """The flood is done: choose the block size and the detail, and start the next stage."""
        wanted = self._resolved if self._requested is None else self._requested
        if wanted > 1 and self._nodes == "lattice":
            self._factor = resolvable_factor(self._growth.inside, self._spacing, wanted)
        if (self._nodes == "lattice" and self._detail < THIN_DETAIL and not self._growth.unbounded
                and thin_length(self._growth.inside, self._spacing, half_width=THIN_FLOOD_HALF_WIDTH) >= THIN_LENGTH):
            self._asked_detail, self._detail = self._detail, THIN_DETAIL
        self.stage = "coarse" if self._factor > 1 else "fine"
        if self.stage == "coarse":
            self._start_coarse()
        else:
            self._start_fine(None)

    def _grown_phi(self) -> NDArray[np.floating] | None:
        """Signed distance (mm) to the outline of the flooded pixels (pixel edges), or None without a flood."""
        if self._growth is None or self._growth.unbounded:
            return None
        inside = self._growth.inside
        if inside.all():
            return None
        # the outline just beyond the outermost flooded pixel centres (which lie at least a
        # quarter pixel inside the boundary): the front finishes from the inside
        step = float(np.min(self._spacing))
        beyond = START_BEYOND * step
        outside = ndimage.distance_transform_edt(~inside, sampling=self._spacing)
        depth = ndimage.distance_transform_edt(inside, sampling=self._spacing)
        # depth >= one (finest) pixel step: every flooded pixel centre is at least `beyond` inside
        return np.where(inside, -(depth - step + beyond), outside - beyond)

    def _grown_start(self) -> Callable | None:
        """φ (mm) at points (mm) for the fine front from the flood: a signed distance, or None.

        The distance to the flooded pixels (as :meth:`_grown_phi`, on the
        flood's bounding box widened by the band) read by cubic B-spline:
        |∇φ| ≈ 1 away from its zero set, so the band takes it as it is
        beyond EXACT_WITHIN pixels and only the nodes nearer get Newton
        closest points (for all of them they would be most of the
        hand-over's time). It is not smoothed (that would lose a strip two
        pixels wide), and the nodes near the outline do need Newton (a small
        disk rests too large on the pixel-centre distance alone).
        """
        if self._growth is None or self._growth.unbounded or self._growth.inside.all():
            return None
        inside = self._growth.inside
        band = FrontParams(model=self._model, **self._params).band_width * float(np.max(self._spacing))
        pad = np.ceil((band + 4.0 * float(np.max(self._spacing))) / self._spacing).astype(int) + 3
        box = occupied_box(inside, pad)
        lo = np.array([s.start for s in box])
        hi = np.array([s.stop for s in box])
        part = inside[box]
        step = float(np.min(self._spacing))
        beyond = START_BEYOND * step
        outside = ndimage.distance_transform_edt(~part, sampling=self._spacing)
        depth = ndimage.distance_transform_edt(part, sampling=self._spacing)
        # depth >= one (finest) pixel step: every flooded pixel centre is at least `beyond` inside
        phi = np.where(part, -(depth - step + beyond), outside - beyond)
        coeffs = ndimage.spline_filter(phi, order=3, mode="nearest")
        sp = self._spacing
        far = 2.0 * band

        def values(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
            px = np.asarray(points_mm, dtype=float) / sp - lo
            out = ndimage.map_coordinates(coeffs, px.T, order=3, mode="nearest", prefilter=False)
            off = np.any((px < 0) | (px > hi - lo - 1), axis=1)
            out[off] = far  # beyond the flood's box: far outside
            return out

        return values

    def _start_coarse(self) -> None:
        f = self._factor
        small = block_mean(self._image, f)
        params = self._front_params()
        tol = params.get("convergence_tol", FrontParams().convergence_tol)
        params["convergence_tol"] = COARSE_TOL_FACTOR * float(tol)  # type: ignore[arg-type]
        phi = self._grown_phi()
        if phi is None:
            self._coarse = Front.from_seeds(small, coarse_seeds(self._seeds, f), spacing=self._spacing * f,
                                            model=self._model, detail=1, **params)
        else:
            self._coarse = Front.from_pixel_phi(small, block_mean(phi, f), spacing=self._spacing * f,
                                                model=self._model, detail=1, **params)
        if self._barrier is not None:
            self._coarse.set_barrier(block_mean(self._barrier.astype(float), f) >= 0.5)
        # the block mean's pixel is f pixels a side: what the image resolves beyond it
        self._coarse.set_resolved_block(max(1, self._resolved // f))
        self.stage = "coarse"

    def _leave_coarse(self) -> None:
        coarse = self._coarse
        if coarse.vanished or coarse.mask().all():
            self._factor = 1  # nothing to refine: start again at full resolution
            self._extra_steps = coarse.steps
            self._start_fine(None)
            return
        self._extra_steps = coarse.steps
        self._start_fine(upsample_phi(coarse.pixel_phi(), self._factor, self._spacing))

    def _fine_tolerance(self, asked: object) -> float:
        """The fine front's ``convergence_tol`` (pixel spacings) for the one asked for: times the resolved block."""
        return fine_tolerance(asked, self._resolved)

    def _start_fine(self, start: Callable | None) -> None:
        """The full-resolution front: from the coarse φ (``start``), the flood's outline, or the seeds."""
        layout = {} if self._nodes == "lattice" else {"nodes": self._nodes}
        params = self._front_params()
        params["convergence_tol"] = self._fine_tolerance(params.get("convergence_tol"))
        features = self._kept_features(FrontParams(model=self._model, **params))
        coarse_time = self._coarse.time if self._coarse is not None else 0.0
        if start is not None:
            front = Front.from_function(start, self._image.shape, image=self._image, spacing=self._spacing,
                                        model=self._model, detail=self._detail, signed_distance=True,
                                        window_from=seed_disks(self._image.shape, self._seeds), features=features,
                                        **params)
        else:
            grown = self._grown_start() if self._coarse is None else None
            if grown is not None:
                front = Front.from_function(grown, self._image.shape, image=self._image, spacing=self._spacing,
                                            model=self._model, detail=self._detail, signed_distance=True,
                                            exact_within=EXACT_WITHIN * float(np.max(self._spacing)),
                                            inside=self._growth.inside, features=features, **layout, **params)
            else:
                front = Front.from_seeds(self._image, self._seeds, spacing=self._spacing, model=self._model,
                                         detail=self._detail, features=features, **layout, **params)
        front.time = coarse_time
        front.steps = self._extra_steps
        if self._barrier is not None:
            front.set_barrier(self._barrier)
        front.set_resolved_block(self._resolved)
        self._fine = front
        self.stage = "fine"

    # ------------------------------------------------------------------ control
    def front(self) -> Front:
        """The full-resolution front, handing over from the flood or the coarse stage now if needed."""
        if self._fine is None:
            if self.stage == "growing":
                self._growth.finished = True
                self._requested = 1  # straight to full resolution
                self._leave_growth()
            elif self.stage == "coarse":
                if self._coarse is None:
                    self._start_fine(None)
                else:
                    self._leave_coarse()
            else:
                self._start_fine(None)
        return self._fine

    def set_params(self, **changes: object) -> None:
        """Change front settings; they reach the running stage at its next step."""
        FrontParams(model=self._model, **dict(self._params, **changes))  # validate
        self._params.update(changes)
        if self._growth is not None and "window" in changes and changes["window"] is not None:
            self._growth.window = tuple(float(v) for v in changes["window"])  # type: ignore[union-attr]
        if self._coarse is not None and self.stage == "coarse":
            coarse_changes = dict(changes)
            if "convergence_tol" in coarse_changes:
                coarse_changes["convergence_tol"] = COARSE_TOL_FACTOR * float(coarse_changes["convergence_tol"])
            self._coarse.set_params(**coarse_changes)
        if self._fine is not None:
            fine_changes = dict(changes)
            if "convergence_tol" in fine_changes:
                fine_changes["convergence_tol"] = self._fine_tolerance(fine_changes["convergence_tol"])
            self._fine.set_params(**fine_changes)
            if self.stage == "done" and not self._fine.vanished:
                self.stage = "fine"  # settle again under the new settings

    # ------------------------------------------------------------------ read-outs
    def contours(self, *, refine: bool = True) -> list[NDArray[np.floating]]:
        """Outlines (2-D) at full-resolution pixel coordinates ``(row, col)``, at any stage (3-D: empty).

        ``refine``: project the fronts' vertices onto their zero sets (see
        :meth:`engine.front.Front.contours`; a live view leaves it off).
        """
        if self._image.ndim != 2:
            return []
        if self._fine is not None:
            return self._fine.contours(refine=refine)
        if self._coarse is not None:
            f = self._factor
            return [c * f + 0.5 * (f - 1) for c in self._coarse.contours(refine=refine)]
        from skimage.measure import find_contours

        inside = self._growth.inside if self._growth is not None else seed_disks(self._image.shape, self._seeds)
        rows, cols = np.flatnonzero(inside.any(axis=1)), np.flatnonzero(inside.any(axis=0))
        if len(rows) == 0:
            return []
        # the pixels' box (from the projections: a list of every pixel took a third of a frame's time)
        lo, hi = np.array([rows[0], cols[0]]), np.array([rows[-1], cols[-1]]) + 1
        padded = np.pad(inside[lo[0]:hi[0], lo[1]:hi[1]], 1).astype(float)
        return [c - 1.0 + lo for c in find_contours(0.5 - padded, 0.0, positive_orientation="low")]

    def mask(self) -> NDArray[np.bool_]:
        """Pixels inside the outline at full resolution, at any stage."""
        if self._fine is not None:
            return self._fine.mask()
        if self._coarse is not None:
            f = self._factor
            big = self._coarse.mask()
            for axis in range(big.ndim):
                big = np.repeat(big, f, axis=axis)
            return big[tuple(slice(0, n) for n in self._image.shape)].copy()
        if self._growth is not None:
            return self._growth.inside.copy()
        return seed_disks(self._image.shape, self._seeds)

    def area_mm2(self) -> float:
        """Area inside the outline (2-D, mm²; 3-D: volume in mm³)."""
        if self._fine is not None:
            return self._fine.area_mm2()
        if self._image.ndim == 2:
            from engine.analysis.contours import signed_area

            return float(sum(signed_area(c * self._spacing) for c in self.contours()))
        return float(self.mask().sum() * np.prod(self._spacing))

    def perimeter_mm(self) -> float:
        """Length of the outlines (2-D, mm)."""
        from engine.analysis.contours import polyline_length

        return float(sum(polyline_length(c * self._spacing) for c in self.contours()))

    # ------------------------------------------------------------------ result
    def result(self) -> "Segmentation":
        """What :func:`engine.segment.segment` returns (the full-resolution front is made if not there yet)."""
        from engine.segment import Segmentation

        front = self.front()
        t0 = time.perf_counter()
        contours = front.contours() if front.ndim == 2 else []
        area = front.area_mm2()
        mask = front.mask()
        output = time.perf_counter() - t0
        timings = dict(self._timings)
        timings.update({"output_s": output, "rebuilds": front.timings["rebuilds"], "nodes": front.node_count,
                        "coarse_steps": self._extra_steps, "growth_passes": self._passes})
        timings["total_s"] = sum(v for k, v in timings.items() if k in ("growth_s", "coarse_s", "setup_s",
                                                                          "evolve_s", "output_s"))
        used = dict(front.params.as_dict(), coarse=self._factor, smoothness_scale=round(front.smoothness_scale, 4),
                    detail=front.detail)
        if self._asked_detail != front.detail and self._nodes == "lattice":
            used["detail_requested"] = self._asked_detail
        if self._raised_at is not None:
            used["detail_raised_at_step"] = self._raised_at
        if self._requested is not None and self._factor != self._requested:
            used["coarse_requested"] = self._requested
        if self._resolved > 1:
            # the tolerance asked for, and the block whose pixel it is a fraction of
            used["convergence_tol"] = float(self._params.get("convergence_tol", FrontParams().convergence_tol))
            used["resolved_block"] = self._resolved
        if self._growth is not None:
            used["growth"] = self._growth.record
        if self._nodes == "scattered":
            used["nodes"] = self._nodes
        return Segmentation(mask, contours, self.steps, self.converged, used, timings, self.time, area,
                            vanished=front.vanished)
