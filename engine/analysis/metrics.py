"""Comparison metrics for segmentation masks and contours.

Overlap (Dice, Jaccard), surface distances (Hausdorff, percentile Hausdorff,
mean surface distance), and physical size (pixel area, voxel volume, polygon
area and polyline length of sub-pixel contours).

Conventions
-----------
- Masks are 2-D ``[row, col]`` or 3-D ``[slice, row, col]`` arrays; any
  non-zero value counts as inside.
- ``spacing`` is the physical size of one pixel/voxel along each array axis,
  in mm and in array order (DICOM ``PixelSpacing`` is already (row, col)).
  A single number means isotropic spacing. Distances with ``spacing=None`` are
  in pixels; with a spacing they are in mm.
- The **surface** of a mask is the set of its pixels that have at least one
  face-connected neighbour outside the mask (4-neighbourhood in 2-D,
  6-neighbourhood in 3-D); equivalently the mask minus its binary erosion with
  the face-connected (cross-shaped) structuring element. Pixels on the border
  of the array count as surface (the outside of the array is background).
  The resulting surface is 8-connected in 2-D (26-connected in 3-D).
- Surface distances are measured between pixel centres: from each surface
  pixel of one mask to the nearest surface pixel of the other, computed with
  :func:`scipy.ndimage.distance_transform_edt` using ``sampling=spacing``.
- Contours are closed polylines of ``(row, col)`` pixel coordinates (pixel
  centres at integers). With points written as ``(row, col)`` and the
  shoelace formula applied to them as ``(x, y)``, outer boundaries have
  positive signed area and holes negative.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage

__all__ = [
    "dice",
    "jaccard",
    "surface",
    "surface_distances",
    "hausdorff",
    "hd95",
    "mean_surface_distance",
    "area_mm2",
    "volume_mm3",
    "polyline_length_mm",
    "polygon_area_mm2",
]


# --------------------------------------------------------------------------
# input validation
# --------------------------------------------------------------------------
def _as_mask(mask: ArrayLike, name: str, ndims: tuple[int, ...] = (2, 3)) -> NDArray[np.bool_]:
    arr = np.asarray(mask)
    if arr.dtype == object:
        raise ValueError(f"{name}: expected a numeric or boolean array, got dtype object")
    if arr.ndim not in ndims:
        allowed = " or ".join(f"{d}-D" for d in ndims)
        raise ValueError(f"{name}: expected a {allowed} mask, got {arr.ndim}-D with shape {arr.shape}")
    if arr.dtype != np.bool_:
        if np.issubdtype(arr.dtype, np.floating) and np.isnan(arr).any():
            raise ValueError(f"{name}: contains NaN")
        arr = arr != 0
    return arr


def _as_pair(a: ArrayLike, b: ArrayLike) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    ma = _as_mask(a, "a")
    mb = _as_mask(b, "b")
    if ma.shape != mb.shape:
        raise ValueError(f"b: shape {mb.shape} does not match the shape of a {ma.shape}")
    return ma, mb


def _as_spacing(spacing: float | Sequence[float] | None, ndim: int, *, required: bool = False) -> NDArray[np.float64] | None:
    if spacing is None:
        if required:
            raise ValueError("spacing: required (mm per pixel along each axis)")
        return None
    try:
        sp = np.asarray(spacing, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"spacing: expected a number or {ndim} numbers, got {spacing!r}") from exc
    if sp.ndim == 0:
        sp = np.full(ndim, float(sp))
    if sp.shape != (ndim,):
        raise ValueError(f"spacing: expected {ndim} values (one per axis), got shape {sp.shape}")
    if not np.all(np.isfinite(sp)) or np.any(sp <= 0):
        raise ValueError(f"spacing: values must be finite and positive, got {sp.tolist()}")
    return sp


# --------------------------------------------------------------------------
# overlap
# --------------------------------------------------------------------------
def dice(a: ArrayLike, b: ArrayLike) -> float:
    """Dice similarity coefficient ``2|A ∩ B| / (|A| + |B|)``.

    Parameters
    ----------
    a, b : array_like of bool, 2-D or 3-D, same shape
        Masks; any non-zero value counts as inside.

    Returns
    -------
    float
        In [0, 1]. Two empty masks agree perfectly: 1.0. One empty mask and
        one non-empty mask: 0.0.

    Raises
    ------
    ValueError
        If a mask is not 2-D or 3-D, or the shapes differ (names ``b``).

    References
    ----------
    .. [1] L. R. Dice, "Measures of the amount of ecologic association between
       species", Ecology 26(3) (1945) 297-302.
    """
    ma, mb = _as_pair(a, b)
    na = int(np.count_nonzero(ma))
    nb = int(np.count_nonzero(mb))
    if na + nb == 0:
        return 1.0
    inter = int(np.count_nonzero(ma & mb))
    return 2.0 * inter / (na + nb)


def jaccard(a: ArrayLike, b: ArrayLike) -> float:
    """Jaccard index ``|A ∩ B| / |A ∪ B|``.

    Parameters
    ----------
    a, b : array_like of bool, 2-D or 3-D, same shape
        Masks; any non-zero value counts as inside.

    Returns
    -------
    float
        In [0, 1]. Two empty masks: 1.0. Related to Dice by
        ``J = D / (2 - D)``.

    Raises
    ------
    ValueError
        If a mask is not 2-D or 3-D, or the shapes differ (names ``b``).

    References
    ----------
    .. [1] P. Jaccard, "The distribution of the flora in the alpine zone",
       New Phytologist 11(2) (1912) 37-50.
    """
    ma, mb = _as_pair(a, b)
    union = int(np.count_nonzero(ma | mb))
    if union == 0:
        return 1.0
    inter = int(np.count_nonzero(ma & mb))
    return inter / union


# --------------------------------------------------------------------------
# surfaces and surface distances
# --------------------------------------------------------------------------
def surface(mask: ArrayLike) -> NDArray[np.bool_]:
    """Surface pixels of a mask.

    A pixel is on the surface when it is inside the mask and at least one of
    its face-connected neighbours (4 in 2-D, 6 in 3-D) is outside, the outside
    of the array counting as background. This is ``mask & ~erosion(mask)``
    with the cross-shaped structuring element and ``border_value=0``.

    Parameters
    ----------
    mask : array_like of bool, 2-D or 3-D

    Returns
    -------
    ndarray of bool, same shape as `mask`
    """
    m = _as_mask(mask, "mask")
    return _surface(m)


def _surface(m: NDArray[np.bool_]) -> NDArray[np.bool_]:
    structure = ndimage.generate_binary_structure(m.ndim, 1)
    eroded = ndimage.binary_erosion(m, structure=structure, border_value=0)
    return m & ~eroded


def surface_distances(
    a: ArrayLike, b: ArrayLike, *, spacing: float | Sequence[float] | None = None
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Directed surface distances between two masks.

    Parameters
    ----------
    a, b : array_like of bool, 2-D or 3-D, same shape
    spacing : float or sequence of float, optional
        mm per pixel along each axis (array order). ``None``: distances in
        pixels.

    Returns
    -------
    d_ab : ndarray, shape (n_a,)
        For each surface pixel of `a` (in C order), the distance to the
        nearest surface pixel of `b`.
    d_ba : ndarray, shape (n_b,)
        The same from the surface of `b` to the surface of `a`.

    Notes
    -----
    If exactly one mask is empty, the distances from the other mask's surface
    are ``inf`` and the empty mask contributes no distances. If both are
    empty, both arrays are empty.

    The Euclidean distance transform is computed on the bounding box of the
    two surfaces only; this is exact, because every surface pixel and its
    nearest surface pixel of the other mask both lie in that box.

    References
    ----------
    .. [1] C. R. Maurer, R. Qi and V. Raghavan, "A linear time algorithm for
       computing exact Euclidean distance transforms of binary images in
       arbitrary dimensions", IEEE Trans. Pattern Anal. Mach. Intell. 25(2)
       (2003) 265-270 (the algorithm of
       :func:`scipy.ndimage.distance_transform_edt`).
    """
    ma, mb = _as_pair(a, b)
    sp = _as_spacing(spacing, ma.ndim)
    sa = _surface(ma)
    sb = _surface(mb)
    has_a = bool(sa.any())
    has_b = bool(sb.any())
    if not has_a or not has_b:
        d_ab = np.full(int(np.count_nonzero(sa)), np.inf)
        d_ba = np.full(int(np.count_nonzero(sb)), np.inf)
        return d_ab, d_ba
    # crop to the bounding box of both surfaces (exact, see Notes)
    both = sa | sb
    box = []
    for axis in range(both.ndim):
        other = tuple(i for i in range(both.ndim) if i != axis)
        occupied = np.flatnonzero(both.any(axis=other))
        box.append(slice(int(occupied[0]), int(occupied[-1]) + 1))
    box_t = tuple(box)
    ca = sa[box_t]
    cb = sb[box_t]
    dist_to_b = ndimage.distance_transform_edt(~cb, sampling=sp)
    dist_to_a = ndimage.distance_transform_edt(~ca, sampling=sp)
    return np.asarray(dist_to_b[ca], dtype=float), np.asarray(dist_to_a[cb], dtype=float)


