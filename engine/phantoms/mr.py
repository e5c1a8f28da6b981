"""Invented MR-like phantoms: an axial abdomen and a coronal head.

The anatomy is a set of smooth star-shaped solids (:class:`Blob`) defined in
patient LPS millimetres and grouped into tissue classes (:class:`Tissue`),
each with a noise-free intensity and an optional label. :func:`render` turns
a tissue model into an image with partial volume at every boundary
(area-averaged supersampling) and into truth labels (the structure at each
voxel centre, which is the engine's own mask convention: a pixel is inside
when the level set is negative at its centre). :func:`build_abdomen` and
:func:`build_head` then multiply by a smooth bias field
(:func:`bias_field`) and add Rician noise (:func:`rician`), deterministically
from a fixed random seed.

No real patient went into any of this; the demo studies in ``sample_cases/``
and ``isotide demo`` are made from these functions.

References
----------
.. [1] H. Gudbjartsson and S. Patz, "The Rician distribution of noisy MRI
   data", Magn. Reson. Med. 34(6) (1995) 910-914.
.. [2] J. G. Sled, A. P. Zijdenbos and A. C. Evans, "A nonparametric method for
   automatic correction of intensity nonuniformity in MRI data", IEEE Trans.
   Med. Imaging 17(1) (1998) 87-97 (smooth multiplicative bias fields).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "Blob",
    "Tissue",
    "Phantom",
    "ABDOMEN_LABELS",
    "HEAD_LABELS",
    "ABBREVIATIONS",
    "LABEL_COLORS",
    "render",
    "bias_field",
    "rician",
    "centred_affine",
    "abdomen_tissues",
    "head_tissues",
    "build_abdomen",
    "build_head",
    "make_abdomen_phantom",
    "make_head_phantom",
    "suggest_seeds",
    "label_table",
]

#: Label index -> name of the abdomen phantom's structures.
ABDOMEN_LABELS: dict[int, str] = {
    1: "liver",
    2: "spleen",
    3: "right kidney",
    4: "left kidney",
    5: "aorta",
    6: "vertebral body",
    7: "liver lesion",
}

#: Label index -> name of the head phantom's structures.
HEAD_LABELS: dict[int, str] = {
    1: "brain",
    2: "right lateral ventricle",
    3: "left lateral ventricle",
    4: "tumour",
}

#: Structure name -> short abbreviation (label tables).
ABBREVIATIONS: dict[str, str] = {
    "liver": "LIV", "spleen": "SPL", "right kidney": "KIDR", "left kidney": "KIDL", "aorta": "AO",
    "vertebral body": "VB", "liver lesion": "LES", "brain": "BRN", "right lateral ventricle": "VENR",
    "left lateral ventricle": "VENL", "tumour": "TUM",
}

#: Label colours in label order: the Okabe-Ito colour-blind-safe palette
#: (M. Okabe and K. Ito, "Color Universal Design", 2008).
LABEL_COLORS = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")


@dataclass(frozen=True)
class Blob:
    """A smooth star-shaped solid in patient LPS millimetres.

    A point p is inside when ``rho < 1 + sum_k a_k cos(k theta + phase_k)``,
    where ``q = R (p - center) / radii`` in the blob's own frame (rotation
    ``angle_deg`` about the normal of ``plane``), ``rho = |q|`` and
    ``theta`` is the angle of q in the blob's in-plane axes.

    Attributes
    ----------
    center, radii : tuple of 3 float
        Centre and semi-axes along x (left), y (posterior), z (head), in mm.
    harmonics : tuple of (k, amplitude, phase)
        In-plane boundary ripples (keep amplitudes small for smooth shapes).
    angle_deg : float
        Rotation of the in-plane axes.
    plane : str
        ``"xy"`` (axial in-plane ripples) or ``"xz"`` (coronal).
    """

    center: tuple[float, float, float]
    radii: tuple[float, float, float]
    harmonics: tuple[tuple[int, float, float], ...] = ()
    angle_deg: float = 0.0
    plane: str = "xy"

    def inside(self, x: np.ndarray, y: np.ndarray, z: np.ndarray) -> np.ndarray:
        """Boolean array: which points are inside."""
        cx, cy, cz = self.center
        a = np.deg2rad(self.angle_deg)
        ca, sa = np.cos(a), np.sin(a)
        if self.plane == "xy":
            u, v, w = x - cx, y - cy, z - cz
        else:
            u, v, w = x - cx, z - cz, y - cy
        ur, vr = ca * u + sa * v, -sa * u + ca * v
        r = self.radii if self.plane == "xy" else (self.radii[0], self.radii[2], self.radii[1])
        qu, qv, qw = ur / r[0], vr / r[1], w / r[2]
        rho = np.sqrt(qu * qu + qv * qv + qw * qw)
        bound = np.ones_like(rho)
        if self.harmonics:
            theta = np.arctan2(qv, qu)
            for k, amp, phase in self.harmonics:
                bound = bound + amp * np.cos(k * theta + phase)
        return rho < bound


@dataclass(frozen=True)
class Tissue:
    """One tissue class: inside ``include`` and outside every ``exclude`` blob."""

    name: str
    intensity: float
    include: tuple[Blob, ...]
    exclude: tuple[Blob, ...] = ()
    label: int = 0

    def inside(self, x: np.ndarray, y: np.ndarray, z: np.ndarray) -> np.ndarray:
        mask = np.zeros(x.shape, dtype=bool)
        for blob in self.include:
            mask |= blob.inside(x, y, z)
        for blob in self.exclude:
            mask &= ~blob.inside(x, y, z)
        return mask


@dataclass
class Phantom:
    """A rendered phantom: image, truth and geometry.

    Attributes
    ----------
    image : ndarray of float32
        ``[slice, row, col]``, integer-valued (bias field and noise applied).
    truth : ndarray of uint8
        Label of the structure at each voxel centre (0 = none).
    spacing : tuple of float
        ``(slice, row, col)`` in mm.
    affine : (4, 4) ndarray
        Index ``(slice, row, col)`` to patient LPS mm.
    label_names : dict of int to str
        Label index -> structure name.
    noise_sigma : float
        Gaussian sigma per channel of the Rician noise.
    clean : ndarray of float32
        The partial-volume image before bias field and noise.
    """

    image: np.ndarray
    truth: np.ndarray
    spacing: tuple[float, float, float]
    affine: np.ndarray
    label_names: dict[int, str]
    noise_sigma: float
    clean: np.ndarray = field(repr=False, default_factory=lambda: np.zeros(0))


def _classify(tissues: Sequence[Tissue], x: np.ndarray, y: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Index (1-based) of the last tissue containing each point, 0 for air."""
    cls = np.zeros(x.shape, dtype=np.int16)
    for i, tissue in enumerate(tissues, start=1):
        cls[tissue.inside(x, y, z)] = i
    return cls


