"""Zero-level contours of φ stored on a narrow band of lattice nodes.

A band is a set of lattice nodes ``indices`` (N, 2) with values ``values``
(N,) of φ (negative inside). With ``detail`` D, lattice node (i, j) sits at
pixel coordinate (row, col) = (i / D, j / D); pixel centres are integers.
Nodes outside the band are unknown, so only the *band cells* (lattice squares
whose four corners are all band nodes) are contoured.

Marching squares (Lorensen & Cline 1987, in its 2-D form) places one vertex on
every cell edge whose end values have opposite signs, by linear interpolation
of φ along the edge; each cell joins its edge vertices with one or two
segments. The segments are oriented so that the inside lies on a fixed side,
which makes them a successor map over edge ids; closed and open polylines
are then read off that map by pointer jumping (Wyllie's list ranking), with no
Python loop over vertices.

Conventions
-----------
- A corner is *outside* when φ > 0 and *inside* otherwise (φ ≤ 0), the same
  split as ``skimage.measure.find_contours(image, 0)`` makes. A node with
  φ == 0 therefore lies on a polyline; consecutive duplicate vertices that this
  creates are merged. (Masks use φ < 0 for inside; a pixel centre with φ == 0
  is on the contour and outside the mask.)
- Saddle cells (two diagonal corners inside, the other two outside) are split
  by the mean of the four corner values (the bilinear interpolant's value at
  the cell centre): mean ≤ 0 joins the two inside corners through the centre,
  mean > 0 separates them. ``saddle="inside"`` / ``"outside"`` instead always
  join the inside / outside corners, which is what
  ``skimage.measure.find_contours(..., fully_connected="low" / "high")`` does.
- Orientation: with each vertex written as (row, col) and read as (x, y), the
  inside lies to the left of the direction of travel. The shoelace area of an
  outer boundary is then positive and that of a hole negative; this is
  counter-clockwise on screen (row down, column right) around the inside, as
  ``skimage.measure.find_contours(..., positive_orientation="low")``.
- A closed polyline is returned **without** repeating its first vertex; the
  closing edge from the last vertex back to the first is implied. It starts at
  the crossing on the lowest-numbered lattice edge (row-major scan of the
  lower-index end node, the column-direction edge first).
- A polyline that runs into the edge of the band cells (the zero set leaves
  the band: a band that is too narrow or cut) cannot close and is returned
  open, flagged in :func:`band_contour_set` and announced by a
  :class:`BandCutWarning` from :func:`band_contours`.

References
----------
.. [1] W. E. Lorensen and H. E. Cline, "Marching cubes: a high resolution 3D
   surface construction algorithm", SIGGRAPH Comput. Graph. 21(4) (1987)
   163-169.
.. [2] J. C. Wyllie, "The complexity of parallel computations", PhD thesis,
   Cornell University (1979) (pointer jumping / list ranking).
.. [3] G. M. Nielson and B. Hamann, "The asymptotic decider: resolving the
   ambiguity in marching cubes", Proc. IEEE Visualization '91 (1991) 83-91
   (the ambiguity of saddle faces; here resolved by the cell-centre value).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "BandCutWarning",
    "ContourSet",
    "average_along_polyline",
    "band_contour_set",
    "band_contours",
    "orient",
    "polyline_length",
    "signed_area",
    "validate_band",
]

_SADDLE_RULES = ("mean", "inside", "outside")

# Local edge numbers of a cell with upper-left corner (i, j):
# 0 top (i, j)-(i, j+1), 1 bottom (i+1, j)-(i+1, j+1),
# 2 left (i, j)-(i+1, j), 3 right (i, j+1)-(i+1, j+1).
_T, _B, _L, _R = 0, 1, 2, 3

# Segments (from edge, to edge) per case; the case has bit 1 for an outside
# upper-left corner, 2 upper-right, 4 lower-left, 8 lower-right. The
# direction puts the inside on the left in (row, col)-as-(x, y). Row 0 joins
# the inside corners of a saddle through the centre, row 1 separates them.
_SEGMENTS = np.full((2, 16, 2, 2), -1, dtype=np.int64)
for _variant in (0, 1):
    for _case, _segs in {
        1: [(_T, _L)],
        2: [(_R, _T)],
        3: [(_R, _L)],
        4: [(_L, _B)],
        5: [(_T, _B)],
        6: [(_R, _T), (_L, _B)] if _variant == 0 else [(_L, _T), (_R, _B)],
        7: [(_R, _B)],
        8: [(_B, _R)],
        9: [(_T, _L), (_B, _R)] if _variant == 0 else [(_T, _R), (_B, _L)],
        10: [(_B, _T)],
        11: [(_B, _L)],
        12: [(_L, _R)],
        13: [(_T, _R)],
        14: [(_L, _T)],
    }.items():
        for _k, _seg in enumerate(_segs):
            _SEGMENTS[_variant, _case, _k] = _seg


class BandCutWarning(RuntimeWarning):
    """The zero set leaves the band cells, so some polylines are open."""


class ContourSet(NamedTuple):
    """Polylines of the zero level set and whether each one is closed.

    Attributes
    ----------
    polylines : list of (k, 2) float arrays
        Vertices in pixel coordinates (row, col). Closed polylines come first
        and do not repeat their first vertex.
    closed : (n,) bool array
        ``closed[k]`` is False when polyline k was cut by the edge of the band.
    """

    polylines: list[NDArray[np.float64]]
    closed: NDArray[np.bool_]


def validate_band(
    indices: ArrayLike, values: ArrayLike, *, detail: int = 1
) -> tuple[NDArray[np.int64], NDArray[np.float64], int]:
    """Check a 2-D band and return it as (int64 indices, float64 values, detail).

    Raises
    ------
    ValueError
        Naming ``indices``, ``values`` or ``detail`` when a shape, dtype or
        value is wrong (non-integer indices, NaN/inf values, detail < 1).
    """
    if isinstance(detail, bool) or not isinstance(detail, (int, np.integer)) or detail < 1:
        raise ValueError(f"detail must be a positive integer, got {detail!r}")
    idx = np.asarray(indices)
    if idx.ndim != 2 or idx.shape[1] != 2:
        raise ValueError(f"indices must be an (N, 2) integer array, got shape {idx.shape}")
    if idx.size and not np.issubdtype(idx.dtype, np.integer):
        raise ValueError(f"indices must be integer lattice indices, got dtype {idx.dtype}")
    vals = np.asarray(values, dtype=np.float64)
    if vals.shape != (idx.shape[0],):
        raise ValueError(f"values must have shape ({idx.shape[0]},) to match indices, got {vals.shape}")
    if not np.all(np.isfinite(vals)):
        raise ValueError("values must be finite (found NaN or inf)")
    return idx.astype(np.int64, copy=False), vals, int(detail)


class _Lookup:
    """Sorted-key lookup of lattice nodes: position in sorted order or −1."""

    def __init__(self, idx: NDArray[np.int64]):
        self.low = idx.min(axis=0)
        span = idx.max(axis=0) - self.low
        # width leaves one spare column so that (i, j + 1) never wraps a row
        self.width = int(span[1]) + 2
        if (int(span[0]) + 2) * self.width >= 2**62:
            raise ValueError("indices span too large a lattice range")
        keys = self.keys(idx)
        # stable sort: linear time when the band arrives in row-major order
        self.order = np.argsort(keys, kind="stable")
        self.sorted_keys = keys[self.order]
        if np.any(self.sorted_keys[1:] == self.sorted_keys[:-1]):
            raise ValueError("indices contain duplicate lattice nodes")

    def keys(self, idx: NDArray[np.int64]) -> NDArray[np.int64]:
        return (idx[:, 0] - self.low[0]) * self.width + (idx[:, 1] - self.low[1])

    def find_keys(self, keys: NDArray[np.int64]) -> NDArray[np.int64]:
        pos = np.searchsorted(self.sorted_keys, keys)
        pos = np.minimum(pos, len(self.sorted_keys) - 1)
        return np.where(self.sorted_keys[pos] == keys, pos, -1)


def _cell_segments(
    idx: NDArray[np.int64], vals: NDArray[np.float64], saddle: str
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]]:
    """Oriented marching-squares segments of the band cells.

    Returns ``(order, right, down, segments)``: ``order`` sorts the band
    row-major (positions below refer to that order), ``right`` / ``down`` give
    each node's column / row neighbour position (−1 where absent), and
    ``segments`` (S, 2) holds (from, to) edge ids ``2 * node + axis`` of the
    lower-index end node (axis 0: edge to the column neighbour, 1: to the row
    neighbour), directed so that the inside lies on the left.
    """
    look = _Lookup(idx)
    sval = vals[look.order]
    keys = look.sorted_keys
    n = len(keys)
    # keys are unique and sorted, so a column neighbour (key + 1) can only be the next entry
    right = np.full(n, -1, dtype=np.int64)
    has_right = np.flatnonzero(keys[1:] == keys[:-1] + 1)
    right[has_right] = has_right + 1
    down = look.find_keys(keys + look.width)
    cells = np.flatnonzero((right >= 0) & (down >= 0))
    diag = right[down[cells]]
    cells, diag = cells[diag >= 0], diag[diag >= 0]
    ul, ur, ll, lr = cells, right[cells], down[cells], diag
    out = sval > 0
    case = out[ul] * 1 + out[ur] * 2 + out[ll] * 4 + out[lr] * 8
    active = (case != 0) & (case != 15)
    ul, ur, ll, lr, case = ul[active], ur[active], ll[active], lr[active], case[active]
    if saddle == "mean":
        variant = ((sval[ul] + sval[ur] + sval[ll] + sval[lr]) > 0).astype(np.int64)
    else:
        variant = np.full(len(case), 0 if saddle == "inside" else 1, dtype=np.int64)
    local = _SEGMENTS[variant, case]  # (cells, 2 segments, 2 ends)
    edge_ids = np.stack([2 * ul, 2 * ll, 2 * ul + 1, 2 * ur + 1], axis=1)  # T, B, L, R
    has = local[:, :, 0] >= 0
    cell_of = np.broadcast_to(np.arange(len(case))[:, None], has.shape)[has]
    seg = local[has]
    src = edge_ids[cell_of, seg[:, 0]]
    dst = edge_ids[cell_of, seg[:, 1]]
    return look.order, right, down, np.stack([src, dst], axis=1)


def _chain_order(succ: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.bool_]]:
    """Order the elements of a successor map made of disjoint cycles and chains.

    ``succ[k]`` is the element after k or −1 at the end of a chain; every
    element has at most one predecessor. Returns (order, group, is_open):
    ``order`` lists all elements polyline by polyline (closed ones first,
    each cycle starting at its smallest element, each chain at its head),
    ``group`` gives a polyline number for each position of ``order`` and
    ``is_open`` flags the open ones per polyline. Pointer jumping: every pass
    doubles how far each element has looked ahead, so ⌈log2 M⌉ + 1 passes of
    whole-array numpy operations suffice.
    """
    m = len(succ)
    ids = np.arange(m, dtype=np.int64)
    has_next = succ >= 0
    passes = int(np.ceil(np.log2(max(m, 2)))) + 1

    # Pass 1: cycle minimum (label) and, for chains, the tail reached.
    nxt = np.where(has_next, succ, ids)
    label = ids.copy()
    for _ in range(passes):
        label = np.minimum(label, label[nxt])
        nxt = nxt[nxt]
    on_chain = ~has_next[nxt]

    # Break every cycle in front of its smallest element, which becomes a head.
    pred = np.full(m, -1, dtype=np.int64)
    pred[succ[has_next]] = ids[has_next]
    heads = np.flatnonzero(~on_chain & (label == ids))
    cut = succ.copy()
    cut[pred[heads]] = -1

    # Pass 2: list ranking, distance to the tail.
    has_next = cut >= 0
    nxt = np.where(has_next, cut, ids)
    rank = has_next.astype(np.int64)
    for _ in range(passes):
        rank = rank + rank[nxt]
        nxt = nxt[nxt]
    tail = nxt

    key = np.where(on_chain, tail, label)
    order = np.lexsort((-rank, key, on_chain))
    skey = key[order]
    starts = np.concatenate([[True], skey[1:] != skey[:-1]]) if m else np.zeros(0, bool)
    group = np.cumsum(starts) - 1
    is_open = on_chain[order][starts]
    return order, group, is_open


def _drop_repeats(
    pts: NDArray[np.float64], group: NDArray[np.int64], is_open: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Remove vertices equal to the next one of the same polyline (cyclically if closed)."""
    n = len(pts)
    if n == 0:
        return pts, group
    first = np.concatenate([[True], group[1:] != group[:-1]])
    last = np.concatenate([group[1:] != group[:-1], [True]])
    start_of = np.flatnonzero(first)[group]
    nxt = np.arange(1, n + 1)
    nxt[last] = start_of[last]
    same = np.all(pts == pts[nxt], axis=1)
    same &= ~(last & is_open[group])  # an open polyline's last vertex has no successor
    # in a cycle of identical points keep none; such polylines vanish below
    return pts[~same], group[~same]


