"""The two time integrators of a front step: RKL2 super time steps (default) and SSP-RK3."""

from __future__ import annotations

import numpy as np
import pytest
from test_front_analytic import circle_sd, mean_radius
from test_front_segmentation import disk_image

from engine.front import Front
from engine.analysis.metrics import dice


def ssp_rk3_real_limit() -> float:
    """Largest x with |R(−y)| ≤ 1 for all 0 ≤ y ≤ x, R(z) = 1 + z + z²/2 + z³/6.

    R is the stability polynomial of every three-stage, third-order
    Runge–Kutta method, SSP-RK3 included (Shu & Osher, J. Comput. Phys. 77
    (1988) 439-471); R(−x) = −1 at x ≈ 2.51 (computed here, not assumed).
    """
    roots = np.roots([1.0 / 6.0, 0.5, 1.0, 2.0])  # R(z) + 1 = 0
    return float(-max(r.real for r in roots if abs(r.imag) < 1e-12))


def test_ssp_rk3_follows_curve_shortening_flow() -> None:
    # Curve-shortening flow of a circle: r(t)² = r0² − 2t (Gage & Hamilton,
    # J. Differential Geom. 23 (1986) 69-96). Requirement as for the default
    # integrator: within 0.2 % from r0 to r0/2.
    centre = (32.3, 31.8)
    t_end = (20.0**2 - 10.0**2) / 2.0
    radii = {}
    for integrator in ("rkl2", "ssp_rk3"):
        front = Front.from_function(circle_sd(centre, 20.0), (64, 64), model="curvature", integrator=integrator)
        front.run(until_time=t_end)
        radii[integrator] = mean_radius(front, centre)
        evaluations = front.timings["evaluations"]
        assert abs(radii[integrator] - 10.0) / 10.0 < 0.002, (integrator, radii[integrator])
        if integrator == "ssp_rk3":
            assert evaluations == 3 * front.steps
        else:
            rkl2_evaluations = evaluations
    # the super time steps buy the same answer with far fewer evaluations
    assert abs(radii["rkl2"] - radii["ssp_rk3"]) < 1e-3
    assert rkl2_evaluations * 3 < evaluations


@pytest.mark.parametrize("normal", [(0.6, 0.8), (0.36, 0.48, 0.8)])
def test_ssp_rk3_steps_stay_within_its_stability_limit(normal: tuple[float, ...]) -> None:
    # A line or plane is a steady state of curvature motion (Osher & Sethian,
    # J. Comput. Phys. 79 (1988) 12-49): φ may change by round-off only, which
    # grows from step to step once dt·ρ passes SSP-RK3's limit on the negative
    # real axis (ρ the curvature term's spectral radius, hyperviscosity included).
    n = np.array(normal)
    front = Front.from_function(lambda p: p @ n - 7.3, (15,) * len(n), model="curvature", smoothness=1.0,
                                integrator="ssp_rk3")
    before = front.pixel_phi()
    front.step(300)
    assert np.max(np.abs(front.pixel_phi() - before)) < 1e-9
    dt = front.time / front.steps
    rho = front.params.curvature_weight * front.layout.spectral_radius(front._band) * front._curvature_gain
    assert dt * rho <= ssp_rk3_real_limit()


def test_both_integrators_segment_alike() -> None:
    # The integrator changes how the front gets to its resting place, not the
    # place: the masks of a noisy disk agree (Dice 0.995, common practice for
    # "the same outline"), and both match the disk.
    image = disk_image(noise=8.0, seed=5)
    truth = disk_image(noise=0.0) > 100.0  # more than half of the pixel inside the disk (50 on 150)
    masks = {}
    for integrator in ("rkl2", "ssp_rk3"):
        front = Front.from_seeds(image, [(48, 48, 6)], model="region", integrator=integrator)
        front.run(max_steps=6000)
        assert front.converged, integrator
        masks[integrator] = front.mask()
        assert dice(masks[integrator], truth) > 0.97, integrator
    assert dice(masks["rkl2"], masks["ssp_rk3"]) > 0.995


def test_switching_integrator_mid_run_and_snapshots_are_exact() -> None:
    image = disk_image(noise=8.0, seed=6)
    front = Front.from_seeds(image, [(48, 48, 5)], model="region")
    front.step(5)
    front.set_params(integrator="ssp_rk3")
    assert front.params.integrator == "ssp_rk3"
    snap = front.snapshot()
    front.step(30)
    phi_a = front.phi.copy()
    front.restore(snap)
    front.step(30)
    assert np.array_equal(front.phi, phi_a)
    assert front.params.as_dict()["integrator"] == "ssp_rk3"


def test_an_unknown_integrator_is_refused_by_name() -> None:
    image = disk_image(noise=0.0)
    with pytest.raises(ValueError, match="integrator must be one of rkl2, ssp_rk3; got 'euler'"):
        Front.from_seeds(image, [(48, 48, 5)], model="region", integrator="euler")
