"""Lattice nodes of a front: integer indices at step ``spacing / detail``, one band stencil shared by every node."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from engine.nodes.band_stencils import BandStencil, band_stencil
from engine.nodes.lattice import LatticeLookup, symmetric_offsets
from engine.nodes.lattice_band import crossing_points, dilate_nodes, nodes_near
from engine.nodes.layout import Band, FrontLayer
from engine.numerics.interpolant import LocalInterpolant

__all__ = ["LatticeLayout"]


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
        if band.near_operators is None:
            band.near_operators = np.ascontiguousarray(band.gather[:, band.near])
        return self.stencil.step_rows @ np.take(phi, band.near_operators)

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
