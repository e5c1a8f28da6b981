"""Segmenting published phantoms and invented test images with the default settings."""

from __future__ import annotations

import dataclasses
import pickle

import numpy as np
import pytest
from scipy import ndimage
from skimage.data import shepp_logan_phantom

from engine.front import Front
from engine.analysis.metrics import dice
from engine.segment import segment

# Shepp & Logan, "The Fourier reconstruction of a head section", IEEE Trans.
# Nucl. Sci. 21(3) (1974) 21-43; scikit-image ships its modified version.
PHANTOM = shepp_logan_phantom()
NOISY = PHANTOM + np.random.default_rng(1974).normal(0.0, 0.05, PHANTOM.shape)
# Three ellipses of the phantom: the two large dark ones (0.0 in brain at
# 0.2) and the upper grey one (0.3), with the intensity range that counts as
# the structure. The grey ellipse carries a small brighter (0.4) ellipse on
# its lower edge: a tissue of its own, which the region model holds outside
# as it holds bone outside an organ in CT (local outside means on both
# sides of the inside). With noise σ = 0.05 against its contrast 0.1 the
# front may also take it in (122 of about 6 100 pixels).
ELLIPSES = {
    "left dark ellipse": ((200, 150, 8), (-1e-3, 1e-3)),
    "right dark ellipse": ((200, 243, 6), (-1e-3, 1e-3)),
    "upper grey ellipse": ((128, 200, 8), (0.29, 0.31)),
}


def truth_region(seed: tuple[int, int, int], value_range: tuple[float, float]) -> np.ndarray:
    """The noise-free phantom's connected region, within ``value_range``, that holds the seed."""
    labels, _ = ndimage.label((PHANTOM >= value_range[0]) & (PHANTOM <= value_range[1]))
    return labels == labels[seed[0], seed[1]]


@pytest.mark.slow
@pytest.mark.parametrize("model", ["region", "window"])
@pytest.mark.parametrize("name", list(ELLIPSES))
def test_shepp_logan_ellipses(model: str, name: str) -> None:
    # Requirement: Dice >= 0.97 against the noise-free region, seeded inside,
    # with Gaussian noise σ = 0.05 and the default settings.
    seed, value = ELLIPSES[name]
    result = segment(NOISY, [seed], model=model)
    assert result.converged
    assert dice(result.mask, truth_region(seed, value)) >= 0.97
    if model == "window":
        low, high = result.params["window"]
        assert low < PHANTOM[seed[0], seed[1]] < high  # the estimated window is reported and sensible


@pytest.mark.slow
@pytest.mark.parametrize("name", list(ELLIPSES))
def test_shepp_logan_without_noise(name: str) -> None:
    # The noise-free phantom (Shepp & Logan 1974): nothing to estimate a noise
    # level from, so the local outside statistics must not mistake the
    # structure's own partial-volume rim for a neighbouring tissue (which
    # turned the front back into the uniform dark ellipse, Dice 0.58, never
    # converging).
    seed, value = ELLIPSES[name]
    result = segment(PHANTOM, [seed], model="region", max_steps=3000)
    assert result.converged
    assert dice(result.mask, truth_region(seed, value)) >= 0.98


@pytest.mark.slow
def test_shepp_logan_edge_model_stops_at_the_boundary() -> None:
    # Geodesic active contour (Caselles, Kimmel & Sapiro 1997) with its
    # balloon force, seeded inside the large dark ellipse: it must stop at
    # the ellipse's boundary (Dice >= 0.97) rather than leak into the brain.
    seed, value = ELLIPSES["left dark ellipse"]
    result = segment(NOISY, [seed], model="edge")
    assert dice(result.mask, truth_region(seed, value)) >= 0.97


def partial_volume_disk(shape: tuple[int, int], centre: tuple[float, float], radius: float,
                        sub: int = 16) -> np.ndarray:
    """Area fraction of each pixel inside the disk, by sub×sub point sampling (common practice)."""
    offs = (np.arange(sub) + 0.5) / sub - 0.5
    rr, cc = np.indices(shape, dtype=float)
    frac = np.zeros(shape)
    for dr in offs:
        for dc in offs:
            frac += ((rr + dr - centre[0]) ** 2 + (cc + dc - centre[1]) ** 2) < radius**2
    return frac / sub**2


def test_partial_volume_disk_gives_subpixel_outline() -> None:
    # A noise-free partial-volume disk: the converged contour must be within
    # 0.05 px RMS of the true circle (a binary pixel mask cannot do better
    # than about 0.2 px RMS; common practice).
    centre, radius = (60.3, 59.6), 37.3
    image = 100.0 + 400.0 * partial_volume_disk((120, 120), centre, radius)
    result = segment(image, [(60, 60, 10)], model="region")
    assert result.converged
    verts = np.concatenate(result.contours)
    err = np.hypot(verts[:, 0] - centre[0], verts[:, 1] - centre[1]) - radius
    assert np.sqrt(np.mean(err**2)) <= 0.05, np.sqrt(np.mean(err**2))


def disk_image(shape=(96, 96), centre=(48.2, 47.7), radius=20.0, noise=0.0, seed=0) -> np.ndarray:
    image = 50.0 + 100.0 * partial_volume_disk(shape, centre, radius, sub=4)
    if noise:
        image += np.random.default_rng(seed).normal(0.0, noise, shape)
    return image


