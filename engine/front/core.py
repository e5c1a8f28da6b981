"""The Front: a level-set function on a narrow band of lattice nodes, evolved with RBF-FD.

State: lattice indices of the band nodes and φ (signed distance in mm,
negative inside) at them, the time, a pixel-resolution inside/outside image
(valid everywhere, exact wherever the band does not reach), running sums for
region statistics, pins and barriers, and the settings.

One step is Runge–Kutta–Legendre super time stepping (RKL2, Meyer, Balsara &
Aslam, J. Comput. Phys. 257 (2014) 594-626; see :mod:`engine.numerics.time_stepping`) of

    φ_t = −V |∇φ|_G + a κ |∇φ|

on every node whose stencil is complete: the normal speed V through the
Godunov Hamiltonian of one-sided RBF-FD derivatives (upwind, so expanding
corners round into arcs and shrinking corners stay sharp: the entropy
solution) and curvature κ from centred RBF-FD derivatives. Speeds and
curvature are those of the front at each node's closest point (extension
velocities, Adalsteinsson & Sethian, J. Comput. Phys. 148 (1999) 2-22), so
all level sets in the band move together and φ stays a signed distance. The
nodes at the band's edge, whose stencil is incomplete, take the rate of the
node nearest to their closest point on the front; that node's stencil never
reaches the edge, so there is no feedback loop, the whole band moves as one
and no kink forms at its edge. The image speed at the layer is averaged
along the outline (``outline_averaging``, :mod:`engine.numerics.outline_averaging`):
noise is pooled along the boundary, not blurred across it.
The time step lets the front move at most ``cfl`` node spacings and the
number of RKL2 stages grows with √(dt / dt_Euler) to keep the stiff
curvature term stable, so fine detail does not force tiny steps
(``integrator="ssp_rk3"`` takes Shu & Osher's three-stage steps instead,
each within forward Euler's limit for the curvature term: the reference
the super time steps are checked against). When the front nears the edge of the part of the band
where c = 1, the band is rebuilt around it and φ is reinitialised to a signed
distance by Newton closest points on the zero set of the local RBF
interpolant (Saye 2014).

With ``nodes="scattered"`` (2-D and 3-D) the band is a subset of one fixed,
edge-adaptive scattered node set per image
(:class:`engine.nodes.node_set.ScatteredNodeSet`): band nodes are global node ids,
each node carries its own cached RBF-FD weights (same operator columns as the
lattice stencil), zero crossings lie on the edges of the nodes' neighbour
graph, the pixel inside image follows φ interpolated to pixel centres, the
time step follows the finest local spacing of the active nodes and the
stage count the node set's Arnoldi estimate of the curvature operator's
spectral radius. Contours are marching squares (surfaces: marching cubes) on
φ interpolated to the band's pixel centres, contours projected onto the
interpolant's zero set. In 3-D a scattered front must not cross the
volume's border (refused: the scheme is not stable there yet). The coarse
start of :func:`engine.segment.segment` stays lattice-only.

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
a consistent set of them comes from :meth:`Front.snapshot`.

References
----------
.. [1] D. Adalsteinsson, J. A. Sethian, "A fast level set method for
   propagating interfaces", J. Comput. Phys. 118 (1995) 269-277.
.. [2] D. Peng, B. Merriman, S. Osher, H. Zhao, M. Kang, "A PDE-based fast
   local level set method", J. Comput. Phys. 155 (1999) 410-438.
.. [3] R. I. Saye, Commun. Appl. Math. Comput. Sci. 9(1) (2014) 107-141.
.. [4] S. Osher, R. Fedkiw, "Level Set Methods and Dynamic Implicit
   Surfaces", Springer (2003).
"""

from __future__ import annotations

import threading
import time as _time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
import functools
from functools import lru_cache

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from engine.front.convergence import OutlineMotion
from engine.front.geometry import grid_crossing_points, seed_disks, seed_function, stroke_distance
from engine.front.speeds import SETTING_NAMES, FrontParams, NodeSpeeds, needed_features, node_speeds
from engine.image.features import ImageFeatures, compute_features
from engine.image.thickness import half_width
from engine.nodes.band_stencils import BandStencil, band_stencil, layer_labels
from engine.nodes.lattice import LatticeLookup
from engine.nodes.layout import TREE_WORKERS, Band, LatticeLayout, NodeLayout, ScatteredLayout
from engine.nodes.node_set import ScatteredNodeSet
from engine.numerics.closest_point import closest_points
from engine.numerics.interpolant import LocalInterpolant
from engine.numerics.outline_averaging import average_along_outline
from engine.numerics.time_stepping import rkl2, rkl2_stages, rkl2_step, ssp_rk3
from engine.validation import check_limits, check_names, check_spacing, validate_seeds

try:  # the band's small dense products run far slower with threaded BLAS
    from threadpoolctl import ThreadpoolController

    _BLAS = ThreadpoolController()

    def single_thread_blas():
        """Context in which BLAS uses one thread (the front's products are small)."""
        return _BLAS.limit(limits=1, user_api="blas")
except ImportError:  # pragma: no cover - threadpoolctl is a declared dependency
    from contextlib import nullcontext as single_thread_blas

#: Values standing in for φ beyond the band (in units of the band half-width).
_FAR = 1.5
#: Floor of the front speed used for the time step (mm per unit time), so a
#: nearly still front still takes steps of bounded length.
MIN_SPEED = 0.25
#: Reinitialise the whole band at a rebuild when the 90th percentile of
#: ||∇φ| − 1| next to the front exceeds this, or after this many rebuilds
#: without one.
REINIT_DRIFT = 0.05
REINIT_EVERY = 10
#: Rebuild and reinitialise between band rebuilds once that percentile has
#: grown by more than this since the last rebuild (checked every
#: STATISTICS_EVERY steps): a small structure grown from a smaller seed never
#: needs a rebuild, and inside it φ flattens (|∇φ| 0.03–0.12 next to the
#: front of a 3 px disk grown from 1.5 px) where growth lags at the centre.
FLAT_DRIFT = 0.25
#: Half-width of an estimated intensity window, in robust standard deviations
#: of the smoothed intensities inside the seeds: wide enough that the front
#: does not stop at the first shoulder of a partial-volume edge, narrow
#: enough to exclude a neighbour whose contrast is several noise levels.
WINDOW_SPREAD = 5.0
#: Outside pixels this close to the front (plus two smoothing scales) are
#: partial-volume rim and do not count toward the local outside mean.
RIM_PIXELS = 1.5
#: Steps between refreshes of the layer next to the front and of the region
#: model's local statistics.
STATISTICS_EVERY = 10
#: The layer is re-picked (every STATISTICS_EVERY steps) only once the front
#: has moved this many node spacings at some layer node since it was picked
#: (the layer, |φ| <= 1.2 spacings, still straddles the front), and at least
#: every LAYER_IDLE_STEPS steps.
LAYER_DRIFT = 0.25
LAYER_IDLE_STEPS = 100
#: Width of the ring of outside pixels, beyond the rim, of the local statistics.
RING_PIXELS = 3.0
#: A local outside mean on the other side of the inside mean than the global
#: outside mean counts only if it differs from the inside mean by at least
#: this fraction of the global contrast (besides three noise deviations). On
#: a noise-free image a ring that still lies mostly in the structure differs
#: from the inside mean by a trace, on that side once the inside mean has
#: taken in some partial-volume pixels; taken as the outside it would make
#: the whole uniform structure look like outside and turn the front back.
LOCAL_CONTRAST = 0.1
#: Share of the local ring (Gaussian weights) that the pixels beyond the noise on one side of the
#: inside mean must make up to count as a neighbouring tissue: a ring still in the structure has
#: 0.1 % of its pixels three noise deviations out on either side, and a smooth bias field a few per cent.
SIDE_SHARE = 0.25
#: Difference between the centred and the upwind |∇φ| beyond which a node is
#: taken to sit on a kink of φ, where curvature motion uses the upwind value.
KINK_GRADIENT = 0.1
#: Structures of smaller mean radius (mm; in 3-D twice this) get
#: proportionally less smoothness (region and window models), so curvature
#: motion does not shrink them.
SMALL_STRUCTURE = 8.0
#: Half-width of the layer of nodes next to the front, in node spacings.
LAYER_WIDTH = 1.2
#: Radius (mm) of the local outside statistics of the region model.
DEFAULT_LOCAL_RADIUS = 6.0
#: Node layouts of the front.
NODE_LAYOUTS = ("lattice", "scattered")


def _locked(method: Callable) -> Callable:
    """Run ``method`` holding the front's lock (see the module docstring's threading contract)."""

    @functools.wraps(method)
    def locked(self: "Front", *args: object, **kwargs: object) -> object:
        with self._lock:
            return method(self, *args, **kwargs)

    return locked


class FrontVanished(ValueError):
    """The zero set disappeared (the outline shrank to nothing or filled the image)."""


@dataclass(frozen=True)
class FrontSnapshot:
    """Everything needed to restore a front exactly (band arrays, not images)."""

    indices: NDArray[np.int64]
    phi: NDArray[np.floating]
    phi_at_rebuild: NDArray[np.floating]
    inside_bits: NDArray[np.uint8]
    sums: tuple[float, float, float, float]
    time: float
    steps: int
    converged: bool
    motion: tuple  # checkpoints of the convergence monitor (engine.front.convergence)
    params: FrontParams
    pins: NDArray[np.bool_] | None
    barrier: NDArray[np.bool_] | None
    local_out: NDArray[np.floating] | None = None
    since_reinit: int = 0
    rebuild_drift: float = 1.0
    layer: tuple[NDArray, ...] = ()  # layer, source, edge_source and layer_phi of the last refresh
    thickness: NDArray[np.floating] | None = None  # half-width behind each layer node at the last refresh
    rest_reinitialised: bool = False  # reinitialised once already at the present rest
    noise: float | None = None  # robust std of the smoothed intensities inside the initial front (region model)

    @property
    def nbytes(self) -> int:
        return int(self.indices.nbytes + self.phi.nbytes + self.phi_at_rebuild.nbytes + self.inside_bits.nbytes)