def hausdorff(
    a: ArrayLike,
    b: ArrayLike,
    *,
    spacing: float | Sequence[float] | None = None,
    percentile: float = 100.0,
) -> float:
    """Symmetric (percentile) Hausdorff distance between mask surfaces.

    Parameters
    ----------
    a, b : array_like of bool, 2-D or 3-D, same shape
    spacing : float or sequence of float, optional
        mm per pixel along each axis (array order). ``None``: result in pixels;
        otherwise in mm.
    percentile : float, default 100
        In [0, 100]. 100 gives the classical Hausdorff distance
        ``max(max d_ab, max d_ba)``.

    Returns
    -------
    float
        The `percentile`-th percentile of the **pooled** directed surface
        distances, i.e. of the concatenation of ``d_ab`` and ``d_ba`` from
        :func:`surface_distances`, using :func:`numpy.percentile` with its
        default linear interpolation between order statistics. At 100 this is
        exactly the symmetric Hausdorff distance; ``percentile=95`` is the
        HD95 of :func:`hd95`. (Another convention in use takes the maximum of
        the two directed 95th percentiles; it is not the one used here.)
        Both masks empty: 0.0. Exactly one empty: ``inf``.

    Raises
    ------
    ValueError
        Bad shapes (names ``b``), bad `spacing`, or `percentile` outside
        [0, 100].

    References
    ----------
    .. [1] D. P. Huttenlocher, G. A. Klanderman and W. J. Rucklidge,
       "Comparing images using the Hausdorff distance", IEEE Trans. Pattern
       Anal. Mach. Intell. 15(9) (1993) 850-863.
    """
    p = _as_percentile(percentile)
    d_ab, d_ba = surface_distances(a, b, spacing=spacing)
    return _pooled_percentile(d_ab, d_ba, p)