def render(
    tissues: Sequence[Tissue],
    affine: np.ndarray,
    shape: tuple[int, int, int],
    *,
    supersample: int = 4,
    through_plane: int = 3,
) -> tuple[np.ndarray, np.ndarray]:
    """Partial-volume image and centre-point labels of a tissue model.

    Each voxel's intensity is the mean over ``through_plane x supersample x
    supersample`` sub-voxel centres (area-averaged supersampling); its label
    is that of the tissue at the voxel centre.

    Parameters
    ----------
    tissues : sequence of Tissue
        Later tissues win where they overlap earlier ones.
    affine : (4, 4) array
        Index ``(slice, row, col)`` to LPS mm.
    shape : (int, int, int)
        ``(slices, rows, cols)``.
    """
    if supersample < 1 or through_plane < 1:
        raise ValueError("supersample: expected >= 1 sub-samples per axis")
    n, rows, cols = shape
    intensity = np.array([0.0] + [t.intensity for t in tissues], dtype=np.float64)
    labels = np.array([0] + [t.label for t in tissues], dtype=np.uint8)
    sub = (np.arange(supersample) + 0.5) / supersample - 0.5
    sub_z = (np.arange(through_plane) + 0.5) / through_plane - 0.5
    rr = (np.arange(rows)[:, None] + sub[None, :]).ravel()
    cc = (np.arange(cols)[:, None] + sub[None, :]).ravel()
    image = np.empty(shape, dtype=np.float64)
    truth = np.empty(shape, dtype=np.uint8)
    r_c, c_c = np.meshgrid(np.arange(rows, dtype=float), np.arange(cols, dtype=float), indexing="ij")
    for k in range(n):
        kk = k + sub_z[:, None, None]
        R = np.broadcast_to(rr[None, :, None], (through_plane, rr.size, cc.size))
        C = np.broadcast_to(cc[None, None, :], (through_plane, rr.size, cc.size))
        K = np.broadcast_to(kk, R.shape)
        x, y, z = (affine[i, 0] * K + affine[i, 1] * R + affine[i, 2] * C + affine[i, 3] for i in range(3))
        cls = _classify(tissues, x, y, z)
        values = intensity[cls].reshape(through_plane, rows, supersample, cols, supersample)
        image[k] = values.mean(axis=(0, 2, 4))
        xc, yc, zc = (affine[i, 0] * k + affine[i, 1] * r_c + affine[i, 2] * c_c + affine[i, 3] for i in range(3))
        truth[k] = labels[_classify(tissues, xc, yc, zc)]
    return image, truth


