"""Polyharmonic spline kernels r^m and the linear operators applied to them.

Closed forms (Δx = x - x_j, r = |Δx|, d = dimension):
``∂_i r^m = m r^(m-2) Δx_i``;
``∂_i∂_j r^m = m r^(m-2) δ_ij + m(m-2) r^(m-4) Δx_i Δx_j``;
``Δ^k r^m = Π_{i<k} (m-2i)(m-2i+d-2) · r^(m-2k)``.
See Fornberg & Flyer, "Solving PDEs with radial basis functions",
Acta Numerica 24 (2015) 215-258.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray


def check_phs(phs: int) -> None:
    """Raise ``ValueError`` unless ``phs`` is an odd exponent >= 1."""
    if not isinstance(phs, (int, np.integer)) or phs < 1 or phs % 2 == 0:
        raise ValueError(f"phs must be an odd positive integer, got {phs!r}")


def _safe_power(r: NDArray[np.floating], p: int) -> NDArray[np.floating]:
    """r**p with 0**p = 0 for p > 0 and 0 for p <= 0 at r = 0 (term multiplied by 0 anyway)."""
    if p >= 0:
        return r**p
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(r > 0, r ** float(p), 0.0)
    return out


def phs_value(diff: NDArray[np.floating], m: int) -> NDArray[np.floating]:
    """r^m for displacement vectors ``diff`` (..., d)."""
    r = np.sqrt(np.einsum("...i,...i->...", diff, diff))
    return r**m


def phs_derivative(diff: NDArray[np.floating], m: int, alpha: tuple[int, ...]) -> NDArray[np.floating]:
    """D^alpha r^m at displacements ``diff`` (..., d) for |alpha| <= 2."""
    order = sum(alpha)
    r = np.sqrt(np.einsum("...i,...i->...", diff, diff))
    if order == 0:
        return r**m
    if order == 1:
        i = alpha.index(1)
        return m * _safe_power(r, m - 2) * diff[..., i]
    if order == 2:
        if m < 3:
            raise ValueError(f"second derivatives of r^{m} are singular; use phs >= 3")
        if 2 in alpha:
            i = j = alpha.index(2)
        else:
            i, j = (k for k, a in enumerate(alpha) if a == 1)
        out = m * (m - 2) * _safe_power(r, m - 4) * diff[..., i] * diff[..., j]
        if i == j:
            out = out + m * _safe_power(r, m - 2)
        return out
    raise ValueError(f"derivatives of order {order} > 2 are not supported; got alpha={alpha}")


def phs_laplacian_power(diff: NDArray[np.floating], m: int, k: int) -> NDArray[np.floating]:
    """Δ^k r^m at displacements ``diff`` (..., d); needs m >= 2k + 1."""
    if m < 2 * k + 1:
        raise ValueError(f"Δ^{k} of r^{m} is singular at r = 0; use phs >= {2 * k + 1}")
    d = diff.shape[-1]
    coef = 1.0
    for i in range(k):
        coef *= (m - 2 * i) * (m - 2 * i + d - 2)
    r = np.sqrt(np.einsum("...i,...i->...", diff, diff))
    return coef * r ** (m - 2 * k)