def _as_percentile(percentile: float) -> float:
    try:
        p = float(percentile)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"percentile: expected a number in [0, 100], got {percentile!r}") from exc
    if not (0.0 <= p <= 100.0):
        raise ValueError(f"percentile: expected a number in [0, 100], got {percentile!r}")
    return p


def _pooled_percentile(d_ab: NDArray[np.float64], d_ba: NDArray[np.float64], p: float) -> float:
    if d_ab.size == 0 and d_ba.size == 0:
        return 0.0
    pooled = np.concatenate((d_ab, d_ba))
    if np.isinf(pooled).any():
        return float("inf")
    return float(np.percentile(pooled, p))


def hd95(a: ArrayLike, b: ArrayLike, *, spacing: float | Sequence[float] | None = None) -> float:
    """95th-percentile Hausdorff distance of the pooled surface distances.

    Same as ``hausdorff(a, b, spacing=spacing, percentile=95.0)``; see
    :func:`hausdorff` for the convention, units and empty-mask values.

    References
    ----------
    .. [1] D. P. Huttenlocher, G. A. Klanderman and W. J. Rucklidge,
       "Comparing images using the Hausdorff distance", IEEE Trans. Pattern
       Anal. Mach. Intell. 15(9) (1993) 850-863.
    """
    return hausdorff(a, b, spacing=spacing, percentile=95.0)


def mean_surface_distance(
    a: ArrayLike, b: ArrayLike, *, spacing: float | Sequence[float] | None = None
) -> float:
    """Symmetric mean surface distance.

    Returns
    -------
    float
        The mean of the pooled directed surface distances,
        ``(sum d_ab + sum d_ba) / (n_a + n_b)`` (each surface pixel of either
        mask weighs the same), in pixels when ``spacing is None`` and in mm
        otherwise. Both masks empty: 0.0. Exactly one empty: ``inf``.

    Raises
    ------
    ValueError
        Bad shapes (names ``b``) or bad `spacing`.
    """
    d_ab, d_ba = surface_distances(a, b, spacing=spacing)
    if d_ab.size == 0 and d_ba.size == 0:
        return 0.0
    pooled = np.concatenate((d_ab, d_ba))
    if np.isinf(pooled).any():
        return float("inf")
    return float(pooled.mean())


# --------------------------------------------------------------------------
# physical size of masks
# --------------------------------------------------------------------------
def area_mm2(mask: ArrayLike, *, spacing: float | Sequence[float]) -> float:
    """Area of a 2-D mask: number of inside pixels times the pixel area.

    Parameters
    ----------
    mask : array_like of bool, 2-D
    spacing : float or (float, float)
        (row, col) mm per pixel.

    Returns
    -------
    float
        mm². An empty mask has area 0.0.
    """
    m = _as_mask(mask, "mask", ndims=(2,))
    sp = _as_spacing(spacing, 2, required=True)
    assert sp is not None
    return float(np.count_nonzero(m)) * float(np.prod(sp))


