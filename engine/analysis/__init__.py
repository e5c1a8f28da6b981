"""Read-outs of an outline: contours of a band, pixel masks, comparison metrics, area inside the image.

- ``contours``: marching squares on band cells, orientation, areas, lengths
- ``masks``: pixel-centre masks from a band, exact partial-volume fractions
- ``metrics``: Dice, Jaccard, Hausdorff, HD95, mean surface distance, areas, lengths
- ``clipped_area``: area of an outline cut by the image's border
"""

from engine.analysis.clipped_area import area_in_image
from engine.analysis.contours import (BandCutWarning, ContourSet, band_contour_set, band_contours, orient,
                                      polyline_length, signed_area)
from engine.analysis.masks import mask_from_band, partial_volume
from engine.analysis.metrics import (area_mm2, dice, hausdorff, hd95, jaccard, mean_surface_distance, polygon_area_mm2,
                                     polyline_length_mm, surface_distances, volume_mm3)

__all__ = [
    "area_in_image",
    "BandCutWarning", "ContourSet", "band_contour_set", "band_contours", "orient", "polyline_length", "signed_area",
    "mask_from_band", "partial_volume",
    "area_mm2", "dice", "hausdorff", "hd95", "jaccard", "mean_surface_distance", "polygon_area_mm2",
    "polyline_length_mm", "surface_distances", "volume_mm3",
]
