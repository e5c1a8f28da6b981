"""The band around the zero set: its first build, its nodes and layer, rebuilds as the front moves.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).
"""

from __future__ import annotations

import time as _time
from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.front.constants import (FAR, FLAT_DRIFT, LAYER_DRIFT, LAYER_IDLE_STEPS, LAYER_WIDTH, REINIT_DRIFT,
                                    REINIT_EVERY)
from engine.front.geometry import grid_crossing_points
from engine.front.state import FrontVanished, _locked
from engine.image.boxes import occupied_box
from engine.image.statistics import estimate_window_from_mask, robust_std
from engine.nodes.lattice import LatticeLookup
from engine.nodes import layout as _layout
from engine.numerics.closest_point import closest_points


class BandBuilding:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    def _initialise(self, oracle: Callable[[NDArray[np.floating]], NDArray[np.floating]], *,
                    signed_distance: bool = False, exact_within: float | None = None,
                    inside: ArrayLike | None = None,
                    window_from: ArrayLike | None = None, estimate_window: bool = False) -> None:
        """Band around the zero set of ``oracle`` (values at points in mm); optionally estimate the window.

        ``inside`` (pixels known to lie inside) limits the pixel read-out to the mask's boundary.
        """
        sp = self.features.spacing
        if inside is None:
            pixel_values = _pixel_values(oracle, self.shape, sp)
        else:
            pixel_values = _boundary_pixel_values(oracle, inside, self.shape, sp)
        self._swap(inside=pixel_values < 0)
        if not self._inside.any():
            raise ValueError("the initial front is empty: no pixel centre lies inside it")
        if estimate_window:
            region = self._inside if window_from is None else np.asarray(window_from, dtype=bool)
            if region.shape != self.shape or not region.any():
                raise ValueError("window_from must be a non-empty boolean mask of the image's shape")
            self._swap(params=self.params.updated(window=estimate_window_from_mask(self.features.smoothed, region)))
        self._swap(noise=robust_std(self.features.smoothed[self._inside]))
        self._reset_sums()
        starts = grid_crossing_points(pixel_values, sp)
        if len(starts) == 0:
            raise ValueError("the initial front has no boundary inside the image")

        def values_at(indices: NDArray[np.int64]) -> NDArray[np.floating]:
            return oracle(self.layout.positions(indices))

        if signed_distance:
            nodes = self.layout.candidates(starts, self.band_half_width)
            values = values_at(nodes)  # read once: the band is built on these very nodes
            trusted = np.ones(len(nodes), dtype=bool) if exact_within is None else np.abs(values) > exact_within
            self._build_band(starts, lambda _: values, nodes=nodes, trusted=trusted)
        else:
            self._build_band(starts, values_at)

    def _sign_from_pixels(self, indices: NDArray[np.int64]) -> NDArray[np.floating]:
        px = np.rint(self.layout.pixels(indices)).astype(np.int64)
        px = np.clip(px, 0, np.array(self.shape) - 1)
        return np.where(self._inside[tuple(px.T)], -1.0, 1.0)

    def _current_values(self, indices: NDArray[np.int64]) -> NDArray[np.floating]:
        """φ at lattice ``indices`` (scattered node ids): band values where known, ±(far) elsewhere."""
        pos = self._band_positions(indices)
        far = FAR * self.band_half_width * self._sign_from_pixels(indices)
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
            near_dist, nearest = cKDTree(starts).query(positions[todo], workers=_layout.tree_workers(len(todo)))
            # nodes farther than the band from every zero crossing are dropped below
            reach = near_dist <= width + 0.5 * float(np.max(self.step_mm))
            phi[todo[~reach]] = np.where(approx[todo[~reach]] < 0, -1.0, 1.0) * 2.0 * width
            todo, nearest = todo[reach], nearest[reach]
            if len(todo):
                cp = closest_points(interp, coeffs, positions[todo], start=starts[nearest], max_iter=8)
                phi[todo] = np.where(approx[todo] < 0, -1.0, 1.0) * cp.distance
        keep = np.abs(phi) <= width
        self._install_band(nodes[keep], phi[keep])
        self._swap(rebuild_drift=self._layer_drift(self._phi))
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
        _, crossing_source = cKDTree(self.layout.positions(indices[active[layer]])).query(
            crossings, workers=_layout.tree_workers(len(crossings)))
        crossing_source = np.asarray(crossing_source, dtype=np.int64)
        crossing_tree = cKDTree(crossings)

        def source_of(nodes: NDArray[np.int64]) -> NDArray[np.int64]:
            if len(nodes) == 0:
                return np.zeros(0, dtype=np.int64)
            _, near = crossing_tree.query(self.layout.positions(indices[nodes]),
                                          workers=_layout.tree_workers(len(nodes)))
            return crossing_source[near]

        source = source_of(active)
        source[layer] = np.arange(len(layer))
        return layer, source, source_of(edge_nodes)

    def _install_band(self, keys: NDArray[np.int64], phi: NDArray[np.floating]) -> None:
        """Make the band on nodes ``keys`` with values ``phi`` the front's, with its layer and statistics."""
        band, phi = self.layout.build_band(keys, phi, self._front_layer, self.band_half_width)
        band.frozen, band.barrier = self._node_masks(band.pixels)
        self._band = band
        self._swap(indices=band.indices, phi=phi, phi_at_rebuild=np.abs(phi))
        self._coeffs = None
        band.layer_phi = phi[band.active[band.layer]]
        self._pick_near()
        self._sync_inside()
        self._update_layer_statistics()

    def _node_masks(self, pixels: NDArray[np.floating]) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
        """Per node at ``pixels``: pinned, and inside a barrier (the pixel nearest each node decides)."""
        near = tuple(np.clip(np.rint(pixels).astype(np.int64), 0, np.array(self.shape) - 1).T)
        frozen = self._pins[near] if self._pins is not None else np.zeros(len(pixels), bool)
        barrier = self._barrier[near] if self._barrier is not None else np.zeros(len(pixels), bool)
        return frozen, barrier

    def _refresh_node_masks(self) -> None:
        b = self._band
        b.frozen, b.barrier = self._node_masks(b.pixels)
        b.held = None
        if not self.vanished:
            self._sync_inside()  # a barrier holds pixel centres too (scattered nodes)
        self._swap(converged=False)
        self._restart_convergence()

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
        self._pick_near()
        self._update_layer_statistics()

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
        self._swap(since_reinit=0 if reinitialise else self._since_reinit + 1)