def band_contour_set(
    indices: ArrayLike, values: ArrayLike, *, detail: int = 1, saddle: str = "mean"
) -> ContourSet:
    """Zero-level polylines of a band, with a flag telling closed from open.

    Parameters
    ----------
    indices : (N, 2) int array
        Distinct lattice indices (i, j) of the band nodes, any order.
    values : (N,) float array
        φ at those nodes, negative inside.
    detail : int, optional
        Lattice nodes per pixel along each axis; node (i, j) is at pixel
        (i / detail, j / detail).
    saddle : {"mean", "inside", "outside"}, optional
        How saddle cells are split (see the module notes). "mean" (default)
        joins the two inside corners when the mean of the four corner values
        is ≤ 0.

    Returns
    -------
    ContourSet
        ``polylines`` (list of (k, 2) float arrays in pixel (row, col)) and
        ``closed`` (bool per polyline). Closed polylines come first, do not
        repeat their first vertex, and have the inside on their left: shoelace
        area (row, col as x, y) positive for outer boundaries and negative for
        holes. Open polylines follow, oriented the same way. Closed polylines
        with fewer than 3 distinct vertices and open ones with fewer than 2
        (only possible where nodes hold exactly 0) are dropped.

    Raises
    ------
    ValueError
        For a malformed band (see :func:`validate_band`), duplicate indices or
        an unknown ``saddle`` rule.

    References
    ----------
    .. [1] W. E. Lorensen and H. E. Cline, SIGGRAPH Comput. Graph. 21(4)
       (1987) 163-169.
    .. [2] J. C. Wyllie, PhD thesis, Cornell University (1979).
    """
    idx, vals, det = validate_band(indices, values, detail=detail)
    if saddle not in _SADDLE_RULES:
        raise ValueError(f"saddle must be one of {_SADDLE_RULES}, got {saddle!r}")
    if len(idx) == 0:
        return ContourSet([], np.zeros(0, dtype=bool))
    order, right, down, segs = _cell_segments(idx, vals, saddle)
    if len(segs) == 0:
        return ContourSet([], np.zeros(0, dtype=bool))

    # Compact the crossed edges to 0..M-1 and build the successor map.
    edges, inverse = np.unique(segs.ravel(), return_inverse=True)
    inverse = inverse.reshape(segs.shape)
    m = len(edges)
    if np.any(np.bincount(inverse[:, 0], minlength=m) > 1) or np.any(np.bincount(inverse[:, 1], minlength=m) > 1):
        raise RuntimeError("inconsistent marching-squares segments (internal error)")
    succ = np.full(m, -1, dtype=np.int64)
    succ[inverse[:, 0]] = inverse[:, 1]

    # One vertex per crossed edge: linear interpolation of φ from the
    # lower-index node a to the higher-index node b.
    node_a = edges // 2
    axis = edges % 2
    node_b = np.where(axis == 0, right[node_a], down[node_a])
    sidx = idx[order]
    va = vals[order][node_a]
    vb = vals[order][node_b]
    frac = (0.0 - va) / (vb - va)
    pts = sidx[node_a].astype(np.float64)
    pts[:, 0] += np.where(axis == 1, frac, 0.0)
    pts[:, 1] += np.where(axis == 0, frac, 0.0)
    if det != 1:
        pts /= det

    walk, group, is_open = _chain_order(succ)
    pts, group = _drop_repeats(pts[walk], group, is_open)
    if len(pts) == 0:
        return ContourSet([], np.zeros(0, dtype=bool))
    counts = np.bincount(group, minlength=len(is_open))
    keep = np.where(is_open, counts >= 2, counts >= 3)
    bounds = np.cumsum(counts)[:-1]
    pieces = np.split(pts, bounds)
    polylines = [p for p, k in zip(pieces, keep) if k]
    return ContourSet(polylines, ~is_open[keep])


