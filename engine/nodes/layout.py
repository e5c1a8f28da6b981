"""Where a front's nodes sit: one interface, a lattice and a scattered implementation.

The front never asks which layout it has: whatever differs between lattice
nodes (integer indices, one stencil shared by every complete node) and
scattered nodes (global ids of one image's :class:`ScatteredNodeSet`, each
node with its own cached weights) is a method of its :class:`NodeLayout`.
``keys`` are lattice indices (N, d) or node ids (N,); ``band`` is the front's
present band (its arrays: ``indices``, ``gather``, ``active``, ``layer``,
``pixel_nodes`` or ``pixel_matrix``, ...).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Protocol

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

from engine.nodes.band_stencils import BandStencil, band_stencil, layer_labels, step_labels
from engine.nodes.lattice import LatticeLookup, symmetric_offsets
from engine.nodes.lattice_band import crossing_points, dilate_nodes, nodes_near
from engine.nodes.node_set import ScatteredNodeSet, edge_crossings, operator_labels
from engine.numerics.interpolant import LocalInterpolant
from engine.numerics.rbffd import assemble

__all__ = ["Band", "NodeLayout", "LatticeLayout", "ScatteredLayout", "SCATTERED_DAMPING", "TREE_WORKERS",
           "NODE_LAYOUTS", "check_layout_options", "make_layout", "node_options"]

#: Hyperviscosity coefficient γ (mm⁴ per unit curvature weight, times the node
#: set's per-node factor (h_i / h_ref)^6) on scattered nodes: the linear
#: curvature operator is stable without it, the full scheme (extension
#: velocities, rebuilds) is not (see DEVELOPERS.md, "Scattered nodes").
SCATTERED_DAMPING = 0.01
#: Node layouts of a front.
NODE_LAYOUTS = ("lattice", "scattered")
#: Threads of the nearest-neighbour queries (scipy runs them outside the
#: interpreter lock; the answers do not depend on the count).
TREE_WORKERS = 2

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

    def lookup(self, keys: NDArray[np.int64], pad: int) -> LatticeLookup | None:
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
        """φ at every pixel centre ``grid`` (``base`` beyond the band), their positions (mm) and pixel coordinates."""

    def surface_grid(self, band: Band, phi: NDArray[np.floating],
                     far: Callable[[NDArray[np.int64]], NDArray[np.floating]]
                     ) -> tuple[NDArray[np.floating], NDArray[np.floating]] | None:
        """φ on a dense box of nodes around the band (``far`` beyond it) and the box's corner (mm); None: use
        φ at the voxel centres."""

    def with_settings(self, params: Any, cache: dict) -> "NodeLayout":
        """The same nodes with stencils for new stencil settings (``cache``: node sets per settings)."""


class LatticeLayout:
    """Lattice nodes at step ``step_mm`` (``detail`` per pixel), sharing one band stencil."""

    name = "lattice"
    #: Barriers are held on the nodes; every pixel centre is a node.
    holds_barrier_on_pixels = False
    #: Columns of a node key (lattice indices).
    key_ndim = 2
    node_set = None

    def __init__(self, stencil: BandStencil, step_mm: NDArray[np.floating], detail: int,
                 shape: tuple[int, ...]) -> None:
        self.stencil = stencil
        self.step_mm = step_mm
        self.detail = detail
        self.shape = shape
        self.damping = stencil.damping
        self._h = float(np.min(step_mm))
        self._coarsest = float(np.max(step_mm))

    def positions(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        return keys * self.step_mm

    def pixels(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        return keys / self.detail

    def smallest_spacing(self, band: Any) -> float:
        return self._h

    def reach_mm(self, band: Any) -> float:
        return self.stencil.reach * self._coarsest

    def spectral_radius(self, band: Any) -> float:
        return self.stencil.spectral_radius

    def lookup(self, keys: NDArray[np.int64]) -> LatticeLookup | None:
        # padded by the band stencil's reach, which holds the interpolant's pattern (the same
        # symmetric offsets; a lookup falls back to a bounds-checked search beyond its padding)
        return LatticeLookup(keys, pad=int(np.max(np.abs(self.stencil.offsets))))

    def crossings(self, keys: NDArray[np.int64], phi: NDArray[np.floating], band: Any,
                  lookup: LatticeLookup | None) -> NDArray[np.floating]:
        return crossing_points(keys, phi, self.step_mm, lookup=lookup)

    def candidates(self, starts_mm: NDArray[np.floating], radius_mm: float) -> NDArray[np.int64]:
        upper = (np.array(self.shape) - 1) * self.detail
        centre = np.clip(np.rint(starts_mm / self.step_mm).astype(np.int64), 0, upper)
        return nodes_near(centre, self.step_mm, radius_mm + self._coarsest, upper)

    def band_positions(self, band: Any, keys: NDArray[np.int64]) -> NDArray[np.int64]:
        return band.lookup.find(keys)

    def layer_width(self, keys: NDArray[np.int64], active: NDArray[np.int64]) -> float | NDArray[np.floating]:
        return self._coarsest

    def pair_distance(self, band: Any, nodes: NDArray[np.int64]) -> float:
        return self._coarsest

    def step_derivatives(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        return self.stencil.step_rows @ np.take(phi, band.gather)

    def layer_derivatives(self, band: Any, phi: NDArray[np.floating], count: int | None) -> NDArray[np.floating]:
        if band.layer_operators is None:
            band.layer_operators = (np.ascontiguousarray(band.gather[:, band.layer]), None)
        return self.stencil.layer_rows[:count] @ np.take(phi, band.layer_operators[0])

    def pixel_values(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        return phi[band.pixel_nodes]

    def contour_grid(self, band: Any, phi: NDArray[np.floating]
                     ) -> tuple[NDArray[np.int64], NDArray[np.floating], int]:
        return band.indices, phi, self.detail

    def build_band(self, keys: NDArray[np.int64], phi: NDArray[np.floating], front_layer: FrontLayer,
                   half_width: float) -> tuple[Band, NDArray[np.floating]]:
        order = np.lexsort(keys.T[::-1])
        indices, phi = keys[order], phi[order]
        lookup = self.lookup(indices)
        table = lookup.around(self.stencil.offsets)
        complete = np.all(table >= 0, axis=1)
        active = np.flatnonzero(complete)
        if len(active) == 0:
            raise ValueError("the band has no node with a complete stencil; the front is too small for "
                             "this detail and stencil size")
        gather = np.ascontiguousarray(table[active].T)  # one row per stencil offset
        edge_nodes = np.flatnonzero(~complete)
        layer, source, edge_source = front_layer(indices, phi, active, edge_nodes, lookup)
        on_pixel = np.all(indices % self.detail == 0, axis=1)
        pixel_nodes = np.flatnonzero(on_pixel)
        pixel_index = tuple((indices[pixel_nodes] // self.detail).T)
        pixels = indices / self.detail
        band = Band(indices, indices * self.step_mm, pixels, lookup, gather, active, edge_nodes, layer, source,
                    edge_source, pixel_nodes, pixel_index)
        return band, phi

    def rebuild_nodes(self, band: Band, starts_mm: NDArray[np.floating], moved_mm: float,
                      half_width: float) -> NDArray[np.int64]:
        # the front moved at most about moved_mm: grow the old band by that much
        layers = int(np.ceil(moved_mm / self._h)) + 1
        return dilate_nodes(band.indices, layers, (np.array(self.shape) - 1) * self.detail)

    def reinitialising_interpolant(self, keys: NDArray[np.int64], values: NDArray[np.floating],
                                   lookup: LatticeLookup | None, starts_mm: NDArray[np.floating], params: Any
                                   ) -> tuple[LocalInterpolant, NDArray[np.floating]] | None:
        dim = keys.shape[1]
        pattern = symmetric_offsets(dim, params.stencil_size_for(dim))
        table = lookup.around(pattern)
        owners = np.flatnonzero(np.all(table >= 0, axis=1))
        interp = LocalInterpolant.build(keys * self.step_mm, table[owners], owners=owners,
                                        degree=params.degree, phs=params.phs, translates=True,
                                        lattice_step=self.step_mm, lattice_indices=keys)
        return interp, interp.coefficients(values)

    def band_interpolant(self, band: Band, params: Any) -> LocalInterpolant | None:
        dim = band.indices.shape[1]
        pattern = symmetric_offsets(dim, params.stencil_size_for(dim))
        table = band.lookup.find(band.indices[:, None, :] + pattern[None])
        owners = np.flatnonzero(np.all(table >= 0, axis=1))
        return LocalInterpolant.build(band.positions, table[owners], owners=owners, degree=params.degree,
                                      phs=params.phs, translates=True, lattice_step=self.step_mm,
                                      lattice_indices=band.indices)

    def coefficients(self, interp: LocalInterpolant, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        return interp.coefficients(phi)

    def pixel_grid_values(self, band: Band, phi: NDArray[np.floating], grid: NDArray[np.int64],
                          base: NDArray[np.floating], spacing: NDArray[np.floating]
                          ) -> tuple[NDArray[np.floating], NDArray[np.floating], NDArray[np.floating]]:
        idx = grid * self.detail
        pos = band.lookup.find(idx)
        values = np.where(pos >= 0, phi[np.maximum(pos, 0)], base)
        return values, idx * self.step_mm, idx / self.detail

    def surface_grid(self, band: Band, phi: NDArray[np.floating],
                     far: Callable[[NDArray[np.int64]], NDArray[np.floating]]
                     ) -> tuple[NDArray[np.floating], NDArray[np.floating]] | None:
        lo = band.indices.min(axis=0)
        hi = band.indices.max(axis=0)
        grid = np.indices(tuple(hi - lo + 1)).reshape(3, -1).T + lo
        dense = far(grid).reshape(tuple(hi - lo + 1))
        dense[tuple((band.indices - lo).T)] = phi
        return dense, lo * self.step_mm

    def with_settings(self, params: Any, cache: dict) -> "LatticeLayout":
        dim = len(self.step_mm)
        stencil = band_stencil(self.step_mm, stencil_size=params.stencil_size_for(dim), degree=params.degree,
                               phs=params.phs)
        return LatticeLayout(stencil, self.step_mm, self.detail, self.shape)


class ScatteredLayout:
    """Nodes of one image's scattered node set, each with its own cached RBF-FD weights."""

    name = "scattered"
    #: A pixel's φ is interpolated from nodes on both sides of a barrier's rim,
    #: so the barrier is held on the pixel centres as well.
    holds_barrier_on_pixels = True
    damping = SCATTERED_DAMPING
    #: Columns of a node key (one id).
    key_ndim = 1
    detail = 1
    stencil = None

    def __init__(self, node_set: ScatteredNodeSet, *, step_mm: NDArray[np.floating] | None = None) -> None:
        self.node_set = node_set
        self.step_mm = np.full(node_set.dim, node_set.reference_spacing) if step_mm is None else step_mm
        self._coarsest = float(np.max(self.step_mm))

    def positions(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        return self.node_set.points[keys]

    def pixels(self, keys: NDArray[np.int64]) -> NDArray[np.floating]:
        return self.node_set.pixels[keys]

    def smallest_spacing(self, band: Any) -> float:
        if band is not None and band.h_min > 0:
            return band.h_min
        return float(np.min(self.node_set.local_spacing))

    def reach_mm(self, band: Any) -> float:
        return band.reach

    def spectral_radius(self, band: Any) -> float:
        return band.spectral

    def lookup(self, keys: NDArray[np.int64]) -> LatticeLookup | None:
        return None

    def crossings(self, keys: NDArray[np.int64], phi: NDArray[np.floating], band: Any,
                  lookup: LatticeLookup | None) -> NDArray[np.floating]:
        if band is not None and band.edges is not None and keys is band.indices:
            return edge_crossings(self.node_set.points[keys], band.edges, phi)
        return self.node_set.crossing_points(keys, phi)

    def candidates(self, starts_mm: NDArray[np.floating], radius_mm: float) -> NDArray[np.int64]:
        return self.node_set.nodes_near(starts_mm, radius_mm + self._coarsest)

    def band_positions(self, band: Any, keys: NDArray[np.int64]) -> NDArray[np.int64]:
        return _positions_in(band.indices, keys)

    def layer_width(self, keys: NDArray[np.int64], active: NDArray[np.int64]) -> float | NDArray[np.floating]:
        return self.node_set.local_spacing[keys[active]]

    def pair_distance(self, band: Any, nodes: NDArray[np.int64]) -> float:
        return float(np.max(band.spacing[nodes]))

    def step_derivatives(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        return np.ascontiguousarray(np.matmul(phi[band.gather][:, None, :], band.step_weights)[:, 0, :].T)

    def layer_derivatives(self, band: Any, phi: NDArray[np.floating], count: int | None) -> NDArray[np.floating]:
        if band.layer_operators is None:
            columns = scattered_columns(self.node_set.dim)[1]
            band.layer_operators = (band.gather[band.layer],
                                    np.ascontiguousarray(band.weights[band.layer][:, :, columns]))
        gather, weights = band.layer_operators
        return np.matmul(phi[gather][:, None, :], weights[:, :, :count])[:, 0, :].T

    def pixel_values(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        return band.pixel_matrix @ phi

    def contour_grid(self, band: Any, phi: NDArray[np.floating]
                     ) -> tuple[NDArray[np.int64], NDArray[np.floating], int]:
        # marching squares on the band's pixel centres, φ interpolated there
        return np.stack(band.pixel_index, axis=1), self.pixel_values(band, phi), 1

    def build_band(self, keys: NDArray[np.int64], phi: NDArray[np.floating], front_layer: FrontLayer,
                   half_width: float) -> tuple[Band, NDArray[np.floating]]:
        """Active nodes are the complete ones (every stencil node in the band, not an edge node of the set);
        their gather and per-node weights come from the node set's cache. The pixel centres covered by the
        active nodes take φ through one sparse interpolation matrix."""
        ns = self.node_set
        dim, shape = ns.dim, ns.shape
        order = np.argsort(keys, kind="stable")
        ids, phi = np.asarray(keys, dtype=np.int64)[order], phi[order]
        table = ns.local_stencils(ids)
        complete = ns.complete(ids)
        if dim == 3:
            # Where the front crosses the volume's border, edge nodes of the set (which copy the
            # rates of layer nodes) lie on both sides of it; on scattered 3-D nodes the loop they
            # close through the curvature stencils grows (a still plane through the box: 2.4 times
            # a step), unlike on a lattice. Refuse rather than blow up: nodes within a spacing of
            # the box's faces and next to the front on both sides of it mean it crosses a face.
            pts, step = ns.points[ids], ns.local_spacing[ids]
            at_face = np.any((pts - ns.box_min <= step[:, None]) | (ns.box_max - pts <= step[:, None]), axis=1)
            rim = at_face & (np.abs(phi) <= 1.2 * step)
            if np.any(phi[rim] < 0) and np.any(phi[rim] >= 0):
                voxel = tuple(int(v) for v in np.rint(ns.pixels[ids[np.flatnonzero(rim)[0]]]))
                raise ValueError(f"scattered nodes in 3-D: the front meets the volume's border near voxel "
                                 f"{voxel}, where the scattered scheme is not stable; use nodes='lattice' "
                                 f"for this volume")
        active = np.flatnonzero(complete)
        if len(active) == 0:
            raise ValueError("the band has no node with a complete stencil; the front is too small for "
                             "these node spacings and this stencil size")
        _, weights = ns.operator_weights(ids[active])
        gather = np.ascontiguousarray(table[active][:, :weights.shape[1]])
        edge_nodes = np.flatnonzero(~complete)
        layer, source, edge_source = front_layer(ids, phi, active, edge_nodes, None)
        pixels = ns.pixels[ids]
        # every pixel centre in a cell touched by an active node that the front can reach before the next
        # rebuild (the rebuild distance plus two node spacings)
        reach = float(np.sqrt(np.max(np.sum((ns.points[ids[gather]] - ns.points[ids[active]][:, None, :]) ** 2,
                                            axis=2))))
        safe = max(half_width - 2.0 * reach, 0.0) + 2.0 * self._coarsest
        covering = active[np.abs(phi[active]) <= safe]
        base = np.floor(pixels[covering]).astype(np.int64)
        corners = np.array(list(np.ndindex(*(2,) * dim)), dtype=np.int64)
        cand = (base[:, None, :] + corners[None]).reshape(-1, dim)
        cand = cand[np.all((cand >= 0) & (cand < np.array(shape)), axis=1)]
        pixel_keys = np.unique(np.ravel_multi_index(tuple(cand.T), shape))
        # interpolation on each pixel centre's nearest nodes of the whole set (cached per pixel); pixels
        # whose stencil leaves the band (at its far edge, beyond the front's reach) are left out
        stencils, pixel_weights = ns.pixel_weights(np.stack(np.unravel_index(pixel_keys, shape), axis=1))
        columns = _positions_in(ids, stencils)
        inside_band = np.all(columns >= 0, axis=1)
        pixel_keys, columns, pixel_weights = (pixel_keys[inside_band], columns[inside_band],
                                              pixel_weights[inside_band])
        pixel_index = np.unravel_index(pixel_keys, shape)
        matrix = assemble(columns, pixel_weights, len(ids))
        spacing = ns.local_spacing[ids]
        band = Band(ids, ns.points[ids], pixels, None,  # type: ignore[arg-type]
                    gather, active, edge_nodes, layer, source,
                    edge_source, np.zeros(0, dtype=np.int64), tuple(pixel_index),
                    weights=weights, pixel_matrix=matrix, spacing=spacing,
                    h_min=float(np.min(spacing[active])), reach=reach,
                    spectral=ns.spectral_bound(ids, damping=SCATTERED_DAMPING), edges=ns.edges(ids),
                    step_weights=np.ascontiguousarray(weights[:, :, scattered_columns(dim)[0]]))
        return band, phi

    def rebuild_nodes(self, band: Band, starts_mm: NDArray[np.floating], moved_mm: float,
                      half_width: float) -> NDArray[np.int64]:
        return self.candidates(starts_mm, half_width)  # every node that can be in the new band

    def _interpolant(self, ids: NDArray[np.int64], owners_mask: NDArray[np.bool_] | None = None
                     ) -> LocalInterpolant | None:
        """Local interpolant on the k nearest nodes of each node whose k nearest are all in ``ids``."""
        ns = self.node_set
        table = ns.local_stencils(ids)[:, :ns.stencil_size]
        ok = np.all(table >= 0, axis=1)
        if owners_mask is not None and np.any(ok & owners_mask):
            ok &= owners_mask
        owners = np.flatnonzero(ok)
        if len(owners) == 0:
            return None
        return LocalInterpolant.build(ns.points[ids], table[owners], owners=owners, degree=ns.degree, phs=ns.phs)

    def reinitialising_interpolant(self, keys: NDArray[np.int64], values: NDArray[np.floating],
                                   lookup: LatticeLookup | None, starts_mm: NDArray[np.floating], params: Any
                                   ) -> tuple[LocalInterpolant, NDArray[np.floating]] | None:
        positions = self.node_set.points[keys]
        # Newton stays next to the zero set: interpolants there suffice
        near_front = cKDTree(starts_mm).query(positions, workers=TREE_WORKERS)[0] <= 2.5 * self._coarsest
        interp = self._interpolant(keys, near_front)
        return None if interp is None else (interp, self.coefficients(interp, values))

    def band_interpolant(self, band: Band, params: Any) -> LocalInterpolant | None:
        return self._interpolant(band.indices)

    def coefficients(self, interp: LocalInterpolant, phi: NDArray[np.floating],
                     chunk: int = 4096) -> NDArray[np.floating]:
        """Coefficients of every owner, one batched product (scattered stencils rarely share a shape)."""
        local = np.asarray(phi, dtype=float)[interp.stencils]
        out = np.empty((len(local), interp.inverses.shape[1]))
        for start in range(0, len(local), chunk):
            rows = slice(start, start + chunk)
            out[rows] = np.matmul(interp.inverses[interp.inverse_index[rows]], local[rows][:, :, None])[:, :, 0]
        return out

    def pixel_grid_values(self, band: Band, phi: NDArray[np.floating], grid: NDArray[np.int64],
                          base: NDArray[np.floating], spacing: NDArray[np.floating]
                          ) -> tuple[NDArray[np.floating], NDArray[np.floating], NDArray[np.floating]]:
        base[np.ravel_multi_index(band.pixel_index, self.node_set.shape)] = self.pixel_values(band, phi)
        return base, grid * spacing, grid.astype(float)

    def surface_grid(self, band: Band, phi: NDArray[np.floating],
                     far: Callable[[NDArray[np.int64]], NDArray[np.floating]]
                     ) -> tuple[NDArray[np.floating], NDArray[np.floating]] | None:
        return None

    def with_settings(self, params: Any, cache: dict) -> "ScatteredLayout":
        key = node_options(params, self.node_set.dim)
        if key not in cache:
            old = self.node_set
            cache[key] = ScatteredNodeSet(old.shape, old.pixel_spacing, lambda p, s=old.local_spacing: s,
                                          stencil_size=key[0], degree=key[1], phs=key[2], points=old.points)
        return ScatteredLayout(cache[key], step_mm=self.step_mm)


@lru_cache(maxsize=4)
def scattered_columns(dim: int) -> tuple[list[int], list[int]]:
    """Columns of a scattered node set's operator weights in :func:`step_labels` and :func:`layer_labels` order."""
    labels = operator_labels(dim)
    return [labels.index(lab) for lab in step_labels(dim)], [labels.index(lab) for lab in layer_labels(dim)]


def _positions_in(ids: NDArray[np.int64], keys: NDArray[np.int64]) -> NDArray[np.int64]:
    """Position of each of ``keys`` (any shape) in the sorted ``ids``, −1 where absent."""
    pos = np.minimum(np.searchsorted(ids, keys), len(ids) - 1)
    return np.where(ids[pos] == keys, pos, -1)


def node_options(params: Any, dim: int) -> tuple[int, int, int]:
    """(stencil size, degree, phs) of a scattered node set for these settings."""
    return params.stencil_size_for(dim), int(params.degree), int(params.phs)


def check_layout_options(options: dict, detail: int) -> None:
    """ValueError naming a layout option that does not fit ``options["nodes"]`` (before any work is done)."""
    nodes = options.get("nodes", "lattice")
    if nodes not in NODE_LAYOUTS:
        raise ValueError(f"nodes must be one of {NODE_LAYOUTS}, got {nodes!r}")
    if nodes == "lattice":
        for name in ("finest", "coarsest", "node_set"):
            if options.get(name) is not None:
                raise ValueError(f"{name} applies to nodes='scattered' only")
    elif detail != 1:
        raise ValueError("detail applies to nodes='lattice'; scattered nodes take finest and coarsest (mm)")


def make_layout(features: Any, params: Any, detail: int, options: dict) -> NodeLayout:
    """The layout of a new front on ``features``' image: a lattice at ``detail`` nodes per pixel, or scattered
    nodes (``options``: ``nodes``, and for scattered nodes ``finest``, ``coarsest`` in mm or a ``node_set``)."""
    sp = features.spacing
    shape = features.image.shape
    dim = len(shape)
    if options.get("nodes", "lattice") == "lattice":
        step_mm = sp / detail
        stencil = band_stencil(step_mm, stencil_size=params.stencil_size_for(dim), degree=params.degree,
                               phs=params.phs)
        return LatticeLayout(stencil, step_mm, detail, shape)
    node_set = options.get("node_set")
    if node_set is not None:
        if not isinstance(node_set, ScatteredNodeSet):
            raise ValueError(f"node_set must be a ScatteredNodeSet, got {type(node_set).__name__}")
        if node_set.shape != shape or not np.allclose(node_set.pixel_spacing, sp, rtol=1e-12, atol=0):
            raise ValueError("node_set was made for another image shape or spacing")
        if (node_set.stencil_size, node_set.degree, node_set.phs) != node_options(params, dim):
            raise ValueError("node_set: its stencil_size, degree and phs differ from the front's settings")
        return ScatteredLayout(node_set)
    finest = 0.5 * float(np.min(sp)) if options.get("finest") is None else options["finest"]
    coarsest = float(np.max(sp)) if options.get("coarsest") is None else options["coarsest"]
    for name, value in (("finest", finest), ("coarsest", coarsest)):
        if not (isinstance(value, (int, float, np.integer, np.floating)) and np.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be a positive node spacing in mm, got {value!r}")
    if finest > coarsest:
        raise ValueError(f"finest ({finest}) must not exceed coarsest ({coarsest})")
    size, degree, phs = node_options(params, dim)
    node_set = ScatteredNodeSet.from_features(features, finest=float(finest), coarsest=float(coarsest),
                                              stencil_size=size, degree=degree, phs=phs)
    return ScatteredLayout(node_set)
