"""The block size an image resolves (engine.image.resolution) and the fine tolerance it sets."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

import growth_phantoms as gp
from engine.analysis.metrics import dice
from engine.image.resolution import resolved_block
from engine.segment import segment


def _shaded_noise(rng: np.random.Generator, side: int) -> np.ndarray:
    """White Gaussian noise on a smooth shading (a bias field), one of a seeded random family."""
    rows, cols = np.mgrid[0:side, 0:side] / side
    shading = 5.0 * np.sin(rng.uniform(1, 3) * rows + rng.uniform(0, 3)) * np.cos(rng.uniform(1, 3) * cols)
    return 100.0 + shading + rng.normal(scale=rng.uniform(0.5, 3.0), size=(side, side))


def test_white_noise_is_resolved_at_the_pixel() -> None:
    # Mean of four independent values: its deviation is half a pixel's (common practice), so the
    # Haar coefficients of the 2× block means vary half as much and the block stays 1.
    rng = np.random.default_rng(12)
    found = [resolved_block(_shaded_noise(rng, 512), rng.uniform(100, 400, size=(1, 2))) for _ in range(10)]
    assert found == [1] * 10


@pytest.mark.parametrize(("zoom", "native", "expected"), [(2, 128, 2), (4, 128, 4), (2, 256, 2)])
def test_a_spline_zoomed_image_is_resolved_at_its_native_pixel(zoom: int, native: int, expected: int) -> None:
    # scipy.ndimage.zoom with a cubic spline adds no detail finer than the native pixel: the
    # finest coefficients fall far below those of the block means (family of 10 noise fields).
    rng = np.random.default_rng(7 + zoom)
    found = []
    for _ in range(10):
        image = ndimage.zoom(_shaded_noise(rng, native), zoom, order=3)
        found.append(resolved_block(image, rng.uniform(0.3, 0.7, size=(1, 2)) * image.shape[0]))
    assert found == [expected] * 10


def test_the_block_keeps_the_smallest_side_of_a_coarse_start() -> None:
    # A 160² image zoomed from 40² still works at full resolution: its block means would fall
    # below MIN_COARSE_SIDE (96) pixels a side.
    image = ndimage.zoom(_shaded_noise(np.random.default_rng(3), 40), 4, order=3)
    assert resolved_block(image, [(80.0, 80.0)]) == 1


def test_an_oversampled_slice_converges_at_a_fraction_of_its_native_pixel() -> None:
    # A disk (radius 30 native px, contrast 1, noise 0.1) on a 128² grid, zoomed 2× by a cubic spline:
    # the fine front's tolerance is the one asked for times the resolved block, both recorded, and the
    # outline still matches the disk (Dice against the zoomed truth, skimage.draw.disk).
    case = gp.zoomed_disk()
    result = segment(case.image, [case.seed], spacing=case.spacing)
    assert result.params["resolved_block"] == 2 and result.params["convergence_tol"] == 0.05
    assert result.converged and dice(result.mask, case.truth) >= 0.98
    plain = segment(case.info["native"], [(64.0, 60.0, 4.0)], spacing=(1.0, 1.0))
    assert "resolved_block" not in plain.params


@pytest.mark.parametrize("detail", [1, 2], ids=["same detail", "new detail"])
def test_a_later_tolerance_reaches_a_grown_front_times_the_resolved_block(detail: int) -> None:
    # A front grown in a session from seeds (through the Segmenter) holds the asked tolerance times the
    # resolved block (2 on this 2×-zoomed slice); a later change of the tolerance (with or without a new
    # detail, which rebuilds the front) keeps that block, as segment() applies it, and so does a change
    # of another setting while the tolerance is set, and going back to the default.
    from engine.session import Session

    case = gp.zoomed_disk()
    image, seed = case.image, case.seed
    s = Session.from_array(image, spacing=(0.5, 0.5))
    lab = s.add_label("structure").index
    s.seed(*seed, label=lab, slice=0)
    s.evolve(steps=4)  # the flood, then the front from it
    assert s._front is not None and s._front.params.convergence_tol == pytest.approx(0.1)
    s.set_params(convergence_tol=0.02, detail=detail)
    assert s._front.params.convergence_tol == pytest.approx(0.04)
    reference = segment(image, [seed], spacing=(0.5, 0.5), convergence_tol=0.02, max_steps=1)
    assert reference.params["resolved_block"] == 2
    assert 2 * reference.params["convergence_tol"] == pytest.approx(s._front.params.convergence_tol)
    s.set_params(smoothness=0.3)
    assert s._front.params.convergence_tol == pytest.approx(0.04)
    s.set_params(convergence_tol=None)
    assert s._front.params.convergence_tol == pytest.approx(0.1)


def test_the_flood_on_a_zoomed_slice_stays_in_the_structure_it_holds_at_half_the_zoom() -> None:
    # The liver of pydicom's test file examples_overlay.dcm (growth_phantoms.mr_liver: a 256² crop zoomed by a
    # cubic spline, ndimage.zoom), resolved at blocks of 4 and 8 pixels at 512² and 1024²: the 1024² flood
    # takes what the 512² flood takes, upsampled (Dice >= 0.95; the level set then finishes both), and stays
    # within the liver (under a fifth of the image; leaking through a notch it covered 87 %).
    from engine.segmenter import Segmenter

    floods = {}
    for side in (512, 1024):
        case = gp.mr_liver(side)
        segmenter = Segmenter(case.image, [case.seed], spacing=case.spacing)
        while segmenter.stage == "growing":
            segmenter.step(1)
        floods[side] = segmenter._growth.inside
    up = np.repeat(np.repeat(floods[512], 2, axis=0), 2, axis=1)
    assert floods[1024].mean() < 0.2
    assert dice(floods[1024], up) >= 0.95


def _oversampled_blob(rng: np.random.Generator, native: int = 112) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """An invented lobed blob (orders 2, 3, 5) with a soft edge and correlated noise, one of a seeded family.

    Returns the native image, the blob's centre (native px) and its pixel-centre truth.
    """
    rows, cols = np.mgrid[0:native, 0:native].astype(float)
    centre = native / 2 + rng.uniform(-5, 5, 2)
    r = np.hypot(rows - centre[0], cols - centre[1])
    t = np.arctan2(rows - centre[0], cols - centre[1])
    lobes = sum(rng.uniform(0, 0.12) * np.cos(k * t + rng.uniform(0, 6)) for k in (2, 3, 5))
    truth = r < native * rng.uniform(0.22, 0.3) * (1 + lobes)
    image = ndimage.gaussian_filter(truth.astype(float), rng.uniform(0.5, 1.2)) * rng.uniform(0.6, 1.0)
    image += ndimage.gaussian_filter(rng.normal(size=image.shape), 0.7) * rng.uniform(0.05, 0.15)
    return image, centre, truth


def test_an_oversampled_structure_is_outlined_alike_at_every_zoom() -> None:
    # A family of 8 invented blobs on 112² grids, zoomed 2× and 4× by a cubic spline (scipy.ndimage.zoom):
    # the image resolves blocks of the zoom, the front starts on the block mean at that block, converges,
    # and its outline is the native one (its mask upsampled, Dice >= 0.985 at the 10th percentile) and
    # the blob's (the native truth upsampled, Dice >= 0.98 for every case).
    agreement, accuracy = [], []
    for i in range(8):
        rng = np.random.default_rng([2026, i])
        native, centre, truth = _oversampled_blob(rng)
        offset = rng.uniform(-3, 3, 2)
        masks = {}
        for zoom in (1, 2, 4):
            image = native if zoom == 1 else ndimage.zoom(native, zoom, order=3)
            seed = (*((centre + 0.5) * zoom - 0.5 + offset), 4.0)
            result = segment(image, [seed], spacing=(1.0 / zoom, 1.0 / zoom))
            assert result.converged, f"case {i}, zoom {zoom}"
            assert result.params.get("resolved_block", 1) == zoom and result.params["coarse"] == zoom
            masks[zoom] = result.mask
        for zoom in (2, 4):
            up = np.kron(masks[1], np.ones((zoom, zoom), dtype=bool))
            agreement.append(dice(masks[zoom], up))
            accuracy.append(dice(masks[zoom], np.kron(truth, np.ones((zoom, zoom), dtype=bool))))
    assert np.percentile(agreement, 10) >= 0.985, agreement
    assert min(accuracy) >= 0.98, accuracy


def test_a_front_keeps_its_resolved_block_through_a_snapshot() -> None:
    # The block lives in the front's state: a front restored from a snapshot (a new object, as the
    # Session makes after undo) has it, and a block that is not a whole number >= 1 is refused.
    from engine.front import Front

    case = gp.zoomed_disk()
    image, seed = case.image, case.seed
    front = Front.from_seeds(image, [seed], spacing=(0.5, 0.5), model="region")
    front.set_resolved_block(2)
    front.step(3)
    copy = Front.from_seeds(image, [seed], spacing=(0.5, 0.5), model="region")
    copy.restore(front.snapshot())
    assert copy.resolved_block == 2
    for bad in (0, 1.5, True):
        with pytest.raises(ValueError, match="block must be a whole number"):
            front.set_resolved_block(bad)  # type: ignore[arg-type]