def bias_field(
    affine: np.ndarray, shape: tuple[int, int, int], strength: float, rng: np.random.Generator
) -> np.ndarray:
    """A smooth multiplicative bias field over a voxel grid.

    ``exp(strength * p / max|p|)`` for a random quadratic polynomial ``p`` in
    the patient coordinates x, y, z (scaled to about [-1, 1] and made
    zero-mean), so the field lies in ``[exp(-strength), exp(strength)]``.

    Parameters
    ----------
    affine : (4, 4) array
        Index ``(slice, row, col)`` to LPS mm.
    shape : (int, int, int)
        ``(slices, rows, cols)``.
    strength : float
        Half-range of the log field (0.2: about -18 % to +22 %).
    rng : numpy.random.Generator
        Draws the seven polynomial coefficients.

    References
    ----------
    .. [1] Sled, Zijdenbos & Evans, IEEE Trans. Med. Imaging 17(1) (1998) 87-97.
    """
    k, r, c = np.meshgrid(*(np.arange(s, dtype=float) for s in shape), indexing="ij")
    x, y, z = (affine[i, 0] * k + affine[i, 1] * r + affine[i, 2] * c + affine[i, 3] for i in range(3))
    scale = max(np.ptp(x), np.ptp(y), np.ptp(z), 1.0) / 2.0
    u, v, w = x / scale, y / scale, z / scale
    coeffs = rng.uniform(-1.0, 1.0, size=7)
    poly = (
        coeffs[0] * u + coeffs[1] * v + coeffs[2] * w + coeffs[3] * u * v
        + coeffs[4] * u * u + coeffs[5] * v * v + coeffs[6] * u * w
    )
    poly -= poly.mean()
    span = max(float(np.abs(poly).max()), 1e-12)
    return np.exp(strength * poly / span)


def rician(signal: np.ndarray, sigma: float, rng: np.random.Generator) -> np.ndarray:
    """Magnitude of ``signal`` plus complex Gaussian noise of ``sigma`` per channel.

    References
    ----------
    .. [1] Gudbjartsson & Patz, Magn. Reson. Med. 34(6) (1995) 910-914.
    """
    real = signal + rng.normal(0.0, sigma, size=signal.shape)
    imag = rng.normal(0.0, sigma, size=signal.shape)
    return np.hypot(real, imag)


