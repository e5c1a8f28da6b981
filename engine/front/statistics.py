"""What the region model reads of the image: the inside image, region sums, local outside means, half-widths.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy import ndimage

from engine.front.constants import (DEFAULT_LOCAL_RADIUS, LOCAL_CONTRAST, RIM_PIXELS, RING_PIXELS, SIDE_SHARE,
                                    SMALL_STRUCTURE)
from engine.front.state import _locked
from engine.image.ring_statistics import block_gaussian_at, core_and_ring, gaussian_at, gaussian_block
from engine.image.thickness import half_width


class RegionStatistics:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    def _reset_sums(self) -> None:
        img = self.features.smoothed
        inside = self._inside
        # the rim's sums follow at the next sync with φ (until then the means take every pixel)
        self._swap(sums=(float(img[inside].sum()), float(inside.sum()), float(img[~inside].sum()),
                         float((~inside).sum())), rim=None)

    def _sync_inside(self) -> None:
        """Update the pixel inside image (and the region sums, the rim's sums) at pixel-centre band nodes."""
        b = self._band
        values = self._pixel_band_values()
        now = self._pixels_inside(values)
        rim = self._rim_sums(values, now)
        before = self._inside[b.pixel_index]
        changed = np.flatnonzero(now != before)
        if len(changed) == 0:
            self._swap(rim=rim)
            return
        idx = tuple(i[changed] for i in b.pixel_index)
        vals = self.features.smoothed[idx]
        gained = now[changed]
        delta_sum = float(vals[gained].sum() - vals[~gained].sum())
        delta_n = float(gained.sum() - (~gained).sum())
        s_in, n_in, s_out, n_out = self._sums
        inside = self._inside.copy()  # the state's image is read-only: the next state gets its own
        inside[idx] = gained
        self._swap(inside=inside, sums=(s_in + delta_sum, n_in + delta_n, s_out - delta_sum, n_out - delta_n),
                   rim=rim)

    def _band_pixels_inside(self) -> NDArray[np.bool_]:
        """Which of the band's pixel centres (``_band.pixel_index``) lie inside."""
        return self._pixels_inside(self._pixel_band_values())

    def _pixels_inside(self, values: NDArray[np.floating]) -> NDArray[np.bool_]:
        """Which of the band's pixel centres (``_band.pixel_index``) lie inside, from φ there (``values``)."""
        now = values < 0
        if self._barrier is not None and self.layout.holds_barrier_on_pixels:
            now &= ~self._barrier[self._band.pixel_index]
        return now

    def _rim_sums(self, values: NDArray[np.floating], inside: NDArray[np.bool_]) -> tuple[float, float, float, float]:
        """Smoothed-intensity sums and counts of the band's pixels in the outline's blurred rim, inside then outside.

        A pixel whose centre lies within :meth:`_rim_reach` of the outline
        (φ a distance near the front) reads a mixture of both regions: partial
        volume over the pixel's box, then the smoothing. ``values`` is φ at the
        band's pixel centres, ``inside`` which of them are inside.
        """
        reach = self._rim_reach()
        img = self.features.smoothed[self._band.pixel_index]
        rim_in = inside & (values > -reach)
        rim_out = ~inside & (values < reach)
        return (float(img[rim_in].sum()), float(rim_in.sum()), float(img[rim_out].sum()), float(rim_out.sum()))

    def _rim_reach(self) -> float:
        """Width (mm) of the blurred rim on each side of the outline: half a pixel's diagonal plus one smoothing scale.

        A pixel's box reaches half its diagonal from its centre; beyond that
        and one smoothing scale σ a straight edge's smoothed profile is within
        about 5 % of the region's own value (1 mm pixels, σ = 1 mm: the
        box-sampled step blurred by σ reads Φ(1.71 / 1.04) ≈ 0.95 there), so
        the mean is barely pulled and a structure 6 px across still keeps a
        core. The pixel is the one the image resolves (:meth:`_resolved_pixel`).
        """
        return 0.5 * float(np.linalg.norm(self._resolved_pixel())) + self.features.sigma_mm

    def _resolved_pixel(self) -> NDArray[np.floating]:
        """Size (mm, per axis) of the pixel the image resolves: its pixel times ``resolved_block``.

        An oversampled image (interpolated to a finer grid than its
        acquisition) spreads each edge over the block it resolves
        (:func:`engine.image.resolution.resolved_block`); its blurred rim and
        the ring of local statistics are that block's multiples, so that the
        outline rests where it would on the image at the resolved pixel.
        """
        return self.features.spacing * float(self._state.resolved_block)

    def _pixel_band_values(self) -> NDArray[np.floating]:
        """φ at the band's pixel centres (``_band.pixel_index``)."""
        return self.layout.pixel_values(self._band, self._phi)

    @_locked
    def region_means(self) -> tuple[float, float]:
        """Mean smoothed intensity inside and outside the front, beyond the outline's blurred rim.

        The Chan–Vese means c_in, c_out are the regions' intensities (Chan &
        Vese 2001); the front rests where the image reads their midpoint. The
        pixels near the outline hold a mixture of both (partial volume over
        each pixel's box, then the smoothing), and taken in they pull each
        mean toward the other and the outline off the boundary, the more the
        larger the rim's share of the region: a 6 px wide channel's outline
        sat 0.07 px outward. So each mean is over the region's pixels beyond
        the rim (:meth:`_rim_reach`); a region with no such pixel takes all of its pixels
        (:meth:`_all_pixel_means`). Mixed pixels are left out of region
        statistics as in partial-volume tissue classification (Shattuck,
        Sandor-Leahy, Schaper, Rottenberg & Leahy, NeuroImage 13(5) (2001)
        856-876).
        """
        s_in, n_in, s_out, n_out = self._sums
        r_in, m_in, r_out, m_out = self._state.rim if self._state.rim is not None else (0.0, 0.0, 0.0, 0.0)
        if n_in - m_in >= 1:
            s_in, n_in = s_in - r_in, n_in - m_in
        if n_out - m_out >= 1:
            s_out, n_out = s_out - r_out, n_out - m_out
        c_in = s_in / n_in if n_in > 0 else 0.0
        c_out = s_out / n_out if n_out > 0 else 0.0
        return c_in, c_out

    def _all_pixel_means(self) -> tuple[float, float]:
        """Mean smoothed intensity over every pixel inside and outside the front, rim included."""
        s_in, n_in, s_out, n_out = self._sums
        return (s_in / n_in if n_in > 0 else 0.0, s_out / n_out if n_out > 0 else 0.0)

    def _inside_means_at_layer(self, core: float) -> NDArray[np.floating] | float:
        """The inside mean each layer node's speed compares with: ``core`` (:meth:`region_means`), or on thin runs every pixel's.

        Along a run of the structure thinner than its blurred rim (a strip
        or vessel a few pixels across: the thin runs of ``thickness``,
        :func:`engine.image.thickness.half_width`) no pixel reaches the
        core's intensity: blur and partial volume spread its signal over its
        neighbours, and measured against the core's mean its noisy tip
        reads as outside (a 2 px strip at SNR 3-4 came to rest 3 px short of
        its end). Its nodes compare with the mean over every inside pixel,
        the strip's own included. Elsewhere the core's mean holds.
        """
        b = self._band
        reach = SMALL_STRUCTURE * (self.ndim - 1)
        if b.thickness is None or len(b.thickness) != len(b.layer) or not np.any(b.thickness < reach):
            return core
        return np.where(b.thickness < reach, self._all_pixel_means()[0], core)

    def _update_layer_statistics(self) -> None:
        """What the layer's speeds read between refreshes: local region statistics, the structure's half-width."""
        if self.params.model == "region":
            self._update_local_statistics()
        if self.params.model in ("region", "window"):
            self._update_thickness()
        b = self._band
        self._swap(layer=(b.layer, b.source, b.edge_source, b.layer_phi), local_out=b.local_out,
                   thickness=b.thickness)

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

        The inside mean is the mean inside the front (the structure being
        outlined; :meth:`region_means`, without the pixels the outline
        cuts). The outside mean is the Gaussian-weighted mean of the
        outside pixels within ``local_radius`` of each layer node (Lankton &
        Tannenbaum 2008), so the front stops halfway between the structure and
        whatever actually borders it rather than halfway to the average of
        the whole image. Only a ring of outside pixels counts: beyond the
        blurred rim of the edge (RIM_PIXELS plus two smoothing scales, so
        partial volume does not pull the mean toward the inside) and within
        RING_PIXELS more, both in the pixels the image resolves
        (:meth:`_resolved_pixel`) (so the tissue that actually borders the front
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
        A radius of eight pixels or more (a fine grid, a zoomed image) is
        summed on the means of blocks a quarter of it across
        (:func:`engine.image.ring_statistics.block_gaussian_at`), so the cost
        does not grow with the radius in pixels.
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
        coarse = float(np.max(self._resolved_pixel()))
        rim = RIM_PIXELS * coarse + 2.0 * self.features.sigma_mm  # mm
        core, ring = core_and_ring(self._inside[box], self.features.spacing, rim=rim,
                                   outer=rim + RING_PIXELS * coarse)
        local = (px - lo).T
        b.local_in = np.full(len(px), c_in)
        ring_px = np.nonzero(ring)
        if np.any(gaussian_block(radius_px, self.ndim) > 1):
            # a radius many pixels wide: the sums on a grid of blocks a quarter of it across
            ring_points = np.array(ring_px, dtype=float).reshape(self.ndim, -1)

            def at_ring(values: NDArray[np.floating]) -> NDArray[np.floating]:
                return block_gaussian_at(values, radius_px, ring_points)

            def at_nodes(values: NDArray[np.floating]) -> NDArray[np.floating]:
                return block_gaussian_at(values, radius_px, local)
        else:
            # The Gaussian sums are read at the ring's pixels and at the pixels around the layer nodes
            # that the linear read-out takes: they are filtered there only (gaussian_at).
            read_px = _linear_read_pixels(local, img.shape)

            def at_ring(values: NDArray[np.floating]) -> NDArray[np.floating]:
                return gaussian_at(values, radius_px, ring_px)

            def at_nodes(values: NDArray[np.floating]) -> NDArray[np.floating]:
                filtered = np.zeros(values.shape, dtype=values.dtype)
                filtered[read_px] = gaussian_at(values, radius_px, read_px)
                return ndimage.map_coordinates(filtered, local, order=1, mode="nearest")

        # ring pixels are told apart from the inside by the inside mean near them (the inside
        # without its rim, Gaussian weights; the global mean where there is too little of it):
        # a smooth bias field across a large structure is not taken for a neighbouring tissue
        core = core.astype(float)
        w_core = at_ring(core)
        near_in = np.where(w_core > 0.05, at_ring(img * core) / np.maximum(w_core, 1e-12), c_in)
        # the outside on each side of the inside mean (darker, brighter), beyond noise:
        # a structure between a darker and a brighter tissue (an organ on bone in CT) is
        # held by both, where their mixed mean could lie on the inside's own side
        w_ring = at_nodes(ring.astype(float))
        sides = []
        for side in (-1.0, 1.0):
            far = np.sign(c_out - c_in) != side
            need = max(3.0 * noise, LOCAL_CONTRAST * abs(c_in - c_out)) if far else 3.0 * noise
            beyond_px = side * (img[ring_px] - near_in) > need
            if not beyond_px.any():
                sides.append(np.full(len(px), np.nan))  # no weight anywhere: not a distinct side
                continue
            beyond = np.zeros(img.shape)
            beyond[tuple(i[beyond_px] for i in ring_px)] = 1.0
            weight = at_nodes(beyond)
            mean = at_nodes(img * beyond) / np.maximum(weight, 1e-12)
            # a side is a tissue where it makes up a good share of the ring, not where a few
            # pixels of the inside's own noise tail (or of a smooth bias) are beyond `need`
            distinct = (weight > 0.05) & (weight >= SIDE_SHARE * w_ring)
            sides.append(np.where(distinct, mean, np.nan))
        first = np.where(np.isnan(sides[0]), sides[1], sides[0])
        other = np.where(np.isnan(sides[0]), np.nan, sides[1])
        b.local_out = np.stack([np.where(np.isnan(first), c_out, first), other])


def _linear_read_pixels(points: NDArray[np.floating], shape: tuple[int, ...]) -> tuple[NDArray[np.int64], ...]:
    """The pixels that ``ndimage.map_coordinates(..., order=1, mode="nearest")`` reads for ``points`` (one per row).

    Each point's coordinate is clamped into the array, then the pixels at
    its floor and the next one (clamped again) on every axis.
    """
    corners = []
    for axis, n in enumerate(shape):
        low = np.floor(np.clip(points[axis], 0, n - 1)).astype(np.int64)
        corners.append((low, np.minimum(low + 1, n - 1)))
    read = np.zeros(shape, dtype=bool)
    for pick in np.ndindex(*(2,) * len(shape)):
        read[tuple(corners[a][p] for a, p in enumerate(pick))] = True
    return np.nonzero(read)