def test_pins_hold() -> None:
    # Pinned contour vertices must not move (< 0.01 px over 500 steps) while
    # the rest of the front grows to the disk's boundary.
    image = disk_image(radius=24.0)
    front = Front.from_seeds(image, [(48, 48, 8)], model="region")
    pinned = np.zeros(image.shape, bool)
    pinned[30:66, 48:70] = True  # the right half of the seed and beyond
    front.pin(pinned)
    before = front.contours()[0]
    # vertices at least two stencil radii (6 px) inside the pinned area
    right = before[before[:, 1] > 47.5 + 6.0]
    front.step(500)
    after = np.concatenate(front.contours())
    moved = np.min(np.linalg.norm(right[:, None, :] - after[None, :, :], axis=2), axis=1)
    assert moved.max() < 0.01, moved.max()
    assert front.mask().sum() > 2 * (np.pi * 8**2)  # the unpinned part did grow


def test_barrier_keeps_labels_apart() -> None:
    # A front grown toward another label's locked outline in the same bright
    # bar may not enter it (V <= 0 inside the barrier), yet fills the rest.
    image = np.full((60, 120), 20.0)
    image[20:40, 10:110] = 120.0
    locked = np.zeros(image.shape, bool)
    locked[20:40, 10:60] = True  # the first label's committed outline
    second = Front.from_seeds(image, [(30, 90, 6)], model="region")
    second.set_barrier(locked)
    second.run(max_steps=3000)
    grown = second.mask()
    assert not np.any(grown & locked)
    assert grown[20:40, 62:108].mean() > 0.9  # it reached the barrier and the bar's far end


def test_segment_is_deterministic() -> None:
    # Identical input gives identical output, bit for bit (common practice
    # for reproducible outlines).
    image = disk_image(noise=8.0, seed=3)
    a = segment(image, [(48, 48, 6)], model="region")
    b = segment(image, [(48, 48, 6)], model="region")
    assert np.array_equal(a.mask, b.mask) and a.steps == b.steps
    for ca, cb in zip(a.contours, b.contours):
        assert np.array_equal(ca, cb)


def test_snapshot_restore_reproduces_stepping_bit_for_bit() -> None:
    image = disk_image(noise=8.0, seed=4)
    front = Front.from_seeds(image, [(48, 48, 5)], model="region")
    front.step(7)
    snap = front.snapshot()
    front.step(40)
    phi_a, steps_a = front.phi.copy(), front.steps
    front.restore(snap)
    front.step(40)
    assert front.steps == steps_a
    assert np.array_equal(front.phi, phi_a)
    assert snap.nbytes < 2_000_000


def test_snapshot_is_the_frozen_state_and_survives_later_changes() -> None:
    # The state is one value: snapshot() hands it out without a copy, nothing can write into
    # it, and steps, strokes and pins build new states instead of changing it.
    image = disk_image(noise=8.0, seed=5)
    front = Front.from_seeds(image, [(48, 48, 5)], model="region")
    front.step(5)
    snap = front.snapshot()
    assert front.snapshot() is snap
    kept = {name: np.array(getattr(snap, name)) for name in ("indices", "phi", "phi_at_rebuild", "inside")}
    for name in kept:
        with pytest.raises(ValueError, match="read-only"):
            getattr(snap, name).reshape(-1)[0] = 0
    with pytest.raises(AttributeError):
        snap.steps = 0  # type: ignore[misc]
    # states compare by identity (comparing their arrays element by element has no single answer)
    assert snap == snap and snap != dataclasses.replace(snap) and len({snap, front.snapshot()}) == 1
    front.step(10)
    front.extend(([(48.0, 62.0)], 3.0))
    pins = np.zeros(image.shape, dtype=bool)
    pins[40:44, 40:44] = True
    front.pin(pins)
    assert front.snapshot() is not snap and front.steps == 15 and snap.steps == 5
    for name, values in kept.items():
        assert np.array_equal(getattr(snap, name), values), name
    # a pickled state (inside image bit-packed) restores a new front to the same steps
    copied = pickle.loads(pickle.dumps(snap))
    assert np.array_equal(copied.inside, snap.inside) and copied.sums == snap.sums
    assert len(pickle.dumps(snap)) < len(pickle.dumps(dict(vars(snap)))) - snap.inside.nbytes * 3 // 4
    other = Front.from_seeds(image, [(30, 30, 4)], model="region")
    other.restore(copied)
    front.restore(snap)
    assert front.snapshot() is snap
    front.step(30)
    other.step(30)
    assert np.array_equal(front.phi, other.phi) and front.time == other.time


@pytest.mark.slow
@pytest.mark.parametrize("model", ["region", "edge", "window", "curvature", "constant"])
def test_no_nan_after_many_steps_on_noise(model: str) -> None:
    # 20 000 steps of every model on a noisy image stay finite.
    image = disk_image(shape=(48, 48), centre=(24.1, 23.8), radius=9.0, noise=30.0, seed=11)
    drive = -0.3 if model == "constant" else 1.0
    front = Front.from_seeds(image, [(24, 24, 8)], model=model, drive=drive, convergence_tol=0.0)
    front.step(20000)
    assert np.all(np.isfinite(front.phi))
    assert front.steps == 20000
    if model in ("region", "window"):  # these hold the disk's outline
        assert not front.vanished and front.mask().sum() > 150
    if model == "constant":  # steady shrinking: the outline vanishes cleanly
        assert front.vanished and not front.mask().any() and front.contours() == []
