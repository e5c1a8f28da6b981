"""Where a front's nodes sit: the one interface of a node layout, and the arrays of a band.

The front never asks which layout it has: whatever differs between lattice
nodes (integer indices, one stencil shared by every complete node;
:mod:`engine.nodes.lattice_layout`) and scattered nodes (global ids of one
image's :class:`~engine.nodes.node_set.ScatteredNodeSet`, each node with its
own cached weights; :mod:`engine.nodes.scattered_layout`) is a method of its
:class:`NodeLayout`. ``keys`` are lattice indices (N, d) or node ids (N,);
``band`` is the front's present :class:`Band`. :mod:`engine.nodes.layout_options`
makes the layout of a new front.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np
from numpy.typing import NDArray

from engine.nodes.lattice import LatticeLookup
from engine.numerics.interpolant import LocalInterpolant

__all__ = ["Band", "NodeLayout", "FrontLayer", "TREE_WORKERS", "tree_workers"]

#: Threads of the nearest-neighbour queries (scipy runs them outside the
#: interpreter lock; the answers do not depend on the count). Read at call time,
#: so a process may set it (``engine.nodes.layout.TREE_WORKERS = 1``).
TREE_WORKERS = 2
#: Queries with fewer points than this run on one thread (starting threads costs more than they save).
PARALLEL_QUERIES = 10_000


def tree_workers(queries: int) -> int:
    """Threads for a nearest-neighbour query of ``queries`` points."""
    return TREE_WORKERS if queries >= PARALLEL_QUERIES else 1

#: A band's function of (keys, φ, active, edge nodes, lookup) giving its layer next to the
#: front and each node's layer node (the front's choice, the same on both layouts).
FrontLayer = Callable[..., tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]]]


@dataclass
class Band:
    """Derived per-band arrays (rebuilt from the state's band keys; the layer fields repeat the state's)."""

    indices: NDArray[np.int64]
    positions: NDArray[np.floating]  # mm
    pixels: NDArray[np.floating]  # pixel coordinates
    lookup: LatticeLookup
    gather: NDArray[np.int64]  # stencil nodes of the active nodes: (n_u, A) on a lattice, (A, W) scattered
    active: NDArray[np.int64]  # nodes evolved (complete stencil)
    edge_nodes: NDArray[np.int64]  # nodes whose stencil is incomplete
    layer: NDArray[np.int64]  # active nodes next to the front (indices into `active`)
    source: NDArray[np.int64]  # per active node: the layer node nearest its closest front point
    edge_source: NDArray[np.int64]  # the same for each edge node
    pixel_nodes: NDArray[np.int64]  # nodes sitting on pixel centres
    pixel_index: tuple[NDArray[np.int64], ...]  # their pixel indices
    frozen: NDArray[np.bool_] = None  # type: ignore[assignment]  # per node: pinned (set by the front)
    barrier: NDArray[np.bool_] = None  # type: ignore[assignment]  # per node: inside a locked outline
    held: tuple[NDArray[np.int64], NDArray[np.int64]] | None = None  # active positions pinned, in a barrier
    layer_phi: NDArray[np.floating] | None = None  # φ at the layer nodes when the layer was picked
    local_in: NDArray[np.floating] | None = None
    local_out: NDArray[np.floating] | None = None
    interpolant: LocalInterpolant | None = None
    # scattered nodes only (global node ids in `indices`, sorted)
    weights: NDArray[np.floating] | None = None  # (A, W, K) per-node operator weights, columns as the lattice's
    pixel_matrix: object | None = None  # sparse (P, N): φ at the band's pixel centres (`pixel_index`)
    spacing: NDArray[np.floating] | None = None  # local node spacing (mm) per node
    h_min: float = 0.0  # smallest local spacing over the active nodes (mm)
    reach: float = 0.0  # largest stencil radius over the active nodes (mm)
    spectral: float = 0.0  # spectral radius bound of curvature motion per unit curvature weight (1/mm²)
    edges: NDArray[np.int64] | None = None  # (E, 2) node pairs of the neighbour graph within the band
    step_weights: NDArray[np.floating] | None = None  # scattered: (A, W, 3d + 1) weights in step_labels order
    layer_operators: tuple[NDArray[np.int64], NDArray[np.floating] | None] | None = None  # see layer_derivatives
    layer_parts: tuple[NDArray[np.int64], int] | None = None  # see _layer_parts
    layer_pairs: NDArray[np.int64] | None = None  # see _layer_pairs
    thickness: NDArray[np.floating] | None = None  # half-width (mm) of the inside behind each layer node
    near: NDArray[np.int64] | None = None  # active positions evolved by their own derivatives (see Front._pick_near)
    near_nodes: NDArray[np.int64] | None = None  # the near nodes themselves (band indices)
    near_source: NDArray[np.int64] | None = None  # per near node: its layer node
    far_nodes: NDArray[np.int64] | None = None  # the other active nodes (band indices): they take their layer node's rate
    far_rate_at: NDArray[np.int64] | None = None  # per far node: where its layer node's rate sits among the near
    edge_rate_at: NDArray[np.int64] | None = None  # the same for each edge node
    near_operators: Any = None  # the layout's step operators restricted to the near nodes


class NodeLayout(Protocol):
    """What a front needs of its nodes, whichever way they are laid out."""

    #: ``"lattice"`` or ``"scattered"``.
    name: str
    #: Nominal node step per axis (mm): the lattice step, or the node set's reference spacing.
    step_mm: NDArray[np.floating]
    #: Hyperviscosity weight per unit curvature weight.
    damping: float

    def positions(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        """Positions (mm) of the nodes ``keys``."""

    def pixels(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        """Pixel coordinates of the nodes ``keys``."""

    def smallest_spacing(self, band: Any) -> float:
        """Smallest node spacing (mm) of the band (before the first band: of the layout)."""

    def reach_mm(self, band: Any) -> float:
        """Largest stencil radius (mm) over the band's active nodes."""

    def spectral_radius(self, band: Any) -> float:
        """Bound on curvature motion's spectral radius per unit curvature weight (1/mm²)."""

    def lookup(self, keys: NDArray[np.int64]) -> LatticeLookup | None:
        """An index lookup of ``keys`` for the crossings and stencils of a band build (None: not needed)."""

    def crossings(self, keys: NDArray[np.int64], phi: NDArray[np.floating], band: Any,
                  lookup: LatticeLookup | None) -> NDArray[np.floating]:
        """Zero crossings (mm) of φ along the edges between the nodes ``keys``."""

    def candidates(self, starts_mm: NDArray[np.floating], radius_mm: float) -> NDArray[np.int64]:
        """Nodes within ``radius_mm`` (plus one step) of any of ``starts_mm``, inside the image."""

    def band_positions(self, band: Any, keys: NDArray[np.int64]) -> NDArray[np.int64]:
        """Position of each of ``keys`` in the band, −1 where it is not in the band."""

    def layer_width(self, keys: NDArray[np.int64], active: NDArray[np.int64]) -> float | NDArray[np.floating]:
        """Half-width (mm) of the layer next to the front, per active node or one value, in node spacings."""

    def pair_distance(self, band: Any, nodes: NDArray[np.int64]) -> float:
        """A node spacing (mm) of the layer ``nodes``: neighbours lie within 1.5 of it."""

    def step_derivatives(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        """(3d + 1, A) at the active nodes in :func:`step_labels` order: ∂_i, ∂_i⁻, ∂_i⁺, hyperviscosity."""

    def layer_derivatives(self, band: Any, phi: NDArray[np.floating], count: int | None) -> NDArray[np.floating]:
        """The first ``count`` rows (all: None) of :func:`layer_labels` at the layer nodes."""

    def pixel_values(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        """φ at the band's pixel centres (``band.pixel_index``)."""

    def contour_grid(self, band: Any, phi: NDArray[np.floating]
                     ) -> tuple[NDArray[np.int64], NDArray[np.floating], int]:
        """Grid nodes, their φ and nodes per pixel for marching squares."""

    def build_band(self, keys: NDArray[np.int64], phi: NDArray[np.floating], front_layer: FrontLayer,
                   half_width: float) -> tuple[Band, NDArray[np.floating]]:
        """The band's arrays on nodes ``keys`` (sorted; ``phi`` in the same order), without pins and barriers."""

    def rebuild_nodes(self, band: Band, starts_mm: NDArray[np.floating], moved_mm: float,
                      half_width: float) -> NDArray[np.int64]:
        """Every node that can be in the band once the front moved up to ``moved_mm`` from ``band``."""

    def reinitialising_interpolant(self, keys: NDArray[np.int64], values: NDArray[np.floating],
                                   lookup: LatticeLookup | None, starts_mm: NDArray[np.floating], params: Any
                                   ) -> tuple[LocalInterpolant, NDArray[np.floating]] | None:
        """The interpolant of approximate ``values`` on ``keys`` and its coefficients (None: band too thin)."""

    def band_interpolant(self, band: Band, params: Any) -> LocalInterpolant | None:
        """The local interpolant of the band's φ (None: the band is too thin for one)."""

    def coefficients(self, interp: LocalInterpolant, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        """Interpolation coefficients of φ for ``interp``."""

    def pixel_grid_values(self, band: Band, phi: NDArray[np.floating], grid: NDArray[np.int64],
                          base: NDArray[np.floating], spacing: NDArray[np.floating]
                          ) -> tuple[NDArray[np.floating], NDArray[np.floating], NDArray[np.floating]]:
        """φ at every pixel centre ``grid`` (``base`` beyond the band), their positions (mm) and pixel coordinates.

        ``grid`` holds every pixel of a box of the image in row-major order
        (the whole image, or the box around a brush stroke).
        """

    def surface_grid(self, band: Band, phi: NDArray[np.floating],
                     far: Callable[[NDArray[np.int64]], NDArray[np.floating]]
                     ) -> tuple[NDArray[np.floating], NDArray[np.floating]] | None:
        """φ on a dense box of nodes around the band (``far`` beyond it) and the box's corner (mm); None: use
        φ at the voxel centres."""

    def with_settings(self, params: Any, cache: dict) -> "NodeLayout":
        """The same nodes with stencils for new stencil settings (``cache``: node sets per settings)."""
