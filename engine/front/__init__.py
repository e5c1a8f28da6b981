"""The level-set front: a function φ on a narrow band of nodes, evolved with RBF-FD.

- ``core``: the :class:`Front` façade (constructors, settings, snapshots, stepping entry points)
- ``state``: :class:`FrontState` (alias ``FrontSnapshot``), the whole state as one frozen value; :class:`FrontVanished`
- ``band``: the band's first build, its layer next to the front, rebuilds
- ``evolution``: one step (derivatives, front curvature, rates, time step, convergence)
- ``layer_speeds``: speeds at the layer next to the front, smoothness per part
- ``statistics``: the inside image, region sums and local outside means
- ``edits``: brush strokes, margins, dropping parts, pins and barriers
- ``readouts``: φ, curvature and normals anywhere, contours, surfaces, masks, areas
- ``constants``: the method's fixed numbers; ``speeds``: :class:`FrontParams` and the speed models
- ``geometry``: pixel-grid crossings, seed and stroke distances; ``convergence``: when a front has stopped
"""

from engine.front.convergence import OutlineMotion
from engine.front.core import Front
from engine.front.speeds import INTEGRATORS, MODELS, FrontParams
from engine.front.state import FrontSnapshot, FrontState, FrontVanished
from engine.nodes.layout_options import NODE_LAYOUTS

__all__ = ["Front", "FrontParams", "FrontSnapshot", "FrontState", "FrontVanished", "NODE_LAYOUTS", "MODELS",
           "INTEGRATORS", "OutlineMotion"]