def centred_affine(
    shape: tuple[int, int, int],
    spacing: tuple[float, float, float],
    orientation: str,
    *,
    offset_mm: float = 0.0,
) -> np.ndarray:
    """Index -> LPS affine of a stack centred on the origin.

    Parameters
    ----------
    shape : (int, int, int)
        ``(slices, rows, cols)``.
    spacing : (float, float, float)
        ``(slice, row, col)`` in mm.
    orientation : str
        ``"axial"`` (rows to posterior, columns to the patient's left, slices
        to the head) or ``"coronal"`` (rows to the feet, columns to the left,
        slices to posterior).
    offset_mm : float
        Shift of the stack's centre along the slice normal (e.g. to render one
        slice at a chosen height).
    """
    n, rows, cols = shape
    if orientation == "axial":
        col_dir, row_dir = np.array([1.0, 0, 0]), np.array([0, 1.0, 0])
    elif orientation == "coronal":
        col_dir, row_dir = np.array([1.0, 0, 0]), np.array([0, 0, -1.0])
    else:
        raise ValueError(f"orientation: expected 'axial' or 'coronal', got {orientation!r}")
    normal = np.cross(col_dir, row_dir)
    affine = np.eye(4)
    affine[:3, 0] = normal * spacing[0]
    affine[:3, 1] = row_dir * spacing[1]
    affine[:3, 2] = col_dir * spacing[2]
    centre = np.array([(n - 1) / 2, (rows - 1) / 2, (cols - 1) / 2, 1.0])
    affine[:3, 3] = -(affine @ centre)[:3]
    if offset_mm:
        affine[:3, 3] += normal * float(offset_mm)
    return affine


def abdomen_tissues() -> list[Tissue]:
    """Tissue model of the axial abdomen (x: patient left, y: posterior, z: head)."""
    body = Blob((0, 5, 0), (165, 118, 400), ((4, 0.04, np.pi), (2, 0.02, 0.4)))
    inner = Blob((0, 5, 0), (151, 105, 400), ((4, 0.04, np.pi), (2, 0.02, 0.4)))
    liver = Blob((-62, -8, 30), (82, 70, 95), ((2, 0.10, 0.6), (3, 0.05, 1.9), (5, 0.02, 0.3)), angle_deg=-20)
    spleen = Blob((92, 38, 38), (30, 50, 55), ((2, 0.08, 2.0), (3, 0.04, 0.2)), angle_deg=35)
    kidney_r = Blob((-62, 58, -22), (24, 36, 48), ((2, 0.05, 0.0), (3, 0.05, 3.1)), angle_deg=25)
    kidney_l = Blob((64, 60, -14), (24, 36, 48), ((2, 0.05, 0.0), (3, 0.05, 0.0)), angle_deg=-25)
    aorta = Blob((14, 30, 0), (11, 11, 2000))
    vertebra = Blob((0, 66, 0), (22, 19, 2000), ((2, 0.06, 0.0),))
    canal = Blob((0, 95, 0), (9, 8, 2000))
    lesion = Blob((-82, -22, 20), (14, 14, 14), ((3, 0.06, 0.5),))
    return [
        Tissue("subcutaneous fat", 820.0, (body,)),
        Tissue("muscle and soft tissue", 300.0, (inner,)),
        Tissue("spinal canal", 120.0, (canal,)),
        Tissue("liver", 520.0, (liver,), (), 1),
        Tissue("spleen", 390.0, (spleen,), (), 2),
        Tissue("right kidney", 440.0, (kidney_r,), (), 3),
        Tissue("left kidney", 440.0, (kidney_l,), (), 4),
        Tissue("aorta", 680.0, (aorta,), (), 5),
        Tissue("vertebral body", 720.0, (vertebra,), (), 6),
        Tissue("liver lesion", 240.0, (lesion,), (), 7),
    ]


def head_tissues() -> list[Tissue]:
    """Tissue model of the head, rippled in the coronal (x, z) plane."""
    scalp = Blob((0, 0, 10), (78, 95, 98), ((3, 0.02, 0.3),), plane="xz")
    skull = Blob((0, 0, 10), (72, 89, 92), ((3, 0.02, 0.3),), plane="xz")
    csf = Blob((0, 0, 10), (66, 83, 86), ((3, 0.02, 0.3),), plane="xz")
    brain = Blob((0, 0, 8), (63, 80, 82), ((4, 0.03, 0.8), (6, 0.015, 0.0)), plane="xz")
    vent_r = Blob((-13, 0, 22), (8, 30, 16), ((2, 0.12, 1.2),), angle_deg=-12, plane="xz")
    vent_l = Blob((13, 0, 22), (8, 30, 16), ((2, 0.12, 1.9),), angle_deg=12, plane="xz")
    tumour = Blob((34, 14, 44), (15, 13, 13), ((3, 0.08, 0.4), (5, 0.03, 1.0)), plane="xz")
    return [
        Tissue("scalp fat", 760.0, (scalp,)),
        Tissue("skull", 90.0, (skull,)),
        Tissue("cerebrospinal fluid", 160.0, (csf,)),
        Tissue("brain", 480.0, (brain,), (), 1),
        Tissue("right lateral ventricle", 150.0, (vent_r,), (), 2),
        Tissue("left lateral ventricle", 150.0, (vent_l,), (), 3),
        Tissue("tumour", 700.0, (tumour,), (), 4),
    ]


