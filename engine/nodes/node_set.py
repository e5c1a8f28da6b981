"""A fixed scattered node set for one image, with the band's RBF-FD operators cached per node.

The nodes are generated once per image with a spacing that follows the
image's edges (:mod:`engine.nodes.edge_spacing`), by the advancing-front
generator of :mod:`engine.nodes.scattered_nodes`. A front then works on a
*band* of these nodes: any subset of global node ids. Stencils
(:mod:`engine.nodes.scattered_stencils`) and RBF-FD weights
(:mod:`engine.nodes.scattered_weights`) are properties of single nodes in the
global set, so they are computed the first time a node enters a band and
cached for good; so are the interpolation weights of each pixel centre.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.image.features import ImageFeatures
from engine.nodes.checks import as_int, as_spacing, non_negative, positive
from engine.nodes.edge_spacing import edge_adaptive_spacing
from engine.nodes.node_graph import edge_crossings, neighbour_edges
from engine.nodes.pixel_interpolation import PixelWeightCache, band_pixel_matrix, check_pixel_indices, grown
from engine.nodes.scattered_nodes import scattered_nodes
from engine.nodes.scattered_stencils import node_stencils, positions_in
from engine.nodes.scattered_weights import band_operator_weights, operator_labels
from engine.nodes.spectral_bound import SPECTRAL_METHODS, curvature_spectral_bound
from engine.numerics.kernels import check_phs
from engine.numerics.polynomials import monomial_count

__all__ = ["ScatteredNodeSet"]

#: Rows of the per-node stores allocated at a time (grown by doubling).
_MIN_ROWS = 1024


class ScatteredNodeSet:
    """Scattered nodes over one image, generated once, with per-node cached stencils and weights.

    Parameters
    ----------
    shape : sequence of int
        Image shape (2-D or 3-D, array order). The nodes fill the box of the
        pixel centres, ``[0, (shape − 1) * spacing]`` mm.
    spacing : float or sequence of float
        Pixel spacing (mm) per axis; anisotropic pixels are fine.
    node_spacing : float or callable
        Requested node spacing (mm): a constant or a callable ``(N, d)``
        points (mm) → ``N`` spacings, e.g. from :func:`edge_adaptive_spacing`.
    stencil_size : int, optional
        Nodes per centred stencil (k nearest). Default as the front's
        ``FrontParams.stencil_size_for``: round(2 M) in 2-D, round(1.6 M) in
        3-D, M the number of monomials of degree ``degree`` (30 and 56 for
        degree 4).
    degree : int, default 4
        Polynomial degree of the centred operators (and of ``hv``).
    phs : int, default 5
        Odd PHS exponent of the centred and one-sided operators.
    upwind_degree : int, default 2
        Polynomial degree of the one-sided stencils, which hold
        ``2 M(upwind_degree) + 1`` nodes (13 in 2-D, 21 in 3-D).
    hv_scaling : float, default 6
        Exponent p of the per-node hyperviscosity factor ``(h_i / h_ref)^p``.
    hv_degree : int, optional
        Polynomial degree of the ``hv`` weights (default ``degree``). With
        ``hv_degree >= 6`` (and a stencil of more than M(hv_degree) nodes) the
        weights reproduce Δ³ exactly on polynomials of that degree; with the
        default they only annihilate polynomials of degree <= ``degree``,
        which is all a damping term needs: ``γ_i hv`` then changes a smooth
        φ by O(h^(degree+1)).
    edge_neighbours : int, optional
        Nearest neighbours per node in the graph of :meth:`edges`. Default 6
        in 2-D, 12 in 3-D.
    seed : int or None, default 0
        Seed of the node generator (fixed seed: identical nodes every run).
    max_nodes : int, default 2_000_000
        Safety limit of the generator.
    points : (N, d) array_like, optional
        Use these node positions (mm) instead of generating nodes.

    Attributes
    ----------
    points : (N, d) ndarray
        Node positions in mm (array axis order).
    pixels : (N, d) ndarray
        Node positions in pixel coordinates (pixel centres at integers).
    local_spacing : (N,) ndarray
        Requested spacing at each node (mm), h_i.
    reference_spacing : float
        h_ref, the largest requested spacing over the nodes.
    tree : scipy.spatial.cKDTree
        Over ``points``.
    labels : tuple of str
        Column labels of :meth:`operator_weights`.
    solves : int
        RBF-FD systems solved so far (one per stencil and kernel).

    Notes
    -----
    Nodes come from :func:`engine.nodes.scattered_nodes.scattered_nodes` (2-D: the
    advancing front of Fornberg & Flyer [1]_; 3-D: its height-field variant).
    Operators and their ``hv`` scaling are described in
    :mod:`engine.nodes.scattered_weights` ([2]_ for the RBF-FD weights, [3]_
    for the hyperviscosity scaling).

    Memory: the cached stencils and weights take about 2.6 kB per node that
    has been in a band in 2-D (10 operators, stencil width ~32) and about
    9.5 kB in 3-D (16 operators, stencil width ~70); pixel weights add
    0.5 kB (2-D) and 0.9 kB (3-D) per pixel.

    References
    ----------
    .. [1] B. Fornberg, N. Flyer, "Fast generation of 2-D node distributions
       for mesh-free PDE discretizations", Comput. Math. Appl. 69 (2015)
       531-544.
    .. [2] N. Flyer, B. Fornberg, V. Bayona, G. A. Barnett, J. Comput. Phys.
       321 (2016) 21-38.
    .. [3] B. Fornberg, E. Lehto, J. Comput. Phys. 230 (2011) 2270-2285.
    """

    def __init__(
        self,
        shape: Sequence[int],
        spacing: float | Sequence[float],
        node_spacing: float | Callable[[NDArray[np.floating]], ArrayLike],
        *,
        stencil_size: int | None = None,
        degree: int = 4,
        phs: int = 5,
        upwind_degree: int = 2,
        hv_scaling: float = 6.0,
        hv_degree: int | None = None,
        edge_neighbours: int | None = None,
        seed: int | None = 0,
        max_nodes: int = 2_000_000,
        points: ArrayLike | None = None,
    ) -> None:
        try:
            shp = tuple(int(s) for s in shape)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"shape: expected 2 or 3 integers, got {shape!r}") from exc
        if len(shp) not in (2, 3) or any(s < 2 for s in shp):
            raise ValueError(f"shape: expected 2 or 3 sizes >= 2, got {shape!r}")
        dim = len(shp)
        self.shape = shp
        self.dim = dim
        self.pixel_spacing = as_spacing(spacing, dim, "spacing")
        self.box_min = np.zeros(dim)
        self.box_max = (np.array(shp) - 1.0) * self.pixel_spacing
        self.degree = as_int(degree, "degree", 1, 8)
        try:
            check_phs(phs)
        except ValueError as exc:
            raise ValueError(f"phs: {exc}") from exc
        if phs < 3:
            raise ValueError(f"phs: second derivatives need phs >= 3, got {phs}")
        if self.degree < (phs - 1) // 2 or self.degree < 2:
            raise ValueError(f"degree: {self.degree} is too low for r^{phs} and second derivatives "
                             f"(need >= {max(2, (phs - 1) // 2)})")
        self.phs = int(phs)
        self.upwind_degree = as_int(upwind_degree, "upwind_degree", 1, 4)
        if self.upwind_degree < (self.phs - 1) // 2:
            raise ValueError(f"upwind_degree: {self.upwind_degree} is too low for r^{self.phs} "
                             f"(need >= {(self.phs - 1) // 2})")
        m = monomial_count(dim, self.degree)
        if stencil_size is None:
            stencil_size = round((2.0 if dim == 2 else 1.6) * m)
        self.stencil_size = as_int(stencil_size, "stencil_size", m + 1, 400)
        self.side_size = 2 * monomial_count(dim, self.upwind_degree) + 1
        self.hv_scaling = non_negative(hv_scaling, "hv_scaling")
        self.hv_degree = self.degree if hv_degree is None else as_int(hv_degree, "hv_degree", 3, 8)
        if monomial_count(dim, self.hv_degree) >= self.stencil_size:
            raise ValueError(f"hv_degree: {self.hv_degree} needs more than {monomial_count(dim, self.hv_degree)} "
                             f"stencil nodes; stencil_size is {self.stencil_size}")
        if edge_neighbours is None:
            edge_neighbours = 6 if dim == 2 else 12
        self.edge_neighbours = as_int(edge_neighbours, "edge_neighbours", 1, self.stencil_size - 1)

        if points is None:
            if not callable(node_spacing):
                positive(node_spacing, "node_spacing")
            kwargs: dict = {"seed": seed, "max_nodes": max_nodes}
            if dim == 3 and callable(node_spacing) and hasattr(node_spacing, "finest"):
                kwargs["min_radius"] = float(node_spacing.finest)  # type: ignore[attr-defined]
            try:
                pts = scattered_nodes(self.box_min, self.box_max, node_spacing, **kwargs)
            except ValueError as exc:
                if str(exc).startswith("radius"):
                    raise ValueError(f"node_spacing{str(exc)[len('radius'):]}") from exc
                raise
        else:
            pts = np.asarray(points, dtype=float)
            if pts.ndim != 2 or pts.shape[1] != dim or len(pts) < 2 or not np.all(np.isfinite(pts)):
                raise ValueError(f"points: expected a finite (N, {dim}) array with N >= 2, got shape {pts.shape}")
            if np.min(cKDTree(pts).query(pts, k=2)[0][:, 1]) <= 0.0:
                raise ValueError("points: some nodes coincide; node positions must be distinct")
        self._given_points = points is not None
        self.points = np.ascontiguousarray(pts)
        n = len(self.points)
        if n < self.stencil_size + 1:
            raise ValueError(f"node_spacing: only {n} nodes fit the image, fewer than a stencil "
                             f"({self.stencil_size}); use a smaller spacing")
        self.pixels = self.points / self.pixel_spacing
        self.tree = cKDTree(self.points)
        if callable(node_spacing):
            local = np.asarray(node_spacing(self.points), dtype=float).reshape(-1)
            if local.shape != (n,) or not np.all((local > 0) & np.isfinite(local)):
                raise ValueError("node_spacing: the callable must return one positive spacing per point")
        else:
            local = np.full(n, positive(node_spacing, "node_spacing"))
        self.local_spacing = local
        self.reference_spacing = float(np.max(local))
        self.hv_scale = (local / self.reference_spacing) ** self.hv_scaling
        self.labels = operator_labels(dim)
        self.solves = 0

        # per-node stores, filled lazily (rows = slots)
        self._slot = np.full(n, -1, dtype=np.int64)
        self._used = 0
        k, ns = self.stencil_size, self.side_size
        self._centred = np.zeros((0, k), dtype=np.int64)
        self._sides = np.zeros((0, 2 * dim, ns), dtype=np.int64)
        self._union = np.zeros((0, 1), dtype=np.int64)
        self._width = np.zeros(0, dtype=np.int64)
        self._edge = np.zeros(0, dtype=bool)
        self._weights = np.zeros((0, 1, len(self.labels)))
        self._have_weights = np.zeros(0, dtype=bool)
        # per-pixel interpolation weights (see pixel_weights), filled lazily
        self._pixel_cache = PixelWeightCache(self.points, self.tree, self.shape, self.pixel_spacing, k=k, phs=self.phs,
                                             degree=self.degree)

    # ------------------------------------------------------------ builders
    @classmethod
    def from_features(cls, features: ImageFeatures, *, finest: float, coarsest: float,
                      spacing_options: dict | None = None, **options: object) -> ScatteredNodeSet:
        """Node set for an image's features with :func:`edge_adaptive_spacing`.

        ``spacing_options`` go to :func:`edge_adaptive_spacing`, ``options``
        to the constructor.
        """
        if not isinstance(features, ImageFeatures):
            raise ValueError(f"features: expected ImageFeatures, got {type(features).__name__}")
        spacing_fn = edge_adaptive_spacing(features, finest=finest, coarsest=coarsest, **(spacing_options or {}))
        return cls(features.image.shape, features.spacing, spacing_fn, **options)  # type: ignore[arg-type]

    # ------------------------------------------------------------ basics
    @property
    def node_count(self) -> int:
        """Number of nodes in the set."""
        return len(self.points)

    def _check_ids(self, ids: ArrayLike, *, unique: bool = True) -> NDArray[np.int64]:
        arr = np.asarray(ids)
        if arr.ndim != 1:
            raise ValueError(f"ids: expected a 1-D array of node ids, got shape {arr.shape}")
        if arr.size == 0:
            return np.zeros(0, dtype=np.int64)
        if not np.issubdtype(arr.dtype, np.integer):
            raise ValueError(f"ids: expected integer node ids, got dtype {arr.dtype}")
        arr = arr.astype(np.int64)
        if arr.min() < 0 or arr.max() >= self.node_count:
            raise ValueError(f"ids: node ids must lie in [0, {self.node_count}), got [{arr.min()}, {arr.max()}]")
        if unique and len(np.unique(arr)) != len(arr):
            raise ValueError("ids: contains repeated node ids")
        return arr

    def nodes_near(self, points_mm: ArrayLike, radius_mm: float) -> NDArray[np.int64]:
        """Sorted unique ids of the nodes within ``radius_mm`` of any of ``points_mm`` (N, d)."""
        p = np.asarray(points_mm, dtype=float)
        if p.ndim != 2 or p.shape[1] != self.dim:
            raise ValueError(f"points_mm: expected shape (N, {self.dim}), got {p.shape}")
        if not np.all(np.isfinite(p)):
            raise ValueError("points_mm: contains NaN or inf")
        r = non_negative(radius_mm, "radius_mm")
        if len(p) == 0:
            return np.zeros(0, dtype=np.int64)
        # query each distinct cell of a grid of pitch r/4 once (nearby points share balls)
        pitch = max(r / 4.0, 1e-12)
        _, first = np.unique(np.floor(p / pitch).astype(np.int64), axis=0, return_index=True)
        centres = p[first]
        # a ball of radius r + pitch * sqrt(d) around a representative covers its whole cell;
        # filter back to the exact radius afterwards
        lists = self.tree.query_ball_point(centres, r + pitch * math.sqrt(self.dim), return_sorted=False)
        lengths = np.fromiter((len(x) for x in lists), dtype=np.int64, count=len(lists))
        cand = np.unique(np.fromiter(itertools.chain.from_iterable(lists), dtype=np.int64, count=int(lengths.sum())))
        if len(cand) == 0:
            return cand
        d, _ = cKDTree(p).query(self.points[cand], distance_upper_bound=r * (1 + 1e-12) + 1e-300)
        return cand[np.isfinite(d)]

    # ------------------------------------------------------------ stencils

    # ------------------------------------------------------------ stencils
    def _ensure_stencils(self, ids: NDArray[np.int64]) -> NDArray[np.int64]:
        """Slots of ``ids``, computing the stencils of nodes seen for the first time."""
        new = np.unique(ids[self._slot[ids] < 0])
        if len(new):
            self._add_stencils(new)
        return self._slot[ids]

    def _add_stencils(self, nodes: NDArray[np.int64]) -> None:
        # degenerate stencils (rank-deficient polynomial part) make edge nodes too; generated nodes
        # are well spread (nearest neighbours within [0.77, 1.21] of the spacing), so only
        # given positions are checked
        degrees = (max(self.degree, self.hv_degree), self.upwind_degree) if self._given_points else None
        new = node_stencils(self.points, self.tree, nodes, stencil_size=self.stencil_size, side_size=self.side_size,
                            box_min=self.box_min, box_max=self.box_max, degrees=degrees)
        count, w_max = len(nodes), new.union.shape[1]
        need = self._used + count
        if need > len(self._edge):
            rows = max(need, 2 * len(self._edge), _MIN_ROWS)
            self._centred, self._sides, self._union, self._width, self._edge, self._weights, self._have_weights = (
                grown(a, rows) for a in (self._centred, self._sides, self._union, self._width, self._edge,
                                          self._weights, self._have_weights))
        if w_max > self._union.shape[1]:
            old = self._union.shape[1]
            union = np.zeros((len(self._union), w_max), dtype=np.int64)
            union[:, :old] = self._union
            union[:, old:] = self._union[:, :1]  # pad with each row's own node (its first column)
            weights = np.zeros((len(self._union), w_max, self._weights.shape[2]))
            weights[:, :old] = self._weights
            self._union, self._weights = union, weights
        slots = np.arange(self._used, need)
        self._used = need
        self._slot[nodes] = slots
        self._centred[slots] = new.centred
        self._sides[slots] = new.sides
        self._union[slots] = nodes[:, None]
        self._union[slots, :w_max] = new.union
        self._width[slots] = new.width
        self._edge[slots] = new.edge

    # ------------------------------------------------------------ weights
    def _ensure_weights(self, slots: NDArray[np.int64]) -> None:
        todo = np.unique(slots[~self._have_weights[slots]])
        if len(todo) == 0:
            return
        ok = todo[~self._edge[todo]]
        self._have_weights[todo] = True
        self._weights[todo] = 0.0
        if len(ok) == 0:
            return
        union = self._union[ok]
        self._weights[ok] = band_operator_weights(
            self.points, union, self._centred[ok], self._sides[ok], self.hv_scale[union[:, 0]], phs=self.phs,
            degree=self.degree, hv_degree=self.hv_degree, upwind_degree=self.upwind_degree)
        self.solves += len(ok) * (2 + 2 * self.dim)

    def operator_weights(self, ids: ArrayLike) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
        """Stencils and weights of the band operators at nodes ``ids``.

        Parameters
        ----------
        ids : (A,) int array
            Global node ids.

        Returns
        -------
        stencils : (A, W) int64 array
            Global ids of each node's stencil nodes (the union of its centred
            and one-sided stencils), the node itself first, then by distance;
            rows shorter than W are padded with the node itself (weight 0).
        weights : (A, W, K) array
            ``(phi[stencils] * weights[..., k]).sum(1)`` approximates operator
            ``labels[k]`` at each node; columns as in
            :func:`~engine.nodes.scattered_weights.operator_labels` (``d*`` in
            1/mm or 1/mm², ``hv`` = s_i (−Δ)³ in 1/mm⁶, ``b*``/``f*`` in 1/mm).
            Rows of edge nodes (never :meth:`complete`) are zero.

        Notes
        -----
        Weights are computed once per node (batched solves) and cached; a
        repeated call only gathers.
        """
        arr = self._check_ids(ids, unique=False)
        if len(arr) == 0:
            return np.zeros((0, 1), dtype=np.int64), np.zeros((0, 1, len(self.labels)))
        slots = self._ensure_stencils(arr)
        self._ensure_weights(slots)
        w = int(self._width[slots].max())
        return self._union[slots, :w].copy(), self._weights[slots, :w, :].copy()

    def local_stencils(self, ids: ArrayLike) -> NDArray[np.int64]:
        """The stencils of :meth:`operator_weights` as positions in ``ids`` (−1 where a node is not in ``ids``)."""
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros((0, 1), dtype=np.int64)
        slots = self._ensure_stencils(arr)
        w = int(self._width[slots].max())
        return positions_in(arr, self._union[slots, :w])

    def complete(self, ids: ArrayLike) -> NDArray[np.bool_]:
        """Which of ``ids`` have every stencil node in ``ids`` (and are not edge nodes)."""
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros(0, dtype=bool)
        slots = self._ensure_stencils(arr)
        w = int(self._width[slots].max())
        inside = np.all(positions_in(arr, self._union[slots, :w]) >= 0, axis=1)
        return inside & ~self._edge[slots]

    def is_edge_node(self, ids: ArrayLike) -> NDArray[np.bool_]:
        """Nodes whose stencils cross the image box or are degenerate (never complete)."""
        arr = self._check_ids(ids, unique=False)
        if len(arr) == 0:
            return np.zeros(0, dtype=bool)
        slots = self._ensure_stencils(arr)
        return self._edge[slots].copy()

    # ------------------------------------------------------------ pixels
    def pixel_interpolation(self, ids: ArrayLike, pixel_indices: ArrayLike) -> sp.csr_matrix:
        """Sparse matrix taking φ at ``ids`` to φ at pixel centres.

        Parameters
        ----------
        ids : (A,) int array
            Global node ids (the band); columns of the matrix follow this order.
        pixel_indices : (P, d) int array
            Pixel indices (array order).

        Returns
        -------
        scipy.sparse.csr_matrix, shape (P, A)
            Row p holds the RBF-FD interpolation (identity operator) weights
            of pixel p's centre on its ``stencil_size`` nearest nodes among
            ``ids`` (PHS r^phs + degree ``degree``). Pixels far from the band
            are extrapolated: keep them within the band.
        """
        arr = self._check_ids(ids)
        pix = check_pixel_indices(pixel_indices, self.shape)
        k = self.stencil_size
        if len(arr) < k:
            raise ValueError(f"ids: {len(arr)} nodes are fewer than a stencil ({k})")
        if len(pix) == 0:
            return sp.csr_matrix((0, len(arr)))
        self.solves += len(pix)
        return band_pixel_matrix(self.points[arr], pix * self.pixel_spacing, k=k, phs=self.phs, degree=self.degree)

    def pixel_weights(self, pixel_indices: ArrayLike) -> tuple[NDArray[np.int64], NDArray[np.floating]]:
        """Interpolation stencils and weights of pixel centres on their nearest nodes of the whole set.

        Parameters
        ----------
        pixel_indices : (P, d) int array
            Pixel indices (array order), inside the image.

        Returns
        -------
        stencils : (P, stencil_size) int64 array
            Global ids of each pixel centre's ``stencil_size`` nearest nodes.
        weights : (P, stencil_size) array
            RBF-FD interpolation weights (PHS r^phs + degree ``degree``), as in
            :meth:`pixel_interpolation` but on the global nearest nodes, so
            they are computed once per pixel and cached. A band can use the
            rows whose stencil lies entirely in it.
        """
        stencils, weights, solved = self._pixel_cache.lookup(check_pixel_indices(pixel_indices, self.shape))
        self.solves += solved
        return stencils, weights

    # ------------------------------------------------------------ zero crossings
    def edges(self, ids: ArrayLike) -> NDArray[np.int64]:
        """Edges of the k-nearest-neighbour graph within ``ids``, as (E, 2) positions in ``ids``.

        Each node is joined to its ``edge_neighbours`` nearest global nodes;
        the edges with both ends in ``ids`` are kept, each once (first < second).
        """
        arr = self._check_ids(ids)
        if len(arr) == 0:
            return np.zeros((0, 2), dtype=np.int64)
        slots = self._ensure_stencils(arr)
        return neighbour_edges(arr, self._centred[slots, 1:self.edge_neighbours + 1])

    def crossing_points(self, ids: ArrayLike, phi: ArrayLike) -> NDArray[np.floating]:
        """Zero crossings of φ along the graph :meth:`edges`, by linear interpolation (mm).

        See :func:`~engine.nodes.node_graph.edge_crossings`.
        """
        arr = self._check_ids(ids)
        values = np.asarray(phi, dtype=float)
        if values.shape != arr.shape:
            raise ValueError(f"phi: expected shape {arr.shape} like ids, got {values.shape}")
        if not np.all(np.isfinite(values)):
            raise ValueError("phi: contains NaN or inf")
        e = self.edges(arr)
        if len(e) == 0:
            return np.zeros((0, self.dim))
        return edge_crossings(self.points[arr], e, values)

    # ------------------------------------------------------------ stability figures
    def spectral_bound(self, ids: ArrayLike, *, damping: float = 0.0, method: str = "arnoldi") -> float:
        """Spectral radius of curvature motion's linear part on the complete nodes of ``ids`` (1/mm²).

        ``damping`` is the hyperviscosity coefficient γ (mm⁴), ``method``
        ``"arnoldi"`` (an estimate with a safety factor) or ``"gershgorin"``
        (a bound); see :func:`~engine.nodes.spectral_bound.curvature_spectral_bound`.
        0 when no node of ``ids`` is complete.
        """
        arr = self._check_ids(ids)
        gamma = non_negative(damping, "damping")
        if method not in SPECTRAL_METHODS:
            raise ValueError(f"method: expected 'arnoldi' or 'gershgorin', got {method!r}")
        if len(arr) == 0:
            return 0.0
        act = arr[self.complete(arr)]
        if len(act) == 0:
            return 0.0
        stencils, w = self.operator_weights(act)
        return curvature_spectral_bound(act, stencils, w, self.labels, damping=gamma, method=method)