class Front:
    """A level-set front on one 2-D slice or one 3-D volume (see module docstring).

    Build with :meth:`from_seeds`, :meth:`from_mask` or :meth:`from_function`.
    Public coordinates are pixels ``(row, col)`` (``(slice, row, col)`` in
    3-D); φ and distances are in mm.
    """

    def __init__(self, features: ImageFeatures, params: FrontParams, layout: NodeLayout) -> None:
        self.features = features
        self.params = params
        self.layout = layout  # where the nodes sit (engine.nodes.layout): lattice or scattered
        self.time = 0.0
        self.steps = 0
        self.converged = False
        self.timings: dict = {"step": 0.0, "rebuild": 0.0, "rebuilds": 0}
        self._phi: NDArray[np.floating] = None  # type: ignore[assignment]
        self._phi_at_rebuild: NDArray[np.floating] = None  # type: ignore[assignment]
        self._band: Band = None  # type: ignore[assignment]
        self._inside: NDArray[np.bool_] = None  # type: ignore[assignment]
        self._sums: list = [0.0, 0.0, 0.0, 0.0]
        self._outline: OutlineMotion | None = None
        self._pins: NDArray[np.bool_] | None = None
        self._barrier: NDArray[np.bool_] | None = None
        self._coeffs: NDArray[np.floating] | None = None
        self._node_sets: dict = {}  # node sets per (stencil size, degree, phs)
        # held by every method that reads or changes the state (see the module docstring)
        self._lock = threading.RLock()

    def __repr__(self) -> str:
        size = "×".join(str(s) for s in self.shape)
        layout = self.layout.name + (f" detail {self.detail}" if self.detail != 1 else "")
        nodes = 0 if self._phi is None else len(self._phi)
        status = "vanished" if self.vanished else "converged" if self.converged else "moving"
        return (f"<Front {self.ndim}-D {size}, {self.params.model}, {layout}, {nodes} nodes, "
                f"step {self.steps}, t={self.time:.4g}, {status}>")

    # ------------------------------------------------------------------ build
    @classmethod
    def _create(cls, image: ArrayLike | None, shape: Sequence[int] | None, spacing: ArrayLike | None,
                model: str, detail: int, params: dict, layout: dict | None = None, *,
                where: str = "Front") -> "Front":
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
        if detail not in (1, 2, 4):
            raise ValueError(f"detail must be 1, 2 or 4, got {detail!r}")
        layout = dict(layout or {})
        nodes = layout.get("nodes", "lattice")
        if nodes not in NODE_LAYOUTS:
            raise ValueError(f"nodes must be one of {NODE_LAYOUTS}, got {nodes!r}")
        given_set = layout.get("node_set")
        if nodes == "lattice":
            for name in ("finest", "coarsest", "node_set"):
                if layout.get(name) is not None:
                    raise ValueError(f"{name} applies to nodes='scattered' only")
        else:
            if detail != 1:
                raise ValueError("detail applies to nodes='lattice'; scattered nodes take finest and coarsest (mm)")
        fp = FrontParams(model=model, **params)
        feats = compute_features(img, sp, sigma_mm=fp.edge_sigma, contrast=fp.edge_contrast)
        if nodes == "lattice":
            step_mm = sp / detail
            stencil = band_stencil(step_mm, stencil_size=fp.stencil_size_for(img.ndim), degree=fp.degree,
                                   phs=fp.phs)
            return cls(feats, fp, LatticeLayout(stencil, step_mm, detail, img.shape))
        if given_set is not None:
            node_set = given_set
            if not isinstance(node_set, ScatteredNodeSet):
                raise ValueError(f"node_set must be a ScatteredNodeSet, got {type(node_set).__name__}")
            if node_set.shape != img.shape or not np.allclose(node_set.pixel_spacing, sp, rtol=1e-12, atol=0):
                raise ValueError("node_set was made for another image shape or spacing")
            if (node_set.stencil_size, node_set.degree, node_set.phs) != _node_options(fp, img.ndim):
                raise ValueError("node_set: its stencil_size, degree and phs differ from the front's settings")
        else:
            finest = 0.5 * float(np.min(sp)) if layout.get("finest") is None else layout["finest"]
            coarsest = float(np.max(sp)) if layout.get("coarsest") is None else layout["coarsest"]
            for name, value in (("finest", finest), ("coarsest", coarsest)):
                if not (isinstance(value, (int, float, np.integer, np.floating)) and np.isfinite(value)
                        and value > 0):
                    raise ValueError(f"{name} must be a positive node spacing in mm, got {value!r}")
            if finest > coarsest:
                raise ValueError(f"finest ({finest}) must not exceed coarsest ({coarsest})")
            size, degree, phs = _node_options(fp, img.ndim)
            node_set = ScatteredNodeSet.from_features(feats, finest=float(finest), coarsest=float(coarsest),
                                                      stencil_size=size, degree=degree, phs=phs)
        front = cls(feats, fp, ScatteredLayout(node_set))
        front._node_sets[_node_options(fp, img.ndim)] = node_set
        return front

    @classmethod
    def from_function(cls, phi: Callable[[NDArray[np.floating]], ArrayLike], shape: Sequence[int], *,
                      spacing: ArrayLike | None = None, model: str = "curvature", detail: int = 1,
                      image: ArrayLike | None = None, signed_distance: bool = False,
                      exact_within: float | None = None,
                      window_from: ArrayLike | None = None, nodes: str = "lattice", finest: float | None = None,
                      coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                      **params: object) -> "Front":
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
        an exact zero set at a fraction of the cost).

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
                            where="Front.from_function()")

        def oracle(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
            values = np.asarray(phi(points_mm), dtype=float).reshape(-1)
            if values.shape != (len(points_mm),) or not np.all(np.isfinite(values)):
                raise ValueError("phi must return one finite value per point")
            return values

        if exact_within is not None and not (np.isfinite(exact_within) and exact_within >= 0):
            raise ValueError(f"exact_within must be >= 0 mm, got {exact_within!r}")
        front._initialise(oracle, signed_distance=signed_distance, exact_within=exact_within,
                          window_from=window_from if estimate else None,
                          estimate_window=estimate)
        return front

    @classmethod
    def from_seeds(cls, image: ArrayLike, seeds: Sequence[Sequence[float]], *, spacing: ArrayLike | None = None,
                   model: str = "region", detail: int = 1, nodes: str = "lattice", finest: float | None = None,
                   coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                   **params: object) -> "Front":
        """Front starting from seed disks ``(row, col, radius_px)`` (3-D: ``(slice, row, col, r)``).

        ``nodes``, ``finest``, ``coarsest``, ``node_set``: see :meth:`from_function`.
        """
        img = np.asarray(image, dtype=float)
        seeds_arr = validate_seeds(seeds, img.shape)
        estimate = model == "window" and params.get("window") is None
        if estimate:  # placeholder until the smoothed image exists
            params = dict(params, window=(0.0, 1.0))
        front = cls._create(img, None, spacing, model, detail, params,
                            {"nodes": nodes, "finest": finest, "coarsest": coarsest, "node_set": node_set},
                            where="Front.from_seeds()")
        if estimate:
            front.params = front.params.updated(window=estimate_window(front.features.smoothed, seeds_arr))
        front._initialise(seed_function(seeds_arr, front.features.spacing))
        return front

    @classmethod
    def from_mask(cls, image: ArrayLike, mask: ArrayLike, *, spacing: ArrayLike | None = None,
                  model: str = "region", detail: int = 1, nodes: str = "lattice", finest: float | None = None,
                  coarsest: float | None = None, node_set: ScatteredNodeSet | None = None,
                  **params: object) -> "Front":
        """Front whose initial inside is the boolean ``mask`` (outline through pixel edges).

        ``nodes``, ``finest``, ``coarsest``, ``node_set``: see :meth:`from_function`.
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
                                  finest=finest, coarsest=coarsest, node_set=node_set, **params)

    @classmethod
    def from_pixel_phi(cls, image: ArrayLike, pixel_phi: ArrayLike, *, spacing: ArrayLike | None = None,
                       model: str = "region", detail: int = 1, window_from: ArrayLike | None = None,
                       nodes: str = "lattice", finest: float | None = None, coarsest: float | None = None,
                       node_set: ScatteredNodeSet | None = None, **params: object) -> "Front":
        """Front whose initial zero set is that of ``pixel_phi`` (mm, negative inside), one value per pixel.

        Between pixel centres the values are interpolated linearly; near the
        zero set they should be close to a signed distance. With the
        ``window`` model and no ``window`` given, the window is estimated from
        the pixels of the boolean ``window_from`` (default: the initial inside).
        ``nodes``, ``finest``, ``coarsest``, ``node_set``: see :meth:`from_function`.
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
                            where="Front.from_pixel_phi()")
        sp = front.features.spacing

        def oracle(points_mm: NDArray[np.floating]) -> NDArray[np.floating]:
            return ndimage.map_coordinates(values, (points_mm / sp).T, order=1, mode="nearest")

        front._initialise(oracle, window_from=window_from, estimate_window=estimate)
        return front

    # -------------------------------------------------------------- geometry
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

    def _initialise(self, oracle: Callable[[NDArray[np.floating]], NDArray[np.floating]], *,
                    signed_distance: bool = False, exact_within: float | None = None,
                    window_from: ArrayLike | None = None, estimate_window: bool = False) -> None:
        """Band around the zero set of ``oracle`` (values at points in mm); optionally estimate the window."""
        sp = self.features.spacing
        pixel_values = _pixel_values(oracle, self.shape, sp)
        self._inside = pixel_values < 0
        if not self._inside.any():
            raise ValueError("the initial front is empty: no pixel centre lies inside it")
        if estimate_window:
            region = self._inside if window_from is None else np.asarray(window_from, dtype=bool)
            if region.shape != self.shape or not region.any():
                raise ValueError("window_from must be a non-empty boolean mask of the image's shape")
            self.params = self.params.updated(window=estimate_window_from_mask(self.features.smoothed, region))
        self._noise = robust_std(self.features.smoothed[self._inside])
        self._reset_sums()
        starts = grid_crossing_points(pixel_values, sp)
        if len(starts) == 0:
            raise ValueError("the initial front has no boundary inside the image")

        def values_at(indices: NDArray[np.int64]) -> NDArray[np.floating]:
            return oracle(self.layout.positions(indices))

        if signed_distance:
            nodes = self.layout.candidates(starts, self.band_half_width)
            trusted = (np.ones(len(nodes), dtype=bool) if exact_within is None
                       else np.abs(values_at(nodes)) > exact_within)
            self._build_band(starts, values_at, nodes=nodes, trusted=trusted)
        else:
            self._build_band(starts, values_at)

    # ------------------------------------------------------------- band build
    def _sign_from_pixels(self, indices: NDArray[np.int64]) -> NDArray[np.floating]:
        px = np.rint(self.layout.pixels(indices)).astype(np.int64)
        px = np.clip(px, 0, np.array(self.shape) - 1)
        return np.where(self._inside[tuple(px.T)], -1.0, 1.0)

    def _current_values(self, indices: NDArray[np.int64]) -> NDArray[np.floating]:
        """φ at lattice ``indices`` (scattered node ids): band values where known, ±(far) elsewhere."""
        pos = self._band_positions(indices)
        far = _FAR * self.band_half_width * self._sign_from_pixels(indices)
        return np.where(pos >= 0, self._phi[np.maximum(pos, 0)], far)

    def _band_positions(self, keys: NDArray[np.int64]) -> NDArray[np.int64]:
        """Position of each node in the band, −1 where it is not in the band."""
        return self.layout.band_positions(self._band, keys)

    def _build_band(self, starts_mm: NDArray[np.floating],
                    values_at: Callable[[NDArray[np.int64]], NDArray[np.floating]], *,
                    nodes: NDArray[np.int64] | None = None, trusted: NDArray[np.bool_] | None = None) -> None:
        """Make the band around the zero set near ``starts_mm`` and reinitialise φ on it.

        ``values_at`` gives approximate φ (exact near the zero set, correct in
        sign elsewhere) at lattice indices. ``nodes`` are the candidate nodes
        (default: all within the band half-width of ``starts_mm``);
        ``trusted`` marks candidates whose value is already a signed distance
        and is kept as it is (the others get Newton closest-point distances).
        """
        t0 = _time.perf_counter()
        width = self.band_half_width
        if nodes is None:
            nodes = self.layout.candidates(starts_mm, width)
        approx = values_at(nodes)
        # The zero set of the approximate values, as points on lattice edges (scattered: graph edges).
        lookup = self.layout.lookup(nodes)
        starts = self._crossings(nodes, approx, lookup)
        if len(starts) == 0:
            raise FrontVanished("the front vanished: no zero crossing is left")
        todo = np.arange(len(nodes)) if trusted is None else np.flatnonzero(~trusted)
        phi = approx.copy()
        if len(todo):
            positions = self.layout.positions(nodes)
            built = self.layout.reinitialising_interpolant(nodes, approx, lookup, starts, self.params)
            if built is None:
                raise FrontVanished("the band is too thin for an interpolant")
            interp, coeffs = built
            near_dist, nearest = cKDTree(starts).query(positions[todo], workers=TREE_WORKERS)
            # nodes farther than the band from every zero crossing are dropped below
            reach = near_dist <= width + 0.5 * float(np.max(self.step_mm))
            phi[todo[~reach]] = np.where(approx[todo[~reach]] < 0, -1.0, 1.0) * 2.0 * width
            todo, nearest = todo[reach], nearest[reach]
            if len(todo):
                cp = closest_points(interp, coeffs, positions[todo], start=starts[nearest], max_iter=8)
                phi[todo] = np.where(approx[todo] < 0, -1.0, 1.0) * cp.distance
        keep = np.abs(phi) <= width
        self._install_band(nodes[keep], phi[keep])
        self._rebuild_drift = self._layer_drift(self._phi)
        self.timings["rebuild"] += _time.perf_counter() - t0
        self.timings["rebuilds"] += 1

    def _front_layer(self, indices: NDArray[np.int64], phi: NDArray[np.floating], active: NDArray[np.int64],
                     edge_nodes: NDArray[np.int64], lookup: LatticeLookup
                     ) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]]:
        """The layer of active nodes next to the front, and each node's layer node.

        A node's layer node is the one nearest to its closest point on the
        front (approximated by its nearest zero crossing): the speed and
        curvature of the front there are the node's extension velocity.
        """
        width = LAYER_WIDTH * self.layout.layer_width(indices, active)
        layer = np.flatnonzero(np.abs(phi[active]) <= width)
        if len(layer) == 0:
            raise FrontVanished("the front has no node next to it; it is too small for this detail")
        crossings = self._crossings(indices, phi, lookup)
        if len(crossings) == 0:
            raise FrontVanished("the front vanished: no zero crossing is left")
        # each crossing's nearest layer node, then each node's nearest crossing
        _, crossing_source = cKDTree(self.layout.positions(indices[active[layer]])).query(crossings,
                                                                                         workers=TREE_WORKERS)
        crossing_source = np.asarray(crossing_source, dtype=np.int64)
        crossing_tree = cKDTree(crossings)

        def source_of(nodes: NDArray[np.int64]) -> NDArray[np.int64]:
            if len(nodes) == 0:
                return np.zeros(0, dtype=np.int64)
            _, near = crossing_tree.query(self.layout.positions(indices[nodes]), workers=TREE_WORKERS)
            return crossing_source[near]

        source = source_of(active)
        source[layer] = np.arange(len(layer))
        return layer, source, source_of(edge_nodes)

    def _install_band(self, keys: NDArray[np.int64], phi: NDArray[np.floating]) -> None:
        """Make the band on nodes ``keys`` with values ``phi`` the front's, with its layer and statistics."""
        band, phi = self.layout.build_band(keys, phi, self._front_layer, self.band_half_width)
        band.frozen, band.barrier = self._node_masks(band.pixels)
        self._band = band
        self._phi = phi
        self._phi_at_rebuild = np.abs(phi)
        self._coeffs = None
        band.layer_phi = phi[band.active[band.layer]]
        self._sync_inside()
        self._update_layer_statistics()

    def _node_masks(self, pixels: NDArray[np.floating]) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
        """Per node at ``pixels``: pinned, and inside a barrier (the pixel nearest each node decides)."""
        near = tuple(np.clip(np.rint(pixels).astype(np.int64), 0, np.array(self.shape) - 1).T)
        frozen = self._pins[near] if self._pins is not None else np.zeros(len(pixels), bool)
        barrier = self._barrier[near] if self._barrier is not None else np.zeros(len(pixels), bool)
        return frozen, barrier

    # ------------------------------------------------------ region statistics
    def _reset_sums(self) -> None:
        img = self.features.smoothed
        inside = self._inside
        self._sums = [float(img[inside].sum()), float(inside.sum()), float(img[~inside].sum()),
                      float((~inside).sum())]

    def _sync_inside(self) -> None:
        """Update the pixel inside image (and the region sums) at pixel-centre band nodes."""
        b = self._band
        now = self._band_pixels_inside()
        before = self._inside[b.pixel_index]
        changed = np.flatnonzero(now != before)
        if len(changed) == 0:
            return
        idx = tuple(i[changed] for i in b.pixel_index)
        vals = self.features.smoothed[idx]
        gained = now[changed]
        delta_sum = float(vals[gained].sum() - vals[~gained].sum())
        delta_n = float(gained.sum() - (~gained).sum())
        self._sums[0] += delta_sum
        self._sums[1] += delta_n
        self._sums[2] -= delta_sum
        self._sums[3] -= delta_n
        self._inside[idx] = gained

    def _band_pixels_inside(self) -> NDArray[np.bool_]:
        """Which of the band's pixel centres (``_band.pixel_index``) lie inside."""
        now = self._pixel_band_values() < 0
        if self._barrier is not None and self.layout.holds_barrier_on_pixels:
            now &= ~self._barrier[self._band.pixel_index]
        return now

    def _pixel_band_values(self) -> NDArray[np.floating]:
        """φ at the band's pixel centres (``_band.pixel_index``)."""
        return self.layout.pixel_values(self._band, self._phi)

    @_locked
    def region_means(self) -> tuple[float, float]:
        """Global mean (smoothed) intensity inside and outside the front."""
        s_in, n_in, s_out, n_out = self._sums
        c_in = s_in / n_in if n_in > 0 else 0.0
        c_out = s_out / n_out if n_out > 0 else 0.0
        return c_in, c_out

    def _update_layer_statistics(self) -> None:
        """What the layer's speeds read between refreshes: local region statistics, the structure's half-width."""
        if self.params.model == "region":
            self._update_local_statistics()
        if self.params.model in ("region", "window"):
            self._update_thickness()

    def _update_thickness(self) -> None:
        """Half-width of the inside behind each layer node (:mod:`engine.image.thickness`), for the smoothness scale."""
        b = self._band
        act = b.active[b.layer]
        grad = self._layer_derivatives(self._phi, hessian=False)[0]
        g2 = np.sum(grad * grad, axis=0)
        trusted = g2 >= 0.25
        normal = (grad / np.sqrt(np.maximum(g2, 1e-12))).T
        closest = b.positions[act] - np.where(trusted, self._phi[act] / np.sqrt(np.maximum(g2, 1e-12)), 0.0)[:, None] * normal
        b.thickness = half_width(self._inside, self.features.spacing, closest, normal,
                                 SMALL_STRUCTURE * (self.ndim - 1))

    def _update_local_statistics(self) -> None:
        """Region statistics at the front's layer nodes: global inside mean, local outside means.

        The inside mean is the global mean inside the front (the structure
        being outlined). The outside mean is the Gaussian-weighted mean of the
        outside pixels within ``local_radius`` of each layer node (Lankton &
        Tannenbaum 2008), so the front stops halfway between the structure and
        whatever actually borders it rather than halfway to the average of
        the whole image. Only a ring of outside pixels counts: beyond the
        blurred rim of the edge (RIM_PIXELS plus two smoothing scales, so
        partial volume does not pull the mean toward the inside) and within
        RING_PIXELS more (so the tissue that actually borders the front
        outweighs tissues further away). The ring's pixels darker and brighter
        than the inside mean (beyond three noise standard deviations; on the
        far side of the inside mean from the global outside mean, beyond
        LOCAL_CONTRAST of the global contrast) give one mean each, where they
        make up enough of the ring: the speed is the smaller of the two
        sides' (``local_out`` holds both, the second NaN where that side is
        absent). Where neither side is there (the ring is still the same
        tissue, as while the front grows from a seed) the global outside
        mean is used (Chan & Vese 2001). Refreshed at every band rebuild and with the
        layer (``LAYER_DRIFT``, ``LAYER_IDLE_STEPS``). Computed on the
        bounding box of the front plus three radii at every band rebuild;
        between rebuilds the front moves less than the statistics' radius.
        """
        b = self._band
        radius_mm = self.params.local_radius if self.params.local_radius is not None else DEFAULT_LOCAL_RADIUS
        radius_px = radius_mm / self.features.spacing
        px = b.pixels[b.active[b.layer]]
        lo = np.maximum(np.floor(px.min(axis=0) - 3 * radius_px).astype(int), 0)
        hi = np.minimum(np.ceil(px.max(axis=0) + 3 * radius_px).astype(int) + 1, np.array(self.shape))
        box = tuple(slice(a, c) for a, c in zip(lo, hi))
        img = self.features.smoothed[box]
        c_in, c_out = self.region_means()
        noise = max(self._noise, 1e-3 * self.features.intensity_scale)
        # leave out the blurred rim of the edge (partial volume plus smoothing)
        coarse = float(np.max(self.features.spacing))
        rim = RIM_PIXELS * coarse + 2.0 * self.features.sigma_mm  # mm
        depth = ndimage.distance_transform_edt(~self._inside[box], sampling=self.features.spacing)
        ring = (depth > rim) & (depth <= rim + RING_PIXELS * coarse)
        local = (px - lo).T
        b.local_in = np.full(len(px), c_in)
        # ring pixels are told apart from the inside by the inside mean near them (the inside
        # without its rim, Gaussian weights; the global mean where there is too little of it):
        # a smooth bias field across a large structure is not taken for a neighbouring tissue
        core = (ndimage.distance_transform_edt(self._inside[box], sampling=self.features.spacing) > rim).astype(float)
        w_core = ndimage.gaussian_filter(core, radius_px, mode="nearest")
        near_in = np.where(w_core > 0.05, ndimage.gaussian_filter(img * core, radius_px, mode="nearest")
                           / np.maximum(w_core, 1e-12), c_in)
        # the outside on each side of the inside mean (darker, brighter), beyond noise:
        # a structure between a darker and a brighter tissue (an organ on bone in CT) is
        # held by both, where their mixed mean could lie on the inside's own side
        w_ring = ndimage.map_coordinates(ndimage.gaussian_filter(ring.astype(float), radius_px, mode="nearest"),
                                         local, order=1, mode="nearest")
        sides = []
        for side in (-1.0, 1.0):
            far = np.sign(c_out - c_in) != side
            need = max(3.0 * noise, LOCAL_CONTRAST * abs(c_in - c_out)) if far else 3.0 * noise
            beyond = (ring & (side * (img - near_in) > need)).astype(float)
            w_side = ndimage.gaussian_filter(beyond, radius_px, mode="nearest")
            s_side = ndimage.gaussian_filter(img * beyond, radius_px, mode="nearest")
            weight = ndimage.map_coordinates(w_side, local, order=1, mode="nearest")
            mean = ndimage.map_coordinates(s_side, local, order=1, mode="nearest") / np.maximum(weight, 1e-12)
            # a side is a tissue where it makes up a good share of the ring, not where a few
            # pixels of the inside's own noise tail (or of a smooth bias) are beyond `need`
            distinct = (weight > 0.05) & (weight >= SIDE_SHARE * w_ring)
            sides.append(np.where(distinct, mean, np.nan))
        first = np.where(np.isnan(sides[0]), sides[1], sides[0])
        other = np.where(np.isnan(sides[0]), np.nan, sides[1])
        b.local_out = np.stack([np.where(np.isnan(first), c_out, first), other])

    # --------------------------------------------------------------- stepping
    def _layer_derivatives(self, phi: NDArray[np.floating], *, hessian: bool = True
                           ) -> tuple[NDArray[np.floating], NDArray[np.floating] | None]:
        """Centred gradient (d, L) and, if asked, Hessian (d, d, L) at the layer nodes next to the front."""
        d = self.ndim
        values = self.layout.layer_derivatives(self._band, phi, None if hessian else d)
        return values[:d], (values[_hessian_rows(d)] if hessian else None)

    def _front_curvature(self, phi_act: NDArray[np.floating], grad: NDArray[np.floating],
                         hess: NDArray[np.floating], *, measure: bool = True) -> NDArray[np.floating]:
        """Curvature of the front at each layer node's closest point (1/mm); ``grad`` (d, L), ``hess`` (d, d, L).

        For a signed distance, the level set through x at distance s from the
        front has principal curvatures k_i(x) = k_i(y) / (1 + s k_i(y)), so
        k_i(y) = k_i(x) / (1 − s k_i(x)); summing them gives the extension of
        the front's curvature along the normals. With ``measure`` the largest
        |κ| and the extension's gain (for the time step) are recorded.
        """
        g2 = _sum_rows(grad * grad)
        np.maximum(g2, 1e-12, out=g2)
        gnorm = np.sqrt(g2)
        s = phi_act / gnorm
        kmax = 1.0 / self.h
        if self.ndim == 2:
            # κ = (φ_y² φ_xx − 2 φ_x φ_y φ_xy + φ_x² φ_yy) / |∇φ|³
            gx, gy = grad
            k_x = [_clip((gy * gy * hess[0, 0] - 2.0 * gx * gy * hess[0, 1] + gx * gx * hess[1, 1])
                         / (g2 * gnorm), kmax)]
        else:
            # principal curvatures: the two eigenvalues of the shape operator S = P H P / |∇φ|
            # (P = I − n nᵀ) other than its exact zero along n, from its invariants:
            # k1 + k2 = tr S, k1 k2 = (tr(S)² − tr(S²)) / 2 (Goldman, Comput. Aided Geom. Des.
            # 22 (2005) 632-658, for curvatures of implicit surfaces)
            n = grad / gnorm
            ph = hess - n[:, None, :] * np.einsum("jl,ijl->il", n, hess)[None, :, :]  # P H, (3, 3, L)
            hn = np.einsum("ijl,jl->il", ph, n)  # (P H) n
            shape_op = (ph - hn[:, None, :] * n[None, :, :]) / gnorm  # P H P / |∇φ|
            trace = shape_op[0, 0] + shape_op[1, 1] + shape_op[2, 2]
            square = np.einsum("ijl,jil->l", shape_op, shape_op)
            gap = np.sqrt(np.maximum(2.0 * square - trace * trace, 0.0))  # (k1 − k2)² = 2 tr(S²) − tr(S)²
            k_x = [_clip(0.5 * (trace + gap), kmax), _clip(0.5 * (trace - gap), kmax)]
        total = None
        denom_min = None
        for k in k_x:
            denom = 1.0 - s * k
            np.maximum(denom, 0.25, out=denom)
            part = _clip(k / denom, kmax)
            total = part if total is None else total + part
            denom_min = denom if denom_min is None else np.minimum(denom_min, denom)
        if measure and len(total):
            # d k(y) / d k(x) = 1 / (1 − s k)²: the extension amplifies the
            # diffusion-like curvature term; the time step must follow.
            self._curvature_gain = max(1.0, 1.0 / float(np.min(denom_min)) ** 2)
            self._last_kappa_max = float(np.max(np.abs(total)))
        elif measure:
            self._curvature_gain, self._last_kappa_max = 1.0, 0.0
        return total

    def _speeds(self, phi: NDArray[np.floating], grad: NDArray[np.floating]) -> NodeSpeeds:
        """Speeds at the layer nodes, with image features taken at their closest points.

        ``grad`` (d, L) is the centred gradient at the layer nodes. For image-driven
        models the normal speed is also taken half a node spacing inside and
        outside the closest point; its slope along the normal (``slope``) lets
        the step treat the speed's pull toward its zero linearly implicitly.
        """
        b = self._band
        names = needed_features(self.params.model, edge_weight=self.params.edge_weight)
        act = b.active[b.layer]
        count = len(act)
        if not names:
            return node_speeds(self.params, intensity=None, edge=None, edge_gradient=None, normal=None,
                               c_in=0.0, c_out=0.0, sigma_mm=self.features.sigma_mm, count=count)
        g2 = np.maximum(np.sum(grad * grad, axis=0), 1e-12)
        normal = (grad / np.sqrt(g2)).T
        closest_mm = b.positions[act] - (phi[act] / np.sqrt(g2))[:, None] * normal
        if self.params.model == "region" and b.local_in is not None:
            c_in: NDArray[np.floating] | float = self.region_means()[0]
            c_out: NDArray[np.floating] | float = b.local_out
        else:
            c_in, c_out = self.region_means()
        half = 0.5 * self.h
        upper = np.array(self.shape) - 1.0
        # the closest points, then half a spacing inside and outside, in one sampling pass
        probe = np.concatenate([closest_mm, closest_mm - half * normal, closest_mm + half * normal])
        px = np.clip(probe / self.features.spacing, 0.0, upper)
        sampled: dict[str, NDArray[np.floating]] = {}
        for name in names:
            if name == "edge_gradient":
                sampled[name] = np.stack([self.features.sample(f"edge_gradient{i}", px)
                                          for i in range(self.ndim)], axis=1)
            elif name == "smoothed" and self.params.model == "region" and self.params.outline_averaging > 0:
                # the region model reads the image itself at the outline: its noise is
                # pooled along the outline, not blurred across the edge (without
                # averaging it reads the smoothed image; the window model always
                # does: its window is estimated on it)
                sampled[name] = self.features.sample("image", px)
            else:
                sampled[name] = self.features.sample(name, px)
        normals = np.concatenate([normal, normal, normal])
        c_out3 = np.tile(c_out, 3) if np.ndim(c_out) else c_out
        all3 = node_speeds(self.params, intensity=sampled.get("smoothed"), edge=sampled.get("edge"),
                           edge_gradient=sampled.get("edge_gradient"), normal=normals, c_in=c_in, c_out=c_out3,
                           sigma_mm=self.features.sigma_mm, count=3 * count)
        v = all3.normal.reshape(3, count)
        a = all3.curvature[:count] if np.ndim(all3.curvature) else all3.curvature
        speed, slope = v[0], (v[2] - v[1]) / (2.0 * half)
        if self.params.outline_averaging > 0:
            # nodes where φ has flattened (|∇φ| < ½, e.g. inside a small structure
            # long after its last reinitialisation) have no reliable closest point:
            # a zero normal leaves them out of the average
            trusted = np.where(((g2 >= 0.25) & ~b.barrier[act] & ~b.frozen[act])[:, None], normal, 0.0)
            averaged = average_along_outline(np.column_stack([speed, slope]), b.positions[act],
                                             self._layer_pairs(), trusted, self.params.outline_averaging)
            speed, slope = averaged[:, 0], averaged[:, 1]
        return NodeSpeeds(speed, a * self._part_scales(closest_mm, normal, b.positions[act], g2 >= 0.25), slope=slope)

    @property
    def smoothness_scale(self) -> float:
        """The smallest smoothness scale applied to any part of the front (1: full smoothness).

        The region and window models scale their smoothness by min(1, ρ /
        ((d − 1)·SMALL_STRUCTURE)), ρ a part's mean radius (mm): curvature
        motion holds a resting front where the image speed equals a·κ, an
        inward shift of about a·κ / (the speed's slope); for a disk of radius
        3 px at smoothness 1 that left 56 % of its area. κ sums d − 1
        principal curvatures, hence the (d − 1): a ball and a disk of the same
        radius shift alike. Each part of the front (:meth:`_part_scales`) has
        its own scale; this is the smallest at the last step (before the first
        step: the whole front's). 1 for the other models.
        """
        if self.params.model not in ("region", "window"):
            return 1.0
        if self._applied_scale is not None:
            return self._applied_scale
        return self._whole_scale()

    _applied_scale: float | None = None

    def _whole_scale(self) -> float:
        """The scale for the whole front as one structure: ρ = d·V/S.

        V from the pixels inside, S from the layer's node count (a slab
        2·LAYER_WIDTH node spacings thick).
        """
        b = self._band
        volume = self._sums[1] * float(np.prod(self.features.spacing))
        surface = len(b.layer) * self.h ** (self.ndim - 1) / (2.0 * LAYER_WIDTH)
        if surface <= 0:
            return 1.0
        return float(self._scale_for_radius(self.ndim * volume / surface))

    def _scale_for_radius(self, radius: NDArray[np.floating] | float) -> NDArray[np.floating] | float:
        """min(1, |ρ| / ((d − 1)·SMALL_STRUCTURE)) for mean radius ρ (mm)."""
        return np.minimum(1.0, np.abs(radius) / (SMALL_STRUCTURE * (self.ndim - 1)))

    def _layer_pairs(self) -> NDArray[np.int64]:
        """Neighbouring layer nodes (E, 2), indices into the layer: lattice neighbours along axes and face diagonals."""
        b = self._band
        if b.layer_pairs is None:
            nodes = b.active[b.layer]
            spacing = self.layout.pair_distance(b, nodes)
            # lattice neighbours along axes and face diagonals are within 1.5 spacings
            b.layer_pairs = cKDTree(b.positions[nodes]).query_pairs(1.5 * spacing, output_type="ndarray")
        return b.layer_pairs

    def _layer_parts(self) -> tuple[NDArray[np.int64], int]:
        """Connected parts of the layer (one per closed outline: each structure, each hole), per layer node."""
        b = self._band
        if b.layer_parts is None:
            size = len(b.layer)
            pairs = self._layer_pairs()
            graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(size, size))
            count, labels = connected_components(graph, directed=False)
            b.layer_parts = (labels.astype(np.int64), int(count))
        return b.layer_parts

    def _part_scales(self, closest_mm: NDArray[np.floating], normal: NDArray[np.floating],
                     nodes_mm: NDArray[np.floating], trusted: NDArray[np.bool_]) -> NDArray[np.floating] | float:
        """Smoothness scale per layer node: :attr:`smoothness_scale` for each part of the front on its own.

        One structure: the whole front's scale (:meth:`_whole_scale`). Several (seeds
        grown apart, a structure with a hole): each part's mean radius by the
        divergence theorem, ρ = d·V/S = mean over its outline of (y − ȳ)·n
        (y the closest points, ȳ their mean, n the outward normals; negative
        for a hole), so a small part keeps its size beside a large one. Only
        ``trusted`` nodes count (|∇φ| ≥ ½: where φ has flattened, the closest
        point y = x − φ∇φ/|∇φ|² lands far off). A part whose layer nodes
        (``nodes_mm``) reach the image border is not closed: it takes the
        whole front's scale.
        """
        if self.params.model not in ("region", "window"):
            return 1.0
        labels, count = self._layer_parts()
        whole = self._whole_scale()
        b = self._band
        thin = (None if b.thickness is None or len(b.thickness) != len(labels)
                else np.asarray(self._scale_for_radius(b.thickness), dtype=float))
        if count == 1:
            if thin is None or np.all(thin >= whole):
                self._applied_scale = whole
                return whole
            per_node = np.minimum(whole, thin)
            self._applied_scale = float(np.min(per_node))
            return per_node
        use = trusted.astype(float)
        weights = np.bincount(labels, use, minlength=count)
        if np.any(weights == 0):  # a part with no trusted node: all of its nodes count
            use = np.where(weights[labels] == 0, 1.0, use)
            weights = np.bincount(labels, use, minlength=count)
        centre = np.stack([np.bincount(labels, use * closest_mm[:, i], count) for i in range(self.ndim)], axis=1)
        centre /= weights[:, None]
        radius = np.bincount(labels, use * np.sum((closest_mm - centre[labels]) * normal, axis=1), count) / weights
        scale = np.asarray(self._scale_for_radius(radius), dtype=float)
        border = np.any((nodes_mm < 2.0 * self.h) | (nodes_mm > self._extent_mm - 2.0 * self.h), axis=1)
        scale[np.unique(labels[border])] = whole
        per_node = scale[labels] if thin is None else np.minimum(scale[labels], thin)
        self._applied_scale = float(np.min(per_node))
        return per_node

    @property
    def _extent_mm(self) -> NDArray[np.floating]:
        """Position (mm) of the last pixel centre along each axis."""
        return (np.array(self.shape) - 1.0) * self.features.spacing

    def _stage_speeds(self, speeds: NodeSpeeds) -> _StageSpeeds:
        """The layer's speeds extended to every active node (the extension velocities of one step)."""
        b = self._band
        normal = speeds.normal[b.source] if np.any(speeds.normal != 0) else None
        a = speeds.curvature
        curving = bool(np.any(np.asarray(a) != 0))
        a_all = a[b.source] if np.ndim(a) else a
        if b.held is None:
            b.held = (np.flatnonzero(b.frozen[b.active]), np.flatnonzero(b.barrier[b.active]))
        return _StageSpeeds(normal, a if curving else None, a_all * self.layout.damping, *b.held)

    def _rate(self, phi: NDArray[np.floating], speeds: _StageSpeeds,
              layer: tuple[NDArray[np.floating], NDArray[np.floating] | None] | None = None,
              measure: bool = False) -> NDArray[np.floating]:
        """φ_t at the active nodes (extension velocities from the front's layer).

        The curvature of the front comes from the layer nodes (``layer``: their
        derivatives, if already known); the other derivatives from
        :meth:`_step_derivatives`. ``measure``: record the largest curvature
        and its extension's gain for the time step (:meth:`_front_curvature`).
        """
        b = self._band
        d = self.ndim
        rows = self._step_derivatives(phi)
        grad, back, fwd, hv = rows[:d], rows[d:2 * d], rows[2 * d:3 * d], rows[3 * d]
        outward, inward = _upwind_squares(back, fwd)
        if speeds.normal is not None:
            # Godunov Hamiltonian (Osher & Fedkiw 2003, eq. 6.3-6.4).
            rate = -speeds.normal * np.sqrt(np.where(speeds.normal > 0, outward, inward))
        else:
            rate = np.zeros(len(b.active))
        if speeds.curvature is not None:
            grad_l, hess_l = layer if layer is not None and layer[1] is not None else self._layer_derivatives(phi)
            kappa = self._front_curvature(phi[b.active[b.layer]], grad_l, hess_l, measure=measure)
            motion = (speeds.curvature * kappa)[b.source]  # curvature part of the normal speed (inward for κ > 0)
            # Centred |∇φ| is accurate where φ is smooth, but on a kink of the
            # distance function (the midline of a part that is collapsing) it
            # tends to 0 and the part would linger there; the upwind |∇φ| of
            # the same motion is the viscosity solution's (Osher & Fedkiw 2003,
            # §6.4). Where the two differ by more than KINK_GRADIENT, take it.
            gnorm = np.sqrt(_sum_rows(grad * grad))
            upwind = np.sqrt(np.where(motion < 0, outward, inward))  # the Godunov |∇φ| of speed −motion
            gnorm = np.where(np.abs(gnorm - upwind) > KINK_GRADIENT, upwind, gnorm)
            rate += motion * gnorm - speeds.damping * hv
        if len(speeds.frozen):
            rate[speeds.frozen] = 0.0
        if len(speeds.barrier):
            rate[speeds.barrier] = np.maximum(rate[speeds.barrier], 0.0)
        return rate

    def _step_derivatives(self, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        """(3d + 1, A) at the active nodes, one row per operator (:func:`step_labels`): ∂_i, ∂_i⁻, ∂_i⁺, hyperviscosity.

        Rows keep each derivative contiguous for the element-wise work that
        follows (a column per operator would be strided).
        """
        return self.layout.step_derivatives(self._band, phi)

    _lattice_h: float | None = None
    #: (|φ| at the last rebuild, the safe distance, the nodes that were beyond it) for :meth:`_needs_rebuild`
    _far_nodes: tuple[NDArray[np.floating], float, NDArray[np.int64]] | None = None
    _rebuild_drift: float = 1.0  # the layer's ||∇φ| − 1| percentile right after the last rebuild
    _curvature_gain: float = 1.0
    _last_kappa_max: float = 0.0
    _since_reinit: int = 0
    _vanished: bool = False
    _noise: float = 0.0  # robust std of the smoothed intensities inside the initial front

    def _time_step(self, speeds: NodeSpeeds, kappa_max: float) -> tuple[float, int]:
        """Time step and number of rate evaluations (RKL2 stages, or 3 for SSP-RK3).

        The step lets the front move at most ``cfl`` node spacings (normal
        speed |V| + a|κ|); the stages make the RKL2 stability interval cover
        the curvature term's spectral radius (super time stepping), and the
        step is shortened to one stage fewer's stability limit where that
        advances more time per evaluation (:func:`engine.numerics.time_stepping.rkl2_step`).
        SSP-RK3 instead shortens the step to forward Euler's limit for that
        spectral radius, 2/ρ (its own real-axis limit is about 2.51/ρ).
        """
        h = self.h
        vmax = float(np.max(np.abs(speeds.normal))) if len(speeds.normal) else 0.0
        amax = float(np.max(speeds.curvature)) if np.ndim(speeds.curvature) else float(speeds.curvature)
        speed = max(vmax + amax * kappa_max, MIN_SPEED)
        dt = self.params.cfl * h / speed
        if self.params.integrator == "ssp_rk3":
            if amax > 0:
                dt = min(dt, 2.0 / (amax * self.layout.spectral_radius(self._band) * self._curvature_gain))
            return dt, 3
        stages = 2
        if amax > 0:
            radius = amax * self.layout.spectral_radius(self._band) * self._curvature_gain
            dt, stages = rkl2_step(dt, 2.0 / radius)
        return dt, stages

    def _full_rate(self, phi: NDArray[np.floating], speeds: _StageSpeeds,
                   layer: tuple[NDArray[np.floating], NDArray[np.floating] | None] | None = None,
                   measure: bool = False) -> NDArray[np.floating]:
        """φ_t at every band node; edge nodes take the rate of the layer node nearest their closest front point."""
        b = self._band
        rate = self._rate(phi, speeds, layer, measure)
        full = np.empty_like(phi)
        full[b.active] = rate
        full[b.edge_nodes] = rate[b.layer[b.edge_source]]
        return full

    def step(self, n: int = 1, *, dt_max: float | None = None) -> None:
        """Advance ``n`` time steps (``params.integrator``: RKL2 super time steps or SSP-RK3; the band is rebuilt when needed)."""
        if n < 0:
            raise ValueError(f"n must be >= 0, got {n}")
        with single_thread_blas():
            self._step(int(n), dt_max)

    def _step(self, n: int, dt_max: float | None) -> None:
        for _ in range(n):
            with self._lock:  # a reader waits for at most one step
                self._one_step(dt_max)

    def _one_step(self, dt_max: float | None) -> None:
        rk3 = self.params.integrator == "ssp_rk3"
        if self.vanished:
            self.steps += 1
            return
        t0 = _time.perf_counter()
        b = self._band
        phi0 = self._phi
        layer = self._layer_derivatives(phi0)
        speeds = self._speeds(phi0, layer[0])
        self._last_kappa_max = 0.0
        r0 = self._full_rate(phi0, self._stage_speeds(speeds), layer, measure=True)
        kappa_max = self._last_kappa_max
        dt, stages = self._time_step(speeds, kappa_max)
        if dt_max is not None and dt_max < dt:
            dt = dt_max
            if not rk3 and np.any(np.asarray(speeds.curvature) != 0):
                radius = float(np.max(speeds.curvature)) * self.layout.spectral_radius(self._band) * self._curvature_gain
                stages = rkl2_stages(dt, 2.0 / radius)
        factor = speeds.relax_factor(dt)
        if factor is not None:
            # every term of the rate scales with the (positive) factor that relaxes
            # the speeds, so the first rate follows without a second evaluation
            r0[b.active] *= factor[b.source]
            r0[b.edge_nodes] *= factor[b.edge_source]
        stage_speeds = self._stage_speeds(speeds.relaxed(dt))
        if rk3:
            new = ssp_rk3(phi0, lambda p: self._full_rate(p, stage_speeds), dt, first_rate=r0)
        else:
            new = rkl2(phi0, lambda p: self._full_rate(p, stage_speeds), dt, stages, first_rate=r0)
        # RKL2 combines stages with some negative weights, so hold pins and
        # barriers on the result, not only on the rates.
        if np.any(b.frozen):
            new[b.frozen] = phi0[b.frozen]
        if np.any(b.barrier):
            new[b.barrier] = np.maximum(new[b.barrier], phi0[b.barrier])
        self._phi = new
        self._coeffs = None
        self.time += dt
        self.steps += 1
        self._record_motion()
        self.timings["evaluations"] = self.timings.get("evaluations", 0) + stages
        self._sync_inside()
        if np.min(new) >= 0.0 or np.max(new) < 0.0:  # no zero crossing left
            self._vanish()
        elif self.steps % STATISTICS_EVERY == 0 and self._layer_is_stale():
            self._refresh_layer()
        self.timings["step"] += _time.perf_counter() - t0
        if self._vanished:
            return
        needs = self._needs_rebuild()
        flattened = not needs and self.steps % STATISTICS_EVERY == 0 and self._has_flattened()
        if needs or flattened:
            try:
                self.rebuild(reinitialise=True if flattened else None)
            except FrontVanished:
                self._vanish()

    def _layer_drift(self, phi: NDArray[np.floating]) -> float:
        """90th percentile of ||∇φ| − 1| at the layer nodes (1 when the layer is empty)."""
        grad = self._layer_derivatives(phi, hessian=False)[0]
        dev = np.abs(np.sqrt(np.sum(grad * grad, axis=0)) - 1.0)
        return float(np.percentile(dev, 90)) if len(dev) else 1.0

    def _has_flattened(self) -> bool:
        """True once φ next to the front is FLAT_DRIFT further from a distance than after the last rebuild.

        The comparison is with the layer's figure right after the last
        rebuild, and only where that was close to a distance (percentile below
        FLAT_DRIFT): a front whose geometry keeps |∇φ| away from 1 (a strip
        thinner than the layer) would otherwise rebuild again and again.
        """
        return self._rebuild_drift < FLAT_DRIFT and self._layer_drift(self._phi) > self._rebuild_drift + FLAT_DRIFT

    def _layer_is_stale(self) -> bool:
        """True once the front moved LAYER_DRIFT node spacings at some layer node, or every LAYER_IDLE_STEPS steps."""
        b = self._band
        if self.steps % LAYER_IDLE_STEPS == 0 or b.layer_phi is None:
            return True
        moved = np.abs(self._phi[b.active[b.layer]] - b.layer_phi)
        return bool(np.max(moved) > LAYER_DRIFT * self.h) if len(moved) else True

    def _refresh_layer(self) -> None:
        """Re-pick the layer next to the front (and the region statistics) as the front moves."""
        b = self._band
        try:
            b.layer, b.source, b.edge_source = self._front_layer(b.indices, self._phi, b.active, b.edge_nodes,
                                                                 b.lookup)
        except FrontVanished:
            self._vanish()
            return
        b.layer_phi = self._phi[b.active[b.layer]]
        b.layer_operators = b.layer_parts = b.layer_pairs = None
        self._update_layer_statistics()

    @property
    def vanished(self) -> bool:
        """True once the outline has shrunk to nothing (or filled the whole image)."""
        return self._vanished

    def _vanish(self) -> None:
        """The zero set is gone: everything is inside or nothing is; stepping becomes a no-op.

        Not converged: there is no outline left to have come to rest (see :attr:`vanished`).
        """
        self._inside[:] = bool(np.all(self._phi < 0))
        self._reset_sums()
        self._vanished = True
        self.converged = False

    def _record_motion(self) -> None:
        """Track the outline's motion (:mod:`engine.front.convergence`) after a step; set ``converged`` when it stopped."""
        monitor = self._motion_monitor()
        crossings = None
        if monitor.due(self.steps):
            b = self._band
            crossings = self._crossings(b.indices, self._phi, b.lookup)
        self.converged = monitor.update(self.steps, crossings)
        if self.converged and not self._rest_reinitialised and not self._vanished and (
                self._layer_drift(self._phi) > self._rebuild_drift + REINIT_DRIFT):
            # φ next to the outline is no longer a distance: its speeds were read at
            # the wrong closest points, and the resting place may be a false one (a
            # 3 px disk grown from a flood rested at 86 % of its area, 95 % once
            # reinitialised); reinitialise and watch the outline again (once: where φ
            # cannot stay a distance, as in a strip two nodes wide, the next rest counts)
            self._rest_reinitialised = True
            try:
                self.rebuild(reinitialise=True)
            except FrontVanished:
                self._vanish()
                return
            monitor.clear()
            self.converged = False

    def _restart_convergence(self) -> None:
        """Forget the outline's recent motion (after an edit, pins or new settings)."""
        self._motion_monitor().clear()
        self._rest_reinitialised = False

    _rest_reinitialised: bool = False

    def _motion_monitor(self) -> OutlineMotion:
        """The convergence monitor, made for the present settings (tolerance in mm, window in steps)."""
        tol = self.params.convergence_tol * float(np.min(self.features.spacing))
        if self._outline is None or (self._outline.tolerance_mm, self._outline.window) != (
                tol, self.params.convergence_window):
            self._outline = OutlineMotion(self.params.convergence_window, tol)
        return self._outline

    def _needs_rebuild(self) -> bool:
        """True once the front reaches nodes that were more than the safe distance from it."""
        safe = self._rebuild_distance()
        cached = self._far_nodes
        if cached is None or cached[0] is not self._phi_at_rebuild or cached[1] != safe:
            cached = self._far_nodes = (self._phi_at_rebuild, safe, np.flatnonzero(self._phi_at_rebuild > safe))
        far = cached[2]
        if not len(far):
            return False
        return bool(np.min(np.abs(self._phi[far])) < 0.75 * self.h)

    def _rebuild_distance(self) -> float:
        """How far (mm) the front may move before the band must follow it.

        Nodes within two stencil radii of the front must be complete and
        evolve normally, so the front may approach the band's edge up to
        that, with half a node spacing to spare.
        """
        return max(self.band_half_width - 2.0 * self._reach_mm - 0.5 * self.h, self.h)

    @_locked
    def rebuild(self, *, reinitialise: bool | None = None) -> None:
        """Move the band with the front; reinitialise φ to a signed distance when it has drifted.

        New band nodes always get Newton closest-point distances. The nodes
        already in the band keep their values, which extension velocities
        keep a signed distance, unless ``reinitialise`` is True, or None and
        the 90th percentile of ||∇φ| − 1| next to the front exceeds
        ``REINIT_DRIFT`` (image-driven speeds vary along the front, so the
        band slowly loses the distance property) or
        ``REINIT_EVERY`` rebuilds have passed.
        """
        b = self._band
        if reinitialise is None:
            reinitialise = self._layer_drift(self._phi) > REINIT_DRIFT or self._since_reinit >= REINIT_EVERY
        starts = self._crossings(b.indices, self._phi, b.lookup)
        moved = self._rebuild_distance() + float(np.max(self.step_mm))
        nodes = self.layout.rebuild_nodes(b, starts, moved, self.band_half_width)
        trusted = None if reinitialise else self._band_positions(nodes) >= 0
        self._build_band(starts, self._current_values, nodes=nodes, trusted=trusted)
        self._since_reinit = 0 if reinitialise else self._since_reinit + 1

    def run(self, *, until_time: float | None = None, max_steps: int | None = None,
            progress: Callable[[int, float], None] | None = None) -> None:
        """Step until converged, ``until_time`` is reached, or ``max_steps`` steps were taken."""
        if until_time is None and max_steps is None:
            max_steps = 20000
        with single_thread_blas():
            self._run(until_time, max_steps, progress)

    def _run(self, until_time: float | None, max_steps: int | None,
             progress: Callable[[int, float], None] | None) -> None:
        taken = 0
        while True:
            if max_steps is not None and taken >= max_steps:
                break
            if self.vanished:  # nothing left to move: the time simply passes
                if until_time is not None:
                    self.time = max(self.time, float(until_time))
                break
            if until_time is not None:
                remaining = until_time - self.time
                if remaining <= 1e-12:
                    break
                self._step(1, remaining)
            else:
                self._step(1, None)
            taken += 1
            if progress is not None:
                progress(self.steps, self.time)
            if until_time is None and self.converged:
                break

    # ------------------------------------------------------------- read-outs
    def _interpolant(self) -> tuple[LocalInterpolant, NDArray[np.floating]]:
        """The band's local interpolant and the coefficients of the present φ (both cached until they change)."""
        b = self._band
        if b.interpolant is None:
            interp = self.layout.band_interpolant(b, self.params)
            if interp is None:
                raise FrontVanished("the band is too thin for an interpolant")
            b.interpolant = interp
        if self._coeffs is None:
            self._coeffs = self.layout.coefficients(b.interpolant, self._phi)
        return b.interpolant, self._coeffs

    @property
    def phi(self) -> NDArray[np.floating]:
        """φ at the band nodes (mm); read-only view."""
        out = self._phi.view()
        out.flags.writeable = False
        return out

    def _to_mm(self, points_px: ArrayLike) -> NDArray[np.floating]:
        pts = np.asarray(points_px, dtype=float)
        if pts.ndim == 1:
            pts = pts[None]
        if pts.ndim != 2 or pts.shape[1] != self.ndim:
            raise ValueError(f"points must be (N, {self.ndim}) pixel coordinates, got shape {pts.shape}")
        if not np.all(np.isfinite(pts)):
            raise ValueError("points contain NaN or infinite coordinates")
        return pts * self.features.spacing

    @_locked
    def phi_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Signed distance (mm) to the front at pixel coordinates.

        Inside the band it is the RBF interpolant of φ; beyond it, the signed
        distance to the nearest vertex of the zero set (accurate to about h).
        """
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        value, _, _ = interp.evaluate(x, coeffs, order=0)
        dist_owner, _ = interp.tree.query(x)
        outside_band = dist_owner > 1.5 * float(np.max(self.step_mm))
        if np.any(outside_band):
            b = self._band
            verts = self._crossings(b.indices, self._phi, b.lookup)
            d, _ = cKDTree(verts).query(x[outside_band])
            px = np.clip(np.rint(x[outside_band] / self.features.spacing).astype(np.int64), 0,
                         np.array(self.shape) - 1)
            value[outside_band] = np.where(self._inside[tuple(px.T)], -d, d)
        return value

    @_locked
    def curvature_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Curvature κ = ∇·(∇φ/|∇φ|) (1/mm) of the level set through each point."""
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        _, grad, hess = interp.evaluate(x, coeffs)
        return curvature_from_derivatives(grad, hess)

    @_locked
    def normals_at(self, points_px: ArrayLike) -> NDArray[np.floating]:
        """Unit outward normals ∇φ/|∇φ| at pixel coordinates, in pixel axes order (mm-based directions)."""
        x = self._to_mm(points_px)
        interp, coeffs = self._interpolant()
        _, grad, _ = interp.evaluate(x, coeffs, order=1)
        return grad / np.maximum(np.linalg.norm(grad, axis=1, keepdims=True), 1e-300)

    @_locked
    def contours(self, *, refine: bool = True) -> list[NDArray[np.floating]]:
        """Closed sub-pixel outlines (2-D), (k, 2) pixel (row, col) arrays.

        Outer boundaries run counter-clockwise on screen (positive shoelace
        area on (row, col)), holes clockwise. With ``refine`` every vertex is
        projected onto the zero set of the RBF interpolant by Newton's method.
        """
        if self.ndim != 2:
            raise ValueError("contours() is for 2-D fronts; use surface() in 3-D")
        if self.vanished:
            return []
        from engine.analysis.contours import band_contours

        nodes, values, detail = self.layout.contour_grid(self._band, self._phi)
        lines = band_contours(nodes, values, detail=detail)
        if not refine or not lines:
            return lines
        interp, coeffs = self._interpolant()
        return refine_polylines(lines, interp, coeffs, self.features.spacing)

    def _contour_set(self) -> tuple[list[NDArray[np.floating]], NDArray[np.bool_]]:
        """Refined contours and which are closed (open ones end on the image's border, or where the band is cut)."""
        from engine.analysis.contours import band_contour_set

        nodes, values, detail = self.layout.contour_grid(self._band, self._phi)
        found = band_contour_set(nodes, values, detail=detail)
        if not found.polylines:
            return [], found.closed
        interp, coeffs = self._interpolant()
        return refine_polylines(found.polylines, interp, coeffs, self.features.spacing), found.closed

    @_locked
    def surface(self) -> tuple[NDArray[np.floating], NDArray[np.int64]]:
        """Triangulated zero set of a 3-D front: vertices (k, 3) in voxel coordinates and faces (m, 3).

        Marching cubes (Lorensen & Cline, SIGGRAPH 1987; scikit-image's
        implementation) on the band's bounding box; lattice nodes outside the
        band take ±(band half-width) with the sign of their voxel. Scattered
        fronts use φ at the voxel centres (:meth:`pixel_phi`).
        """
        if self.ndim != 3:
            raise ValueError("surface() is for 3-D fronts; use contours() in 2-D")
        if self.vanished:
            return np.empty((0, 3)), np.empty((0, 3), dtype=np.int64)
        from skimage.measure import marching_cubes

        box = self.layout.surface_grid(self._band, self._phi,
                                       lambda keys: _FAR * self.band_half_width * self._sign_from_pixels(keys))
        if box is None:  # φ at the voxel centres
            verts, faces, _, _ = marching_cubes(self.pixel_phi(), level=0.0)
            return verts, faces.astype(np.int64)
        dense, corner_mm = box
        verts, faces, _, _ = marching_cubes(dense, level=0.0, spacing=tuple(self.step_mm))
        return (verts + corner_mm) / self.features.spacing, faces.astype(np.int64)

    @_locked
    def pixel_phi(self) -> NDArray[np.floating]:
        """φ (mm) at every pixel centre: band values where the band has a node there, ±(beyond the band) elsewhere.

        With scattered nodes the band's values are interpolated to the pixel
        centres the active nodes cover.
        """
        out = np.where(self._current_inside(), -1.0, 1.0) * (_FAR * self.band_half_width)
        if not self.vanished:
            b = self._band
            out[b.pixel_index] = self._pixel_band_values()
        return out

    @_locked
    def mask(self) -> NDArray[np.bool_]:
        """Pixels whose centre lies inside the front (φ < 0)."""
        return self._current_inside()

    def _current_inside(self) -> NDArray[np.bool_]:
        """A copy of the pixel inside image with the band's pixel centres as φ has them now."""
        inside = self._inside.copy()
        if not self.vanished:
            inside[self._band.pixel_index] = self._band_pixels_inside()
        return inside

    @_locked
    def area_mm2(self) -> float:
        """Area (2-D, from the refined contours) or volume (3-D, voxel count) inside the front, within the image.

        Where the outline runs off the image, the border closes it
        (:func:`engine.analysis.clipped_area.area_in_image`).
        """
        if self.ndim == 2 and not self.vanished:
            from engine.analysis.clipped_area import area_in_image

            lines, closed = self._contour_set()
            inside = self.mask()
            border = np.concatenate([inside[0], inside[-1], inside[:, 0], inside[:, -1]])
            return area_in_image(lines, closed, self.shape, self.features.spacing, border_inside=bool(border.all()))
        return float(self._inside.sum() * np.prod(self.features.spacing))

    @_locked
    def perimeter_mm(self) -> float:
        """Total length of the outlines (mm), 2-D only."""
        from engine.analysis.contours import polyline_length

        sp = self.features.spacing
        return float(sum(polyline_length(c * sp) for c in self.contours()))

    # ------------------------------------------------------------------ edits
    def _edit(self, combine: Callable[[NDArray[np.floating], NDArray[np.floating], NDArray[np.floating]],
                                      NDArray[np.floating]],
              extra_starts: NDArray[np.floating] | None = None) -> None:
        """Apply ``combine(values, positions_mm, pixels)`` to φ at nodes and pixel centres, and rebuild."""
        if self.vanished:
            raise ValueError("the outline has vanished; start a new front from seeds or a mask")
        b = self._band
        starts = self._crossings(b.indices, self._phi, b.lookup)
        if extra_starts is not None and len(extra_starts):
            starts = np.concatenate([starts, extra_starts]) if len(starts) else extra_starts

        def values_at(indices: NDArray[np.int64]) -> NDArray[np.floating]:
            return combine(self._current_values(indices), self.layout.positions(indices),
                           self.layout.pixels(indices))

        # the inside image must follow the edit beyond the band as well
        self._apply_to_pixels(combine)
        self._build_band(starts, values_at)
        self.converged = False
        self._restart_convergence()

    def _apply_to_pixels(self, combine: Callable[[NDArray[np.floating], NDArray[np.floating],
                                                  NDArray[np.floating]], NDArray[np.floating]]) -> None:
        """Re-evaluate the edit at every pixel centre it can change (those near the stroke)."""
        grid = np.argwhere(np.ones(self.shape, dtype=bool))
        base = np.where(self._inside.reshape(-1), -1.0, 1.0) * _FAR * self.band_half_width
        values, mm, px = self.layout.pixel_grid_values(self._band, self._phi, grid, base, self.features.spacing)
        new_inside = (combine(values, mm, px) < 0).reshape(self.shape)
        if np.array_equal(new_inside, self._inside):
            return
        self._inside = new_inside
        self._reset_sums()

    def _stroke(self, stroke: object) -> tuple[NDArray[np.floating], float]:
        if isinstance(stroke, tuple) and len(stroke) == 2:
            points, radius = stroke
        else:
            raise ValueError("stroke must be (points_px, radius_px): a polyline and a radius in pixels")
        pts = np.asarray(points, dtype=float).reshape(-1, self.ndim)
        if len(pts) == 0 or not np.all(np.isfinite(pts)):
            raise ValueError("stroke points must be finite pixel coordinates")
        if not float(radius) > 0:
            raise ValueError(f"stroke radius must be > 0 pixels, got {radius!r}")
        return pts * self.features.spacing, float(radius) * float(np.min(self.features.spacing))

    @_locked
    def extend(self, stroke: tuple[ArrayLike, float]) -> None:
        """Add the area swept by a brush stroke: φ ← min(φ, d_stroke)."""
        pts, radius = self._stroke(stroke)
        self._edit(lambda v, mm, px: np.minimum(v, stroke_distance(mm, pts, radius)),
                   _stroke_outline(pts, radius, self.h))

    @_locked
    def trim(self, stroke: tuple[ArrayLike, float]) -> None:
        """Cut the area swept by a brush stroke out: φ ← max(φ, −d_stroke)."""
        pts, radius = self._stroke(stroke)
        self._edit(lambda v, mm, px: np.maximum(v, -stroke_distance(mm, pts, radius)),
                   _stroke_outline(pts, radius, self.h))

    @_locked
    def margin(self, mm: float) -> None:
        """Grow (mm > 0) or shrink (mm < 0) the outline by a margin: φ ← φ − mm, then reinitialise."""
        if not np.isfinite(mm):
            raise ValueError(f"mm must be finite, got {mm!r}")
        chunk = 0.4 * self.band_half_width
        remaining = float(mm)
        while abs(remaining) > 0:
            part = float(np.clip(remaining, -chunk, chunk))
            self._edit(lambda v, mm, px, p=part: v - p)
            remaining -= part
            if abs(remaining) < 1e-12:
                break

    @_locked
    def keep_parts(self, points_px: ArrayLike) -> int:
        """Remove every separate part of the inside that holds none of ``points_px``; returns how many went.

        Parts are the connected components of the pixel inside image (full
        connectivity). Nothing is removed when no part holds any of the
        points (so a front that moved off its seeds is never emptied).
        """
        pts = np.asarray(points_px, dtype=float).reshape(-1, self.ndim)
        if len(pts) == 0 or not np.all(np.isfinite(pts)):
            raise ValueError("points_px must be finite pixel coordinates")
        inside = self.mask()
        labels, count = ndimage.label(inside, structure=np.ones((3,) * self.ndim, dtype=bool))
        if count <= 1:
            return 0
        px = np.clip(np.rint(pts).astype(np.int64), 0, np.array(self.shape) - 1)
        held = np.unique(labels[tuple(px.T)])
        held = held[held > 0]
        if len(held) == 0:
            return 0
        drop = np.ones(count + 1, dtype=bool)
        drop[0] = False
        drop[held] = False
        if not np.any(drop):
            return 0
        # pixels of dropped parts, grown by one so nodes between pixel centres go too,
        # but never next to a kept part (whose outline must not move)
        box = np.ones((3,) * self.ndim, dtype=bool)
        kept = np.isin(labels, held)
        gone = ndimage.binary_dilation(drop[labels], structure=box) & ~ndimage.binary_dilation(kept, structure=box)
        far = _FAR * self.band_half_width

        def combine(values: NDArray[np.floating], mm: NDArray[np.floating],
                    px: NDArray[np.floating]) -> NDArray[np.floating]:
            px_idx = tuple(np.clip(np.rint(px).astype(np.int64), 0, np.array(self.shape) - 1).T)
            return np.where(gone[px_idx], np.maximum(values, far), values)

        self._edit(combine)
        return int(drop.sum())

    @_locked
    def pin(self, mask: ArrayLike | None, *, replace: bool = False) -> None:
        """Freeze the front inside ``mask`` (pixel array); ``None`` clears all pins."""
        self._pins = self._merge_mask(self._pins, mask, replace, "mask")
        self._refresh_node_masks()

    @_locked
    def set_barrier(self, mask: ArrayLike | None) -> None:
        """Area the front may not enter (other labels' locked outlines); ``None`` clears it."""
        self._barrier = self._merge_mask(None, mask, True, "mask")
        self._refresh_node_masks()

    def _merge_mask(self, old: NDArray[np.bool_] | None, mask: ArrayLike | None, replace: bool,
                    name: str) -> NDArray[np.bool_] | None:
        if mask is None:
            return None
        m = np.asarray(mask, dtype=bool)
        if m.shape != self.shape:
            raise ValueError(f"{name} shape {m.shape} does not match the image shape {self.shape}")
        if old is not None and not replace:
            m = m | old
        m = m.copy()
        m.flags.writeable = False
        return m

    def _refresh_node_masks(self) -> None:
        b = self._band
        b.frozen, b.barrier = self._node_masks(b.pixels)
        b.held = None
        if not self.vanished:
            self._sync_inside()  # a barrier holds pixel centres too (scattered nodes)
        self.converged = False
        self._restart_convergence()

    @_locked
    def set_params(self, **changes: object) -> None:
        """Change settings between steps without restarting (band settings trigger a rebuild)."""
        new = self.params.updated(**changes)
        rebuild = any(getattr(new, k) != getattr(self.params, k) for k in ("band_width", "stencil_size", "degree", "phs"))
        features = any(getattr(new, k) != getattr(self.params, k) for k in ("edge_sigma", "edge_contrast"))
        self.params = new
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
        self.converged = False
        self._restart_convergence()

    def _new_stencils(self, params: FrontParams) -> None:
        """Stencils for changed stencil settings (scattered: the same nodes with new per-node operators)."""
        self.layout = self.layout.with_settings(params, self._node_sets)

    # -------------------------------------------------------------- snapshots
    @_locked
    def snapshot(self) -> FrontSnapshot:
        """Exact copy of the evolving state (band arrays and a bit-packed inside image)."""
        b = self._band
        return FrontSnapshot(b.indices.copy(), self._phi.copy(), self._phi_at_rebuild.copy(),
                             np.packbits(self._inside.reshape(-1)), tuple(self._sums), self.time, self.steps,
                             self.converged, self._motion_monitor().state(), self.params, self._pins, self._barrier,
                             None if b.local_out is None else b.local_out.copy(), self._since_reinit,
                             self._rebuild_drift,
                             (b.layer.copy(), b.source.copy(), b.edge_source.copy(), b.layer_phi.copy()),
                             None if b.thickness is None else b.thickness.copy(), self._rest_reinitialised,
                             self._noise)

    @_locked
    def restore(self, snap: FrontSnapshot) -> None:
        """Return to ``snap``; stepping afterwards reproduces the same φ bit for bit."""
        if not isinstance(snap, FrontSnapshot):
            raise ValueError("snapshot must come from Front.snapshot()")
        if snap.indices.ndim != self.layout.key_ndim:
            raise ValueError("snapshot was taken on another node layout (lattice against scattered nodes)")
        size = int(np.prod(self.shape))
        inside = np.unpackbits(snap.inside_bits, count=size).astype(bool).reshape(self.shape)
        self._pins, self._barrier = snap.pins, snap.barrier
        if snap.params != self.params:
            self.params = snap.params
            self.features = compute_features(self.features.image, self.features.spacing,
                                             sigma_mm=snap.params.edge_sigma, contrast=snap.params.edge_contrast)
            self._new_stencils(snap.params)
        self._inside = inside
        self._sums = list(snap.sums)
        if snap.noise is not None:
            self._noise = snap.noise
        self._install_band(snap.indices.copy(), snap.phi.copy())
        self._phi_at_rebuild = snap.phi_at_rebuild.copy()
        # the layer and statistics of the last rebuild, not recomputed from the present φ
        if snap.layer:
            (self._band.layer, self._band.source, self._band.edge_source,
             self._band.layer_phi) = (a.copy() for a in snap.layer)
            self._band.layer_operators = self._band.layer_parts = self._band.layer_pairs = None
        if snap.local_out is not None:
            self._band.local_out = snap.local_out.copy()
        self._band.thickness = None if snap.thickness is None else snap.thickness.copy()
        self._rest_reinitialised = snap.rest_reinitialised
        self._since_reinit = snap.since_reinit
        self._rebuild_drift = snap.rebuild_drift
        self._vanished = False
        self.time, self.steps, self.converged = snap.time, snap.steps, snap.converged
        self._motion_monitor().restore(snap.motion)


# ---------------------------------------------------------------- helpers
def _clip(x: NDArray[np.floating], bound: float) -> NDArray[np.floating]:
    """x limited to [−bound, bound] (np.clip without its per-call overhead, which shows at every RKL2 stage)."""
    return np.minimum(np.maximum(x, -bound, out=x), bound, out=x)


#: Pixels per call of an initial front's function in :func:`_pixel_values`.
PIXEL_CHUNK = 1 << 21


def _pixel_values(oracle: Callable[[NDArray[np.floating]], NDArray[np.floating]], shape: tuple[int, ...],
                  spacing: NDArray[np.floating]) -> NDArray[np.floating]:
    """``oracle`` at every pixel centre, slab by slab along the first axis (bounded memory on large volumes)."""
    out = np.empty(shape)
    rows = max(1, PIXEL_CHUNK // int(np.prod(shape[1:])))
    for start in range(0, shape[0], rows):
        stop = min(start + rows, shape[0])
        grid = np.indices((stop - start,) + tuple(shape[1:])).reshape(len(shape), -1).T
        grid[:, 0] += start
        out[start:stop] = np.asarray(oracle(grid * spacing), dtype=float).reshape((stop - start,) + tuple(shape[1:]))
    return out


def _sum_rows(values: NDArray[np.floating]) -> NDArray[np.floating]:
    """Sum over the first axis of a (d, n) array (np.sum's per-call overhead shows at every stage)."""
    total = values[0].copy()
    for row in values[1:]:
        total += row
    return total


def _upwind_squares(back: NDArray[np.floating], fwd: NDArray[np.floating]
                    ) -> tuple[NDArray[np.floating], NDArray[np.floating]]:
    """Squared Godunov |∇φ| for outward and for inward motion (Osher & Fedkiw 2003, eq. 6.3-6.4).

    With s = sign(speed): |∂_i φ| = max(s·D⁻φ, −s·D⁺φ, 0); ``back``, ``fwd`` are
    (d, A). Outward (s = +1): max(D⁻, −D⁺, 0); inward: max(−D⁻, D⁺, 0) =
    −min(D⁻, −D⁺, 0). A node's upwind |∇φ| for any speed is the root of one of the two.
    """
    ahead = -fwd
    out = np.maximum(back, ahead)
    into = np.minimum(back, ahead, out=ahead)
    np.maximum(out, 0.0, out=out)
    np.minimum(into, 0.0, out=into)
    out *= out
    into *= into
    return _sum_rows(out), _sum_rows(into)


@lru_cache(maxsize=4)
def _hessian_rows(dim: int) -> NDArray[np.int64]:
    """(d, d): the row of ∂_i∂_j in :meth:`Front._layer_derivatives`'s values (:func:`layer_labels` order)."""
    labels = layer_labels(dim)
    rows = np.empty((dim, dim), dtype=np.int64)
    for i in range(dim):
        for j in range(dim):
            rows[i, j] = labels.index(f"d{min(i, j)}{max(i, j)}")
    return rows


@dataclass(frozen=True)
class _StageSpeeds:
    """One step's speeds as every RKL2 stage uses them (extended from the layer to the active nodes)."""

    normal: NDArray[np.floating] | None  # V per active node (None: no normal motion)
    curvature: NDArray[np.floating] | float | None  # a per layer node or one value (None: no curvature motion)
    damping: NDArray[np.floating] | float  # a·γ per active node: the hyperviscosity weight
    frozen: NDArray[np.int64]  # active positions that are pinned
    barrier: NDArray[np.int64]  # active positions inside a barrier


def _node_options(params: FrontParams, dim: int) -> tuple[int, int, int]:
    """(stencil size, degree, phs) of a scattered node set for these settings."""
    return params.stencil_size_for(dim), int(params.degree), int(params.phs)


def curvature_from_derivatives(grad: NDArray[np.floating], hess: NDArray[np.floating]) -> NDArray[np.floating]:
    """κ = (|g|² tr H − gᵀHg) / |g|³ (sum of principal curvatures)."""
    g2 = np.einsum("ni,ni->n", grad, grad)
    trace = np.trace(hess, axis1=1, axis2=2)
    ghg = np.einsum("ni,nij,nj->n", grad, hess, grad)
    return (g2 * trace - ghg) / np.maximum(g2, 1e-300) ** 1.5


def refine_polylines(lines: list[NDArray[np.floating]], interp: LocalInterpolant, coeffs: NDArray[np.floating],
                     spacing: NDArray[np.floating]) -> list[NDArray[np.floating]]:
    """Project contour vertices (pixel coordinates) onto the interpolant's zero set (Newton)."""
    counts = [len(c) for c in lines]
    pts = np.concatenate(lines) * spacing
    cp = closest_points(interp, coeffs, pts, start=pts, max_iter=8)
    out = cp.points / spacing
    return list(np.split(out, np.cumsum(counts)[:-1]))


def _stroke_outline(points_mm: NDArray[np.floating], radius: float, h: float) -> NDArray[np.floating]:
    """Points on the boundary of a brush stroke, as starts for the band around it."""
    dim = points_mm.shape[1]
    if dim == 2:
        angles = np.linspace(0, 2 * np.pi, max(16, int(2 * np.pi * radius / h)), endpoint=False)
        ring = radius * np.stack([np.cos(angles), np.sin(angles)], axis=1)
    else:
        n = max(32, int(4 * np.pi * radius**2 / h**2))
        k = np.arange(n) + 0.5
        phi_ang = np.arccos(1 - 2 * k / n)
        theta = np.pi * (1 + 5**0.5) * k
        ring = radius * np.stack([np.cos(phi_ang), np.sin(phi_ang) * np.cos(theta), np.sin(phi_ang) * np.sin(theta)], 1)
    dense = [points_mm[:1]]
    for a, b in zip(points_mm[:-1], points_mm[1:]):
        n = max(1, int(np.ceil(np.linalg.norm(b - a) / h)))
        dense.append(a + (b - a) * (np.arange(1, n + 1) / n)[:, None])
    path = np.concatenate(dense)
    return (path[:, None, :] + ring[None]).reshape(-1, dim)


def estimate_window(image: NDArray[np.floating], seeds: NDArray[np.floating]) -> tuple[float, float]:
    """Intensity window from the pixels inside the seed disks: median ± WINDOW_SPREAD robust standard deviations.

    The robust standard deviation is 1.4826 × the median absolute deviation
    (Hampel 1974; common practice).
    """
    inside = seed_disks(image.shape, seeds)
    return estimate_window_from_mask(image, inside)


def robust_std(values: NDArray[np.floating]) -> float:
    """1.4826 × the median absolute deviation (Hampel 1974; common practice)."""
    if values.size == 0:
        return 0.0
    med = float(np.median(values))
    return 1.4826 * float(np.median(np.abs(values - med)))


def estimate_window_from_mask(image: NDArray[np.floating], mask: NDArray[np.bool_]) -> tuple[float, float]:
    """Intensity window median ± WINDOW_SPREAD robust standard deviations of ``image`` inside ``mask``.

    Pass the smoothed image the speeds use, so the window matches them.
    """
    values = image[mask]
    med = float(np.median(values))
    spread = max(robust_std(values), 0.01 * (float(np.percentile(image, 99)) - float(np.percentile(image, 1))), 1e-6)
    return med - WINDOW_SPREAD * spread, med + WINDOW_SPREAD * spread
