"""The sequential node placement of the scattered node generators (2-D and 3-D advancing fronts).

Nodes are placed in an axis-aligned box (mm) with a prescribed local
spacing ``radius(x)``: neighbouring nodes end up about ``radius(x)`` apart.
The front that places them advances along axis 0 of the box (rows in 2-D,
slices in 3-D); coordinates are in array axis order, like everything else in
the engine.

- 2-D: the advancing-front algorithm of Fornberg & Flyer [1]_. A row of
  *potential dot positions* (PDPs) starts on the low edge of the box. Each
  step places a node at the lowest PDP, removes the PDPs within ``radius`` of
  it (together with it, a contiguous run of the row), and inserts five new
  PDPs on the upper arc of the circle of that radius, spread evenly in angle
  between the two nearest remaining PDPs on either side. Where no PDP remains
  on a side, the arc ends where the circle meets the side wall of the box
  (angle 0 or pi when the wall is farther than ``radius``); new PDPs outside
  the box are dropped. Ending the arc at the wall is this module's choice:
  with the arc always running down to angle 0 or pi, PDPs beside a side wall
  slipped below the row and nodes there came as close as 0.36 r.
- 3-D: a height-field advancing front built on the same principle: the PDPs
  sit on a fixed fine grid over the box's (row, col) face and move only along
  the slice axis. Each step places a node at the lowest PDP and lifts every
  PDP within horizontal distance ``r`` of it onto the upper half of the
  sphere of radius ``r`` around it (``z <- max(z, z0 + sqrt(r^2 - d^2))``).
  Every later node therefore lies at least ``r`` (the earlier node's radius)
  from every earlier node. The grid spacing is a quarter of the smallest
  radius.

The sequential loop over placed nodes is inherent to both algorithms; it is
kept to scalar arithmetic on a heap plus a linked list of PDPs (2-D) or to
small numpy windows with block minima (3-D), and the radius callable is
evaluated in batches where the algorithm allows (2-D).

References
----------
.. [1] B. Fornberg and N. Flyer, "Fast generation of 2-D node distributions
   for mesh-free PDE discretizations", Comput. Math. Appl. 69(7) (2015)
   531-544.
"""

from __future__ import annotations

import heapq
import math

import numpy as np
from numpy.typing import NDArray

from engine.nodes.node_radius import NodeRadius

__all__ = ["advancing_front_2d", "height_field_3d"]

# 2-D: new potential dots at these fractions of the free arc
_ARC_FRACTIONS = (0.1, 0.3, 0.5, 0.7, 0.9)
# 3-D: PDP grid spacing = smallest radius / _GRID_PER_RADIUS; PDP block size for minima
_GRID_PER_RADIUS = 4
_BLOCK = 16
_MAX_GRID_POINTS = 50_000_000


def _too_many(max_nodes: int) -> ValueError:
    return ValueError(
        f"max_nodes: the box needs more than max_nodes={max_nodes} nodes at this radius; "
        "raise max_nodes or the radius"
    )


def advancing_front_2d(
    lo: NDArray[np.float64],
    hi: NDArray[np.float64],
    rad: NodeRadius,
    rng: np.random.Generator,
    max_nodes: int,
) -> NDArray[np.float64]:
    """Fornberg-Flyer advancing front; y = axis 0 (advancing), x = axis 1."""
    ylo, xlo = float(lo[0]), float(lo[1])
    yhi, xhi = float(hi[0]), float(hi[1])

    # initial row of potential dots along the low edge, spaced at 1/8 of the smallest
    # radius found there, with tiny random heights to break ties
    if rad.is_constant:
        r_bottom = rad.const
    else:
        xs = np.linspace(xlo, xhi, 1025)
        r_bottom = float(np.min(rad(np.column_stack((np.full_like(xs, ylo), xs)))))
    dx0 = r_bottom / 8.0
    n0 = int(math.ceil((xhi - xlo) / dx0)) + 1
    X: list[float] = np.linspace(xlo, xhi, n0).tolist()
    Y: list[float] = (ylo + 1e-4 * dx0 * rng.random(n0)).tolist()
    const = rad.is_constant
    r_const = rad.const
    nan = math.nan
    # radius at each potential dot: known (constant) or evaluated lazily in batches
    R: list[float] = [r_const] * n0 if const else [nan] * n0
    pending: list[int] = [] if const else list(range(n0))
    # doubly linked list of the row (left/right neighbours), -1 = none
    prev: list[int] = list(range(-1, n0 - 1))
    nxt: list[int] = list(range(1, n0 + 1))
    nxt[-1] = -1
    alive: list[bool] = [True] * n0
    heap: list[tuple[float, int]] = [(y, u) for u, y in enumerate(Y)]
    heapq.heapify(heap)

    out_y: list[float] = []
    out_x: list[float] = []
    heappop, heappush = heapq.heappop, heapq.heappush
    atan2, cos, sin, acos, pi = math.atan2, math.cos, math.sin, math.acos, math.pi
    fractions = _ARC_FRACTIONS

    while heap:
        y0, u = heappop(heap)
        if not alive[u]:
            continue
        if y0 > yhi:
            break
        x0 = X[u]
        r = R[u]
        if r != r:  # radius not yet known: evaluate all pending live dots at once
            live = [v for v in pending if alive[v]]
            pts = np.empty((len(live), 2))
            pts[:, 0] = [Y[v] for v in live]
            pts[:, 1] = [X[v] for v in live]
            for v, rv in zip(live, rad(pts).tolist()):
                R[v] = rv
            pending = []
            r = R[u]
        if len(out_y) >= max_nodes:
            raise _too_many(max_nodes)
        out_y.append(y0)
        out_x.append(x0)
        alive[u] = False
        r2 = r * r
        # remove the contiguous run of dots within r on either side
        v = prev[u]
        while v != -1:
            dx = X[v] - x0
            dy = Y[v] - y0
            if dx * dx + dy * dy > r2:
                break
            alive[v] = False
            v = prev[v]
        left = v
        v = nxt[u]
        while v != -1:
            dx = X[v] - x0
            dy = Y[v] - y0
            if dx * dx + dy * dy > r2:
                break
            alive[v] = False
            v = nxt[v]
        right = v
        # free arc between the nearest remaining dots (or the side walls)
        if left != -1:
            a_left = atan2(Y[left] - y0, X[left] - x0)
        else:
            a_left = pi - acos(min(1.0, (x0 - xlo) / r))
        if right != -1:
            a_right = atan2(Y[right] - y0, X[right] - x0)
        else:
            a_right = acos(min(1.0, (xhi - x0) / r))
        span = a_left - a_right
        p = left
        for f in fractions:
            a = a_left - f * span
            nx_ = x0 + r * cos(a)
            if nx_ < xlo or nx_ > xhi:
                continue
            ny_ = y0 + r * sin(a)
            uid = len(X)
            X.append(nx_)
            Y.append(ny_)
            prev.append(p)
            nxt.append(-1)
            alive.append(True)
            if const:
                R.append(r_const)
            else:
                R.append(nan)
                pending.append(uid)
            if p != -1:
                nxt[p] = uid
            heappush(heap, (ny_, uid))
            p = uid
        if p != -1:
            nxt[p] = right
        if right != -1:
            prev[right] = p

    return np.column_stack((np.asarray(out_y, dtype=float), np.asarray(out_x, dtype=float)))


