"""RKL2 super time stepping: accuracy on a decaying mode, and the choice of step and stage count."""

from __future__ import annotations

import numpy as np
import pytest

from engine.numerics.time_stepping import rkl2, rkl2_reach, rkl2_stages, rkl2_step


def test_rkl2_is_second_order_on_the_heat_equation() -> None:
    # u_t = u_xx on a periodic grid: the Fourier mode sin(kx) decays as
    # exp(−λt) with λ the symbol of the discrete Laplacian (common practice).
    # RKL2 is second order in time (Meyer, Balsara & Aslam, J. Comput. Phys.
    # 257 (2014) 594-626): halving dt at a fixed stage count quarters the error.
    n = 64
    x = np.arange(n) * 2 * np.pi / n
    dx = x[1]
    lam = 4.0 / dx**2 * np.sin(3 * dx / 2) ** 2  # symbol of the 3-point Laplacian at k = 3

    def laplacian(u: np.ndarray) -> np.ndarray:
        return (np.roll(u, 1) + np.roll(u, -1) - 2 * u) / dx**2

    rho = 4.0 / dx**2  # spectral radius of the 3-point Laplacian
    end = 0.2
    errors = []
    stages = rkl2_stages(end / 8, 2.0 / rho)  # stable for every dt below
    for steps in (8, 16, 32):
        dt = end / steps
        u = np.sin(3 * x)
        for _ in range(steps):
            u = rkl2(u, laplacian, dt, stages)
        errors.append(np.max(np.abs(u - np.exp(-lam * end) * np.sin(3 * x))))
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert np.all(orders >= 1.8), (errors, orders)


@pytest.mark.parametrize("dt_max", [0.05, 0.3, 0.877, 1.0, 1.2, 7.5, 40.0])
@pytest.mark.parametrize("dt_euler", [0.0877, 0.013])
def test_rkl2_step_advances_the_most_time_per_evaluation(dt_max: float, dt_euler: float) -> None:
    dt, stages = rkl2_step(dt_max, dt_euler)
    assert dt <= dt_max
    assert rkl2_reach(stages, dt_euler) >= dt * (1 - 1e-12)  # stable
    # brute force over stage counts: step = min(dt_max, the stage count's limit)
    candidates = [(s / min(dt_max, rkl2_reach(s, dt_euler)), s) for s in range(2, 400)]
    best = min(c[0] for c in candidates)
    assert stages / dt == pytest.approx(best, rel=1e-12)


def test_rkl2_step_shortens_only_when_it_pays() -> None:
    # dt_max = 1, dt_euler = 2/22.8: seven stages reach 1.18, six reach 0.877;
    # 6/0.877 = 6.84 evaluations per unit time against 7/1.
    dt, stages = rkl2_step(1.0, 2.0 / 22.8)
    assert stages == 6 and dt == pytest.approx(10 * 2.0 / 22.8)
    # dt_max = 1, dt_euler = 2/24.6: six stages reach only 0.81 (7.4 per unit time), so seven
    dt, stages = rkl2_step(1.0, 2.0 / 24.6)
    assert stages == 7 and dt == 1.0