#: Pixels per call of an initial front's function in :func:`_pixel_values`.
PIXEL_CHUNK = 1 << 21


def _boundary_pixel_values(oracle: Callable[[NDArray[np.floating]], NDArray[np.floating]], inside: ArrayLike,
                           shape: tuple[int, ...], spacing: NDArray[np.floating]) -> NDArray[np.floating]:
    """Pixel values for a front whose inside pixels are known: ``oracle`` next to the boundary, ∓1 elsewhere.

    Only pixels with a neighbour (along an axis) on the other side of the
    mask are read: the crossings between pixel centres, and the inside bits,
    are then those of ``oracle`` at every pixel.
    """
    mask = np.asarray(inside)
    if mask.shape != tuple(shape) or mask.dtype != bool:
        raise ValueError(f"inside must be a boolean mask of shape {tuple(shape)}, got {mask.dtype} {mask.shape}")
    out = np.where(mask, -1.0, 1.0)
    box = occupied_box(mask, 1)
    if box is None:
        return out
    lo = np.array([s.start for s in box])
    part = mask[box]
    border = np.zeros(part.shape, dtype=bool)
    for axis in range(part.ndim):
        lead = (slice(None),) * axis + (slice(0, -1),)
        trail = (slice(None),) * axis + (slice(1, None),)
        change = part[lead] != part[trail]
        border[lead] |= change
        border[trail] |= change
    pixels = np.argwhere(border) + lo
    values = np.asarray(oracle(pixels * spacing), dtype=float)
    wrong = int(np.count_nonzero((values < 0) != mask[tuple(pixels.T)]))
    if wrong:
        raise ValueError(f"inside disagrees with phi at {wrong} pixel(s) next to its boundary")
    out[tuple(pixels.T)] = values
    return out


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
