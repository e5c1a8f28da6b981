"""The Front: a level-set function φ on a narrow band of nodes, evolved with RBF-FD — the façade.

State: the band's node keys (lattice indices or scattered node ids) and φ
(signed distance in mm, negative inside) at them, the time, a pixel
inside/outside image (valid everywhere, exact wherever the band does not
reach), running sums for region statistics, pins and barriers, and the
settings, all in one frozen :class:`~engine.front.state.FrontState` that
every step and edit replaces whole; :meth:`Front.snapshot` returns it as it
is. The class is assembled from parts
by job (:mod:`engine.front.band`, :mod:`~engine.front.evolution`,
:mod:`~engine.front.layer_speeds`, :mod:`~engine.front.statistics`,
:mod:`~engine.front.edits`, :mod:`~engine.front.readouts`); whatever differs
between lattice and scattered nodes is asked of its ``layout``
(:mod:`engine.nodes.layout`). The method is described in
:mod:`engine.front.evolution`.

Threads: one thread (a worker) owns the stepping and the edits; any other
thread may call the read-outs (:meth:`Front.contours`, :meth:`Front.mask`,
:meth:`Front.pixel_phi`, :meth:`Front.area_mm2`, :meth:`Front.perimeter_mm`,
:meth:`Front.curvature_at`, :meth:`Front.phi_at`, :meth:`Front.snapshot`)
at any time. Every public method holds the front's lock, and
:meth:`Front.step` takes it once per step, so a reader sees whole steps only
and waits at most one step. Read-outs never change the state (φ, band, inside
image, sums, time, steps, pins, barrier); they may fill caches derived from
it, such as the interpolant's coefficients, which depend on φ alone. Plain
attributes (``steps``, ``time``, ``converged``) may be read without the lock;
a consistent set of them comes from :meth:`Front.snapshot`, a state no later
change can touch.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

from engine.front.band import BandBuilding
from engine.front.convergence import OutlineMotion
from engine.front.edits import Edits
from engine.front.evolution import Evolution
from engine.front.geometry import seed_function
from engine.front.layer_speeds import LayerSpeeds
from engine.front.readouts import ReadOuts
from engine.front.speeds import SETTING_NAMES, FrontParams
from engine.front.state import FrontState, StateAccess, _locked
from engine.front.statistics import RegionStatistics
from engine.image.features import ImageFeatures, check_features, compute_features
from engine.image.statistics import estimate_window
from engine.nodes.band_stencils import BandStencil
from engine.nodes.lattice import LatticeLookup
from engine.nodes.layout import Band, NodeLayout
from engine.nodes.layout_options import check_layout_options, make_layout
from engine.nodes.node_set import ScatteredNodeSet
from engine.nodes.scattered_layout import node_options
from engine.validation import check_detail, check_limits, check_names, check_spacing, validate_seeds


class Front(StateAccess, BandBuilding, RegionStatistics, LayerSpeeds, Evolution, Edits, ReadOuts):
    """A level-set front on one 2-D slice or one 3-D volume (see module docstring).

    Build with :meth:`from_seeds`, :meth:`from_mask` or :meth:`from_function`.
    Public coordinates are pixels ``(row, col)`` (``(slice, row, col)`` in
    3-D); φ and distances are in mm.
    """

    def __init__(self, features: ImageFeatures, params: FrontParams, layout: NodeLayout) -> None:
        self.features = features
        self.layout = layout  # where the nodes sit (engine.nodes.layout): lattice or scattered
        # the whole state, replaced (never changed) by every step and edit; the rest are caches
        self._state = FrontState(np.zeros((0, layout.key_ndim), dtype=np.int64), np.zeros(0), np.zeros(0),
                                 None, (0.0, 0.0, 0.0, 0.0), 0.0, 0, False, (), params, None, None,
                                 noise=0.0, detail=layout.detail)  # type: ignore[arg-type]
        self.timings: dict = {"step": 0.0, "rebuild": 0.0, "rebuilds": 0}
        self._band: Band = None  # type: ignore[assignment]  # derived from the state's indices and layer
        self._outline: OutlineMotion | None = None
        self._coeffs: NDArray[np.floating] | None = None
        self._contours_kept: tuple | None = None  # (φ, band, refined contours, closed) of _contour_set
        self._node_sets: dict = {}  # node sets per (stencil size, degree, phs)
        self._curvature_gain = 1.0  # gain of the curvature's extension along normals (for the time step)
        self._last_kappa_max = 0.0
        self._applied_scale: float | None = None  # the smallest smoothness scale of the last step
        #: (|φ| at the last rebuild, the safe distance, the nodes that were beyond it) for _needs_rebuild
        self._far_nodes: tuple[NDArray[np.floating], float, NDArray[np.int64]] | None = None
        # held by every method that reads or changes the state (see the module docstring)
        self._lock = threading.RLock()

    def __repr__(self) -> str:
        size = "×".join(str(s) for s in self.shape)
        layout = self.layout.name + (f" detail {self.detail}" if self.detail != 1 else "")
        nodes = len(self._phi)
        status = "vanished" if self.vanished else "converged" if self.converged else "moving"
        return (f"<Front {self.ndim}-D {size}, {self.params.model}, {layout}, {nodes} nodes, "
                f"step {self.steps}, t={self.time:.4g}, {status}>")

    @classmethod
    def _create(cls, image: ArrayLike | None, shape: Sequence[int] | None, spacing: ArrayLike | None,
                model: str, detail: int, params: dict, layout: dict | None = None, *,
                where: str = "Front", features: ImageFeatures | None = None) -> "Front":
        check_names(params, SETTING_NAMES, where)
        if image is None:
            if shape is None:
                raise ValueError("shape is required when no image is given")
            img = np.zeros(tuple(int(s) for s in shape))
        else:
            img = np.asarray(image, dtype=float)
        if img.ndim not in (2, 3):
            raise ValueError(f"image must be 2-D or 3-D, got shape {img.shape}")
        if min(img.shape) < 4 and img.ndim == 2:
            raise ValueError(f"image is too small: shape {img.shape}")
        if not np.all(np.isfinite(img)):
            raise ValueError("image contains NaN or infinite values")
        sp = check_spacing(spacing, img.ndim)
        check_limits(img.shape, sp, params)
        check_detail(detail)
        options = dict(layout or {})
        check_layout_options(options, detail)
        fp = FrontParams(model=model, **params)
        if features is None:
            feats = compute_features(img, sp, sigma_mm=fp.edge_sigma, contrast=fp.edge_contrast)
        else:
            feats = check_features(features, img, sp, sigma_mm=fp.edge_sigma, contrast=fp.edge_contrast)
        front = cls(feats, fp, make_layout(feats, fp, detail, options))
        front._node_sets[node_options(fp, img.ndim)] = front.node_set  # the set new stencils start from
        return front

    @classmethod
    def from_function(cls, phi: Callable[[NDArray[np.floating]], ArrayLike], shape: Sequence[int], *,
                      spacing: ArrayLike | None = None, model: str = "curvature", detail: int = 1,
                      image: ArrayLike | None = None, signed_distance: bool = False,
                      exact_within: float | None = None, inside: ArrayLike | None = None,
                      window_from: ArrayLike | None = None, nodes: str = "lattice", finest: float | None = None,
                      coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                      features: ImageFeatures | None = None, **params: object) -> "Front":
        """Front whose initial zero set is that of ``phi`` (callable on (N, d) points in mm).

        With ``signed_distance`` the values of ``phi`` within the band are
        taken as they are (they must be a smooth signed distance in mm there);
        otherwise the band is reinitialised by Newton closest points. With the
        ``window`` model and no ``window`` given, the window is estimated from
        the pixels of the boolean ``window_from`` (default: the initial inside).
        With ``exact_within`` (mm; with ``signed_distance``) only the nodes
        whose value lies farther than that from zero are taken as they are;
        those nearer are reinitialised by Newton closest points (an
        approximate distance, such as one between pixel centres, then gives
        an exact zero set at a fraction of the cost). ``inside`` (a boolean
        mask of the image's shape), when the caller knows which pixel centres
        lie inside, spares evaluating ``phi`` at every pixel: it is read only
        at the pixels next to the mask's boundary (and must agree in sign
        there). ``features``: the image's
        :func:`~engine.image.features.compute_features` at the front's
        ``edge_sigma`` and ``edge_contrast``, when the caller keeps them for
        several fronts on one image (every constructor takes it).

        Every constructor takes ``nodes``: ``"lattice"`` (default; ``detail``
        lattice nodes per pixel) or ``"scattered"`` (2-D or 3-D, detail 1; in 3-D the front must not
        cross the volume's border): nodes of an
        edge-adaptive :class:`~engine.nodes.node_set.ScatteredNodeSet`, ``finest``
        mm apart near strong edges and ``coarsest`` mm in flat areas (default
        half the smallest pixel spacing and the largest pixel spacing), or
        the ``node_set`` given (to share one set between fronts on the same
        image).
        """
        if image is not None and tuple(np.shape(image)) != tuple(shape):
            raise ValueError(f"shape {tuple(shape)} does not match image shape {np.shape(image)}")
        estimate = model == "window" and params.get("window") is None
        if estimate:
            if image is None:
                raise ValueError("the window model needs an image")
            params = dict(params, window=(0.0, 1.0))
        front = cls._create(image, shape, spacing, model, detail, params,
                            {"nodes": nodes, "finest": finest, "coarsest": coarsest, "node_set": node_set},
                            where="Front.from_function()", features=features)

        def oracle(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
            values = np.asarray(phi(points_mm), dtype=float).reshape(-1)
            if values.shape != (len(points_mm),) or not np.all(np.isfinite(values)):
                raise ValueError("phi must return one finite value per point")
            return values

        if exact_within is not None and not (np.isfinite(exact_within) and exact_within >= 0):
            raise ValueError(f"exact_within must be >= 0 mm, got {exact_within!r}")
        front._initialise(oracle, signed_distance=signed_distance, exact_within=exact_within, inside=inside,
                          window_from=window_from if estimate else None,
                          estimate_window=estimate)
        return front

    @classmethod
    def from_seeds(cls, image: ArrayLike, seeds: Sequence[Sequence[float]], *, spacing: ArrayLike | None = None,
                   model: str = "region", detail: int = 1, nodes: str = "lattice", finest: float | None = None,
                   coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                   features: ImageFeatures | None = None, **params: object) -> "Front":
        """Front starting from seed disks ``(row, col, radius_px)`` (3-D: ``(slice, row, col, r)``).

        ``nodes``, ``finest``, ``coarsest``, ``node_set``, ``features``: see :meth:`from_function`.
        """
        img = np.asarray(image, dtype=float)
        seeds_arr = validate_seeds(seeds, img.shape)
        estimate = model == "window" and params.get("window") is None
        if estimate:  # placeholder until the smoothed image exists
            params = dict(params, window=(0.0, 1.0))
        front = cls._create(img, None, spacing, model, detail, params,
                            {"nodes": nodes, "finest": finest, "coarsest": coarsest, "node_set": node_set},
                            where="Front.from_seeds()", features=features)
        if estimate:
            front._swap(params=front.params.updated(window=estimate_window(front.features.smoothed, seeds_arr)))
        front._initialise(seed_function(seeds_arr, front.features.spacing))
        return front

    @classmethod
    def from_mask(cls, image: ArrayLike, mask: ArrayLike, *, spacing: ArrayLike | None = None,
                  model: str = "region", detail: int = 1, nodes: str = "lattice", finest: float | None = None,
                  coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                  features: ImageFeatures | None = None, **params: object) -> "Front":
        """Front whose initial inside is the boolean ``mask`` (outline through pixel edges).

        ``nodes``, ``finest``, ``coarsest``, ``node_set``, ``features``: see :meth:`from_function`.
        """
        img = np.asarray(image, dtype=float)
        m = np.asarray(mask, dtype=bool)
        if m.shape != img.shape:
            raise ValueError(f"mask shape {m.shape} does not match image shape {img.shape}")
        if not m.any():
            raise ValueError("mask is empty: nothing to start a front from")
        sp = check_spacing(spacing, img.ndim)
        outside = ndimage.distance_transform_edt(~m, sampling=sp)
        inside = ndimage.distance_transform_edt(m, sampling=sp)
        half = 0.5 * float(np.min(sp))
        pixel_phi = np.where(m, -(inside - half), outside - half)
        return cls.from_pixel_phi(img, pixel_phi, spacing=spacing, model=model, detail=detail, nodes=nodes,
                                  finest=finest, coarsest=coarsest, node_set=node_set, features=features, **params)

    @classmethod
    def from_pixel_phi(cls, image: ArrayLike, pixel_phi: ArrayLike, *, spacing: ArrayLike | None = None,
                       model: str = "region", detail: int = 1, window_from: ArrayLike | None = None,
                       nodes: str = "lattice", finest: float | None = None, coarsest: float | None = None,
                       node_set: ScatteredNodeSet | None = None, features: ImageFeatures | None = None,
                       **params: object) -> "Front":
        """Front whose initial zero set is that of ``pixel_phi`` (mm, negative inside), one value per pixel.

        Between pixel centres the values are interpolated linearly; near the
        zero set they should be close to a signed distance. With the
        ``window`` model and no ``window`` given, the window is estimated from
        the pixels of the boolean ``window_from`` (default: the initial inside).
        ``nodes``, ``finest``, ``coarsest``, ``node_set``, ``features``: see :meth:`from_function`.
        """
        img = np.asarray(image, dtype=float)
        values = np.asarray(pixel_phi, dtype=float)
        if values.shape != img.shape:
            raise ValueError(f"pixel_phi shape {values.shape} does not match image shape {img.shape}")
        if not np.all(np.isfinite(values)):
            raise ValueError("pixel_phi contains NaN or infinite values")
        if not np.any(values < 0):
            raise ValueError("pixel_phi has no negative value: nothing to start a front from")
        estimate = model == "window" and params.get("window") is None
        if estimate:
            params = dict(params, window=(0.0, 1.0))
        front = cls._create(img, None, spacing, model, detail, params,
                            {"nodes": nodes, "finest": finest, "coarsest": coarsest, "node_set": node_set},
                            where="Front.from_pixel_phi()", features=features)
        sp = front.features.spacing

        def oracle(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
            return ndimage.map_coordinates(values, (points_mm / sp).T, order=1, mode="nearest")

        front._initialise(oracle, window_from=window_from, estimate_window=estimate)
        return front

    @property
    def ndim(self) -> int:
        return self.features.image.ndim

    @property
    def shape(self) -> tuple[int, ...]:
        return self.features.image.shape

    @property
    def nodes(self) -> str:
        """Node layout: ``"lattice"`` or ``"scattered"``."""
        return self.layout.name

    @property
    def detail(self) -> int:
        """Lattice nodes per pixel (1 on scattered nodes)."""
        return self.layout.detail

    @property
    def step_mm(self) -> NDArray[np.floating]:
        """Nominal node step per axis (mm): the lattice step, or the node set's reference spacing."""
        return self.layout.step_mm

    @property
    def stencil(self) -> BandStencil | None:
        """The lattice band stencil (None on scattered nodes: each node has its own weights)."""
        return self.layout.stencil

    @property
    def node_set(self) -> ScatteredNodeSet | None:
        """The image's scattered node set (None on a lattice)."""
        return self.layout.node_set

    @property
    def h(self) -> float:
        """Smallest node spacing (mm): the lattice step, or the finest local spacing of the active scattered nodes."""
        return self.layout.smallest_spacing(self._band)

    @property
    def band_half_width(self) -> float:
        """Band half-width in mm: ``band_width`` steps of the coarsest axis (stencils reach furthest there)."""
        return self.params.band_width * float(np.max(self.step_mm))

    @property
    def node_count(self) -> int:
        return len(self._phi)

    @property
    def _reach_mm(self) -> float:
        """Stencil radius in mm (largest offset times the largest step; scattered: largest over the active nodes)."""
        return self.layout.reach_mm(self._band)

    def _crossings(self, keys: NDArray[np.int64], phi: NDArray[np.floating],
                   lookup: LatticeLookup | None) -> NDArray[np.floating]:
        """Zero crossings (mm) of φ along lattice edges or the scattered nodes' neighbour graph."""
        return self.layout.crossings(keys, phi, self._band, lookup)

    @_locked
    def set_params(self, **changes: object) -> None:
        """Change settings between steps without restarting (band settings trigger a rebuild)."""
        new = self.params.updated(**changes)
        rebuild = any(getattr(new, k) != getattr(self.params, k) for k in ("band_width", "stencil_size", "degree", "phs"))
        features = any(getattr(new, k) != getattr(self.params, k) for k in ("edge_sigma", "edge_contrast"))
        self._swap(params=new)
        if features:
            self.features = compute_features(self.features.image, self.features.spacing,
                                             sigma_mm=new.edge_sigma, contrast=new.edge_contrast)
            self._reset_sums()
        if rebuild:
            self._new_stencils(new)
        if rebuild or features:
            # new stencils do not fit the old band: reinitialise instead of measuring drift with them
            self.rebuild(reinitialise=True if rebuild else None)
        else:
            self._update_layer_statistics()
        self._swap(converged=False)
        self._restart_convergence()

    @property
    def resolved_block(self) -> int:
        """Pixels a side of the block the image resolves (1: every pixel; see :meth:`set_resolved_block`)."""
        return int(self._state.resolved_block)

    @_locked
    def set_resolved_block(self, block: int) -> None:
        """Size the region statistics' rim and ring on blocks of ``block`` pixels a side (an oversampled image).

        ``block`` is what :func:`engine.image.resolution.resolved_block` reads
        of the image; the rim and ring of the region statistics are then
        measured in that block's pixel (:meth:`_resolved_pixel`).
        """
        if isinstance(block, bool) or not isinstance(block, (int, np.integer)) or block < 1:
            raise ValueError(f"block must be a whole number >= 1, got {block!r}")
        if int(block) == self.resolved_block:
            return
        self._swap(resolved_block=int(block))
        self._swap(rim=self._rim_sums(self._pixel_band_values(), self._band_pixels_inside()))
        self._update_layer_statistics()
        self._swap(converged=False)
        self._restart_convergence()

    def _new_stencils(self, params: FrontParams) -> None:
        """Stencils for changed stencil settings (scattered: the same nodes with new per-node operators)."""
        self.layout = self.layout.with_settings(params, self._node_sets)

    @_locked
    def snapshot(self) -> FrontState:
        """The present state itself: a frozen value that later steps and edits replace, never change."""
        return self._state

    @_locked
    def restore(self, snap: FrontState) -> None:
        """Return to the state ``snap``; stepping afterwards reproduces the same φ bit for bit."""
        if not isinstance(snap, FrontState):
            raise ValueError("snapshot must come from Front.snapshot()")
        if snap.indices.ndim != self.layout.key_ndim:
            raise ValueError("snapshot was taken on another node layout (lattice against scattered nodes)")
        if snap.inside.shape != self.shape:
            raise ValueError(f"snapshot was taken on an image of shape {snap.inside.shape}, not {self.shape}")
        if snap.detail is not None and snap.detail != self.detail:
            raise ValueError(f"snapshot was taken at {snap.detail} lattice nodes per pixel, not {self.detail}")
        if snap.noise is None:  # a state stored without it keeps this front's
            snap = snap.updated(noise=self._noise)
        if snap.detail is None:  # stored before the detail was kept: the caller built this front at it
            snap = snap.updated(detail=self.detail)
        old_params = self.params
        self._state = snap
        if snap.params != old_params:
            self.features = compute_features(self.features.image, self.features.spacing,
                                             sigma_mm=snap.params.edge_sigma, contrast=snap.params.edge_contrast)
            self._new_stencils(snap.params)
        # the band's derived arrays, then the layer and statistics of the state's last refresh
        self._install_band(snap.indices, snap.phi)
        b = self._band
        if snap.layer:
            b.layer, b.source, b.edge_source, b.layer_phi = snap.layer
            b.layer_operators = b.layer_parts = b.layer_pairs = None
        else:
            snap = snap.updated(layer=(b.layer, b.source, b.edge_source, b.layer_phi))
        if snap.near is not None:
            self._use_near(snap.near)
        else:  # a state stored before the pick was kept: pick again from its φ and layer
            self._pick_near()
            snap = snap.updated(near=self._state.near)
        if snap.local_out is not None:
            b.local_out = snap.local_out
        else:
            snap = snap.updated(local_out=b.local_out)
        b.thickness = snap.thickness
        self._state = snap
        self._motion_monitor().restore(snap.motion)
