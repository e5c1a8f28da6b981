"""Where the front's nodes sit: a lattice restricted to the band, or a fixed scattered set per image.

Lattice nodes:

- ``lattice``: lattice nodes, symmetric stencil patterns, index lookup
- ``band_stencils``: the lattice band's shared centred / one-sided / hyperviscosity weights
- ``lattice_band``: lattice nodes near points, a band grown by layers, zero crossings along lattice edges

Scattered nodes:

- ``scattered_nodes``: variable-density scattered nodes in a box (Fornberg & Flyer 2015)
- ``advancing_front``: the 2-D and 3-D advancing fronts that place them; ``node_radius``: their spacing
- ``spacing_quality``: nearest-neighbour statistics of a node set
- ``edge_spacing``: node spacing that follows an image's edges
- ``node_set``: an image's scattered node set with cached per-node band operators
- ``scattered_stencils``: centred and one-sided stencils, edge nodes
- ``scattered_weights``: RBF-FD band operator and interpolation weights
- ``pixel_interpolation``: φ at pixel centres from the nodes
- ``node_graph``: the nodes' neighbour graph and zero crossings along it
- ``spectral_bound``: the spectral radius of curvature motion on a band (time-step limit)

The front's layout:

- ``layout``: the ``NodeLayout`` interface and a band's arrays
- ``lattice_layout``, ``scattered_layout``: its two implementations
- ``layout_options``: the layout of a new front
"""

from engine.nodes.band_stencils import BandStencil, band_stencil, centred_derivatives
from engine.nodes.edge_spacing import EdgeAdaptiveSpacing, edge_adaptive_spacing
from engine.nodes.lattice import LatticeLookup, lattice_operators, lattice_stencils, symmetric_offsets
from engine.nodes.lattice_layout import LatticeLayout
from engine.nodes.layout import Band, NodeLayout
from engine.nodes.layout_options import NODE_LAYOUTS, make_layout
from engine.nodes.node_set import ScatteredNodeSet
from engine.nodes.scattered_layout import ScatteredLayout
from engine.nodes.scattered_nodes import mask_region, scattered_nodes
from engine.nodes.spacing_quality import SpacingQuality, spacing_quality

__all__ = [
    "BandStencil", "band_stencil", "centred_derivatives",
    "LatticeLookup", "lattice_operators", "lattice_stencils", "symmetric_offsets",
    "EdgeAdaptiveSpacing", "ScatteredNodeSet", "edge_adaptive_spacing",
    "SpacingQuality", "scattered_nodes", "mask_region", "spacing_quality",
    "Band", "NodeLayout", "LatticeLayout", "ScatteredLayout", "NODE_LAYOUTS", "make_layout",
]
