"""Invented slices for growth from a click: shapes, seeded random hazard families, and a real MR slice.

Every image is rendered with partial volume (each pixel holds the fraction
of it inside the shape, from sub-samples; ``tests/partial_volume.py``); the
truth is the shape at pixel centres. Seeds are disks of radius 3-5 px, what
a click gives. The tests and ``tests/bench/bench_growth.py`` share these.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage
from scipy.spatial import cKDTree

from partial_volume import partial_volume

#: Sub-samples per axis of the partial-volume rendering.
SUB = 4


@dataclass(frozen=True)
class Case:
    """One invented slice: image, pixel-centre truth, one seed disk ``(row, col, radius_px)``."""

    name: str
    image: np.ndarray
    truth: np.ndarray
    seed: tuple[float, float, float]
    spacing: tuple[float, float] = (1.0, 1.0)
    info: dict = field(default_factory=dict)


# ---------------------------------------------------------------- shapes
def polar_shape(centre: tuple[float, float], radius: Callable[[np.ndarray], np.ndarray]
                ) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """Inside test of the star-shaped region r < radius(θ) about ``centre`` (pixels)."""

    def inside(rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        y, x = rows - centre[0], cols - centre[1]
        return np.hypot(y, x) < radius(np.arctan2(y, x))

    return inside


def star_radius(mean: float, depth: float, arms: int, turn: float = 0.0) -> Callable[[np.ndarray], np.ndarray]:
    """r(θ) = mean·(1 + depth·cos(arms·(θ − turn))): arms reach mean·(1 + depth), valleys mean·(1 − depth)."""
    return lambda t: mean * (1.0 + depth * np.cos(arms * (t - turn)))


def blob_radius(rng: np.random.Generator, mean: float, roughness: float = 0.12, orders: int = 5
                ) -> Callable[[np.ndarray], np.ndarray]:
    """A random smooth closed outline: r(θ) = mean·(1 + Σ_k a_k cos(kθ + p_k)), k = 2..orders, |a_k| ~ roughness/k."""
    ks = np.arange(2, orders + 1)
    amp = roughness * rng.uniform(0.3, 1.0, len(ks)) / (ks / 2.0)
    phase = rng.uniform(0, 2 * np.pi, len(ks))
    return lambda t: mean * (1.0 + np.sum(amp[:, None] * np.cos(ks[:, None] * np.ravel(t)[None] + phase[:, None]),
                                          axis=0).reshape(np.shape(t)))


def render(shape: tuple[int, int], *parts: tuple[Callable, float], background: float = 0.0) -> np.ndarray:
    """Partial-volume image: ``background`` plus, for each ``(inside, value)``, value × the pixel's covered fraction.

    Later parts replace earlier ones where they overlap.
    """
    image = np.full(shape, float(background))
    for inside, value in parts:
        frac, _ = partial_volume(shape, lambda r, c, f=inside: f(r, c).astype(float), SUB)
        image = image * (1.0 - frac) + value * frac
    return image


def truth_of(shape: tuple[int, int], inside: Callable) -> np.ndarray:
    rows, cols = np.indices(shape, dtype=float)
    return np.asarray(inside(rows, cols), dtype=bool)


def deepest_point(truth: np.ndarray) -> tuple[float, float]:
    """The pixel farthest from the outside (centre of the largest inscribed disk)."""
    depth = ndimage.distance_transform_edt(truth)
    return tuple(float(v) for v in np.unravel_index(int(np.argmax(depth)), truth.shape))  # type: ignore[return-value]


# ---------------------------------------------------------------- growth shapes
def star(side: int = 256, *, noise: float = 0.05, seed: int = 0, seed_radius: float = 4.0) -> Case:
    """Five arms reaching 0.39·side from the centre, valleys at 0.16·side; contrast 1, noise σ (fraction of it)."""
    c = (side - 1) / 2.0 + 0.31
    inside = polar_shape((c, c), star_radius(0.275 * side, 0.42, 5, 0.3))
    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    return Case(f"star {side}", image, truth_of((side, side), inside), (c, c, seed_radius), info={"inside": inside})


def annulus(side: int = 256, *, noise: float = 0.05, seed: int = 0, seed_radius: float = 4.0) -> Case:
    """A ring of radii 0.33·side and 0.39·side, seeded at one point of the ring (the front must go round)."""
    c = (side - 1) / 2.0 + 0.27
    r1, r2 = 0.33 * side, 0.39 * side

    def inside(rows, cols):
        rad = np.hypot(rows - c, cols - c)
        return (rad > r1) & (rad < r2)

    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    return Case(f"annulus {side}", image, truth_of((side, side), inside), (c, c + 0.5 * (r1 + r2), seed_radius),
                info={"inside": inside})


def sine_path(side: int, amplitude: float, period: float, phase: float = 0.0) -> np.ndarray:
    """Points (row, col) along a sine across the image: ``amplitude`` and ``period`` as fractions of the side."""
    cols = np.linspace(0.08 * side, 0.92 * side, 8 * side)
    rows = side / 2.0 + amplitude * side * np.sin(2 * np.pi * cols / (period * side) + phase)
    return np.column_stack([rows, cols])


def channel_path(side: int) -> np.ndarray:
    """Points (row, col) along a winding path (two sine periods across the image)."""
    return sine_path(side, 0.3, 0.45)


def near_path(path: np.ndarray, width: float) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """Inside test of the tube ``width`` px wide around ``path`` (pixels)."""
    tree = cKDTree(path)

    def inside(rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        d, _ = tree.query(np.column_stack([np.ravel(rows), np.ravel(cols)]), workers=2)
        return (d <= width / 2.0).reshape(np.shape(rows))

    return inside


def channel(side: int = 256, *, width: float | None = None, noise: float = 0.05, seed: int = 0,
            seed_radius: float = 3.0) -> Case:
    """A channel ``width`` px wide (default side/42, 6 px at 256²) along a winding path, seeded at one end."""
    w = side / 42.0 if width is None else width
    path = channel_path(side)
    inside = near_path(path, w)
    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    length = float(np.sum(np.hypot(*np.diff(path, axis=0).T)))
    start = path[int(0.02 * len(path))]
    return Case(f"channel {side}", image, truth_of((side, side), inside), (start[0], start[1], seed_radius),
                info={"length_px": length, "width_px": w, "end": tuple(path[-1]), "inside": inside})


def ellipse(side: int = 256, *, noise: float = 0.125, seed: int = 0, seed_radius: float = 4.0,
            spacing: tuple[float, float] = (0.7, 1.0)) -> Case:
    """An ellipse with semi-axes 0.35·side and 0.2·side (pixels) on anisotropic pixels, SNR 8."""
    c = (side - 1) / 2.0 + 0.37
    a, b = 0.35 * side, 0.2 * side

    def inside(rows, cols):
        return ((rows - c) / a) ** 2 + ((cols - c) / b) ** 2 < 1.0

    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    return Case(f"ellipse {side}", image, truth_of((side, side), inside), (c + 0.2 * a, c, seed_radius), spacing,
                info={"inside": inside})


def convoluted(side: int = 256, *, noise: float = 0.05, seed: int = 0, seed_radius: float = 4.0) -> Case:
    """A blob whose outline carries many lobes (orders 2-24) of decreasing amplitude: a long convoluted boundary."""
    rng = np.random.default_rng(1000 + seed)
    c = (side - 1) / 2.0 + 0.21
    ks = np.arange(2, 25)
    amp = 0.22 * rng.uniform(0.4, 1.0, len(ks)) / np.sqrt(ks)
    phase = rng.uniform(0, 2 * np.pi, len(ks))

    def radius(t):
        t = np.asarray(t)
        return 0.3 * side * (1 + np.sum(amp[:, None] * np.cos(ks[:, None] * t.ravel()[None] + phase[:, None]),
                                         axis=0).reshape(t.shape) / 1.6)

    inside = polar_shape((c, c), radius)
    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    truth = truth_of((side, side), inside)
    r, col = deepest_point(truth)
    return Case(f"convoluted {side}", image, truth, (r, col, seed_radius), info={"inside": inside})


def strip(width: float, *, side: int = 256, length: float = 200.0, angle: float = 0.0, noise: float = 0.05,
          seed: int = 0) -> Case:
    """A disk of radius 14 px with a straight strip ``width`` px wide and ``length`` px long attached.

    The seed (radius 4) sits in the disk; ``angle`` (degrees) turns the strip off the column axis.
    """
    cy, cx = side / 2.0 + 0.3, 30.2
    a = np.deg2rad(angle)
    d = np.array([np.sin(a), np.cos(a)])

    def inside(rows, cols):
        y, x = rows - cy, cols - cx
        along = y * d[0] + x * d[1]
        across = -y * d[1] + x * d[0]
        bar = (along >= 0) & (along <= length) & (np.abs(across) <= width / 2.0)
        return bar | (np.hypot(y, x) < 14.0)

    image = render((side, side), (inside, 1.0)) + np.random.default_rng(seed).normal(0, noise, (side, side))
    far_end = (cy + length * d[0], cx + length * d[1])
    return Case(f"strip {width:g} px at {angle:g}°", image, truth_of((side, side), inside), (cy, cx, 4.0),
                info={"far_end": far_end, "direction": tuple(d), "inside": inside})


# ---------------------------------------------------------------- hazard families
def _place(rng: np.random.Generator, side: int, mean_radius: float) -> tuple[float, float]:
    margin = 1.45 * mean_radius + 6
    return (float(rng.uniform(margin, side - margin)), float(rng.uniform(margin, side - margin)))


def _seed_in(rng: np.random.Generator, truth: np.ndarray) -> tuple[float, float, float]:
    """A seed disk of radius 3-5 px, offset from the deepest point by up to 40 % of the inscribed radius."""
    depth = ndimage.distance_transform_edt(truth)
    radius = float(rng.uniform(3.0, 5.0))
    r0, c0 = deepest_point(truth)
    reach = 0.4 * depth[int(r0), int(c0)]
    for _ in range(50):
        ang, dist = rng.uniform(0, 2 * np.pi), rng.uniform(0, reach)
        r, c = r0 + dist * np.sin(ang), c0 + dist * np.cos(ang)
        if depth[int(round(r)), int(round(c))] > radius + 1.5:
            return (float(r), float(c), radius)
    return (r0, c0, radius)


def weak_edge(rng: np.random.Generator, side: int = 160) -> Case:
    """An object (contrast 1) with a neighbour touching a third to a half of its outline at 10-20 % of the contrast."""
    mean = rng.uniform(24, 38)
    centre = _place(rng, side, mean)
    obj = polar_shape(centre, blob_radius(rng, mean))
    weak = rng.uniform(0.10, 0.20)
    turn = rng.uniform(0, 2 * np.pi)
    normal = np.array([np.sin(turn), np.cos(turn)])
    cut = rng.uniform(0.0, 0.35) * mean

    def neighbour(rows, cols):  # a half-plane beyond a line through the object, outside the object
        return ((rows - centre[0]) * normal[0] + (cols - centre[1]) * normal[1] > cut) & ~obj(rows, cols)

    noise = rng.uniform(0.03, 0.05)
    image = render((side, side), (neighbour, 1.0 - weak), (obj, 1.0))
    image += rng.normal(0, noise, image.shape)
    truth = truth_of((side, side), obj)
    return Case("weak edge", image, truth, _seed_in(rng, truth), info={"weak": weak, "noise": noise})


def narrow_gap(rng: np.random.Generator, side: int = 160) -> Case:
    """An object and a same-intensity neighbour 1-2 px apart along a stretch of their outlines."""
    mean = rng.uniform(22, 32)
    centre = _place(rng, side, mean)
    r_obj = blob_radius(rng, mean, roughness=0.08)
    obj = polar_shape(centre, r_obj)
    gap = rng.uniform(1.0, 2.0)
    turn = rng.uniform(0, 2 * np.pi)
    normal = np.array([np.sin(turn), np.cos(turn)])
    reach = float(np.max(r_obj(np.linspace(0, 2 * np.pi, 720))))

    def neighbour(rows, cols):  # everything beyond the object's outline grown by `gap`, within a slab
        y, x = rows - centre[0], cols - centre[1]
        rad, ang = np.hypot(y, x), np.arctan2(y, x)
        return (rad >= r_obj(ang) + gap) & (y * normal[0] + x * normal[1] > 0.2 * mean) & (rad < reach + 25)

    noise = rng.uniform(0.04, 0.06)
    image = render((side, side), (neighbour, 1.0), (obj, 1.0)) + rng.normal(0, noise, (side, side))
    truth = truth_of((side, side), obj)
    return Case("narrow gap", image, truth, _seed_in(rng, truth), info={"gap": gap, "noise": noise})


def low_snr(rng: np.random.Generator, side: int = 160) -> Case:
    """An object with contrast 1 against Gaussian noise σ of 1/3 to 1/2 (SNR 2-3)."""
    mean = rng.uniform(26, 40)
    centre = _place(rng, side, mean)
    obj = polar_shape(centre, blob_radius(rng, mean, roughness=0.1, orders=4))
    snr = rng.uniform(2.0, 3.0)
    image = render((side, side), (obj, 1.0)) + rng.normal(0, 1.0 / snr, (side, side))
    truth = truth_of((side, side), obj)
    return Case("SNR 2-3", image, truth, _seed_in(rng, truth), info={"snr": snr})


def ct_bone(rng: np.random.Generator, side: int = 160) -> Case:
    """CT in HU: an organ (20-40 HU above soft tissue at 40 HU) touching a bone (700-1200 HU), body in air.

    Soft tissue 20-70 HU, cortical bone above 700 HU and air −1000 HU are
    common practice (from memory). Noise σ 5-8 HU.
    """
    mean = rng.uniform(24, 34)
    centre = (side / 2.0 + rng.uniform(-8, 8), side / 2.0 + rng.uniform(-8, 8))
    r_obj = blob_radius(rng, mean, roughness=0.1)
    organ = polar_shape(centre, r_obj)
    turn = rng.uniform(0, 2 * np.pi)
    normal = np.array([np.sin(turn), np.cos(turn)])
    far = float(np.max(r_obj(np.linspace(0, 2 * np.pi, 720))))
    thick = rng.uniform(6, 12)

    def bone(rows, cols):  # a slab of bone pressed against the organ along one side
        y, x = rows - centre[0], cols - centre[1]
        along = y * normal[0] + x * normal[1]
        across = -y * normal[1] + x * normal[0]
        return (along > 0.55 * mean) & (along < far + thick) & (np.abs(across) < 0.8 * mean)

    body = polar_shape((side / 2.0, side / 2.0), lambda t: 0.47 * side + 0 * t)
    contrast = rng.uniform(20, 40)
    bone_hu = rng.uniform(700, 1200)
    image = render((side, side), (body, 40.0), (organ, 40.0 + contrast), (bone, bone_hu), background=-1000.0)
    noise = rng.uniform(5, 8)
    image += rng.normal(0, noise, image.shape)
    rows, cols = np.indices((side, side), dtype=float)
    truth = organ(rows, cols) & ~bone(rows, cols)
    return Case("CT organ on bone", image, truth, _seed_in(rng, truth),
                info={"contrast_hu": contrast, "bone_hu": bone_hu, "noise_hu": noise})


def blurred(rng: np.random.Generator, side: int = 160) -> Case:
    """An object blurred by a Gaussian of σ 2-3 px (noise 3-5 % of the contrast added after the blur)."""
    mean = rng.uniform(24, 40)
    centre = _place(rng, side, mean)
    obj = polar_shape(centre, blob_radius(rng, mean))
    sigma = rng.uniform(2.0, 3.0)
    image = ndimage.gaussian_filter(render((side, side), (obj, 1.0)), sigma, mode="nearest")
    noise = rng.uniform(0.03, 0.05)
    image += rng.normal(0, noise, image.shape)
    truth = truth_of((side, side), obj)
    return Case("blur", image, truth, _seed_in(rng, truth), info={"blur_px": sigma, "noise": noise})


def dark_on_bright(rng: np.random.Generator, side: int = 160) -> Case:
    """A dark object (0.2-0.5) on a bright background (1), noise 3-6 % of the contrast."""
    mean = rng.uniform(22, 40)
    centre = _place(rng, side, mean)
    obj = polar_shape(centre, blob_radius(rng, mean))
    dark = rng.uniform(0.2, 0.5)
    noise = rng.uniform(0.03, 0.06) * (1.0 - dark)
    image = render((side, side), (obj, dark), background=1.0) + rng.normal(0, noise, (side, side))
    truth = truth_of((side, side), obj)
    return Case("dark on bright", image, truth, _seed_in(rng, truth), info={"dark": dark, "noise": noise})


#: Hazard families: name → case maker taking a seeded generator.
def clicked_vessel(rng: np.random.Generator, side: int = 256, *, snr: tuple[float, float] = (8.0, 15.0),
                   width: tuple[float, float] = (2.5, 4.0)) -> Case:
    """A winding vessel (contrast 1, ``width`` px wide) clicked anywhere along it with a seed disk of 3-5 px.

    The disk is wider than the vessel, so it holds the vessel's surroundings too. The path is a sine
    across the image (amplitude 0.15-0.3 side, period 0.3-0.6 side, random phase); the click lands within
    0.3 px (σ) of the path, anywhere from 2 % to 98 % of its length. One case per generator.
    """
    w = rng.uniform(*width)
    radius = rng.uniform(3.0, 5.0)
    noise = 1.0 / rng.uniform(*snr)
    amp, period, phase = rng.uniform(0.15, 0.3), rng.uniform(0.3, 0.6), rng.uniform(0.0, 2.0 * np.pi)
    path = sine_path(side, amp, period, phase)
    inside = near_path(path, w)
    image = render((side, side), (inside, 1.0)) + rng.normal(0, noise, (side, side))
    at = path[int(rng.uniform(0.02, 0.98) * len(path))] + rng.normal(0, 0.3, 2)
    return Case(f"vessel {w:.1f} px", image, truth_of((side, side), inside), (at[0], at[1], radius),
                info={"width_px": w, "snr": 1.0 / noise, "inside": inside})


def magnitude_noise(rng: np.random.Generator, side: int = 160, *, snr: tuple[float, float] = (3.0, 6.0)) -> Case:
    """An object (1) on a background of 0.1-0.3 in a magnitude image: Rician noise at SNR 3-6 (``snr``).

    An MR magnitude image is |signal + complex Gaussian noise| (Gudbjartsson & Patz, Magn. Reson. Med.
    34 (1995) 910-914): the noise is not Gaussian, and it lifts the dark background by about σ·√(π/2)
    where the signal is low, so the contrast is less than the signals' difference.
    """
    mean = rng.uniform(18, 34)
    centre = _place(rng, side, mean)
    obj = polar_shape(centre, blob_radius(rng, mean))
    sigma = 1.0 / rng.uniform(*snr)
    background = rng.uniform(0.1, 0.3)
    clean = render((side, side), (obj, 1.0), background=background)
    image = np.hypot(clean + rng.normal(0, sigma, clean.shape), rng.normal(0, sigma, clean.shape))
    truth = truth_of((side, side), obj)
    return Case(f"magnitude noise, SNR {snr[0]:g}-{snr[1]:g}", image, truth, _seed_in(rng, truth),
                info={"snr": 1.0 / sigma, "background": background})


def magnitude_noise_low_snr(rng: np.random.Generator, side: int = 160) -> Case:
    """As :func:`magnitude_noise` at SNR 2-3: contrast to noise 1.4-2.7, less after the background's Rician lift."""
    return magnitude_noise(rng, side, snr=(2.0, 3.0))


