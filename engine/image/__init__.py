"""What the front reads from an image: features for the speed models, thickness, a coarse start, the flood.

- ``features``: smoothed image, edge stopping function g and ∇g, sampled by cubic splines
- ``thickness``: local half-width of a structure behind its outline, thin runs of its midline
- ``coarse_start``: block-averaged images, coarse seeds, cubic upsampling of a coarse φ
- ``growth``: growth from a click, a pixel-level flood bounded by the speed model
- ``ring_statistics``: a region's core and the ring beyond its rim, Gaussian sums read at a few pixels

The names load on first use: the flood builds on the front, while the front
reads this package's features, so an eager import here would be circular.
"""

from __future__ import annotations

from engine.lazy import lazy_attributes

_PUBLIC = {
    "ImageFeatures": "engine.image.features",
    "compute_features": "engine.image.features",
    "half_width": "engine.image.thickness",
    "thin_length": "engine.image.thickness",
    "block_mean": "engine.image.coarse_start",
    "coarse_seeds": "engine.image.coarse_start",
    "upsample_phi": "engine.image.coarse_start",
    "RegionGrowth": "engine.image.growth",
    "noise_level": "engine.image.growth",
}

__all__ = list(_PUBLIC)


__getattr__, __dir__ = lazy_attributes(__name__, _PUBLIC, __all__)
