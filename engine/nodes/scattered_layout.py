"""Scattered nodes of a front: global ids of one image's node set, each node with its own cached RBF-FD weights."""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

from engine.nodes import layout as _layout
from engine.nodes.band_stencils import layer_labels, step_labels
from engine.nodes.lattice import LatticeLookup
from engine.nodes.layout import Band, FrontLayer
from engine.nodes.node_graph import edge_crossings
from engine.nodes.node_set import ScatteredNodeSet
from engine.nodes.scattered_stencils import positions_in
from engine.nodes.scattered_weights import operator_labels
from engine.numerics.interpolant import LocalInterpolant
from engine.numerics.rbffd import assemble

__all__ = ["ScatteredLayout", "SCATTERED_DAMPING", "node_options", "scattered_columns"]

#: Hyperviscosity coefficient γ (mm⁴ per unit curvature weight, times the node
#: set's per-node factor (h_i / h_ref)^6) on scattered nodes: the linear
#: curvature operator is stable without it, the full scheme (extension
#: velocities, rebuilds) is not (see DEVELOPERS.md, "Scattered nodes").
SCATTERED_DAMPING = 0.01


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
        return positions_in(band.indices, keys, ids_sorted=True)

    def layer_width(self, keys: NDArray[np.int64], active: NDArray[np.int64]) -> float | NDArray[np.floating]:
        return self.node_set.local_spacing[keys[active]]

    def pair_distance(self, band: Any, nodes: NDArray[np.int64]) -> float:
        return float(np.max(band.spacing[nodes]))

    def step_derivatives(self, band: Any, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        if band.near_operators is None:
            band.near_operators = (band.gather[band.near], np.ascontiguousarray(band.step_weights[band.near]))
        gather, weights = band.near_operators
        return np.ascontiguousarray(np.matmul(phi[gather][:, None, :], weights)[:, 0, :].T)

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
        columns = positions_in(ids, stencils, ids_sorted=True)
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
        near = cKDTree(starts_mm).query(positions, workers=_layout.tree_workers(len(positions)))[0]
        near_front = near <= 2.5 * self._coarsest
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
        corner, size = grid[0], grid[-1] - grid[0] + 1  # the box's first pixel and extent
        pixels = np.stack(band.pixel_index, axis=1)
        in_box = np.all((pixels >= corner) & (pixels < corner + size), axis=1)
        base[np.ravel_multi_index(tuple((pixels[in_box] - corner).T), tuple(size))] = self.pixel_values(band, phi)[in_box]
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



def node_options(params: Any, dim: int) -> tuple[int, int, int]:
    """(stencil size, degree, phs) of a scattered node set for these settings."""
    return params.stencil_size_for(dim), int(params.degree), int(params.phs)