def concave_arc(rng: np.random.Generator, side: int = 160) -> Case:
    """A C-shaped arc 8-16 px wide bent through 180-306° (radius 0.28-0.4·side), clicked near one end, SNR 5-20.

    The front must travel round the bend from the click to the far end; the arc's inner side is concave.
    """
    centre = (side / 2.0 + rng.uniform(-6, 6), side / 2.0 + rng.uniform(-6, 6))
    radius, width = rng.uniform(0.28, 0.4) * side, rng.uniform(8.0, 16.0)
    span, turn = rng.uniform(1.0, 1.7) * np.pi, rng.uniform(0.0, 2.0 * np.pi)

    def inside(rows, cols):
        y, x = rows - centre[0], cols - centre[1]
        angle = np.mod(np.arctan2(y, x) - turn, 2.0 * np.pi)
        return (np.abs(np.hypot(y, x) - radius) < width / 2.0) & (angle < span)

    noise = 1.0 / rng.uniform(5.0, 20.0)
    image = render((side, side), (inside, 1.0)) + rng.normal(0, noise, (side, side))
    at = turn + rng.uniform(0.02, 0.15) * span
    seed = (centre[0] + radius * np.sin(at), centre[1] + radius * np.cos(at), float(rng.uniform(3.0, 5.0)))
    return Case("concave arc", image, truth_of((side, side), inside), seed,
                info={"width_px": width, "span_deg": float(np.degrees(span)), "snr": 1.0 / noise})