def band_contours(
    indices: ArrayLike, values: ArrayLike, *, detail: int = 1, saddle: str = "mean"
) -> list[NDArray[np.float64]]:
    """Zero-level polylines of φ on a band, in pixel coordinates (row, col).

    Same as :func:`band_contour_set` but returns the polylines only. If the
    band cuts the zero set, the open polylines are still returned (after the
    closed ones) and a :class:`BandCutWarning` says how many there are; use
    :func:`band_contour_set` to tell them apart.

    Parameters
    ----------
    indices : (N, 2) int array
        Distinct lattice indices of the band nodes, any order.
    values : (N,) float array
        φ at those nodes, negative inside.
    detail : int, optional
        Lattice nodes per pixel along each axis.
    saddle : {"mean", "inside", "outside"}, optional
        Saddle-cell rule (default: mean of the four corner values).

    Returns
    -------
    list of (k, 2) float arrays
        Closed polylines without a repeated first vertex, inside on the left
        (positive shoelace area for outer boundaries, negative for holes).

    References
    ----------
    .. [1] W. E. Lorensen and H. E. Cline, SIGGRAPH Comput. Graph. 21(4)
       (1987) 163-169.
    """
    result = band_contour_set(indices, values, detail=detail, saddle=saddle)
    n_open = int(np.count_nonzero(~result.closed))
    if n_open:
        warnings.warn(
            f"{n_open} contour polyline(s) leave the band and are open; widen the band",
            BandCutWarning,
            stacklevel=2,
        )
    return result.polylines