def volume_mm3(mask: ArrayLike, *, spacing: float | Sequence[float]) -> float:
    """Volume of a 3-D mask: number of inside voxels times the voxel volume.

    Parameters
    ----------
    mask : array_like of bool, 3-D ``[slice, row, col]``
    spacing : float or (float, float, float)
        (slice, row, col) mm per voxel.

    Returns
    -------
    float
        mm³. An empty mask has volume 0.0.
    """
    m = _as_mask(mask, "mask", ndims=(3,))
    sp = _as_spacing(spacing, 3, required=True)
    assert sp is not None
    return float(np.count_nonzero(m)) * float(np.prod(sp))


# --------------------------------------------------------------------------
# contours
# --------------------------------------------------------------------------
def _as_contours(contours: ArrayLike | Sequence[ArrayLike]) -> list[NDArray[np.float64]]:
    """One (k, 2) array or a sequence of them -> list of float arrays."""
    if isinstance(contours, np.ndarray) and contours.dtype != object:
        # one contour (k, 2), or a stack of equal-length contours (m, k, 2)
        items: list = [contours] if contours.ndim != 3 else list(contours)
    elif isinstance(contours, (list, tuple)):
        if len(contours) == 0:
            return []
        # a bare list of (row, col) pairs is one contour
        items = [contours] if np.ndim(contours[0]) == 1 else list(contours)
    else:
        raise ValueError(
            f"contours: expected a (k, 2) array or a list of them, got {type(contours).__name__}"
        )
    out = []
    for idx, c in enumerate(items):
        try:
            arr = np.asarray(c, dtype=float)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"contours: item {idx} is not a numeric (k, 2) array") from exc
        if arr.ndim != 2 or arr.shape[1] != 2:
            raise ValueError(f"contours: item {idx} must have shape (k, 2), got {arr.shape}")
        if not np.all(np.isfinite(arr)):
            raise ValueError(f"contours: item {idx} contains NaN or inf")
        out.append(arr)
    return out


def polyline_length_mm(
    contours: ArrayLike | Sequence[ArrayLike], *, spacing: float | Sequence[float]
) -> float:
    """Total length of closed sub-pixel contours, in mm.

    Parameters
    ----------
    contours : (k, 2) array or sequence of (k, 2) arrays
        Closed polylines of ``(row, col)`` pixel coordinates. The closing
        segment from the last vertex back to the first is always included; a
        contour whose last vertex repeats the first (as returned by
        :func:`skimage.measure.find_contours`) therefore gets a zero-length
        closing segment and the same total.
    spacing : float or (float, float)
        (row, col) mm per pixel. Each segment is scaled per axis before its
        length is taken, so anisotropic pixels are exact.

    Returns
    -------
    float
        Sum of all segment lengths (mm). Empty input: 0.0.
    """
    sp = _as_spacing(spacing, 2, required=True)
    assert sp is not None
    total = 0.0
    for c in _as_contours(contours):
        if len(c) < 2:
            continue
        mm = c * sp
        seg = np.roll(mm, -1, axis=0) - mm
        total += float(np.hypot(seg[:, 0], seg[:, 1]).sum())
    return total


def polygon_area_mm2(
    contours: ArrayLike | Sequence[ArrayLike], *, spacing: float | Sequence[float]
) -> float:
    """Signed area enclosed by closed contours (shoelace formula), in mm².

    Parameters
    ----------
    contours : (k, 2) array or sequence of (k, 2) arrays
        Closed polylines of ``(row, col)`` pixel coordinates; a repeated
        closing vertex is allowed and changes nothing.
    spacing : float or (float, float)
        (row, col) mm per pixel.

    Returns
    -------
    float
        ``sum over contours of ½ Σ (r_i c_{i+1} − r_{i+1} c_i) · s_row · s_col``
        with ``(row, col)`` taken as ``(x, y)``. Outer boundaries (positive
        orientation) add, holes (negative orientation) subtract, so an outline
        with holes gives its net area. A single contour traversed the other
        way gives the negative of its area.

    References
    ----------
    .. [1] B. Braden, "The surveyor's area formula", College Math. J. 17(4)
       (1986) 326-337.
    """
    sp = _as_spacing(spacing, 2, required=True)
    assert sp is not None
    total = 0.0
    for c in _as_contours(contours):
        if len(c) < 3:
            continue
        # subtract the centroid first: same area, less cancellation
        x = c[:, 0] - c[:, 0].mean()
        y = c[:, 1] - c[:, 1].mean()
        total += 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))
    return total * float(sp[0] * sp[1])