FAMILIES: dict[str, Callable[[np.random.Generator], Case]] = {
    "weak_edge": weak_edge,
    "narrow_gap": narrow_gap,
    "low_snr": low_snr,
    "ct_bone": ct_bone,
    "blur": blurred,
    "dark_on_bright": dark_on_bright,
    "magnitude_noise": magnitude_noise,
    "concave_arc": concave_arc,
}


def family(name: str, count: int = 10, seed: int = 2024) -> list[Case]:
    """``count`` cases of one hazard family, each from its own seeded generator."""
    make = FAMILIES[name]
    return [make(np.random.default_rng([seed, i])) for i in range(count)]


# ---------------------------------------------------------------- a real slice
#: pydicom's test file: an axial MR of an abdomen (300 × 484, 0.723 mm pixels), read with
#: pydicom.data.get_testdata_file; the liver lies in its left half.
def zoomed_disk() -> Case:
    """An oversampled slice: a disk on a 128² grid zoomed 2× by a cubic spline (``scipy.ndimage.zoom``).

    The disk has radius 30 native px, contrast 1 and Gaussian noise σ 0.1 (seeded); at 0.5 mm pixels the
    slice resolves blocks of 2 px. Truth: the zoomed disk at pixel centres (``skimage.draw.disk``);
    ``info["native"]``: the 128² slice before the zoom.
    """
    from skimage.draw import disk

    rng = np.random.default_rng(5)
    native = np.zeros((128, 128))
    native[disk((64, 60), 30, shape=native.shape)] = 1.0
    native += rng.normal(scale=0.1, size=native.shape)
    image = ndimage.zoom(native, 2, order=3)
    truth = np.zeros(image.shape, dtype=bool)
    truth[disk((128.5, 120.5), 60, shape=image.shape)] = True
    return Case("zoomed disk", image, truth, (128.0, 120.0, 4.0), (0.5, 0.5), info={"native": native})


