"""Numerical building blocks of the front: RBF-FD weights, local interpolants, closest points, time steppers.

Each module has one job; the names a caller needs are re-exported here.

- ``polynomials``: monomial bases and their derivatives
- ``kernels``: polyharmonic splines r^m and the operators applied to them
- ``neighbours``: the k nearest nodes of each centre (stencils)
- ``rbffd``: batched RBF-FD weights and sparse operator matrices
- ``interpolant``: value, gradient and Hessian of φ at any point
- ``closest_point``: Newton closest points on the zero set, signed distance
- ``time_stepping``: SSP-RK3 and RKL2 super time stepping
- ``outline_averaging``: a Gaussian average along the outline
"""

from engine.numerics.closest_point import ClosestPoints, closest_points, signed_distance
from engine.numerics.interpolant import LocalInterpolant
from engine.numerics.kernels import check_phs, phs_derivative, phs_laplacian_power, phs_value
from engine.numerics.neighbours import knn_stencils
from engine.numerics.outline_averaging import average_along_outline
from engine.numerics.polynomials import monomial_count, monomial_exponents, monomial_values
from engine.numerics.rbffd import Operator, assemble, operator_matrix, parse_operator, stencil_weights
from engine.numerics.time_stepping import rkl2, rkl2_stages, rkl2_step, ssp_rk3

__all__ = [
    "ClosestPoints", "closest_points", "signed_distance",
    "LocalInterpolant",
    "check_phs", "phs_derivative", "phs_laplacian_power", "phs_value",
    "knn_stencils",
    "average_along_outline",
    "monomial_count", "monomial_exponents", "monomial_values",
    "Operator", "assemble", "operator_matrix", "parse_operator", "stencil_weights",
    "rkl2", "rkl2_stages", "rkl2_step", "ssp_rk3",
]
