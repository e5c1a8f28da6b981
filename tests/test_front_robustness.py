"""Invented phantoms where naive level sets fail: the defaults must hold the boundary."""

from __future__ import annotations

import numpy as np
import pytest

from engine.analysis.metrics import dice
from engine.segment import segment


def supersampled(shape: tuple[int, int], inside, sub: int = 4) -> np.ndarray:
    """Area fraction of each pixel for which ``inside(rows, cols)`` holds (partial volume)."""
    offs = (np.arange(sub) + 0.5) / sub - 0.5
    rr, cc = np.indices(shape, dtype=float)
    frac = np.zeros(shape)
    for dr in offs:
        for dc in offs:
            frac += inside(rr + dr, cc + dc)
    return frac / sub**2


def disk(centre, radius):
    return lambda r, c: (r - centre[0]) ** 2 + (c - centre[1]) ** 2 < radius**2


@pytest.mark.slow
def test_fading_edge_does_not_leak() -> None:
    # An object (200) whose neighbour on one side brightens to within 15 % of
    # the object's contrast (185 against a background of 100): global
    # Chan–Vese statistics would let the front run into the neighbour.
    shape = (120, 120)
    obj = supersampled(shape, disk((60, 60), 28.0))
    neighbour = supersampled(shape, lambda r, c: (c > 60) & ((r - 60) ** 2 + (c - 60) ** 2 >= 28.0**2) & (c < 112))
    image = 100.0 + 100.0 * obj + 85.0 * neighbour
    image += np.random.default_rng(5).normal(0.0, 4.0, shape)
    truth = obj > 0.5
    result = segment(image, [(60, 50, 8)], model="region")
    assert dice(result.mask, truth) >= 0.95
    assert result.mask[:, 92:].sum() < 20  # nothing of the neighbour's far side


def narrow_gap_phantom(scale: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Two same-intensity disks (radius 25·scale px) 1.5 px apart, noise σ = 6; returns image and left disk's fraction."""
    shape = (100 * scale, 140 * scale)
    a = supersampled(shape, disk((50 * scale, 45 * scale), 25.0 * scale))
    b = supersampled(shape, disk((50 * scale, 45 * scale + 50 * scale + 1.5), 25.0 * scale))
    image = 40.0 + 120.0 * np.clip(a + b, 0, 1) + np.random.default_rng(6).normal(0.0, 6.0, shape)
    return image, a


@pytest.mark.slow
def test_narrow_gap_to_a_same_intensity_neighbour() -> None:
    # Two touching-close disks of the same intensity, 1.5 px apart.
    image, a = narrow_gap_phantom()
    result = segment(image, [(50, 45, 8)], model="region")
    assert dice(result.mask, a > 0.5) >= 0.95
    assert result.mask[:, 75:].sum() == 0


@pytest.mark.slow
def test_outline_at_snr_two() -> None:
    # Contrast 20 against Gaussian noise σ = 10 (SNR 2).
    shape = (120, 120)
    obj = supersampled(shape, lambda r, c: ((r - 60) / 30.0) ** 2 + ((c - 60) / 22.0) ** 2 < 1)
    image = 100.0 + 20.0 * obj + np.random.default_rng(7).normal(0.0, 10.0, shape)
    result = segment(image, [(60, 60, 8)], model="region")
    assert dice(result.mask, obj > 0.5) >= 0.9


@pytest.mark.slow
def test_ct_soft_tissue_next_to_bone() -> None:
    # CT in Hounsfield units: an organ at 60 HU in tissue at 40 HU (20 HU
    # contrast, noise σ = 6 HU) touching a bone at 900 HU. Tissue values are
    # common practice (soft tissue 20-70 HU, cortical bone > 700 HU; from memory).
    shape = (140, 140)
    organ = supersampled(shape, lambda r, c: ((r - 70) / 28.0) ** 2 + ((c - 60) / 36.0) ** 2 < 1)
    bone = supersampled(shape, lambda r, c: ((r - 70) / 40.0) ** 2 + ((c - 112) / 9.0) ** 2 < 1) * (1 - organ)
    image = -1000.0 + 1040.0 * supersampled(shape, disk((70, 70), 66.0))  # body outline in air
    image += 20.0 * organ + 860.0 * bone
    image += np.random.default_rng(8).normal(0.0, 6.0, shape)
    result = segment(image, [(70, 60, 10)], model="region")
    assert dice(result.mask, organ > 0.5) >= 0.93
    assert not np.any(result.mask & (bone > 0.5))
