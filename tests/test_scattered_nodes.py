"""Tests for engine.nodes.scattered_nodes.

External references used here:
- Fornberg & Flyer, Comput. Math. Appl. 69 (2015) 531-544 (the 2-D algorithm;
  it reports a narrow distribution of nearest-neighbour distances, from memory).
- Lattice densities (common geometry, from memory): the hexagonal lattice of
  spacing r has one node per r^2 * sqrt(3)/2 of area; the face-centred cubic
  lattice of nearest-neighbour distance r has one node per r^3 / sqrt(2) of
  volume. Both are the densest packings with minimum distance r.
- Brute-force numpy distances for the k-nearest stencils.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial import cKDTree

from engine.nodes.scattered_nodes import DENSITY_2D, DENSITY_3D, mask_region, scattered_nodes
from engine.nodes.spacing_quality import spacing_quality
from engine.numerics.neighbours import knn_stencils

HEX_AREA_PER_NODE = math.sqrt(3.0) / 2.0  # times r^2 (common geometry, from memory)
FCC_VOLUME_PER_NODE = 1.0 / math.sqrt(2.0)  # times r^3 (common geometry, from memory)


def _interior(nodes: np.ndarray, lo: float, hi: float) -> np.ndarray:
    return np.all((nodes >= lo) & (nodes < hi), axis=1)


# --------------------------------------------------------------------------
# 2-D, constant radius
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def square_nodes() -> tuple[np.ndarray, float]:
    r = 0.01
    return scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=0), r


def test_2d_nearest_neighbour_band(square_nodes):
    nodes, r = square_nodes
    q = spacing_quality(nodes, radius=r)
    # Fornberg & Flyer (2015) report a narrow nearest-neighbour distribution (from memory).
    # Required: >= 95 % of nodes in [0.75 r, 1.35 r].
    # Measured (seed 0, r = 0.01, 9173 nodes): 100 %; min 0.872 r, max 1.171 r, median r.
    assert q.relative
    assert q.fraction_within(0.75, 1.35) >= 0.95
    assert q.median == pytest.approx(1.0, abs=0.02)
    assert len(nodes) > 8000


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("r", [0.02, 0.01])
def test_2d_no_two_nodes_closer_than_half_radius(seed, r):
    nodes = scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=seed)
    dist, _ = cKDTree(nodes).query(nodes, k=2)
    # required: no pair closer than 0.5 r (measured minimum over these six cases: 0.773 r)
    assert dist[:, 1].min() >= 0.5 * r


def test_2d_nodes_inside_box_and_cover_it(square_nodes):
    nodes, r = square_nodes
    assert np.all(nodes >= 0.0) and np.all(nodes <= 1.0)
    # no holes: every probe point at least 2r inside the box is within r of a node
    # (measured max 0.87 r; a hole would show as a distance well above r)
    probes = np.random.default_rng(3).uniform(2 * r, 1 - 2 * r, size=(40000, 2))
    d, _ = cKDTree(nodes).query(probes)
    assert d.max() < 1.0 * r


def test_2d_count_vs_hexagonal_lattice():
    # reference: hexagonal lattice density, area / (r^2 sqrt(3)/2) (common geometry, from memory)
    # measured interior ratio (seeds 0-2, r = 0.02, 0.01, 0.005): 0.780 ... 0.796
    for r in (0.02, 0.01):
        nodes = scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=1)
        count = int(_interior(nodes, 0.2, 0.8).sum())
        hex_count = 0.36 / (r * r * HEX_AREA_PER_NODE)
        ratio = count / hex_count
        assert 0.75 <= ratio <= 0.83, ratio
        assert ratio == pytest.approx(DENSITY_2D, rel=0.04)


def test_2d_anisotropic_box_and_offset():
    # a box not at the origin and not square: same interior density
    r = 0.3
    lo, hi = (-12.0, 40.0), (18.0, 52.0)
    nodes = scattered_nodes(lo, hi, r, seed=4)
    assert np.all(nodes >= np.array(lo)) and np.all(nodes <= np.array(hi))
    inner = np.all((nodes >= np.array(lo) + 2) & (nodes < np.array(hi) - 2), axis=1).sum()
    area = (30.0 - 4) * (12.0 - 4)
    ratio = inner / (area / (r * r * HEX_AREA_PER_NODE))  # hexagonal reference (from memory)
    assert 0.75 <= ratio <= 0.83, ratio


# --------------------------------------------------------------------------
# 2-D, variable radius
# --------------------------------------------------------------------------
@pytest.mark.parametrize("axis", [0, 1])
def test_2d_variable_density_tracks_radius(axis):
    r0, g = 0.004, 0.012  # r(x) = r0 + g x: spacing grows 4x across the square

    def radius(p):
        return r0 + g * p[:, axis]

    nodes = scattered_nodes((0.0, 0.0), (1.0, 1.0), radius, seed=0)
    q = spacing_quality(nodes, radius=radius)
    # required: local NN distance within 25 % of r(x) for >= 95 % of nodes
    # measured: 100 % (ratios in [0.86, 1.21] for axis 0, [0.78, 1.17] for axis 1)
    assert q.fraction_within(0.75, 1.25) >= 0.95
    # the number of nodes per strip follows the hexagonal density integrated over the strip:
    # count ~ DENSITY_2D * (2/sqrt 3) * width * integral dx / r(x)^2
    #       = DENSITY_2D * (2/sqrt 3) * 0.8 * (1/g) (1/r(a) - 1/r(b))
    # measured within 1.5 % of this in every strip
    t = nodes[:, axis]
    other = nodes[:, 1 - axis]
    band = (other >= 0.1) & (other < 0.9)
    for a, b in [(0.1, 0.3), (0.3, 0.5), (0.5, 0.7), (0.7, 0.9)]:
        count = int(np.sum(band & (t >= a) & (t < b)))
        predicted = DENSITY_2D * 2 / math.sqrt(3) * 0.8 / g * (1 / (r0 + g * a) - 1 / (r0 + g * b))
        assert count == pytest.approx(predicted, rel=0.06)


def test_deterministic_for_fixed_seed():
    def radius(p):
        return 0.02 + 0.02 * p[:, 0] * p[:, 1]

    a = scattered_nodes((0.0, 0.0), (1.0, 1.0), radius, seed=7)
    b = scattered_nodes((0.0, 0.0), (1.0, 1.0), radius, seed=7)
    c = scattered_nodes((0.0, 0.0), (1.0, 1.0), radius, seed=8)
    assert np.array_equal(a, b)
    assert not (a.shape == c.shape and np.allclose(a, c))
    a3 = scattered_nodes((0, 0, 0), (1, 1, 1), 0.12, seed=7)
    b3 = scattered_nodes((0, 0, 0), (1, 1, 1), 0.12, seed=7)
    assert np.array_equal(a3, b3)


def test_keep_restricts_to_region():
    r = 0.01

    def annulus(p):
        rho = np.hypot(p[:, 0] - 0.5, p[:, 1] - 0.5)
        return (rho > 0.2) & (rho < 0.3)

    full = scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=2)
    kept = scattered_nodes((0.0, 0.0), (1.0, 1.0), r, seed=2, keep=annulus)
    assert np.array_equal(kept, full[annulus(full)])
    # area of the annulus pi (0.3^2 - 0.2^2) (exact geometry) times the interior density
    expected = DENSITY_2D * math.pi * (0.09 - 0.04) / (r * r * HEX_AREA_PER_NODE)
    assert len(kept) == pytest.approx(expected, rel=0.05)


def test_mask_region_disk():
    # a disk of radius 20 px on anisotropic pixels (0.5 mm rows, 0.8 mm cols)
    sp = np.array([0.5, 0.8])
    rr, cc = np.mgrid[0:80, 0:60]
    disk = (rr - 40.0) ** 2 + (cc - 30.0) ** 2 <= 20.0**2
    keep = mask_region(disk, spacing=sp)
    nodes = scattered_nodes((0.0, 0.0), (79 * 0.5, 59 * 0.8), 0.6, seed=0)
    inside = keep(nodes)
    px = nodes / sp
    rho = np.hypot(px[:, 0] - 40.0, px[:, 1] - 30.0)
    # nearest-pixel lookup: kept nodes lie within the disk plus half a pixel diagonal,
    # nodes more than that inside the disk are all kept (disk geometry)
    half_diag = math.hypot(0.5, 0.5)
    assert np.all(rho[inside] <= 20.0 + half_diag)
    assert np.all(inside[rho < 20.0 - half_diag])
    assert not keep(np.array([[-5.0, 10.0], [10.0, 1e3]])).any()  # outside the array


# --------------------------------------------------------------------------
# 3-D
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def cube_nodes() -> tuple[np.ndarray, float]:
    r = 0.05
    return scattered_nodes((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), r, seed=0), r


def test_3d_nearest_neighbour_band(cube_nodes):
    nodes, r = cube_nodes
    q = spacing_quality(nodes, radius=r)
    # required: >= 95 % of nodes with NN distance in [0.7 r, 1.5 r]
    # measured (seed 0, r = 0.05, 8953 nodes): 100 %, min r, max 1.06 r
    assert q.fraction_within(0.7, 1.5) >= 0.95
    # by construction no two nodes are closer than r (round-off aside)
    assert q.min >= 1.0 - 1e-9


def test_3d_count_vs_fcc_and_coverage(cube_nodes):
    nodes, r = cube_nodes
    assert np.all(nodes >= 0.0) and np.all(nodes <= 1.0)
    # reference: FCC lattice density, volume / (r^3 / sqrt 2) (common geometry, from memory)
    # measured interior ratio (seeds 0-1, r = 0.1, 0.05, 0.04): 0.720 ... 0.730
    count = int(_interior(nodes, 0.2, 0.8).sum())
    ratio = count / (0.216 / (r**3 * FCC_VOLUME_PER_NODE))
    assert 0.69 <= ratio <= 0.77, ratio
    assert ratio == pytest.approx(DENSITY_3D, rel=0.05)
    # no holes: probes at least 2r inside are within r of a node (measured max 0.85 r here,
    # 0.90 r over seeds 0-1 and r = 0.1, 0.05, 0.04)
    probes = np.random.default_rng(4).uniform(2 * r, 1 - 2 * r, size=(30000, 3))
    d, _ = cKDTree(nodes).query(probes)
    assert d.max() < 1.0 * r


def test_3d_variable_density_tracks_radius():
    def radius(p):
        return 0.04 + 0.06 * p[:, 2]  # spacing 2.5x larger at one side

    nodes = scattered_nodes((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), radius, seed=0)
    q = spacing_quality(nodes, radius=radius)
    # required: within 25 % of r(x) for >= 95 % of nodes; measured 100 % (ratios 0.94 ... 1.10)
    assert q.fraction_within(0.75, 1.25) >= 0.95
    # slab counts follow the FCC density integrated over the slab (interior in the other axes):
    # count ~ DENSITY_3D sqrt(2) * 0.36 * integral dz / r(z)^3 = ... (1/(2g)) (r(a)^-2 - r(b)^-2)
    g, r0 = 0.06, 0.04
    z = nodes[:, 2]
    band = _interior(nodes[:, :2], 0.2, 0.8)
    for a, b in [(0.2, 0.5), (0.5, 0.8)]:
        count = int(np.sum(band & (z >= a) & (z < b)))
        predicted = DENSITY_3D * math.sqrt(2) * 0.36 / (2 * g) * ((r0 + g * a) ** -2 - (r0 + g * b) ** -2)
        # measured +2.6 % and +5.8 % (the interior density constant was measured at constant r)
        assert count == pytest.approx(predicted, rel=0.12)


# --------------------------------------------------------------------------
# stencils and quality measures
# --------------------------------------------------------------------------
@pytest.mark.parametrize("dim", [2, 3])
def test_knn_stencils_match_bruteforce_argsort(dim):
    rng = np.random.default_rng(dim)
    nodes = rng.random((60, dim))
    centers = rng.random((25, dim))
    k = 9
    # reference: brute-force numpy distances and argsort
    for c, own in ((None, True), (centers, False)):
        cc = nodes if own else centers
        dist = np.linalg.norm(cc[:, None, :] - nodes[None, :, :], axis=-1)
        ref = np.argsort(dist, axis=1, kind="stable")[:, :k]
        got = knn_stencils(nodes, c, k=k)
        assert got.shape == (len(cc), k)
        assert np.issubdtype(got.dtype, np.integer)
        assert np.array_equal(got, ref)
        if own:
            assert np.array_equal(got[:, 0], np.arange(len(nodes)))


def test_knn_stencils_centre_first_with_duplicates():
    nodes = np.array([[0.0, 0.0], [0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [0.0, 0.0]])
    st = knn_stencils(nodes, k=3)
    assert np.array_equal(st[:, 0], np.arange(5))
    for i, row in enumerate(st):
        assert len(set(row.tolist())) == 3  # no index twice
    # node 0's nearest three are the three coincident nodes (distance 0)
    assert set(st[0].tolist()) == {0, 1, 4}


def test_spacing_quality_on_lattices():
    # hexagonal lattice with spacing a: every nearest neighbour exactly a (geometry)
    a = 0.7
    i, j = np.mgrid[0:12, 0:12]
    hexa = np.column_stack(((i + 0.5 * (j % 2)).ravel() * a, (j * math.sqrt(3) / 2).ravel() * a))
    q = spacing_quality(hexa)
    assert not q.relative
    assert q.min == pytest.approx(a, rel=1e-12) and q.max == pytest.approx(a, rel=1e-12)
    assert q.std == pytest.approx(0.0, abs=1e-12)
    # simple cubic lattice, spacing 2, relative to radius 4 -> all 0.5
    g = np.stack(np.meshgrid(*[np.arange(4) * 2.0] * 3, indexing="ij"), -1).reshape(-1, 3)
    q3 = spacing_quality(g, radius=4.0)
    assert q3.relative and q3.min == pytest.approx(0.5) and q3.max == pytest.approx(0.5)
    assert q3.fraction_within(0.49, 0.51) == 1.0 and q3.fraction_within(0.6, 2.0) == 0.0


# --------------------------------------------------------------------------
# bad input
# --------------------------------------------------------------------------
def test_bad_input_raises_naming_argument():
    with pytest.raises(ValueError, match="^box_max:"):
        scattered_nodes((0, 0), (1, 0), 0.1)
    with pytest.raises(ValueError, match="^box_max:"):
        scattered_nodes((0, 0), (1, 1, 1), 0.1)
    with pytest.raises(ValueError, match="^box_min:"):
        scattered_nodes((0, 0, 0, 0), (1, 1, 1, 1), 0.1)
    with pytest.raises(ValueError, match="^box_min:"):
        scattered_nodes((0, np.nan), (1, 1), 0.1)
    with pytest.raises(ValueError, match="^radius:"):
        scattered_nodes((0, 0), (1, 1), 0.0)
    with pytest.raises(ValueError, match="^radius:"):
        scattered_nodes((0, 0), (1, 1), "wide")
    with pytest.raises(ValueError, match="^radius:"):
        scattered_nodes((0, 0), (1, 1), lambda p: 0.1 - p[:, 0])  # negative on part of the box
    with pytest.raises(ValueError, match="^radius:"):
        scattered_nodes((0, 0), (1, 1), lambda p: np.full((len(p), 2), 0.1))
    with pytest.raises(ValueError, match="^keep:"):
        scattered_nodes((0, 0), (1, 1), 0.1, keep=lambda p: np.ones(3, bool))
    with pytest.raises(ValueError, match="^keep:"):
        scattered_nodes((0, 0), (1, 1), 0.1, keep=True)
    with pytest.raises(ValueError, match="^max_nodes:"):
        scattered_nodes((0, 0), (1, 1), 0.01, max_nodes=1000)  # caught by the up-front estimate
    with pytest.raises(ValueError, match="^max_nodes:"):
        scattered_nodes((0, 0), (1, 1), 0.01, max_nodes=8500)  # caught while placing nodes
    with pytest.raises(ValueError, match="^max_nodes:"):
        scattered_nodes((0, 0, 0), (1, 1, 1), 0.05, max_nodes=8000)
    with pytest.raises(ValueError, match="^min_radius:"):
        scattered_nodes((0, 0, 0), (1, 1, 1), 0.1, min_radius=-1.0)
    pts = np.random.default_rng(0).random((10, 2))
    with pytest.raises(ValueError, match="^k:"):
        knn_stencils(pts, k=11)
    with pytest.raises(ValueError, match="^k:"):
        knn_stencils(pts, k=0)
    with pytest.raises(ValueError, match="^centers:"):
        knn_stencils(pts, np.zeros((3, 3)), k=2)
    with pytest.raises(ValueError, match="^nodes:"):
        knn_stencils(np.array([[0.0, np.nan], [1.0, 1.0]]), k=1)
    with pytest.raises(ValueError, match="^nodes:"):
        spacing_quality(np.zeros((1, 2)))
    with pytest.raises(ValueError, match="^mask:"):
        mask_region(np.zeros(5, bool), spacing=1.0)
    with pytest.raises(ValueError, match="^spacing:"):
        mask_region(np.zeros((5, 5), bool), spacing=(1.0, 0.0))
