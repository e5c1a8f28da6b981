"""The band's far nodes, which take their layer node's rate instead of their own derivatives."""

from __future__ import annotations

import numpy as np
from test_front_analytic import circle_sd

from engine.front import Front


def test_far_nodes_stay_the_distance_to_a_circle_under_curve_shortening_flow() -> None:
    # Curve-shortening flow of a circle: r(t)² = r0² − 2t (Gage & Hamilton,
    # J. Differential Geom. 23 (1986) 69-96). With extension velocities every
    # level set moves with the front, so φ over the whole band stays the
    # signed distance to the exact circle, at the far nodes (which copy their
    # layer node's rate) as at the near ones. Measured: 3e-4 mm at both, as
    # when every node took its own derivatives; the bound is 2e-3 mm.
    centre = np.array((32.3, 31.8))
    r0 = 20.0
    front = Front.from_function(circle_sd(centre, r0), (64, 64), model="curvature")
    front.run(until_time=(r0**2 - 14.0**2) / 2.0)
    b = front._band
    assert front.timings["rebuilds"] >= 2  # the band followed the front: new far nodes came in on the way
    assert len(b.far_nodes) > 0.2 * len(b.active)
    exact = np.linalg.norm(b.positions - centre, axis=1) - np.sqrt(r0**2 - 2.0 * front.time)
    error = np.abs(front.phi - exact)
    assert np.max(error[b.far_nodes]) < 2e-3
    assert np.max(error[b.near_nodes]) < 2e-3


def test_near_nodes_cover_what_the_layer_stencils_read() -> None:
    # every active node within the layer's width plus one stencil reach of the front
    # takes its own derivatives: the layer's derivatives never read a far node
    front = Front.from_function(circle_sd((30.2, 29.7), 12.0), (64, 64), model="curvature")
    front.step(7)
    b = front._band
    reach = front.layout.reach_mm(b)
    near_nodes = np.zeros(len(b.indices), bool)
    near_nodes[b.near_nodes] = True
    layer_nodes = b.active[b.layer]
    read = b.gather[:, b.layer]  # stencil nodes of every layer node (offset-major)
    assert np.all(near_nodes[read] | ~np.isin(read, b.active))
    assert np.all(np.abs(front.phi[b.far_nodes]) > 1.2 * front.h + reach)
    assert set(layer_nodes) <= set(b.near_nodes)
