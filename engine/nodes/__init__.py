"""Where the front's nodes sit: a lattice restricted to the band, or a fixed scattered set per image.

- ``lattice``: lattice nodes, symmetric stencil patterns, index lookup
- ``band_stencils``: the lattice band's shared centred / one-sided / hyperviscosity weights
- ``scattered_nodes``: variable-density scattered nodes (Fornberg & Flyer 2015)
- ``node_set``: an image's edge-adaptive scattered node set with cached band operators
"""

from engine.nodes.band_stencils import BandStencil, band_stencil, centred_derivatives
from engine.nodes.lattice import LatticeLookup, lattice_operators, lattice_stencils, symmetric_offsets
from engine.nodes.node_set import EdgeAdaptiveSpacing, ScatteredNodeSet, edge_adaptive_spacing
from engine.nodes.scattered_nodes import SpacingQuality, scattered_nodes, spacing_quality

__all__ = [
    "BandStencil", "band_stencil", "centred_derivatives",
    "LatticeLookup", "lattice_operators", "lattice_stencils", "symmetric_offsets",
    "EdgeAdaptiveSpacing", "ScatteredNodeSet", "edge_adaptive_spacing",
    "SpacingQuality", "scattered_nodes", "spacing_quality",
]