def _as_polyline(polyline: ArrayLike, name: str = "polyline") -> NDArray[np.float64]:
    p = np.asarray(polyline, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 2:
        raise ValueError(f"{name} must be a (k, 2) array of (row, col) vertices, got shape {p.shape}")
    if not np.all(np.isfinite(p)):
        raise ValueError(f"{name} must be finite (found NaN or inf)")
    return p


def signed_area(polyline: ArrayLike) -> float:
    """Shoelace area of a closed polyline, pixels², (row, col) read as (x, y).

    Positive when the polyline winds counter-clockwise in that reading (the
    orientation of outer boundaries in this package), negative for holes. The
    closing edge is implied; a repeated first vertex at the end is harmless.

    References
    ----------
    .. [1] B. Braden, "The surveyor's area formula", College Math. J. 17(4)
       (1986) 326-337.
    """
    p = _as_polyline(polyline)
    if len(p) < 3:
        return 0.0
    q = p - p.mean(axis=0)  # centring reduces cancellation
    x, y = q[:, 0], q[:, 1]
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))


def polyline_length(polyline: ArrayLike, *, closed: bool = True) -> float:
    """Length of a polyline in pixels (including the closing edge when ``closed``)."""
    p = _as_polyline(polyline)
    if len(p) < 2:
        return 0.0
    if closed:
        p = np.vstack([p, p[:1]])
    return float(np.sum(np.hypot(*np.diff(p, axis=0).T)))