def height_field_3d(
    lo: NDArray[np.float64],
    hi: NDArray[np.float64],
    rad: NodeRadius,
    rmin: float,
    rng: np.random.Generator,
    max_nodes: int,
) -> NDArray[np.float64]:
    """Height-field advancing front along axis 0 over a (axis 1, axis 2) grid."""
    delta = rmin / _GRID_PER_RADIUS
    n1 = int(math.floor((hi[1] - lo[1]) / delta)) + 1
    n2 = int(math.floor((hi[2] - lo[2]) / delta)) + 1
    if n1 * n2 > _MAX_GRID_POINTS:
        raise ValueError(
            f"min_radius: the grid of potential dots would have {n1 * n2} points "
            f"(spacing {delta:.3g} mm); use a larger radius or min_radius, or a smaller box"
        )
    g1 = lo[1] + delta * np.arange(n1)
    g2 = lo[2] + delta * np.arange(n2)
    B = _BLOCK
    N1 = -(-n1 // B) * B
    N2 = -(-n2 // B) * B
    z = np.full((N1, N2), np.inf)
    z[:n1, :n2] = lo[0] + 1e-6 * rmin * rng.random((n1, n2))
    block_min = z.reshape(N1 // B, B, N2 // B, B).min(axis=(1, 3))
    nb2 = block_min.shape[1]
    zmax = float(hi[0])
    const = rad.is_constant
    r_const = rad.const
    g1_l = g1.tolist()
    g2_l = g2.tolist()

    def offsets_squared(m: int) -> NDArray[np.float64]:
        """Squared (axis 1, axis 2) distances of grid offsets -m..m from a grid point."""
        a = delta * np.arange(-m, m + 1)
        return (a * a)[:, None] + (a * a)[None, :]

    # the node always sits on a grid point, so the lift above it depends only on the
    # offsets: for a constant radius it is one fixed template
    m_cap = int(r_const / delta) if const else 0
    off2 = offsets_squared(m_cap)
    if const:
        h2c = r_const * r_const - off2
        template = np.sqrt(np.maximum(h2c, 0.0))
        template[h2c < 0.0] = -np.inf

    out: list[tuple[float, float, float]] = []
    while True:
        b = int(block_min.argmin())
        bi, bj = divmod(b, nb2)
        block = z[bi * B:(bi + 1) * B, bj * B:(bj + 1) * B]
        k = int(block.argmin())
        ki, kj = divmod(k, B)
        i = bi * B + ki
        j = bj * B + kj
        z0 = float(z[i, j])
        if z0 > zmax:
            break
        if len(out) >= max_nodes:
            raise _too_many(max_nodes)
        x1 = g1_l[i]
        x2 = g2_l[j]
        out.append((z0, x1, x2))
        if const:
            m = m_cap
            i0, i1 = max(i - m, 0), min(i + m + 1, n1)
            j0, j1 = max(j - m, 0), min(j + m + 1, n2)
            lift = template[i0 - i + m:i1 - i + m, j0 - j + m:j1 - j + m] + z0
        else:
            r = rad.at((z0, x1, x2))
            m = int(r / delta)
            if m > m_cap:
                m_cap = max(m, 2 * m_cap)
                off2 = offsets_squared(m_cap)
            i0, i1 = max(i - m, 0), min(i + m + 1, n1)
            j0, j1 = max(j - m, 0), min(j + m + 1, n2)
            h2 = r * r - off2[i0 - i + m_cap:i1 - i + m_cap, j0 - j + m_cap:j1 - j + m_cap]
            lift = np.sqrt(np.maximum(h2, 0.0))
            lift += z0
            lift[h2 < 0.0] = -np.inf
        window = z[i0:i1, j0:j1]
        np.maximum(window, lift, out=window)
        b0, b1 = i0 // B, (i1 - 1) // B + 1
        c0, c1 = j0 // B, (j1 - 1) // B + 1
        block_min[b0:b1, c0:c1] = (
            z[b0 * B:b1 * B, c0 * B:c1 * B].reshape(b1 - b0, B, c1 - c0, B).min(axis=(1, 3))
        )
    return np.asarray(out, dtype=float).reshape(-1, 3)
