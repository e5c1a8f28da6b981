"""Explicit time integrators for the level-set equation.

``ssp_rk3``: the three-stage, third-order strong-stability-preserving
Runge–Kutta method of Shu & Osher, "Efficient implementation of essentially
non-oscillatory shock-capturing schemes", J. Comput. Phys. 77 (1988) 439-471.

``rkl2``: the s-stage, second-order Runge–Kutta–Legendre super-time-stepping
method of Meyer, Balsara & Aslam, "A stabilized Runge-Kutta-Legendre method
for explicit super-time-stepping of parabolic and mixed equations",
J. Comput. Phys. 257 (2014) 594-626. Its stability interval on the negative
real axis grows as (s² + s − 2)/4 times that of forward Euler, so purely
curvature-driven motion (a parabolic equation) takes far fewer function
evaluations than with a classical method.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from scipy.linalg.blas import daxpy as _axpy

Rate = Callable[[NDArray[np.floating]], NDArray[np.floating]]


def ssp_rk3(phi: NDArray[np.floating], rate: Rate, dt: float,
            first_rate: NDArray[np.floating] | None = None) -> NDArray[np.floating]:
    """One SSP-RK3 step of φ' = rate(φ) (``first_rate`` = rate(φ) if already known)."""
    r0 = rate(phi) if first_rate is None else first_rate
    p1 = phi + dt * r0
    p2 = 0.75 * phi + 0.25 * (p1 + dt * rate(p1))
    return phi / 3.0 + 2.0 / 3.0 * (p2 + dt * rate(p2))


def rkl2_stages(dt: float, dt_euler: float) -> int:
    """Fewest RKL2 stages s (>= 2) whose stability bound (s² + s − 2)/4 · dt_euler covers ``dt``."""
    need = 4.0 * dt / dt_euler
    s = int(np.ceil((-1.0 + np.sqrt(9.0 + 4.0 * need)) / 2.0))
    return max(s, 2)


def rkl2_reach(stages: int, dt_euler: float) -> float:
    """Longest stable RKL2 step with ``stages`` stages: (s² + s − 2)/4 · dt_euler."""
    return (stages * stages + stages - 2) / 4.0 * dt_euler


def rkl2_step(dt_max: float, dt_euler: float) -> tuple[float, int]:
    """Step (<= ``dt_max``) and stage count that advance the most time per evaluation.

    The fewest stages covering ``dt_max`` may reach well beyond it (stage
    counts are whole); one stage fewer at its own stability limit can then
    cost fewer evaluations per unit time. The time per evaluation,
    (s² + s − 2)/(4s) · dt_euler, grows with s, so only that one
    alternative needs checking.
    """
    stages = rkl2_stages(dt_max, dt_euler)
    if stages > 2:
        shorter = rkl2_reach(stages - 1, dt_euler)
        if (stages - 1) * dt_max < stages * shorter:
            return shorter, stages - 1
    return dt_max, stages


@lru_cache(maxsize=64)
def rkl2_coefficients(s: int) -> tuple[NDArray[np.floating], ...]:
    """μ_j, ν_j, μ̃_j, γ̃_j (j = 1..s; index 0 unused) of the RKL2 recursion (read-only, cached)."""
    if s < 2:
        raise ValueError(f"RKL2 needs at least 2 stages, got {s}")
    j = np.arange(s + 1, dtype=float)
    b = np.empty(s + 1)
    b[:3] = 1.0 / 3.0
    b[2:] = (j[2:] ** 2 + j[2:] - 2.0) / (2.0 * j[2:] * (j[2:] + 1.0))
    a = 1.0 - b
    w1 = 4.0 / (s * s + s - 2.0)
    mu = np.zeros(s + 1)
    nu = np.zeros(s + 1)
    mu_t = np.zeros(s + 1)
    gamma_t = np.zeros(s + 1)
    mu_t[1] = b[1] * w1
    for k in range(2, s + 1):
        mu[k] = (2.0 * k - 1.0) / k * b[k] / b[k - 1]
        nu[k] = -(k - 1.0) / k * b[k] / b[k - 2]
        mu_t[k] = mu[k] * w1
        gamma_t[k] = -a[k - 1] * mu_t[k]
    for array in (mu, nu, mu_t, gamma_t):
        array.flags.writeable = False
    return mu, nu, mu_t, gamma_t


def rkl2(phi: NDArray[np.floating], rate: Rate, dt: float, stages: int,
         first_rate: NDArray[np.floating] | None = None) -> NDArray[np.floating]:
    """One RKL2 step of φ' = rate(φ) with ``stages`` stages (Meyer, Balsara & Aslam 2014)."""
    mu, nu, mu_t, gamma_t = rkl2_coefficients(stages)
    r0 = rate(phi) if first_rate is None else first_rate
    y_prev2 = phi
    y_prev = phi + mu_t[1] * dt * r0
    flat = phi.dtype == np.float64 and phi.ndim == 1
    for k in range(2, stages + 1):
        # y = μ y₋₁ + ν y₋₂ + (1 − μ − ν) φ + μ̃ dt F(y₋₁) + γ̃ dt F(φ)
        y = np.multiply(rate(y_prev), mu_t[k] * dt)
        terms = ((y_prev, mu[k]), (y_prev2, nu[k]), (phi, 1.0 - mu[k] - nu[k]), (r0, gamma_t[k] * dt))
        if flat:  # in place, no temporaries (this runs at every stage)
            for x, c in terms:
                y = _axpy(x, y, a=c)
        else:
            for x, c in terms:
                y += c * x
        y_prev2, y_prev = y_prev, y
    return y_prev
