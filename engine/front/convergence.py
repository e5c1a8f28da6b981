"""When a front has stopped: the largest displacement of its outline over a window of steps.

The outline is represented by its zero crossings on the edges between
neighbouring nodes (linear interpolation of φ). Its displacement between two
steps is the symmetric Hausdorff distance between the two sets of crossings:
the farthest any point of either outline lies from the other outline. A
front still moving anywhere (the tip of a thin strip, the far side of a
ring) is therefore not converged however much of it is at rest, while an
outline that jitters in place (noise, layer re-picks) is, since only the net
change over the window counts. Reading the outline itself, not φ at fixed
nodes, keeps the figure true where φ is no longer a distance (inside a strip
two pixels wide φ steepens next to the outline while the outline rests).

The check runs every ``CHECK_EVERY`` steps on checkpoints taken as often;
the front counts as converged once the displacement since the checkpoint at
least ``window`` steps old is below the tolerance (mm).

References
----------
.. [1] D. P. Huttenlocher, G. A. Klanderman, W. J. Rucklidge, "Comparing
   images using the Hausdorff distance", IEEE Trans. Pattern Anal. Mach.
   Intell. 15(9) (1993) 850-863.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

#: Steps between checkpoints (and checks).
CHECK_EVERY = 5


@dataclass
class OutlineMotion:
    """Checkpoints of the outline (zero crossings, mm) and its displacement over the window at the last check."""

    window: int
    tolerance_mm: float
    checkpoints: deque = field(default_factory=deque)  # (step, crossings (N, d) mm)
    displacement_mm: float = float("inf")

    def clear(self) -> None:
        """Forget every checkpoint (after an edit or a change of settings)."""
        self.checkpoints.clear()
        self.displacement_mm = float("inf")

    def due(self, step: int) -> bool:
        """True at the steps where :meth:`update` needs the outline."""
        return step % CHECK_EVERY == 0

    def update(self, step: int, crossings: NDArray[np.floating] | None) -> bool:
        """Record the outline after step ``step``; True when it has stopped (``crossings`` may be None off a check)."""
        if not self.due(step) or crossings is None:
            return self.displacement_mm < self.tolerance_mm
        while len(self.checkpoints) > 1 and step - self.checkpoints[1][0] >= self.window:
            self.checkpoints.popleft()
        if self.checkpoints and step - self.checkpoints[0][0] >= self.window:
            self.displacement_mm = hausdorff(self.checkpoints[0][1], crossings)
        else:
            self.displacement_mm = float("inf")
        self.checkpoints.append((step, np.array(crossings, dtype=float)))
        return self.displacement_mm < self.tolerance_mm

    def state(self) -> tuple:
        """Copy of the checkpoints and the last figure (for snapshots)."""
        return tuple((s, p.copy()) for s, p in self.checkpoints) + (self.displacement_mm,)

    def restore(self, state: tuple) -> None:
        """Back to a :meth:`state`."""
        if not state:
            self.clear()
            return
        *marks, self.displacement_mm = state
        self.checkpoints = deque((s, p.copy()) for s, p in marks)


def hausdorff(a: NDArray[np.floating], b: NDArray[np.floating]) -> float:
    """Symmetric Hausdorff distance between two outlines sampled by the points ``a`` and ``b`` (inf when one is empty).

    The distance from a point to the other outline is taken to the line (in
    3-D the plane) through its nearest samples there, not to the nearest
    sample: crossings slide along lattice edges that run nearly along the
    outline much farther than the outline moves.
    """
    if len(a) == 0 or len(b) == 0:
        return float("inf")
    return float(max(np.max(_to_outline(a, b)), np.max(_to_outline(b, a))))


def _to_outline(points: NDArray[np.floating], samples: NDArray[np.floating]) -> NDArray[np.floating]:
    """Distance from each of ``points`` to the outline sampled by ``samples`` (local line or plane fit)."""
    dim = points.shape[1]
    k = min(dim, len(samples))
    dist, idx = cKDTree(samples).query(points, k=k)
    if k < dim:
        return np.atleast_1d(dist if k == 1 else dist[:, 0])
    base = samples[idx[:, 0]]
    rel = points - base
    if dim == 2:
        tangent = samples[idx[:, 1]] - base
        length = np.linalg.norm(tangent, axis=1)
        normal = np.stack([-tangent[:, 1], tangent[:, 0]], axis=1) / np.maximum(length, 1e-300)[:, None]
        ok = length > 1e-9
    else:
        normal = np.cross(samples[idx[:, 1]] - base, samples[idx[:, 2]] - base)
        length = np.linalg.norm(normal, axis=1)
        normal = normal / np.maximum(length, 1e-300)[:, None]
        ok = length > 1e-3 * np.maximum(dist[:, -1], 1e-300) ** 2
    across = np.abs(np.sum(rel * normal, axis=1))
    return np.where(ok, np.minimum(across, dist[:, 0]), dist[:, 0])