def average_along_polyline(values: ArrayLike, polyline: ArrayLike, sigma: float, *,
                           closed: bool = True) -> NDArray[np.float64]:
    """Gaussian average of per-vertex ``values`` along a polyline, with σ = ``sigma`` in arc length.

    Arc length is measured in the polyline's own units. Each vertex weighs
    by the length it stands for (half of each adjacent segment), so unevenly
    spaced vertices do not bias the average. A closed polyline wraps round
    (a repeated first vertex at its end is taken once and given its value
    back); an open one is averaged over the vertices it has. ``sigma`` 0
    returns a copy.
    """
    p = _as_polyline(polyline)
    v = np.asarray(values, dtype=float)
    if v.shape != (len(p),):
        raise ValueError(f"values must have one entry per vertex ({len(p)}), got shape {v.shape}")
    if not sigma >= 0:
        raise ValueError(f"sigma must be >= 0, got {sigma!r}")
    repeated = closed and len(p) > 1 and np.array_equal(p[0], p[-1])
    if repeated:
        p, v = p[:-1], v[:-1]
    n = len(p)
    if sigma == 0 or n < 3:
        out = v.copy()
        return np.append(out, out[0]) if repeated else out
    seg = np.hypot(*np.diff(np.vstack([p, p[:1]]) if closed else p, axis=0).T)
    s = np.concatenate([[0.0], np.cumsum(seg)])[:n]  # arc length at each vertex
    total = float(np.sum(seg)) if closed else float(s[-1])
    ahead = seg if closed else np.append(seg, 0.0)
    behind = np.roll(seg, 1) if closed else np.insert(seg, 0, 0.0)
    weight = 0.5 * (ahead + behind)
    # vertices within 4σ ahead of any vertex (the window behind is the same by symmetry of the search)
    ends = np.concatenate([s, s + total]) if closed else s
    within = np.searchsorted(ends, s + 4.0 * sigma, side="right") - np.arange(n) - 1
    behind_count = np.arange(n) - np.searchsorted(s, s - 4.0 * sigma, side="left")
    reach = int(max(within.max(), 0 if closed else behind_count.max()))
    reach = min((n - 1) // 2 if closed else n - 1, max(reach, 1))
    num = weight * v
    den = weight.copy()
    index = np.arange(n)
    for k in range(1, reach + 1):
        for step in (k, -k):
            j = index + step
            if closed:  # past either end: the arc length wraps round the outline
                gap = np.abs(s[j % n] + np.where(j >= n, total, np.where(j < 0, -total, 0.0)) - s)
                j = j % n
            else:
                valid = (j >= 0) & (j < n)
                j = np.clip(j, 0, n - 1)
                gap = np.where(valid, np.abs(s[j] - s), np.inf)
            w = weight[j] * np.exp(-0.5 * (gap / sigma) ** 2)
            num += w * v[j]
            den += w
    out = num / np.maximum(den, 1e-300)
    return np.append(out, out[0]) if repeated else out


def _points_in_polygon(points: NDArray[np.float64], poly: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Even-odd (crossing number) test of points against one closed polygon."""
    a = poly
    b = np.roll(poly, -1, axis=0)
    py, px = points[:, 1:2], points[:, 0:1]
    straddle = (a[:, 1] > py) != (b[:, 1] > py)
    with np.errstate(divide="ignore", invalid="ignore"):
        xcross = a[:, 0] + (py - a[:, 1]) * (b[:, 0] - a[:, 0]) / (b[:, 1] - a[:, 1])
    return np.count_nonzero(straddle & (px < xcross), axis=1) % 2 == 1


def orient(polylines: Sequence[ArrayLike]) -> list[NDArray[np.float64]]:
    """Reorder vertices so outer boundaries are positive and holes negative.

    For non-crossing closed polylines from any source: a polyline nested in
    an even number of the others bounds inside area and gets positive shoelace
    area (row, col as x, y); nested in an odd number it is a hole and gets
    negative area. Nesting is decided by the crossing-number test on one
    vertex. Polylines already oriented come back unchanged (as float arrays).

    References
    ----------
    .. [1] E. Haines, "Point in polygon strategies", Graphics Gems IV,
       Academic Press (1994) 24-46 (crossing-number test).
    """
    polys = [_as_polyline(p, f"polylines[{k}]") for k, p in enumerate(polylines)]
    n = len(polys)
    depth = np.zeros(n, dtype=np.int64)
    probes = np.array([p[0] for p in polys]) if n else np.zeros((0, 2))
    for k, poly in enumerate(polys):
        if len(poly) < 3:
            continue
        inside = _points_in_polygon(probes, poly)
        inside[k] = False
        depth += inside
    out = []
    for poly, d in zip(polys, depth):
        area = signed_area(poly)
        want_positive = d % 2 == 0
        out.append(poly[::-1].copy() if (area > 0) != want_positive and area != 0 else poly)
    return out
