"""Lattice lookups: positions of lattice indices in a node set, and of every node's neighbours."""

from __future__ import annotations

import numpy as np
import pytest

import engine.nodes.lattice as lattice
from engine.nodes.lattice import LatticeLookup, symmetric_offsets


def _brute_force(indices: np.ndarray, query: np.ndarray) -> np.ndarray:
    where = {tuple(v): i for i, v in enumerate(indices)}
    return np.array([where.get(tuple(q), -1) for q in query.reshape(-1, indices.shape[1])]).reshape(query.shape[:-1])


@pytest.mark.parametrize("dim", [2, 3])
@pytest.mark.parametrize("pad", [0, 2, 4])
@pytest.mark.parametrize("dense", [True, False])
def test_neighbours_match_a_dictionary(dim: int, pad: int, dense: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    if not dense:
        monkeypatch.setattr(lattice, "DENSE_LOOKUP_LIMIT", 0)  # sorted keys and binary search
    rng = np.random.default_rng(dim + 10 * pad)
    indices = np.unique(rng.integers(-5, 20, (900, dim)), axis=0)
    rng.shuffle(indices)
    offsets = symmetric_offsets(dim, 30 if dim == 2 else 60)
    lookup = LatticeLookup(indices, pad=pad)
    assert (lookup.table is not None) == dense
    expected = _brute_force(indices, indices[:, None, :] + offsets[None])
    np.testing.assert_array_equal(lookup.around(offsets), expected)
    query = rng.integers(-12, 28, (500, dim))
    np.testing.assert_array_equal(lookup.find(query), _brute_force(indices, query))
