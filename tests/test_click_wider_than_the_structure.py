"""A click wider than the structure under it: the seed's own tissue and the flood's noise figure.

A seed disk of 3-5 px (what a click gives) on a vessel 3 px wide holds the
vessel's surroundings too. The flood must not start from the surroundings,
and its noise figure must not read the vessel's contrast as noise.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

import growth_phantoms as gp
from engine.analysis.metrics import dice
from engine.front.geometry import seed_disks
from engine.image.growth import MIXED_SEED, MIXED_SPREAD, RegionGrowth, haar_noise, noise_level, seed_tissue
from engine.segment import segment


def _haar(image: np.ndarray, centres: np.ndarray, resolved: int = 1) -> float:
    """The Haar figure that decides a click's tissue: the larger of the finest resolved level and the next."""
    return max(haar_noise(image, centres, resolved))


@pytest.mark.parametrize("kernel", [0.0, 0.5, 0.7, 1.0])
def test_the_haar_figure_reads_the_pixels_noise_beside_an_edge_through_the_seed(kernel: float) -> None:
    # White Gaussian noise, smoothed by a Gaussian of `kernel` px (a reconstruction kernel: noise correlated
    # between pixels), with a step of 5 noise deviations through the seed's centre; family of 10 draws.
    # The median of |Haar diagonal coefficients| / 0.6745 (Donoho & Johnstone, Biometrika 81 (1994)) at the
    # finest level and the next ignores the few coefficients on the edge and reads the pixel deviation
    # (np.std of the noise field) within [0.75, 1.4] (0.82-1.33 measured; the next level's box holds 256
    # coefficients); the finest level alone reads 0.39-0.45 of it at a kernel of 0.7 px and 0.20-0.23 at
    # 1 px (measured), which is why the next counts. The seed's tissue is told apart against this figure.
    rng = np.random.default_rng(40 + int(10 * kernel))
    ratios, finest = [], []
    for _ in range(10):
        field = rng.normal(size=(192, 192))
        if kernel:
            field = ndimage.gaussian_filter(field, kernel)
        sigma = float(field.std())
        image = field.copy()
        image[:, 96:] += 5.0 * sigma
        centre = np.array([[rng.uniform(80, 112), 96.3]])
        ratios.append(_haar(image, centre) / sigma)
        finest.append(haar_noise(image, centre)[0] / sigma)
    assert 0.75 <= min(ratios) and max(ratios) <= 1.4, ratios
    if kernel >= 0.7:
        assert max(finest) < 0.5, finest


def test_on_an_oversampled_image_the_noise_figure_is_the_resolved_pixels() -> None:
    # White noise σ on a 96² grid, zoomed 4× by a cubic spline (scipy.ndimage.zoom, pixel-centre
    # mapping): read on the block means of the resolved block (4 px), the figure is that of the
    # native pixels after the spline (measured against np.std of the native field through the
    # same zoom and block mean, within [0.8, 1.25]); the zoomed image's finest level reads a tenth.
    rng = np.random.default_rng(8)
    native = rng.normal(scale=0.2, size=(96, 96))
    image = ndimage.zoom(native, 4, order=3, grid_mode=True, mode="nearest")
    from engine.image.coarse_start import block_mean

    sigma = float(block_mean(image, 4).std())
    centre = np.array([[190.0, 170.0]])
    assert 0.8 <= _haar(image, centre, resolved=4) / sigma <= 1.25
    assert noise_level(image, centre) < 0.2 * sigma


