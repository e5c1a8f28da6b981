"""A front whose φ cannot stay a signed distance next to its outline, rebuilt at two lattice nodes per pixel.

Next to the outline a front keeps φ a signed distance (extension
velocities); where it drifts from one, :mod:`engine.front.band`
reinitialises it (φ *flattened*: the layer's ||∇φ| − 1| grew by
``FLAT_DRIFT`` since the last rebuild). Once in a while that is the growth
of a small structure; again and again it means one node per pixel cannot
hold a distance there: across a vessel 3-4 px wide the midline, where φ
has a kink, lies within the stencils of the layer, and on a boundary whose
contrast is below about 2.5 noise deviations the outline's wiggles are a
pixel or two across. Each reinitialisation then moves the outline a little,
and it cycles instead of coming to rest. At ``FLATTENED_LIMIT`` flattenings
such a front is rebuilt at ``THIN_DETAIL`` nodes per pixel from its φ at
the pixel centres (cubic B-spline, :func:`engine.image.coarse_start.upsample_phi`),
keeping its steps, time, pins, barrier and resolved block; the flood's own
test for thin parts (:mod:`engine.image.thickness`) sets that detail from
the start where it sees them.
"""

from __future__ import annotations

from dataclasses import fields

import numpy as np

from engine.front.core import Front
from engine.image.coarse_start import upsample_phi

#: Lattice nodes per pixel for a structure with a thin part, and for a front rebuilt here.
THIN_DETAIL = 2
#: Flattenings (reinitialisations of a φ that drifted from a distance next to the front) after which a
#: front at fewer than THIN_DETAIL nodes per pixel is rebuilt at THIN_DETAIL. Measured on 40 invented
#: blobs under Rician noise at SNR 2-3: the 36 fronts that came to rest flattened 0-3 times (one 9 times,
#: in 1 374 steps), the 4 that never did 30-69 times in 3 000 steps; the bench cases, the hazard
#: families and the clicked vessels at SNR 8-15 never flatten.
FLATTENED_LIMIT = 4


def cannot_hold_distance(front: Front) -> bool:
    """True for a moving 2-D lattice front at under THIN_DETAIL nodes per pixel that flattened FLATTENED_LIMIT times.

    Volumes are left as they are: two nodes per voxel is eight times the
    nodes, and no case in 3-D has been measured.
    """
    return (front.ndim == 2 and front.nodes == "lattice" and front.detail < THIN_DETAIL
            and front.flattenings >= FLATTENED_LIMIT and not front.converged and not front.vanished)


def at_thin_detail(front: Front) -> Front:
    """``front`` rebuilt at THIN_DETAIL lattice nodes per pixel (same outline, settings, steps, time, pins, barrier)."""
    params = front.params
    settings = {f.name: getattr(params, f.name) for f in fields(params)}
    model = settings.pop("model")
    start = upsample_phi(front.pixel_phi(), 1, front.features.spacing)
    finer = Front.from_function(start, front.shape, image=front.features.image, spacing=front.features.spacing,
                                model=model, detail=THIN_DETAIL, signed_distance=True, features=front.features,
                                **settings)
    finer.steps, finer.time = front.steps, front.time
    if front._barrier is not None:
        finer.set_barrier(front._barrier)
    if front._pins is not None and np.any(front._pins):
        finer.pin(front._pins)
    finer.set_resolved_block(front.resolved_block)
    return finer
