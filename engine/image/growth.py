"""Growth from a click: a pixel-level flood from the seeds, bounded by the speed model.

A level-set front moves at most ``cfl`` node spacings a step, so a seed of a
few pixels needs hundreds of steps to cross a large structure and thousands
to follow a long thin one. The flood takes the front most of the way in a
few passes over the pixels, each a handful of whole-array operations; the
level set then finishes from its outline to sub-pixel accuracy (and decides
every pixel the flood left open).

Each pass keeps the pixels connected to the seeds that the model clearly
calls inside:

- where the pixels just outside the present region (beyond a rim, within a
  ring: the region model's local outside statistics) differ distinctly from
  the inside, darker or brighter, a pixel joins when the region speed of
  Chan & Vese against each such side, S = (2I − c_in − c_out) / (c_in −
  c_out), is at least ``CLEAR_INSIDE``: it lies at least three quarters of
  the way from that outside to the inside intensity (a pixel more than
  three quarters covered by the structure);
- elsewhere (the region is still surrounded by its own tissue) a pixel
  joins when it is within ``HOMOGENEITY`` noise deviations of the local
  inside mean (seeded region growing, Adams & Bischof 1994).

Where most of a pixel's neighbourhood is alike, it must also be alike in
the image averaged over ``CALM_SMOOTHING`` pixels: a neighbour a tenth of
the contrast away hides in the noise of single pixels, not in that average.

Where the smoothing hides the middle of a strip two or three pixels wide, the
means of the unsmoothed image along short segments through a pixel (the best
of ``LINE_DIRECTIONS``) stand in for it, in thin parts only (Ricci &
Perfetti 2007); pixels more than half inside along some segment and mostly
outside across it join those within ``BRIDGE_REACH`` steps (hysteresis,
Canny 1986), which carries the
flood along a strip at an angle to the pixel axes, whose middle passes the
segments' test on pieces joined through corners.

Means are local (Gaussian-weighted, the radius of the region model's local
statistics; the rim and ring at least the block the image resolves wide,
:func:`engine.image.resolution.resolved_block`); a smooth bias field slows the flood (the local mean lags
behind it) and the level set finishes. Pixels connect through faces only (a
one-pixel diagonal gap is not a path), and a pixel on an edge much steeper
than the region's own contrast is a mixture of two other tissues and waits
for the level set. A seed disk wider than the structure under it (a click
on a thin vessel) holds its surroundings too: the flood starts from the
tissue at the disk's centre only (:func:`seed_tissue`). Noise is the larger
of the estimate from the finest diagonal wavelet coefficients near the
seeds at the resolved pixel (Donoho & Johnstone 1994) and the spread of
that seed tissue's pixels and of what the region held a pass ago (noise
correlated between pixels hides from the finest coefficients; the pixels a
pass lets in do not loosen the test for their neighbours, or a leak feeds
itself); the image is
smoothed just enough that a quarter of the contrast found around the first
region is ``MARGIN`` noise deviations (no smoothing at high SNR, so strips
two pixels wide stay connected). The intensity-window model floods the
pixels whose smoothed intensity lies in the inner half of its window.

The flood only ever adds pixels the model would add, and stops short of any
boundary it is unsure of, so it never has to be undone: the level set only
moves the last pixel or so. A flood that takes the whole image (more than
``UNBOUNDED`` of it) has had its likeness test widened by a leak: it starts
again from the seeds, judging likeness by the noise figure alone, and gives
the seeds back only if that flood takes the whole image too.

References
----------
.. [1] R. Adams, L. Bischof, "Seeded region growing", IEEE Trans. Pattern
   Anal. Mach. Intell. 16(6) (1994) 641-647.
.. [2] D. L. Donoho, I. M. Johnstone, "Ideal spatial adaptation by wavelet
   shrinkage", Biometrika 81(3) (1994) 425-455 (noise σ = MAD / 0.6745 of
   the finest detail coefficients).
.. [3] T. F. Chan, L. A. Vese, "Active contours without edges", IEEE Trans.
   Image Process. 10(2) (2001) 266-277.
.. [4] S. Lankton, A. Tannenbaum, "Localizing region-based active
   contours", IEEE Trans. Image Process. 17(11) (2008) 2029-2039.
.. [5] E. Ricci, R. Perfetti, "Retinal blood vessel segmentation using line
   operators and support vector classification", IEEE Trans. Med. Imaging
   26(10) (2007) 1357-1365 (mean intensity along oriented line segments).
.. [6] J. Canny, "A computational approach to edge detection", IEEE Trans.
   Pattern Anal. Mach. Intell. 8(6) (1986) 679-698 (hysteresis: a low bar
   reached only through pixels connected to ones past a high bar).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage
from skimage.filters import threshold_otsu

from engine.front.constants import SIDE_SHARE
from engine.front.geometry import seed_disks
from engine.image.boxes import around_points, occupied_box, widened
from engine.image.coarse_start import block_mean, to_coarse
from engine.image.ring_statistics import core_and_ring

#: Models the flood serves (it follows their inside test).
GROWTH_MODELS = ("region", "window")
#: Region speed a pixel needs to join where the local outside is distinct.
CLEAR_INSIDE = 0.5
#: Noise deviations (of the smoothed image) from the local inside mean within
#: which a pixel joins where the local outside is not distinct.
HOMOGENEITY = 2.5
#: Noise deviations a quarter of the contrast must span for the chosen smoothing.
MARGIN = 3.0
#: Smoothings tried (Gaussian σ in units of the smallest pixel spacing), smallest first.
SMOOTHINGS = (0.0, 0.5, 1.0, 1.5, 2.0, 3.0)
#: Smoothing of the first pass (before the contrast is known).
FIRST_SMOOTHING = 1.0
#: Least smoothing (σ in pixels) of the homogeneity test where no side is distinct: an edge weaker
#: than three noise deviations at the pass's smoothing (a neighbour at a tenth of the contrast)
#: stands out once the noise is averaged over a few pixels.
CALM_SMOOTHING = 2.0
#: Share of a pixel's 5 × 5 neighbourhood alike at the pass's scale above which the calm test applies.
WIDE_SHARE = 0.6
#: Ring pixels beyond the inside mean on the far side from the image's outside mean count only
#: beyond this fraction of the difference of the two (noise-free images: partial-volume traces).
FAR_SIDE = 0.05
#: Least Gaussian weight of one side's ring pixels around a pixel for its local mean to count.
MIN_WEIGHT = 0.05
#: Noise deviations of the spread of a pixel's 3 × 3 neighbourhood above which (beyond twice the
#: weakest local contrast) the pixel counts as a mixture on a steep edge.
MIXTURE = 3.0
#: Passes at most that stay inside their box (passes that reach the side of their box widen it and
#: do not count: a channel 2 800 px long takes a few dozen).
MAX_PASSES = 40
#: Pixels (odd) of the segments whose means find strips thinner than the pass's smoothing, and their directions.
LINE_PIXELS = 9
LINE_DIRECTIONS = 16
#: Side of the neighbourhood (pixels) in which the segments' test must hold on less than half the pixels.
THIN_WINDOW = 7
#: Share of a side's contrast that the segments' noise at MARGIN deviations must stay within for them to count
#: (the bar itself lies three quarters of the way from the outside: 4.5 of their deviations above it).
LINE_SHARE = 0.5
#: Region speed the unsmoothed pixel itself needs for a segment's mean to count (a quarter of the way from the
#: outside to the inside): a gap of background between two parts of the structure is a line of outside
#: pixels, whose segments across the gap still average well inside.
OWN_PIXEL = -0.5
#: Region speed of a segment's mean (more than half the way from the outside to the inside) at which a pixel
#: within BRIDGE_REACH face steps of pixels that pass the segments' test joins them (a gap of two pixels in
#: a strip's middle is bridged from both sides; more lets the flood creep along the blurred rim of an organ).
BRIDGE_SPEED = 0.0
BRIDGE_REACH = 1
#: Region speed that such a pixel's least segment mean must stay below: across a strip the segment is mostly
#: outside (a quarter of the way at most), across an organ's rim it is half inside.
ACROSS_SPEED = -0.5
#: Side of the neighbourhood (pixels) in which such pixels and the flooded ones must make up less than half.
BRIDGE_WINDOW = THIN_WINDOW + 2
#: A pass that adds fewer pixels than this fraction of the region ends the flood.
SETTLED = 0.002
#: A seed disk whose pixels split into two groups whose means differ by more than this many noise deviations
#: holds two tissues: only the one at its centre starts the flood (:func:`seed_tissue`).
MIXED_SEED = 4.0
#: The pixels within this radius (pixels) of a seed's centre are the tissue it was put on.
CENTRE_RADIUS = 1.5
#: A disk of fewer pixels is kept whole.
MIN_MIXED_PIXELS = 9
#: A seed disk whose pixels spread (MAD × 1.4826) over more than this many noise deviations holds two tissues
#: too, however close partial volume brings the two groups' means (a vessel 3 px wide at SNR 4-5).
MIXED_SPREAD = 2.0
#: On an oversampled image the spread of the seed tissue's intensities within this many resolved blocks of each
#: seed's centre (at least its disk) gives the noise (:meth:`RegionGrowth._spread_pixels`): the radius of a seed a
#: click gives at the acquired pixel.
SPREAD_BLOCKS = 3
#: Half-side (pixels) of the box around each seed whose wavelet coefficients give the noise.
NOISE_BOX = 32
#: Holes of the region smaller than this (in pixels, 2-D; voxels in 3-D ×4) are filled.
SMALL_HOLE = 16
#: Box around the region in which a pass works: this many local radii beyond it (at least BOX_PAD pixels).
BOX_RADII = 4.0
BOX_PAD = 48
#: A region covering more than this fraction of the image has found no boundary.
UNBOUNDED = 0.9


def noise_level(image: NDArray[np.floating], centres: ArrayLike, *, half: int = NOISE_BOX) -> float:
    """Noise standard deviation of ``image`` near ``centres`` (pixel coordinates).

    The median absolute value of the finest diagonal Haar coefficients
    within ``half`` pixels of each centre, divided by 0.6745 (Donoho &
    Johnstone 1994): edges and smooth shading hardly touch these
    coefficients, so the figure is that of white noise. The median over the
    centres is returned.
    """
    img = np.asarray(image, dtype=float)
    figures = []
    for centre in np.atleast_2d(np.asarray(centres, dtype=float)):
        box = tuple(slice(max(int(c) - half, 0), min(int(c) + half, n)) for c, n in zip(centre, img.shape))
        block = img[box]
        block = block[tuple(slice(0, (n // 2) * 2) for n in block.shape)]
        if min(block.shape) < 2:
            continue
        detail = np.zeros([n // 2 for n in block.shape])
        for corner in np.ndindex(*(2,) * img.ndim):
            sign = -1.0 if sum(corner) % 2 else 1.0
            detail += sign * block[tuple(slice(c, None, 2) for c in corner)]
        detail /= 2.0 ** (img.ndim / 2.0)
        figures.append(float(np.median(np.abs(detail))) / 0.6745)
    return float(np.median(figures)) if figures else 0.0


def haar_noise(image: NDArray[np.floating], centres: ArrayLike, resolved: int = 1) -> tuple[float, float]:
    """Noise standard deviation of one resolved pixel near ``centres`` (pixel coordinates), from Haar coefficients.

    Two figures: :func:`noise_level` on the block means of the resolved
    block (``resolved`` pixels a side; the image itself at 1), and twice
    that on blocks twice as large. White noise reads alike on both (the
    mean of four independent values varies half as much, common practice);
    noise correlated over a pixel or two (a CT reconstruction kernel, lossy
    compression) hides from the finest coefficients, not from the next
    level's, though on a textured organ that level reads the texture too.
    Both are medians of coefficients over boxes around the seeds (Donoho &
    Johnstone 1994), so an edge in a seed's disk (a click wider than a thin
    vessel) does not count.
    """
    img = np.asarray(image, dtype=float)
    points = np.atleast_2d(np.asarray(centres, dtype=float))
    block = max(int(resolved), 1)
    # only the box the coefficients are read in, aligned to the larger blocks
    step = 2 * block
    box = around_points(points, NOISE_BOX * block, step, img.shape)
    img = img[box]
    points = points - [s.start for s in box]
    level = block_mean(img, block) if block > 1 else img
    finest = noise_level(level, to_coarse(points, block), half=NOISE_BOX)
    next_level = 2.0 * noise_level(block_mean(level, 2), to_coarse(points, step), half=NOISE_BOX // 2)
    return finest, next_level


def seed_tissue(image: NDArray[np.floating], seeds: NDArray[np.floating], noise: float,
                disks: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """The pixels of the seed disks (``disks``) in the tissue at each seed's centre.

    A click wider than the structure under it (a vessel, a strip, the rim of
    an organ) holds its surroundings too; a flood started from them takes
    the surroundings for inside. Where a disk's pixels split (Otsu's
    threshold, IEEE Trans. Syst. Man Cybern. 9(1) (1979) 62-66) into two
    groups whose means differ by more than ``MIXED_SEED`` noise deviations,
    or spread over more than ``MIXED_SPREAD`` of them, only the group of the
    pixels within ``CENTRE_RADIUS`` of its centre is kept, and of it the part
    connected through faces to them. A disk of one tissue (the two halves
    of its noise differ by about 1.6 deviations, and it spreads over one)
    is kept whole.
    """
    out = np.zeros(image.shape, dtype=bool)
    for seed in np.atleast_2d(seeds):
        radius = max(float(seed[-1]), 1.0)
        low = np.maximum(np.floor(seed[:-1] - radius).astype(np.int64), 0)
        high = np.minimum(np.ceil(seed[:-1] + radius).astype(np.int64) + 1, image.shape)
        if np.any(high <= low):
            continue
        box = tuple(slice(a, b) for a, b in zip(low, high))
        d2 = sum((axis - c) ** 2 for axis, c in zip(np.ogrid[box], seed[:-1]))
        disk = disks[box] & (d2 <= radius**2)
        values = image[box]
        kept = disk
        if disk.sum() >= MIN_MIXED_PIXELS:
            inside = values[disk]
            cut = float(threshold_otsu(inside))
            above = inside > cut
            spread = 1.4826 * float(np.median(np.abs(inside - np.median(inside))))
            if above.any() and (~above).any() and (
                    inside[above].mean() - inside[~above].mean() > MIXED_SEED * noise
                    or spread > MIXED_SPREAD * noise):
                centre = disk & (d2 <= min(CENTRE_RADIUS, radius) ** 2)
                if centre.any():
                    side = (values > cut) if np.median(values[centre]) > cut else (values <= cut)
                    labels, _ = ndimage.label(disk & side)
                    touching = np.unique(labels[centre & side])
                    touching = touching[touching > 0]
                    if len(touching):
                        kept = np.isin(labels, touching)
        out[box] |= kept
    return out


def smoothing_factor(sigma_px: NDArray[np.floating]) -> float:
    """Factor by which a Gaussian of σ (pixels, per axis) lowers the standard deviation of white noise.

    Σ w² of a sampled Gaussian ≈ Π 1/(2√π σ_i) (σ_i ≳ 0.5); 1 without smoothing.
    """
    s = np.asarray(sigma_px, dtype=float)
    if np.all(s <= 0):
        return 1.0
    return float(np.prod(1.0 / np.sqrt(2.0 * np.sqrt(np.pi) * np.maximum(s, 0.5))))


@dataclass
class RegionGrowth:
    """The flood from the seeds (see module docstring); one :meth:`step` is one pass.

    Parameters
    ----------
    image : 2-D or 3-D intensities.
    seeds : ``(..., radius_px)`` disks.
    spacing : pixel spacing in mm per axis.
    model : ``"region"`` or ``"window"``.
    window : ``(low, high)`` of the window model (its inner half is flooded).
    window_sigma_mm : smoothing of the window model's image (its Edge scale σ).
    local_radius_mm : radius of the local means (the region model's).
    rim_mm, ring_mm : outside pixels nearer the region than ``rim_mm`` are
        its blurred rim and do not count toward the local outside mean; only
        those within ``ring_mm`` more do.
    barrier : pixels never flooded (other labels' locked outlines), or None.
    resolved : the block (pixels) the image resolves
        (:func:`engine.image.resolution.resolved_block`): the rim and the ring
        are never narrower than it.
    """

    image: NDArray[np.floating]
    seeds: NDArray[np.floating]
    spacing: NDArray[np.floating]
    model: str = "region"
    window: tuple[float, float] | None = None
    window_sigma_mm: float = 1.0
    local_radius_mm: float = 6.0
    rim_mm: float = 1.5
    ring_mm: float = 3.0
    barrier: NDArray[np.bool_] | None = None
    resolved: int = 1
    inside: NDArray[np.bool_] = field(init=False, repr=False)
    passes: int = field(init=False, default=0)
    finished: bool = field(init=False, default=False)
    unbounded: bool = field(init=False, default=False)
    restarted: bool = field(init=False, default=False)  # a flood that reached the whole image started again
    noise: float = field(init=False, default=0.0)
    smoothing: float = field(init=False, default=FIRST_SMOOTHING)
    contrast: float = field(init=False, default=0.0)
    _first: bool = field(init=False, default=True, repr=False)  # still flooding with the first smoothing
    _widen: bool = field(init=False, default=False, repr=False)  # the last pass reached the side of its box
    _settling: int = field(init=False, default=0, repr=False)  # passes that stayed inside their box
    _per_box: dict = field(init=False, default_factory=dict, repr=False)  # what a pass reads of the image alone
    _previous: NDArray[np.bool_] | None = field(init=False, default=None, repr=False)  # the region a pass ago

    def __post_init__(self) -> None:
        self.image = np.asarray(self.image, dtype=float)
        self.seeds = np.atleast_2d(np.asarray(self.seeds, dtype=float))
        self.spacing = np.asarray(self.spacing, dtype=float).reshape(-1)
        if self.model not in GROWTH_MODELS:
            raise ValueError(f"model: the flood serves {', '.join(GROWTH_MODELS)}, got {self.model!r}")
        if self.model == "window" and self.window is None:
            raise ValueError("window: the window model's flood needs its (low, high)")
        self.inside = seed_disks(self.image.shape, self.seeds)
        if self.barrier is not None:
            self.barrier = np.asarray(self.barrier, dtype=bool)
            if self.barrier.shape != self.image.shape:
                raise ValueError(f"barrier: expected shape {self.image.shape}, got {self.barrier.shape}")
            self.inside &= ~self.barrier
        if not self.inside.any():
            raise ValueError("seeds: no pixel centre lies inside the seed disks")
        # a click wider than the structure under it holds the surroundings too: told apart by the
        # Haar figure of the noise, which an edge in the disk does not touch
        finest, next_level = haar_noise(self.image, self.seeds[:, :-1], self.resolved)
        haar = max(finest, next_level)
        if self.model == "region":
            self.inside = seed_tissue(self.image, self.seeds, haar, self.inside)
        self._seed_mask = self.inside.copy()
        # white noise from the finest resolved Haar level; noise correlated between pixels (a CT
        # reconstruction kernel, lossy compression) hides from it, not from the spread of the seed
        # tissue's own pixels
        tissue = self.image[self._spread_pixels(haar)]
        spread = 1.4826 * float(np.median(np.abs(tissue - np.median(tissue)))) if tissue.size >= 9 else 0.0
        self.noise = max(finest, spread)
        if self.model == "window":
            self.smoothing = self.window_sigma_mm / float(np.min(self.spacing))

    # ------------------------------------------------------------------ state
    @property
    def record(self) -> dict:
        """What the flood did, for provenance records."""
        out = {"method": "flood", "passes": self.passes, "pixels": int(self.inside.sum()),
               "noise": round(float(self.noise), 6), "smoothing_px": self.smoothing}
        if self.model == "region":
            out["contrast"] = round(float(self.contrast), 6)
        if self.restarted:
            out["restarted"] = True
        if self.unbounded:
            out["unbounded"] = True
        return out

    def step(self) -> bool:
        """One pass of the flood; returns True while it still grows (False once finished).

        A pass works on a box around the present region; a pass whose flood
        reaches the side of its box leaves the rest to the next pass (on a
        wider box), so no pass takes long on a large image.
        """
        if self.finished:
            return False
        before = int(self.inside.sum())
        grown, reached_box = self._pass()
        self.passes += 1
        added = int(grown.sum()) - before
        self._previous, self.inside = self.inside, grown
        if reached_box:
            self._widen = True  # the next box reaches twice as far around the region
        elif self._first:
            # the first smoothing has found the structure's surroundings: choose the smoothing
            self._first = False
            self._choose_smoothing()
            if self.model == "window":
                self.finished = True
        elif added <= SETTLED * before:
            self.finished = True
        if not reached_box:
            self._settling += 1
            self._widen = False
        if self._settling >= MAX_PASSES:
            self.finished = True
        if self.inside.sum() > UNBOUNDED * self.inside.size:
            if self.model == "region" and not self.restarted:  # the spread of a leak widened the test
                self._restart()
                return True
            # no boundary anywhere: the flood found nothing to stop at; give the seeds back
            self.inside = self._seed_mask.copy()
            self.unbounded = True
            self.finished = True
        if self.finished:
            self.inside = _fill_small_holes(self.inside, SMALL_HOLE * (4 if self.image.ndim == 3 else 1))
            if self.model == "region" and not self.unbounded:
                self.inside = self._fill_inside_holes()
            if self.barrier is not None:
                self.inside &= ~self.barrier
        return not self.finished

    def _restart(self) -> None:
        """Start again from the seeds, judging likeness by the noise figure alone.

        The spread of what the region holds widens the likeness test (noise
        correlated between pixels, texture, the profile across a vessel);
        once the flood has taken the whole image, a leak has widened it. The
        second flood keeps the smoothing and the contrast the first one chose
        (a leak during the first smoothing's passes leaves them to be chosen
        as the first flood would have).
        """
        self.inside = self._seed_mask.copy()
        self.restarted = True
        self._previous = None
        self._widen = False
        self._settling = 0
        self.finished = False

    def run(self) -> NDArray[np.bool_]:
        """All passes; the flooded region."""
        while not self.finished:
            self.step()
        return self.inside

    def _spread_pixels(self, haar: float) -> NDArray[np.bool_]:
        """The pixels whose spread gives the noise: the seeds' tissue, in disks of at least SPREAD_BLOCKS resolved blocks.

        An oversampled image (an interpolated reconstruction, a spline
        zoom) spreads each acquired pixel over a block of ``resolved``
        pixels a side: a seed disk of a few pixels then holds one or two
        acquired pixels, whose spread is not the noise's. Widened to a few
        blocks it holds what a seed of that radius holds at the acquired
        pixel. The region model keeps the tissue at the disks' centres
        (:func:`seed_tissue`, against the Haar figure ``haar``).
        """
        if self.resolved <= 1:
            return self._seed_mask
        seeds = self.seeds.copy()
        seeds[:, -1] = np.maximum(seeds[:, -1], SPREAD_BLOCKS * self.resolved)
        disks = seed_disks(self.image.shape, seeds)
        if self.barrier is not None:
            disks &= ~self.barrier
        return seed_tissue(self.image, seeds, haar, disks) if self.model == "region" else disks

    # ------------------------------------------------------------------ passes
    def _sigma_px(self, smoothing: float) -> NDArray[np.floating]:
        return smoothing * float(np.min(self.spacing)) / self.spacing

    def _smoothed_noise(self, smoothing: float) -> float:
        """The noise's deviation after smoothing by ``smoothing`` pixels (:func:`smoothing_factor`).

        On an oversampled image the noise is white only at the pixel it
        resolves: a Gaussian lowers it as one ``resolved`` times narrower
        would lower white noise.
        """
        return self.noise * smoothing_factor(self._sigma_px(smoothing) / max(int(self.resolved), 1))

    def _smoothed_image(self, smoothing: float, box: tuple[slice, ...]) -> NDArray[np.floating]:
        """The image smoothed by ``smoothing`` on ``box`` (filtered on the box widened by four σ, then cut)."""

        def smoothed() -> NDArray[np.floating]:
            if smoothing <= 0:
                return self.image[box]
            sigma = self._sigma_px(smoothing)
            reach = np.ceil(4.0 * sigma).astype(int)
            wide = tuple(slice(max(s.start - r, 0), min(s.stop + r, n))
                         for s, r, n in zip(box, reach, self.image.shape))
            cut = tuple(slice(s.start - w.start, s.stop - w.start) for s, w in zip(box, wide))
            return ndimage.gaussian_filter(self.image[wide], sigma, mode="nearest")[cut]

        return self._image_alone("smoothed", box, smoothing, smoothed)  # type: ignore[return-value]

    def _box(self) -> tuple[slice, ...]:
        """The part of the image a pass works on: the region's bounding box widened by BOX_RADII local radii."""
        tight = occupied_box(self.inside)
        pad = np.maximum(np.ceil(BOX_RADII * self.local_radius_mm / self.spacing), BOX_PAD).astype(int)
        if self._widen:  # the last pass reached its box: as far again as the region reaches
            pad = np.maximum(pad, np.array([s.stop - s.start for s in tight]))
        return widened(tight, pad, self.image.shape)

    def _pass(self) -> tuple[NDArray[np.bool_], bool]:
        """The region after one pass, and whether its flood reached the side of the pass's box."""
        box = self._box()
        region = self.inside[box]
        accept = self._accept(box, region)
        if self.barrier is not None:
            accept = accept & ~self.barrier[box]
        structure = ndimage.generate_binary_structure(self.image.ndim, 1)
        labels, _ = ndimage.label(accept | region, structure)
        held = np.unique(labels[self._seed_mask[box] | region])
        held = held[held > 0]
        grown_box = np.isin(labels, held)
        touches = [(s.start > 0 and grown_box.take(0, axis=i).any())
                   or (s.stop < n and grown_box.take(-1, axis=i).any())
                   for i, (s, n) in enumerate(zip(box, self.image.shape))]
        grown = self.inside.copy()
        grown[box] = grown_box
        return grown, any(touches)

    def _accept(self, box: tuple[slice, ...], region: NDArray[np.bool_]) -> NDArray[np.bool_]:
        """Pixels of ``box`` the model clearly calls inside, given the present ``region``."""
        if self.model == "window":
            low, high = self.window  # type: ignore[misc]
            smooth = self._smoothed_image(self.smoothing, box)
            centre, half = 0.5 * (low + high), 0.5 * (high - low)
            return (half - np.abs(smooth - centre)) / half >= CLEAR_INSIDE
        smoothing = FIRST_SMOOTHING if self._first else self.smoothing
        smooth = self._smoothed_image(smoothing, box)
        noise = max(self._smoothed_noise(smoothing), 1e-12)
        core, ring = self._core_and_ring(region, smoothing)
        if core.sum() >= 50 and not self.restarted:
            # what the region already holds varies this much (noise correlated between pixels
            # falls less under smoothing than white noise; texture; a bias field), over the pixels
            # it held a pass ago: the pixels the last pass let in do not loosen the test that
            # judges their neighbours (else a test loosened by a leak lets in more of it, pass by pass);
            # a flood started again after a leak judges by the noise figure alone (:meth:`_restart`)
            held = core if self._previous is None else core & self._previous[box]
            values = smooth[held if held.sum() >= 50 else core]
            noise = max(noise, 1.4826 * float(np.median(np.abs(values - np.median(values)))))
        radius_px = self.local_radius_mm / self.spacing
        core_weight = _gaussian_sum(core.astype(float), radius_px)  # shared by the pass's and the calm mean
        c_in = _local_mean(smooth, core, radius_px, weight=core_weight)
        outside_mean = float(smooth[~region].mean()) if (~region).any() else float(smooth.mean())
        inside_mean = float(smooth[core].mean())
        accept = np.ones(smooth.shape, dtype=bool)
        decided = np.zeros(smooth.shape, dtype=bool)
        ring_weight = _gaussian_sum(ring.astype(float), radius_px)
        weakest = np.full(smooth.shape, np.inf)  # the least contrast to a distinct side
        lines = self._line_means(box, smoothing)
        along = np.ones(smooth.shape, dtype=bool)  # clearly inside along some direction, against every side
        bridging = np.ones(smooth.shape, dtype=bool)  # more than half inside along some direction, against every side
        for side in (-1.0, 1.0):
            # what borders the region on this side of its intensity (darker, brighter), beyond noise
            far = np.sign(outside_mean - inside_mean) != side
            spread = max(3.0 * noise, FAR_SIDE * abs(inside_mean - outside_mean)) if far else 3.0 * noise
            beyond = ring & (side * (smooth - c_in) > spread)
            if not beyond.any():
                continue
            c_out, weight = _local_mean(smooth, beyond, radius_px, weights=True)
            # a side is a tissue where it makes up a good share of the ring, not where a few
            # pixels of the inside's own noise tail (or of a smooth bias) are beyond the spread
            distinct = (weight > MIN_WEIGHT) & (weight >= SIDE_SHARE * ring_weight)
            speed = (2.0 * smooth - c_in - c_out) / np.where(distinct, c_in - c_out, 1.0)
            accept &= ~distinct | (speed >= CLEAR_INSIDE)
            if lines is not None:
                raw = self.image[box]
                line = np.where(c_in > c_out, lines[1], lines[0])
                contrast = np.where(distinct, c_in - c_out, 1.0)
                # only against a side whose contrast the segments' noise cannot mimic (a weak edge
                # at a tenth of the contrast is left to the tests above)
                clear = LINE_SHARE * np.abs(c_in - c_out) >= MARGIN * self.noise / np.sqrt(LINE_PIXELS)
                line_speed = (2.0 * line - c_in - c_out) / contrast
                own = (2.0 * raw - c_in - c_out) / contrast
                along &= ~distinct | (clear & (line_speed >= CLEAR_INSIDE) & (own >= OWN_PIXEL))
                across = (2.0 * np.where(c_in > c_out, lines[0], lines[1]) - c_in - c_out) / contrast
                bridging &= ~distinct | (clear & (line_speed >= BRIDGE_SPEED) & (own >= OWN_PIXEL)
                                         & (across <= ACROSS_SPEED))
            decided |= distinct
            weakest = np.where(distinct, np.minimum(weakest, np.abs(c_in - c_out)), weakest)
        homogeneous = np.abs(smooth - c_in) < HOMOGENEITY * noise
        if smoothing < CALM_SMOOTHING and not decided.all():
            # also alike on a calmer scale: a weak edge hides in the pass's noise, not in the calm image's
            calm = self._smoothed_image(CALM_SMOOTHING, box)
            calm_noise = max(self._smoothed_noise(CALM_SMOOTHING), 1e-12)
            if core.sum() >= 50 and not self.restarted:
                values = calm[core]
                calm_noise = max(calm_noise, 1.4826 * float(np.median(np.abs(values - np.median(values)))))
            # (never stricter than a twentieth of the contrast: a noise-free image has no noise to average)
            tolerance = max(HOMOGENEITY * calm_noise, FAR_SIDE * abs(inside_mean - outside_mean))
            # only where most of the pixel's 5 × 5 neighbourhood is alike: the average of a strip a few
            # pixels wide takes in its background, and the strip would stop at its first narrowing
            wide = ndimage.uniform_filter(homogeneous.astype(float), size=5, mode="nearest") >= WIDE_SHARE
            calm_alike = ~wide | (np.abs(calm - _local_mean(calm, core, radius_px, weight=core_weight)) < tolerance)
            homogeneous &= calm_alike
            along &= calm_alike  # a weak neighbour is told apart on the calm scale, along any line or not
            bridging &= calm_alike
        if lines is not None:
            # and alike the inside along that line (seeded region growing on the segments' means):
            # a neighbour a tenth of the contrast away is not, though it lies well beyond CLEAR_INSIDE
            line = lines[1] if inside_mean > outside_mean else lines[0]
            along &= np.abs(line - c_in) < HOMOGENEITY * max(noise, self.noise / np.sqrt(LINE_PIXELS))
            # only in thin parts: where the segments' test holds over less than half of the pixel's
            # 7 × 7 neighbourhood (a strip 2-3 px wide), not across a whole neighbouring tissue
            along &= decided
            # (the flooded pixels do not count: the mouth of a strip leaving a flooded part is thin too)
            along &= ndimage.uniform_filter((along & ~region).astype(float), size=THIN_WINDOW, mode="nearest") < 0.5
            # where noise dims a strip, or it runs at an angle to the pixel axes, the segments' test may hold
            # on pieces of its middle joined only through corners or short gaps: pixels more than half
            # inside along some direction and mostly outside across it join them within BRIDGE_REACH face
            # steps (hysteresis, the low bar reached only from pixels past the high one; Canny 1986), in
            # thin parts only (with the flooded pixels, less than half of a BRIDGE_WINDOW² neighbourhood:
            # a strip 3 px wide at an angle, not a neighbouring tissue)
            bridging &= decided
            bridging &= ndimage.uniform_filter((bridging | region).astype(float), size=BRIDGE_WINDOW,
                                               mode="nearest") < 0.5
            accept |= ndimage.binary_dilation(along, iterations=BRIDGE_REACH, mask=bridging) | along
        accept = np.where(decided, accept, homogeneous)
        # a pixel on an edge steeper than twice the weakest contrast around the region (where
        # nothing is distinct yet: the contrast found around the first region) is a mixture of
        # two other tissues (the rim of a bone in soft tissue passes through the organ's
        # value): left to the level set
        spread = self._image_alone("spread", box, smoothing,
                                   lambda: _extreme3(smooth, np.maximum) - _extreme3(smooth, np.minimum))
        steep = spread > 2.0 * np.where(np.isfinite(weakest), weakest, self.contrast) + 2.0 * MIXTURE * noise
        return accept & ~steep

    def _line_means(self, box: tuple[slice, ...], smoothing: float
                    ) -> tuple[NDArray[np.floating], NDArray[np.floating]] | None:
        """Least and greatest mean of the unsmoothed image along LINE_PIXELS-pixel segments through each pixel.

        Over LINE_DIRECTIONS directions (2-D only). A strip two or three
        pixels wide loses its middle under the isotropic smoothing that the
        noise calls for (a 2 px strip smoothed by σ = 1 px keeps about 0.7
        of its contrast, below CLEAR_INSIDE's 0.75), not along its own
        direction: there the mean keeps its full contrast with the noise
        divided by √LINE_PIXELS (oriented line averages, the line detectors
        of vessel enhancement; Ricci & Perfetti 2007). None where the pass
        does not smooth, in 3-D, or where that noise at MARGIN deviations still
        spans more than LINE_SHARE of the contrast.
        """
        if self.image.ndim != 2 or smoothing <= 0 or self._first or not np.allclose(self.spacing, self.spacing[0]):
            return None
        if MARGIN * self.noise / np.sqrt(LINE_PIXELS) > LINE_SHARE * self.contrast:
            return None
        return self._image_alone("lines", box, smoothing, lambda: self._segment_extremes(box))

    def _image_alone(self, name: str, box: tuple[slice, ...], smoothing: float, make: Callable[[], object]) -> object:
        """What ``make()`` gives of the image alone on ``box`` at ``smoothing``, kept while the box stays.

        The passes that settle a flood work on one box (the region moves
        less than its pad), and the smoothed images, the segments' means and
        the neighbourhood spread read the image only: made once per box, not
        once per pass.
        """
        key = (name, smoothing, tuple((s.start, s.stop) for s in box))
        if key not in self._per_box:
            if any(k[2] != key[2] for k in self._per_box):
                self._per_box.clear()
            self._per_box[key] = make()
        return self._per_box[key]

    def _segment_extremes(self, box: tuple[slice, ...]) -> tuple[NDArray[np.floating], NDArray[np.floating]]:
        """Least and greatest mean of the unsmoothed image along the segments through each pixel of ``box``."""
        half = LINE_PIXELS // 2
        wide = tuple(slice(max(s.start - half, 0), min(s.stop + half, n)) for s, n in zip(box, self.image.shape))
        # the box and LINE_PIXELS // 2 pixels around it (repeating the image's edge beyond it)
        # (single precision: a mean of LINE_PIXELS values needs no more, and the sums run twice as fast)
        padded = np.pad(self.image[wide].astype(np.float32), [(half - (s.start - w.start), half - (w.stop - s.stop))
                                                              for s, w in zip(box, wide)], mode="edge")
        rows, cols = box[0].stop - box[0].start, box[1].stop - box[1].start
        low = np.full((rows, cols), np.inf, dtype=np.float32)
        high = np.full((rows, cols), -np.inf, dtype=np.float32)
        total = np.empty((rows, cols), dtype=np.float32)
        offsets = np.arange(-half, half + 1)
        for angle in np.arange(LINE_DIRECTIONS) * np.pi / LINE_DIRECTIONS:
            dr = np.rint(offsets * np.sin(angle)).astype(int)
            dc = np.rint(offsets * np.cos(angle)).astype(int)
            total.fill(0.0)
            for r, c in zip(dr, dc):
                np.add(total, padded[half + r:half + r + rows, half + c:half + c + cols], out=total)
            np.minimum(low, total, out=low)
            np.maximum(high, total, out=high)
        return low.astype(float) / LINE_PIXELS, high.astype(float) / LINE_PIXELS

    def _fill_inside_holes(self) -> NDArray[np.bool_]:
        """The region with its enclosed holes that the two-phase model clearly calls inside filled.

        A hole's median (at the pass's smoothing) against the medians of the
        region's core and of the ring around its outer outline: a hole whose
        region speed of Chan & Vese, S = (2I − c_in − c_out) / (c_in − c_out),
        is at least CLEAR_INSIDE lies on the inside's side of the structure's
        own edge (a brighter or darker patch of a textured organ, which the
        local test took for a neighbouring tissue); the level set keeps it
        whole either way, and would otherwise fill it inward from its rim, a
        quarter node spacing a step. A hole of the outside's intensity (the
        middle of a ring) stays open.
        """
        filled = _filled(self.inside)
        holes = filled & ~self.inside
        if not holes.any():
            return self.inside
        box = self._box()
        region, hole_box, whole = self.inside[box], holes[box], filled[box]
        smooth = self._smoothed_image(self.smoothing, box)
        core, _ = self._core_and_ring(region, self.smoothing)
        _, ring = self._core_and_ring(whole, self.smoothing)
        if not ring.any():
            return self.inside
        c_in, c_out = float(np.median(smooth[core])), float(np.median(smooth[ring]))
        noise = self._smoothed_noise(self.smoothing)
        if abs(c_in - c_out) <= 2.0 * MARGIN * noise:
            return self.inside  # no clear edge to the outside to measure the holes against
        labels, count = ndimage.label(hole_box)
        level = np.asarray(ndimage.median(smooth, labels, np.arange(1, count + 1)), dtype=float)
        speed = (2.0 * level - c_in - c_out) / (c_in - c_out)
        take = np.concatenate([[False], speed >= CLEAR_INSIDE])
        out = self.inside.copy()
        out[box] |= take[labels]
        return out

    def _core_and_ring(self, region: NDArray[np.bool_], smoothing: float
                       ) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
        """The region without its rim, and the ring of outside pixels beyond the rim (as the local statistics).

        Rim and ring are each at least a resolved block wide: in an image
        that resolves only blocks of several pixels an edge spreads over a
        block, and a narrower rim leaves its blurred part in the core (whose
        spread then loosens the test) while a narrower ring lies within it
        (and finds no distinct outside).
        """
        block = self.resolved * float(np.min(self.spacing))
        rim = max(self.rim_mm + 2.0 * smoothing * float(np.min(self.spacing)), block)
        core, ring = core_and_ring(region, self.spacing, rim=rim, outer=rim + max(self.ring_mm, block))
        return (core if core.any() else region), ring

    def _choose_smoothing(self) -> None:
        """The least smoothing at which a quarter of the contrast around the first region spans MARGIN noise deviations."""
        if self.model == "window":
            return
        box = self._box()
        region = self.inside[box]
        smooth = self._smoothed_image(FIRST_SMOOTHING, box)
        core, ring = self._core_and_ring(region, FIRST_SMOOTHING)
        self.contrast = abs(float(np.median(smooth[ring])) - float(np.median(smooth[core]))) if ring.any() else 0.0
        self.smoothing = SMOOTHINGS[-1]
        for s in SMOOTHINGS:
            if self._smoothed_noise(s) * MARGIN <= 0.25 * self.contrast:
                self.smoothing = s
                break


def _gaussian_sum(values: NDArray[np.floating], radius_px: NDArray[np.floating]) -> NDArray[np.floating]:
    """Gaussian-weighted sum of ``values`` around every pixel, as :func:`_local_mean` takes it."""
    radius = np.asarray(radius_px, dtype=float)
    block = max(1, int(np.min(radius) // 3))
    if block > 1 and min(values.shape) >= 4 * block:
        from engine.image.coarse_start import block_mean

        return _upsample_linear(ndimage.gaussian_filter(block_mean(values, block), radius / block, mode="constant"),
                                block, values.shape)
    return ndimage.gaussian_filter(values, radius, mode="constant")


def _local_mean(values: NDArray[np.floating], mask: NDArray[np.bool_], radius_px: NDArray[np.floating], *,
                weights: bool = False, weight: NDArray[np.floating] | None = None):
    """Gaussian-weighted mean of ``values`` over ``mask`` around every pixel (normalised convolution).

    Where the mask has no weight nearby the mean of the whole mask stands in.
    With ``weights`` the normalising weight is returned too; ``weight``
    gives it (``_gaussian_sum`` of the mask, shared by means over one mask).
    For radii of several pixels the two Gaussian sums are taken on a grid
    of blocks (about a third of the radius a side) and interpolated back:
    they are smooth on that scale, and the passes over a 1024² image cost a
    quarter.
    """
    m = mask.astype(float)
    w = _gaussian_sum(m, radius_px) if weight is None else weight
    s = _gaussian_sum(values * m, radius_px)
    fallback = float(values[mask].mean()) if mask.any() else float(values.mean())
    mean = np.where(w > 1e-6, s / np.maximum(w, 1e-12), fallback)
    return (mean, w) if weights else mean


def _extreme3(values: NDArray[np.floating], extreme: np.ufunc) -> NDArray[np.floating]:
    """Greatest (``np.maximum``) or least (``np.minimum``) value of each pixel's 3 × 3 (× 3) neighbourhood.

    As ``ndimage.maximum_filter`` / ``minimum_filter`` with ``size=3`` give
    it (the edge pixel stands for the one beyond it), axis by axis on
    shifted views: a sixth of their time.
    """
    out = values
    for axis in range(values.ndim):
        if values.shape[axis] < 2:
            continue
        before = tuple(slice(None, -1) if j == axis else slice(None) for j in range(values.ndim))
        after = tuple(slice(1, None) if j == axis else slice(None) for j in range(values.ndim))
        source, out = out, out.copy()
        extreme(out[after], source[before], out=out[after])  # with the neighbour before
        extreme(out[before], source[after], out=out[before])  # and the one after
    return out


def _upsample_linear(small: NDArray[np.floating], block: int, shape: tuple[int, ...]) -> NDArray[np.floating]:
    """Values of a block grid (block i centred on pixel block·i + (block − 1)/2) at every pixel, linearly, axis by axis."""
    out = small
    for axis, n in enumerate(shape):
        position = np.clip((np.arange(n) - 0.5 * (block - 1)) / block, 0.0, out.shape[axis] - 1.0)
        low = np.floor(position).astype(np.int64)
        high = np.minimum(low + 1, out.shape[axis] - 1)
        weight = (position - low).reshape([-1 if j == axis else 1 for j in range(out.ndim)])
        lower = np.take(out, low, axis=axis)  # (the products and their sum in place: no temporaries)
        lower *= 1.0 - weight
        upper = np.take(out, high, axis=axis)
        upper *= weight
        lower += upper
        out = lower
    return out


def _fill_small_holes(inside: NDArray[np.bool_], limit: int) -> NDArray[np.bool_]:
    """``inside`` with its holes (enclosed outside components) smaller than ``limit`` pixels filled."""
    box = _hole_box(inside)
    part = inside[box]
    holes = ndimage.binary_fill_holes(part) & ~part
    if not holes.any():
        return inside
    labels, count = ndimage.label(holes)
    sizes = np.bincount(labels.ravel(), minlength=count + 1)
    small = sizes < limit
    small[0] = False
    out = inside.copy()
    out[box] = part | small[labels]
    return out


def _filled(inside: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """``ndimage.binary_fill_holes(inside)``, filled on the bounding box of ``inside`` (see :func:`_hole_box`)."""
    box = _hole_box(inside)
    out = inside.copy()
    out[box] = ndimage.binary_fill_holes(inside[box])
    return out


def _hole_box(inside: NDArray[np.bool_]) -> tuple[slice, ...]:
    """The bounding box of ``inside`` one pixel wider (within the array): every hole lies in it.

    Its margin is outside and reaches the array's side outside the box, so
    the holes found in it are the holes of the whole array.
    """
    box = occupied_box(inside, 1)
    return tuple(slice(0, 0) for _ in inside.shape) if box is None else box