def _make(
    tissues: Sequence[Tissue],
    shape: tuple[int, int, int],
    fov_mm: tuple[float, float, float],
    orientation: str,
    label_names: dict[int, str],
    *,
    seed: int,
    noise_sigma: float,
    bias: float,
    supersample: int,
    offset_mm: float,
) -> Phantom:
    if len(shape) != 3 or min(shape) < 1:
        raise ValueError(f"shape: expected (slices, rows, cols) >= 1, got {shape!r}")
    if len(fov_mm) != 3 or min(fov_mm) <= 0:
        raise ValueError(f"fov_mm: expected three positive lengths, got {fov_mm!r}")
    if not noise_sigma >= 0:
        raise ValueError(f"noise_sigma: must be >= 0, got {noise_sigma!r}")
    if not bias >= 0:
        raise ValueError(f"bias: must be >= 0, got {bias!r}")
    if not np.isfinite(offset_mm):
        raise ValueError(f"offset_mm: must be finite, got {offset_mm!r}")
    spacing = tuple(float(f) / int(s) for f, s in zip(fov_mm, shape))
    affine = centred_affine(shape, spacing, orientation, offset_mm=offset_mm)
    clean, truth = render(tissues, affine, shape, supersample=supersample, through_plane=min(3, supersample))
    rng = np.random.default_rng(seed)
    field_ = bias_field(affine, shape, bias, rng)
    noisy = rician(clean * field_, noise_sigma, rng) if noise_sigma > 0 else clean * field_
    image = np.clip(np.rint(noisy), 0, 32767).astype(np.float32)
    return Phantom(image, truth, spacing, affine, dict(label_names), float(noise_sigma), clean.astype(np.float32))


def build_abdomen(
    shape: tuple[int, int, int] = (24, 256, 256),
    *,
    fov_mm: tuple[float, float, float] = (144.0, 400.0, 400.0),
    seed: int = 20240611,
    noise_sigma: float = 18.0,
    bias: float = 0.2,
    supersample: int = 4,
    offset_mm: float = 0.0,
) -> Phantom:
    """The abdomen phantom with its geometry (see :func:`make_abdomen_phantom`).

    ``offset_mm`` moves the stack's centre towards the head: for example
    ``build_abdomen((1, 256, 256), fov_mm=(6.0, 400.0, 400.0), offset_mm=33.0)``
    renders one slice at the height of slice 17 of the default 24-slice stack
    (same truth; the bias field and noise differ).
    """
    tissues = abdomen_tissues()
    return _make(tissues, shape, fov_mm, "axial", ABDOMEN_LABELS, seed=seed, noise_sigma=noise_sigma,
                 bias=bias, supersample=supersample, offset_mm=offset_mm)


def build_head(
    shape: tuple[int, int, int] = (16, 160, 160),
    *,
    fov_mm: tuple[float, float, float] = (80.0, 240.0, 240.0),
    seed: int = 20240612,
    noise_sigma: float = 16.0,
    bias: float = 0.15,
    supersample: int = 4,
    offset_mm: float = 0.0,
) -> Phantom:
    """The coronal head phantom with its geometry (see :func:`make_head_phantom`).

    ``offset_mm`` moves the stack's centre towards posterior.
    """
    return _make(head_tissues(), shape, fov_mm, "coronal", HEAD_LABELS, seed=seed, noise_sigma=noise_sigma,
                 bias=bias, supersample=supersample, offset_mm=offset_mm)


