"""φ at pixel centres from scattered nodes: RBF-FD interpolation weights, per band or cached per pixel.

A pixel centre's value is the PHS + polynomial interpolant of φ on its
``k`` nearest nodes (RBF-FD with the identity operator; Flyer, Fornberg,
Bayona & Barnett, J. Comput. Phys. 321 (2016) 21-38).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from engine.nodes.scattered_weights import interpolation_weights
from engine.numerics.rbffd import assemble

__all__ = ["check_pixel_indices", "band_pixel_matrix", "PixelWeightCache"]

#: Rows of the per-pixel stores allocated at a time (grown by doubling).
_MIN_ROWS = 1024


def check_pixel_indices(pixel_indices: ArrayLike, shape: tuple[int, ...]) -> NDArray[np.int64]:
    """Pixel indices as a (P, d) int64 array inside an image of ``shape``; ValueError naming the problem."""
    dim = len(shape)
    pix = np.asarray(pixel_indices)
    if pix.ndim != 2 or pix.shape[1] != dim:
        raise ValueError(f"pixel_indices: expected shape (P, {dim}), got {pix.shape}")
    if pix.size and not np.issubdtype(pix.dtype, np.integer):
        raise ValueError(f"pixel_indices: expected integers, got dtype {pix.dtype}")
    pix = pix.astype(np.int64)
    if len(pix) and (np.any(pix < 0) or np.any(pix >= np.array(shape))):
        raise ValueError(f"pixel_indices: indices must lie inside the image shape {shape}")
    return pix


def band_pixel_matrix(nodes: NDArray[np.floating], centres: NDArray[np.floating], *, k: int, phs: int,
                      degree: int) -> sp.csr_matrix:
    """(P, A) sparse matrix of the interpolation weights of ``centres`` (mm) on their ``k`` nearest ``nodes``."""
    _, st = cKDTree(nodes).query(centres, k=k)
    st = np.asarray(st, dtype=np.int64).reshape(len(centres), k)
    w = interpolation_weights(nodes, st, centres, phs=phs, degree=degree)
    return assemble(st, w, len(nodes))


class PixelWeightCache:
    """Interpolation stencils and weights of pixel centres on their nearest nodes of a whole set, each computed once.

    Parameters
    ----------
    points : (N, d) array
        The set's nodes (mm); ``tree`` is a cKDTree over them.
    shape, pixel_spacing
        The image's shape and pixel spacing (mm); pixel centres sit at ``index * pixel_spacing``.
    k, phs, degree : int
        Stencil size, PHS exponent and polynomial degree of the interpolation.
    """

    def __init__(self, points: NDArray[np.floating], tree: cKDTree, shape: tuple[int, ...],
                 pixel_spacing: NDArray[np.floating], *, k: int, phs: int, degree: int) -> None:
        self.points, self.tree, self.shape, self.pixel_spacing = points, tree, shape, pixel_spacing
        self.k, self.phs, self.degree = k, phs, degree
        self._slot: NDArray[np.int64] | None = None  # per pixel: its row in the stores, −1 until computed
        self._used = 0
        self._stencils = np.zeros((0, k), dtype=np.int64)
        self._weights = np.zeros((0, k))

    def lookup(self, pix: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.floating], int]:
        """Stencils (P, k) and weights (P, k) of the checked pixel indices ``pix``, and how many were new."""
        k = self.k
        if len(pix) == 0:
            return np.zeros((0, k), dtype=np.int64), np.zeros((0, k)), 0
        if self._slot is None:
            self._slot = np.full(int(np.prod(self.shape)), -1, dtype=np.int64)
        flat = np.ravel_multi_index(tuple(pix.T), self.shape)
        new = np.unique(flat[self._slot[flat] < 0])
        if len(new):
            centres = np.stack(np.unravel_index(new, self.shape), axis=1) * self.pixel_spacing
            _, st = self.tree.query(centres, k=k)
            st = np.asarray(st, dtype=np.int64).reshape(len(new), k)
            w = interpolation_weights(self.points, st, centres, phs=self.phs, degree=self.degree)
            used = self._used
            need = used + len(new)
            if need > len(self._stencils):
                rows = max(need, 2 * len(self._stencils), _MIN_ROWS)
                self._stencils, self._weights = grown(self._stencils, rows), grown(self._weights, rows)
            self._stencils[used:need] = st
            self._weights[used:need] = w
            self._slot[new] = np.arange(used, need)
            self._used = need
        slots = self._slot[flat]
        return self._stencils[slots], self._weights[slots], len(new)


def grown(a: NDArray, rows: int) -> NDArray:
    """``a`` with ``rows`` rows, the new ones zero."""
    out = np.zeros((rows,) + a.shape[1:], dtype=a.dtype)
    out[:len(a)] = a
    return out
