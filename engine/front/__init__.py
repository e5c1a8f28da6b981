"""The level-set front: a function φ on a narrow band of nodes, evolved with RBF-FD.

- ``core``: the :class:`Front` (constructors, stepping, band rebuild, edits, snapshots, read-outs)
- ``speeds``: :class:`FrontParams` (every setting, validated) and the speed models
- ``geometry``: zero crossings, node balls and dilation, seed and stroke distances
- ``convergence``: when a front has stopped (largest displacement of its outline over a window)
"""

from engine.front.convergence import OutlineMotion
from engine.front.core import NODE_LAYOUTS, Front, FrontSnapshot, FrontVanished
from engine.front.speeds import INTEGRATORS, MODELS, FrontParams

__all__ = ["Front", "FrontParams", "FrontSnapshot", "FrontVanished", "NODE_LAYOUTS", "MODELS", "INTEGRATORS",
           "OutlineMotion"]