MR_ABDOMEN_FILE = "examples_overlay.dcm"
#: The 256² crop around the liver (first row and column) and a click in the liver (row, col, radius px).
MR_LIVER_CROP = (20, 20)
MR_LIVER_SEED = (130.0, 70.0, 4.0)


def mr_liver(side: int = 256) -> Case:
    """The liver of that MR slice: a 256² crop, at ``side``² (cubic spline zoom beyond 256).

    No truth: nobody has drawn this liver's outline (its lower edge meets a
    large lesion and the right kidney).
    """
    import pydicom
    from pydicom.data import get_testdata_file

    ds = pydicom.dcmread(get_testdata_file(MR_ABDOMEN_FILE))
    r0, c0 = MR_LIVER_CROP
    image = ds.pixel_array.astype(float)[r0:r0 + 256, c0:c0 + 256]
    spacing = float(ds.PixelSpacing[0])
    factor = side / 256.0
    if factor != 1:
        image = ndimage.zoom(image, factor, order=3)
    r, c, radius = MR_LIVER_SEED
    seed = ((r + 0.5) * factor - 0.5, (c + 0.5) * factor - 0.5, radius)
    return Case(f"MR liver {side}", image, np.zeros(image.shape, dtype=bool), seed,
                (spacing / factor, spacing / factor), info={"source": f"pydicom test data {MR_ABDOMEN_FILE}"})
