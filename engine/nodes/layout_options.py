"""The node layout of a new front: which layouts there are, the check of a front's layout options, the layout made."""

from __future__ import annotations

from typing import Any

import numpy as np

from engine.nodes.band_stencils import band_stencil
from engine.nodes.lattice_layout import LatticeLayout
from engine.nodes.layout import NodeLayout
from engine.nodes.node_set import ScatteredNodeSet
from engine.nodes.scattered_layout import ScatteredLayout, node_options
from engine.validation.arguments import NODE_LAYOUTS, check_nodes

__all__ = ["NODE_LAYOUTS", "check_layout_options", "make_layout"]


def check_layout_options(options: dict, detail: int) -> None:
    """ValueError naming a layout option that does not fit ``options["nodes"]`` (before any work is done)."""
    nodes = options.get("nodes", "lattice")
    check_nodes(nodes)
    if nodes == "lattice":
        for name in ("finest", "coarsest", "node_set"):
            if options.get(name) is not None:
                raise ValueError(f"{name} applies to nodes='scattered' only")
    elif detail != 1:
        raise ValueError("detail applies to nodes='lattice'; scattered nodes take finest and coarsest (mm)")



def make_layout(features: Any, params: Any, detail: int, options: dict) -> NodeLayout:
    """The layout of a new front on ``features``' image: a lattice at ``detail`` nodes per pixel, or scattered
    nodes (``options``: ``nodes``, and for scattered nodes ``finest``, ``coarsest`` in mm or a ``node_set``)."""
    sp = features.spacing
    shape = features.image.shape
    dim = len(shape)
    if options.get("nodes", "lattice") == "lattice":
        step_mm = sp / detail
        stencil = band_stencil(step_mm, stencil_size=params.stencil_size_for(dim), degree=params.degree,
                               phs=params.phs)
        return LatticeLayout(stencil, step_mm, detail, shape)
    node_set = options.get("node_set")
    if node_set is not None:
        if not isinstance(node_set, ScatteredNodeSet):
            raise ValueError(f"node_set must be a ScatteredNodeSet, got {type(node_set).__name__}")
        if node_set.shape != shape or not np.allclose(node_set.pixel_spacing, sp, rtol=1e-12, atol=0):
            raise ValueError("node_set was made for another image shape or spacing")
        if (node_set.stencil_size, node_set.degree, node_set.phs) != node_options(params, dim):
            raise ValueError("node_set: its stencil_size, degree and phs differ from the front's settings")
        return ScatteredLayout(node_set)
    finest = 0.5 * float(np.min(sp)) if options.get("finest") is None else options["finest"]
    coarsest = float(np.max(sp)) if options.get("coarsest") is None else options["coarsest"]
    for name, value in (("finest", finest), ("coarsest", coarsest)):
        if not (isinstance(value, (int, float, np.integer, np.floating)) and np.isfinite(value) and value > 0):
            raise ValueError(f"{name} must be a positive node spacing in mm, got {value!r}")
    if finest > coarsest:
        raise ValueError(f"finest ({finest}) must not exceed coarsest ({coarsest})")
    size, degree, phs = node_options(params, dim)
    node_set = ScatteredNodeSet.from_features(features, finest=float(finest), coarsest=float(coarsest),
                                              stencil_size=size, degree=degree, phs=phs)
    return ScatteredLayout(node_set)
