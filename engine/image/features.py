"""Image-side quantities for the speed models, computed once per image.

The smoothed intensity, the edge stopping function of geodesic active
contours g = 1 / (1 + (|∇G_σ * I| / K)²) and its gradient are computed on the
pixel grid once and sampled at nodes with cubic B-spline interpolation (in
pixel coordinates, i.e. physical coordinates divided by the spacing).

References
----------
.. [1] V. Caselles, R. Kimmel, G. Sapiro, "Geodesic active contours",
   Int. J. Comput. Vis. 22(1) (1997) 61-79.
.. [2] M. Unser, "Splines: a perfect fit for signal and image processing",
   IEEE Signal Process. Mag. 16(6) (1999) 22-38 (cubic B-spline sampling).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

from engine.validation.inputs import check_spacing


@dataclass(frozen=True)
class ImageFeatures:
    """Per-image arrays (pixel grid) and their spline coefficients.

    The smoothed image is made at once; the edge map g, its gradient and the
    automatic edge contrast K on first use (only the edge model and a region
    model with an edge weight read them; on a large volume they would be
    most of a front's set-up time and memory).
    """

    image: NDArray[np.floating]
    spacing: NDArray[np.floating]
    sigma_mm: float
    smoothed: NDArray[np.floating]
    intensity_scale: float  # robust spread of the image (p99 - p1)
    contrast_given: float | None = None  # K as set; None = automatic
    _coeffs: dict = field(default_factory=dict, repr=False, compare=False)
    _edges: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def contrast(self) -> float:
        """K of the edge stopping function, in intensity units per mm (given, or 1.5 × the median gradient)."""
        return self._edge_features()[0]

    @property
    def edge(self) -> NDArray[np.floating]:
        """g = 1 / (1 + (|∇G_σ * I| / K)²), in (0, 1]."""
        return self._edge_features()[1]

    @property
    def edge_gradient(self) -> tuple[NDArray[np.floating], ...]:
        """∂g/∂x_i per mm."""
        return self._edge_features()[2]

    def _edge_features(self) -> tuple[float, NDArray[np.floating], tuple[NDArray[np.floating], ...]]:
        if "g" not in self._edges:
            grads = np.gradient(self.smoothed, *self.spacing)
            magnitude = np.sqrt(sum(g * g for g in grads))
            del grads
            contrast = self.contrast_given
            if contrast is None:
                med = float(np.median(magnitude))
                contrast = 1.5 * med if med > 0 else max(float(np.max(magnitude)), 1e-12) * 0.1
            edge = 1.0 / (1.0 + (magnitude / contrast) ** 2)
            self._edges["g"] = (float(contrast), edge, tuple(np.gradient(edge, *self.spacing)))
        return self._edges["g"]

    def sample(self, name: str, points_px: NDArray[np.floating]) -> NDArray[np.floating]:
        """Cubic-spline sample of feature ``name`` at pixel coordinates (N, d).

        Names: ``"smoothed"``, ``"edge"``, ``"edge_gradient0"``, ... Points on
        integer coordinates are read directly.
        """
        array = self._array(name)
        pts = np.asarray(points_px, dtype=float)
        rounded = np.rint(pts)
        if np.all(rounded == pts):
            idx = np.clip(rounded.astype(np.int64), 0, np.array(array.shape) - 1)
            return array[tuple(idx.T)]
        if name not in self._coeffs:
            self._coeffs[name] = ndimage.spline_filter(array, order=3, mode="mirror")
        return ndimage.map_coordinates(self._coeffs[name], pts.T, order=3, mode="mirror", prefilter=False)

    def _array(self, name: str) -> NDArray[np.floating]:
        if name == "smoothed":
            return self.smoothed
        if name == "edge":
            return self.edge
        if name.startswith("edge_gradient"):
            return self.edge_gradient[int(name[len("edge_gradient"):])]
        if name == "image":
            return self.image
        raise ValueError(f"name: unknown image feature {name!r}")


def robust_scale(image: NDArray[np.floating]) -> float:
    """Spread between the 1st and 99th intensity percentiles (never zero)."""
    lo, hi = np.percentile(image, [1.0, 99.0])
    scale = float(hi - lo)
    if scale <= 0:
        scale = float(np.max(image) - np.min(image))
    return scale if scale > 0 else 1.0


def check_features(features: ImageFeatures, image: NDArray[np.floating], spacing: NDArray[np.floating], *,
                   sigma_mm: float, contrast: float | None) -> ImageFeatures:
    """``features`` when they are :func:`compute_features` of ``image`` at ``spacing``, ``sigma_mm`` and ``contrast``.

    Raises ``ValueError`` naming ``features`` otherwise (another image, spacing, smoothing or edge contrast).
    """
    if not isinstance(features, ImageFeatures):
        raise ValueError(f"features: expected ImageFeatures, got {type(features).__name__}")
    same_image = features.image is image or (features.image.shape == np.shape(image)
                                              and np.array_equal(features.image, image))
    if not same_image:
        raise ValueError("features: they were computed from another image")
    if not np.array_equal(features.spacing, spacing):
        raise ValueError(f"features: computed at spacing {tuple(features.spacing)}, not {tuple(spacing)}")
    if features.sigma_mm != float(sigma_mm) or features.contrast_given != (None if contrast is None
                                                                            else float(contrast)):
        raise ValueError(f"features: computed with edge_sigma {features.sigma_mm} and edge_contrast "
                         f"{features.contrast_given}, not {sigma_mm} and {contrast}")
    return features


def compute_features(
    image: ArrayLike, spacing: ArrayLike, *, sigma_mm: float = 1.0, contrast: float | None = None
) -> ImageFeatures:
    """Smoothed image, edge stopping function g and ∇g for one image.

    Parameters
    ----------
    image : 2-D or 3-D array of intensities (any scale: HU, MR units, 8-bit).
    spacing : pixel spacing per axis in mm.
    sigma_mm : Gaussian scale of the smoothing (Edge scale σ).
    contrast : gradient magnitude (intensity per mm) at which g = 1/2
        (Edge contrast K). Default: 1.5 times the median gradient magnitude
        of the smoothed image, so that flat noisy areas keep g ≈ 0.7 while
        edges a few noise levels high already bring g near 0.1.
    """
    img = np.asarray(image, dtype=float)
    if img.ndim not in (2, 3):
        raise ValueError(f"image must be 2-D or 3-D, got {img.ndim}-D")
    sp = check_spacing(spacing, img.ndim)
    if not np.all(np.isfinite(img)):
        raise ValueError("image contains NaN or infinite values")
    if sigma_mm < 0:
        raise ValueError(f"sigma_mm must be >= 0, got {sigma_mm}")
    if contrast is not None and not contrast > 0:
        raise ValueError(f"contrast must be > 0, got {contrast}")
    sigma_px = sigma_mm / sp
    smoothed = ndimage.gaussian_filter(img, sigma_px, mode="nearest") if sigma_mm > 0 else img.copy()
    return ImageFeatures(img, sp, float(sigma_mm), smoothed, robust_scale(img),
                         None if contrast is None else float(contrast))
