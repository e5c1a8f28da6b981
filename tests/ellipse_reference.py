"""Exact signed distance to an ellipse, computed independently of the engine (common geometry)."""

from __future__ import annotations

import numpy as np


def exact_ellipse_distance(points: np.ndarray, centre, a: float, b: float, *,
                           samples: int = 4096) -> tuple[np.ndarray, np.ndarray]:
    """Signed distance (negative inside) to the ellipse and the parameter t of the closest point.

    The ellipse has semi-axis ``a`` along the first coordinate and ``b``
    along the second. Dense sampling of t, then safeguarded Newton on
    f'(t) = 0 with f(t) = |q − (a cos t, b sin t)|².
    """
    q = np.asarray(points, dtype=float) - np.asarray(centre, dtype=float)
    px, py = q[:, 0], q[:, 1]
    t_grid = np.linspace(0.0, 2.0 * np.pi, samples, endpoint=False)
    t = np.empty(len(q))
    for start in range(0, len(q), 2048):  # bounded memory
        sl = slice(start, start + 2048)
        d2 = (a * np.cos(t_grid)[None] - px[sl, None]) ** 2 + (b * np.sin(t_grid)[None] - py[sl, None]) ** 2
        t[sl] = t_grid[np.argmin(d2, axis=1)]
    coarse = np.hypot(a * np.cos(t) - px, b * np.sin(t) - py)
    step_limit = 2.0 * np.pi / samples
    for _ in range(40):
        s, c = np.sin(t), np.cos(t)
        f1 = -a * s * (a * c - px) + b * c * (b * s - py)  # f'(t) / 2
        f2 = a * a * s * s - a * c * (a * c - px) + b * b * c * c - b * s * (b * s - py)  # f''(t) / 2
        t = t - np.clip(f1 / np.where(f2 > 0, f2, np.inf), -step_limit, step_limit)
    s, c = np.sin(t), np.cos(t)
    dist = np.hypot(a * c - px, b * s - py)
    residual = -a * s * (a * c - px) + b * c * (b * s - py)
    # The refinement must be a stationary point no farther than the best sample.
    assert np.all(dist <= coarse + 1e-12) and np.all(np.abs(residual) < 1e-8 * (1 + dist) * a)
    inside = px**2 / a**2 + py**2 / b**2 < 1.0
    return np.where(inside, -dist, dist), np.mod(t, 2.0 * np.pi)
