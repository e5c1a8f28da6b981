"""Speeds at the layer next to the front: image features at closest points, smoothness per part.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from engine.front.constants import LAYER_WIDTH, SHAPE_AVERAGING, SHAPE_CONTRAST, SMALL_STRUCTURE
from engine.front.speeds import NodeSpeeds, needed_features, node_speeds
from engine.numerics.outline_averaging import outline_graph


class LayerSpeeds:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    def _speeds(self, phi: NDArray[np.floating], grad: NDArray[np.floating],
                hess: NDArray[np.floating] | None = None) -> NodeSpeeds:
        """Speeds at the layer nodes, with image features taken at their closest points.

        ``grad`` (d, L) and ``hess`` (d, d, L) are the centred derivatives at the layer
        nodes. For image-driven models the normal speed is also taken half a node
        spacing inside and outside the closest point; its slope along the normal
        (``slope``) lets the step treat the speed's pull toward its zero linearly
        implicitly. With ``hess`` the region and window models' smoothness is
        kept off the outline's shape at the scales the averaged image speed
        resolves (:meth:`_smooth_shape_speed`).
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
            c_in: NDArray[np.floating] | float = self._inside_means_at_layer(self.region_means()[0])
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
        c_in3 = np.tile(c_in, 3) if np.ndim(c_in) else c_in
        all3 = node_speeds(self.params, intensity=sampled.get("smoothed"), edge=sampled.get("edge"),
                           edge_gradient=sampled.get("edge_gradient"), normal=normals, c_in=c_in3, c_out=c_out3,
                           sigma_mm=self.features.sigma_mm, count=3 * count)
        v = all3.normal.reshape(3, count)
        a = all3.curvature[:count] if np.ndim(all3.curvature) else all3.curvature
        speed, slope = v[0], (v[2] - v[1]) / (2.0 * half)
        scales = self._part_scales(closest_mm, normal, b.positions[act], g2 >= 0.25)
        if self.params.outline_averaging > 0:
            # nodes where φ has flattened (|∇φ| < ½, e.g. inside a small structure
            # long after its last reinitialisation) have no reliable closest point:
            # a zero normal leaves them out of the average
            trusted = np.where(((g2 >= 0.25) & ~b.barrier[act] & ~b.frozen[act])[:, None], normal, 0.0)
            graph = outline_graph(b.positions[act], self._layer_pairs(), trusted)
            averaged = graph.average(np.column_stack([speed, slope]), self.params.outline_averaging)
            speed, slope = averaged[:, 0], averaged[:, 1]
            if hess is not None and self._image_holds_shape() and np.any(a != 0):
                kappa = self._front_curvature(phi[act], grad, hess, measure=False)
                shape = graph.average(kappa, SHAPE_AVERAGING * self.params.outline_averaging)
                # a part of the outline held by pins or a barrier meets them at kinks the image
                # speed never balances: its smoothness stays plain
                labels, count = self._layer_parts()
                held = np.bincount(labels, b.frozen[act] | b.barrier[act], minlength=count) > 0
                shape_speed = self._smooth_shape_speed(a * scales, shape, slope, self.h)
                speed = speed + np.where(held[labels], 0.0, shape_speed)
        return NodeSpeeds(speed, a * scales, slope=slope)

    def _image_holds_shape(self) -> bool:
        """Whether the image can fix the outline's shape: the smoothness then acts on κ − κ̄ (:meth:`_smooth_shape_speed`).

        The window model: always (its window is set apart from the outside).
        The region model: where its regions differ by at least SHAPE_CONTRAST
        noise deviations (``noise``, of the smoothed image inside the first
        front). On an image of noise alone the two means differ by less than
        one: the speed's slopes there are the noise's, and a front they held
        would come to rest on a noise blob.
        """
        if self.params.model == "window":
            return True
        if self.params.model != "region":
            return False
        c_in, c_out = self.region_means()
        noise = self._noise if self._noise is not None else 0.0
        return abs(c_in - c_out) >= SHAPE_CONTRAST * noise

    @staticmethod
    def _smooth_shape_speed(weight: NDArray[np.floating] | float, mean_curvature: NDArray[np.floating],
                            slope: NDArray[np.floating], spacing: float) -> NDArray[np.floating]:
        """The normal speed a·κ̄ that keeps the smoothness off the outline's shape at the averaged scales.

        Curvature motion a·κ moves every part of the outline, and a resting
        front sits where the image speed balances it, a·κ / (the speed's slope)
        inside a convex boundary and outside a concave one: on a boundary with
        lobes a few pixels across that is most of the outline's error. The
        image speed is averaged along the outline (``outline_averaging``), so
        it already fixes the outline's shape at scales coarser than that
        average; what the smoothness must damp is the wiggle finer than it,
        where the average leaves the image noise. Adding a·κ̄ to the normal
        speed, κ̄ the curvature averaged along the outline with a Gaussian
        SHAPE_AVERAGING times as wide (``mean_curvature``), turns the
        smoothness into a·(κ − κ̄): a high-pass of the curvature that damps
        fine wiggles as before and leaves the shape (a circle, an arm, a lobe
        wider than the average) where the image puts it. This is Taubin's
        smoothing without shrinkage (G. Taubin, "Curve and surface smoothing
        without shrinkage", Proc. 5th ICCV (1995) 852-857): a smoothing
        filter whose pass band keeps the low frequencies of the shape
        unchanged. Only the image can fix the shape: a·κ̄ is capped by what
        the image speed gives back over one node spacing of the outline
        (−``slope`` · ``spacing``, the speed's restoring fall along the
        normal), so where the image speed is flat (a constant image, no
        image force, pure noise) the plain smoothness acts and a front with
        nothing to hold it still shrinks away. ``weight`` is the curvature
        coefficient a per layer node.

        References
        ----------
        G. Taubin, Proc. 5th ICCV (1995) 852-857.
        """
        limit = np.maximum(-slope, 0.0) * spacing
        return np.clip(weight * mean_curvature, -limit, limit)

    @property
    def smoothness_scale(self) -> float:
        """The smallest smoothness scale applied to any part of the front (1: full smoothness).

        The region and window models scale their smoothness by min(1, ρ /
        ((d − 1)·SMALL_STRUCTURE)), ρ a part's mean radius (mm): curvature
        motion holds a resting front where the image speed equals a·κ, an
        inward shift of about a·κ / (the speed's slope), a large part of a
        small structure's radius at full smoothness. κ sums d − 1
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