def test_a_click_on_a_strip_keeps_only_the_strip() -> None:
    # A strip 3 px wide (contrast 1, SNR 8) clicked at its middle with disks of 3-5 px: the disk's
    # pixels split (Otsu) into the strip and its background; only pixels whose centre lies in the
    # strip, or within half a pixel of it (partial volume), are kept, and at least 60 % of the
    # strip's pixels in the disk. Family of 10 draws (angle, offset of the click, radius, noise).
    rng = np.random.default_rng(11)
    for i in range(10):
        angle = rng.uniform(0, 60)  # the strip runs right of its disk, within the image
        case = gp.strip(3.0, angle=angle, noise=1.0 / 8.0, seed=i)
        # halfway along the strip (its disk of radius 14 px lies at the seed growth_phantoms.strip gives)
        r, c = np.array(case.seed[:2]) + 100.0 * np.array(case.info["direction"])
        seed = np.array([[r + rng.uniform(-0.4, 0.4), c + rng.uniform(-0.4, 0.4), rng.uniform(3.0, 5.0)]])
        disks = seed_disks(case.image.shape, seed)
        noise = _haar(case.image, seed[:, :-1])
        kept = seed_tissue(case.image, seed, noise, disks)
        near = ndimage.binary_dilation(case.truth)  # within one face step of a pixel centred in the strip
        assert kept.any() and not (kept & ~near).any(), f"draw {i}"
        assert (kept & case.truth).sum() >= 0.6 * (disks & case.truth).sum(), f"draw {i}"
        assert (disks & ~near).any(), f"draw {i}: the disk held no background"


def test_a_click_on_a_strip_at_snr_4_to_5_keeps_only_the_strip_in_most_draws() -> None:
    # As above at SNR 4-5, where partial volume brings the two groups' means within MIXED_SEED
    # deviations: the disk's spread (MAD × 1.4826, common practice) over MIXED_SPREAD deviations
    # still tells two tissues apart. At least 8 of 10 draws keep only pixels within one face step of
    # the strip (8 measured; 0 with the means' test alone, which kept every disk whole).
    rng = np.random.default_rng(13)
    clean = 0
    for i in range(10):
        case = gp.strip(3.0, angle=rng.uniform(0, 60), noise=1.0 / rng.uniform(4.0, 5.0), seed=100 + i)
        r, c = np.array(case.seed[:2]) + 100.0 * np.array(case.info["direction"])
        seed = np.array([[r + rng.uniform(-0.4, 0.4), c + rng.uniform(-0.4, 0.4), rng.uniform(3.0, 5.0)]])
        disks = seed_disks(case.image.shape, seed)
        kept = seed_tissue(case.image, seed, _haar(case.image, seed[:, :-1]), disks)
        near = ndimage.binary_dilation(case.truth)
        clean += bool(kept.any() and not (kept & ~near).any()
                      and (kept & case.truth).sum() >= 0.6 * (disks & case.truth).sum())
    assert clean >= 8, clean


def test_a_click_inside_one_tissue_keeps_its_whole_disk_even_at_snr_2() -> None:
    # Pure noise at SNR 2 (σ 0.5 on a contrast of 1 elsewhere): the two Otsu halves of a disk of one
    # tissue differ by about 1.6 deviations (the means of the halves of a normal distribution,
    # ±0.8 σ; common statistics), far below MIXED_SEED, and its spread is about one deviation, below
    # MIXED_SPREAD, so the disk stays whole (family of 10).
    rng = np.random.default_rng(12)
    assert MIXED_SEED >= 3.0 and MIXED_SPREAD >= 1.5
    for i in range(10):
        image = 1.0 + rng.normal(scale=0.5, size=(64, 64))
        seed = np.array([[rng.uniform(20, 44), rng.uniform(20, 44), rng.uniform(3.0, 5.0)]])
        disks = seed_disks(image.shape, seed)
        kept = seed_tissue(image, seed, _haar(image, seed[:, :-1]), disks)
        assert np.array_equal(kept, disks), f"draw {i}"


def test_the_flood_reads_a_clicked_vessels_noise_not_its_contrast() -> None:
    # The noise figure is the larger of the finest Haar figure and the spread (MAD × 1.4826, common
    # practice) of the seed tissue's pixels. On the clicked-vessel family (SNR 8-15, noise 1/SNR known)
    # it reads at most 3 times the noise (1.04-2.51 measured: the tissue kept still holds partial-volume
    # pixels); the spread of the whole disk read 2.7-8 times, the vessel's contrast.
    for i in range(10):
        case = gp.clicked_vessel(np.random.default_rng([77, i]))
        flood = RegionGrowth(case.image, np.array([case.seed]), spacing=np.array(case.spacing))
        truth = 1.0 / case.info["snr"]
        assert 0.8 * truth <= flood.noise <= 3.0 * truth, f"draw {i}: {flood.noise:.3f} against {truth:.3f}"