def make_abdomen_phantom(
    shape: tuple[int, int, int] = (24, 256, 256),
    *,
    fov_mm: tuple[float, float, float] = (144.0, 400.0, 400.0),
    seed: int = 20240611,
    noise_sigma: float = 18.0,
    bias: float = 0.2,
    supersample: int = 4,
) -> tuple[np.ndarray, np.ndarray, tuple[float, float, float], dict[int, str]]:
    """An invented MR-like axial abdomen.

    The anatomy is fixed in millimetres (field of view ``fov_mm``), so any
    ``shape`` shows the same structures at another resolution.

    Parameters
    ----------
    shape : (int, int, int)
        ``(slices, rows, cols)``; e.g. ``(1, 512, 512)`` for one large slice.
    fov_mm : (float, float, float)
        Extent along slice, row and column in mm (spacing = fov / shape).
    seed : int
        Seed of the bias field and the noise.
    noise_sigma : float
        Gaussian sigma of each channel before taking the magnitude (Rician).
    bias : float
        Half-range of the log bias field (0.2: about -18 % to +22 %).
    supersample : int
        Sub-samples per in-plane axis for partial volume (``min(3,
        supersample)`` through-plane); 1 gives point sampling.

    Returns
    -------
    image : ndarray of float32
        ``[slice, row, col]``, integer-valued (as stored in the demo DICOM).
    truth_labels : ndarray of uint8
        Structure at each voxel centre (0 = none), see :data:`ABDOMEN_LABELS`.
    spacing : tuple of float
        ``(slice, row, col)`` in mm.
    label_names : dict of int to str
        Label index -> structure name.
    """
    ph = build_abdomen(shape, fov_mm=fov_mm, seed=seed, noise_sigma=noise_sigma, bias=bias, supersample=supersample)
    return ph.image, ph.truth, ph.spacing, ph.label_names


def make_head_phantom(
    shape: tuple[int, int, int] = (16, 160, 160),
    *,
    fov_mm: tuple[float, float, float] = (80.0, 240.0, 240.0),
    seed: int = 20240612,
    noise_sigma: float = 16.0,
    bias: float = 0.15,
    supersample: int = 4,
) -> tuple[np.ndarray, np.ndarray, tuple[float, float, float], dict[int, str]]:
    """An invented MR-like coronal head; same conventions as :func:`make_abdomen_phantom`."""
    ph = build_head(shape, fov_mm=fov_mm, seed=seed, noise_sigma=noise_sigma, bias=bias, supersample=supersample)
    return ph.image, ph.truth, ph.spacing, ph.label_names


def suggest_seeds(truth: np.ndarray, label_names: dict[int, str]) -> list[dict[str, object]]:
    """One seed per label: on the slice where the label is largest (near-ties
    go to the slice nearest the middle), at the pixel deepest inside it
    (largest distance to the boundary), radius half that depth (1 to 8 px)."""
    from scipy import ndimage

    seeds = []
    middle = (truth.shape[0] - 1) / 2
    for index, name in sorted(label_names.items()):
        areas = (truth == index).sum(axis=(1, 2))
        if not areas.any():
            continue
        # Largest slice; among near-ties (within 5 %) the one nearest the middle.
        candidates = np.nonzero(areas >= 0.95 * areas.max())[0]
        k = int(candidates[np.argmin(np.abs(candidates - middle))])
        depth = ndimage.distance_transform_edt(truth[k] == index)
        r, c = np.unravel_index(int(np.argmax(depth)), depth.shape)
        seeds.append(
            {
                "label": index,
                "name": name,
                "slice": k,
                "row": int(r),
                "col": int(c),
                "radius_px": float(np.clip(np.floor(depth[r, c] / 2), 1, 8)),
                "area_px": int(areas[k]),
            }
        )
    return seeds


def label_table(label_names: dict[int, str]) -> list[dict[str, object]]:
    """Label table entries ``{"index", "name", "abbreviation", "color"}`` in index order.

    Colours follow :data:`LABEL_COLORS` by label index (label 1 orange, 2 sky
    blue, ...), abbreviations come from :data:`ABBREVIATIONS` (the name when
    unknown).
    """
    return [
        {"index": i, "name": name, "abbreviation": ABBREVIATIONS.get(name, name),
         "color": LABEL_COLORS[(i - 1) % len(LABEL_COLORS)]}
        for i, name in sorted(label_names.items())
    ]