def test_a_clicked_winding_vessel_fills_and_comes_to_rest() -> None:
    # Family of 10 winding vessels 2.5-4 px wide at SNR 8-15 (growth_phantoms.clicked_vessel), each
    # clicked anywhere along it with a disk of 3-5 px. Every one converges within 400 steps (62-108
    # measured; when the disk's spread stood in for the noise, 6 of 10 ran past 1 500) and fills its
    # vessel: Dice against the pixel-centre truth, whose partial-volume pixels weigh heavily on a vessel
    # 3 px wide, at least 0.92 at the 10th percentile and 0.90 for all (0.933-0.972 measured).
    scores, steps = [], []
    for i in range(10):
        case = gp.clicked_vessel(np.random.default_rng([77, i]))
        result = segment(case.image, [case.seed], spacing=case.spacing, max_steps=1500)
        assert result.converged, f"{case.name} (draw {i}): {result.steps} steps"
        scores.append(dice(result.mask, case.truth))
        steps.append(result.steps)
    assert max(steps) <= 400, steps
    assert np.percentile(scores, 10) >= 0.92 and min(scores) >= 0.90, scores


def test_a_flood_that_leaks_on_a_clicked_vessel_at_snr_4_to_6_starts_again_and_holds_the_vessel() -> None:
    # Family of 10 winding vessels 2.5-4 px wide at SNR 4-6 (growth_phantoms.clicked_vessel). Where the
    # likeness test is widened by the spread of what the region holds (for a vessel, which has no pixel
    # deeper than the rim, the profile across it), the flood takes a fringe and, in 2 draws of 10, leaks
    # into the whole image: the seeds were given back and the front crawled from them (Dice 0.60-0.61
    # after 1 500 steps). A flood that reaches the whole image starts again judging likeness by the noise
    # figure alone: no draw ends without a boundary, and every flood covers at least 95 % of its vessel
    # (0.994-1.000 measured) and stays within 1.5 px of it but for a few hundred pixels (26-343 measured,
    # of 1 300-2 900 flooded).
    restarted = []
    for i in range(10):
        case = gp.clicked_vessel(np.random.default_rng([78, i]), snr=(4.0, 6.0))
        flood = RegionGrowth(case.image, np.array([case.seed]), spacing=np.array(case.spacing))
        flood.run()
        assert not flood.unbounded, f"draw {i}: the seeds were given back"
        cover = np.sum(flood.inside & case.truth) / case.truth.sum()
        beyond = np.sum(flood.inside & (ndimage.distance_transform_edt(~case.truth) > 1.5))
        assert cover >= 0.95 and beyond <= 500, f"draw {i}: cover {cover:.3f}, {beyond} px beyond 1.5 px"
        restarted.append(flood.record.get("restarted", False))
    assert sum(restarted) == 2, restarted  # the two draws that leaked (5 and 8)


def test_a_clicked_winding_vessel_at_snr_4_to_6_is_held_at_two_nodes_a_pixel_and_comes_to_rest() -> None:
    # Family of 10 winding vessels 2.5-4 px wide at SNR 4-6 (growth_phantoms.clicked_vessel). The flood
    # takes a fringe of partial-volume pixels there, and on the two vessels 3.5-3.6 px wide its midline read
    # a pixel-centre half-width of 2.24 px (√5) in places, where the thin-part bar was 2.0: the front ran at
    # one node per pixel, could not hold a signed distance across the vessel (reinitialised every 40
    # steps as φ flattened) and never came to rest in 1 500 steps (Dice 0.961, 0.962). Every vessel of the
    # family is thin (two nodes per pixel), converges within 600 steps (93-477 measured) and is filled:
    # Dice against the pixel-centre truth at least 0.92 at the 10th percentile and 0.90 for all
    # (0.924-0.965 measured).
    scores, steps = [], []
    for i in range(10):
        case = gp.clicked_vessel(np.random.default_rng([78, i]), snr=(4.0, 6.0))
        result = segment(case.image, [case.seed], spacing=case.spacing, max_steps=800)
        assert result.params["detail"] == 2, f"draw {i}: detail {result.params['detail']}"
        assert result.converged, f"draw {i}: {result.steps} steps"
        scores.append(dice(result.mask, case.truth))
        steps.append(result.steps)
    assert max(steps) <= 600, steps
    assert np.percentile(scores, 10) >= 0.92 and min(scores) >= 0.90, scores
