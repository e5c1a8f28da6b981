"""Generate Isotide's invented demo studies (synthetic phantoms, no real patients).

Run ``python sample_cases/make_cases.py`` from the repository root to (re)write

- ``sample_cases/abdomen_mr/``: an axial MR-like abdomen, 24 slices of 256 x 256
  (1.5625 mm pixels, 6 mm slices), uncompressed 16-bit DICOM series;
- ``sample_cases/head_mr/``: a coronal MR-like head, 16 slices of 160 x 160
  (1.5 mm pixels, 5 mm slices), DICOM series in RLE Lossless (decoded by
  pydicom itself, no extra codecs needed);

each with a NIfTI copy (``image.nii.gz``), one slice as a 16-bit PNG, the
noise-free ground-truth labels (``truth_dseg.nii.gz`` + ``truth_dseg.tsv``),
suggested seeds (``seeds.json``) and a README.

How the images are made: smooth star-shaped structures defined in patient
millimetres are rendered with area-averaged supersampling (partial volume at
every boundary), multiplied by a smooth bias field and corrupted by Rician
noise (the magnitude of a complex signal with Gaussian noise in both
channels). Everything is deterministic: a fixed random seed, UIDs derived
from fixed entropy sources with :func:`pydicom.uid.generate_uid`, fixed dates.
The patient is ``Phantom^Isotide``.

The truth label of a voxel is the structure at the voxel's centre, which is
the engine's own mask convention (a pixel is inside when the level set is
negative at its centre).

References
----------
.. [1] H. Gudbjartsson and S. Patz, "The Rician distribution of noisy MRI
   data", Magn. Reson. Med. 34(6) (1995) 910-914.
.. [2] J. G. Sled, A. P. Zijdenbos and A. C. Evans, "A nonparametric method for
   automatic correction of intensity nonuniformity in MRI data", IEEE Trans.
   Med. Imaging 17(1) (1998) 87-97 (smooth multiplicative bias fields).
"""

from __future__ import annotations

import json
import sys
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = [
    "Blob",
    "Tissue",
    "Phantom",
    "ABDOMEN_LABELS",
    "HEAD_LABELS",
    "render",
    "abdomen_tissues",
    "head_tissues",
    "make_abdomen_phantom",
    "make_head_phantom",
    "build_abdomen",
    "build_head",
    "suggest_seeds",
    "write_case",
    "main",
]

HERE = Path(__file__).resolve().parent

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

_ABBREVIATIONS = {
    "liver": "LIV", "spleen": "SPL", "right kidney": "KIDR", "left kidney": "KIDL", "aorta": "AO",
    "vertebral body": "VB", "liver lesion": "LES", "brain": "BRN", "right lateral ventricle": "VENR",
    "left lateral ventricle": "VENL", "tumour": "TUM",
}
_OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")


@dataclass(frozen=True)
class Blob:
    """A smooth star-shaped solid in patient LPS millimetres.

    A point p is inside when ``rho < 1 + sum_k a_k cos(k theta + phase_k)``,
    where ``q = R (p - center) / radii`` in the blob's own frame (rotation
    ``angle_deg`` about the plane normal ``axis``), ``rho = |q|`` and
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
    """A rendered phantom: image, truth and geometry."""

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


def _bias_field(
    affine: np.ndarray, shape: tuple[int, int, int], strength: float, rng: np.random.Generator
) -> np.ndarray:
    """exp of a random low-order polynomial in x, y, z with range about +-strength."""
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


def _rician(signal: np.ndarray, sigma: float, rng: np.random.Generator) -> np.ndarray:
    """Magnitude of signal + complex Gaussian noise (Gudbjartsson & Patz 1995)."""
    real = signal + rng.normal(0.0, sigma, size=signal.shape)
    imag = rng.normal(0.0, sigma, size=signal.shape)
    return np.hypot(real, imag)


def _centred_affine(shape: tuple[int, int, int], spacing: tuple[float, float, float], orientation: str) -> np.ndarray:
    """Index -> LPS affine of a stack centred on the origin."""
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
) -> Phantom:
    if len(shape) != 3 or min(shape) < 1:
        raise ValueError(f"shape: expected (slices, rows, cols) >= 1, got {shape!r}")
    if len(fov_mm) != 3 or min(fov_mm) <= 0:
        raise ValueError(f"fov_mm: expected three positive lengths, got {fov_mm!r}")
    if noise_sigma < 0 or bias < 0:
        raise ValueError("noise_sigma: and bias must be >= 0")
    spacing = tuple(float(f) / int(s) for f, s in zip(fov_mm, shape))
    affine = _centred_affine(shape, spacing, orientation)
    clean, truth = render(tissues, affine, shape, supersample=supersample, through_plane=min(3, supersample))
    rng = np.random.default_rng(seed)
    field_ = _bias_field(affine, shape, bias, rng)
    noisy = _rician(clean * field_, noise_sigma, rng) if noise_sigma > 0 else clean * field_
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
) -> Phantom:
    """The abdomen phantom with its geometry (see :func:`make_abdomen_phantom`)."""
    tissues = abdomen_tissues()
    return _make(tissues, shape, fov_mm, "axial", ABDOMEN_LABELS, seed=seed, noise_sigma=noise_sigma,
                 bias=bias, supersample=supersample)


def build_head(
    shape: tuple[int, int, int] = (16, 160, 160),
    *,
    fov_mm: tuple[float, float, float] = (80.0, 240.0, 240.0),
    seed: int = 20240612,
    noise_sigma: float = 16.0,
    bias: float = 0.15,
    supersample: int = 4,
) -> Phantom:
    """The coronal head phantom with its geometry (see :func:`make_head_phantom`)."""
    return _make(head_tissues(), shape, fov_mm, "coronal", HEAD_LABELS, seed=seed, noise_sigma=noise_sigma,
                 bias=bias, supersample=supersample)


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


def _uid(*parts: object) -> str:
    from pydicom.uid import generate_uid

    # pydicom's root prefix with a SHA-512 of fixed entropy sources: the same UIDs every run.
    return generate_uid(entropy_srcs=["isotide-sample-cases", *map(str, parts)])


def _write_dicom_series(
    folder: Path, ph: Phantom, *, case: str, description: str, windows: Sequence[tuple[float, float, str]],
    rle: bool,
) -> None:
    import pydicom
    from pydicom.dataset import Dataset, FileMetaDataset
    from pydicom.uid import ExplicitVRLittleEndian, MRImageStorage, RLELossless

    folder.mkdir(parents=True, exist_ok=True)
    for old in folder.glob("*.dcm"):
        old.unlink()
    n, rows, cols = ph.image.shape
    study, series, frame = _uid(case, "study"), _uid(case, "series"), _uid(case, "frame-of-reference")
    col_dir = ph.affine[:3, 2] / np.linalg.norm(ph.affine[:3, 2])
    row_dir = ph.affine[:3, 1] / np.linalg.norm(ph.affine[:3, 1])
    # Scanner-style numbering: instance 1 is the last slice along the normal,
    # so file order is not spatial order.
    for k in range(n):
        instance = n - k
        ds = Dataset()
        ds.file_meta = FileMetaDataset()
        ds.file_meta.MediaStorageSOPClassUID = MRImageStorage
        sop = _uid(case, "image", k)
        ds.file_meta.MediaStorageSOPInstanceUID = sop
        ds.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
        ds.SpecificCharacterSet = "ISO_IR 100"
        ds.ImageType = ["DERIVED", "SECONDARY", "PHANTOM"]
        ds.SOPClassUID = MRImageStorage
        ds.SOPInstanceUID = sop
        ds.StudyDate = ds.SeriesDate = ds.ContentDate = "20240101"
        ds.StudyTime = ds.SeriesTime = ds.ContentTime = "120000"
        ds.AccessionNumber = ""
        ds.Modality = "MR"
        ds.Manufacturer = "Isotide sample cases (synthetic)"
        ds.ReferringPhysicianName = ""
        ds.StudyDescription = "Isotide invented demo study"
        ds.SeriesDescription = description
        ds.PatientName = "Phantom^Isotide"
        ds.PatientID = f"ISOTIDE-{case.upper()}"
        ds.PatientBirthDate = ""
        ds.PatientSex = "O"
        ds.ScanningSequence = "SE"
        ds.SequenceVariant = "NONE"
        ds.ScanOptions = ""
        ds.MRAcquisitionType = "2D"
        ds.SliceThickness = f"{ph.spacing[0]:.4f}"
        ds.SpacingBetweenSlices = f"{ph.spacing[0]:.4f}"
        ds.RepetitionTime = "500"
        ds.EchoTime = "12"
        ds.EchoTrainLength = 1
        ds.StudyInstanceUID = study
        ds.SeriesInstanceUID = series
        ds.StudyID = "1"
        ds.SeriesNumber = 1
        ds.InstanceNumber = instance
        position = ph.affine @ np.array([k, 0.0, 0.0, 1.0])
        ds.ImagePositionPatient = [f"{v:.4f}" for v in position[:3]]
        ds.ImageOrientationPatient = [f"{v:.6f}" for v in (*col_dir, *row_dir)]
        ds.FrameOfReferenceUID = frame
        ds.PositionReferenceIndicator = ""
        ds.SliceLocation = f"{float(position[:3] @ np.cross(col_dir, row_dir)):.4f}"
        ds.SamplesPerPixel = 1
        ds.PhotometricInterpretation = "MONOCHROME2"
        ds.Rows, ds.Columns = rows, cols
        ds.PixelSpacing = [f"{ph.spacing[1]:.6f}", f"{ph.spacing[2]:.6f}"]
        ds.BitsAllocated = 16
        ds.BitsStored = 16
        ds.HighBit = 15
        ds.PixelRepresentation = 1
        ds.WindowCenter = [f"{c:g}" for c, _, _ in windows]
        ds.WindowWidth = [f"{w:g}" for _, w, _ in windows]
        ds.WindowCenterWidthExplanation = [e for _, _, e in windows]
        pixels = ph.image[k].astype("<i2")
        if rle:
            ds.compress(RLELossless, pixels, encoding_plugin="pydicom", generate_instance_uid=False)
        else:
            ds.PixelData = pixels.tobytes()
        pydicom.dcmwrite(folder / f"IM{instance:04d}.dcm", ds, enforce_file_format=True)


def _label_table(label_names: dict[int, str]) -> list[dict[str, object]]:
    return [
        {"index": i, "name": name, "abbreviation": _ABBREVIATIONS.get(name, name), "color": _OKABE_ITO[(i - 1) % 7]}
        for i, name in sorted(label_names.items())
    ]


def _nifti_bytes(data: np.ndarray, affine_lps: np.ndarray, *, dtype: type, intent: str | None) -> bytes:
    """Gzipped NIfTI-1 with (i, j, k) = (col, row, slice) and the LPS affine turned to RAS."""
    import gzip

    import nibabel as nib

    swap = np.array([[0, 0, 1, 0], [0, 1, 0, 0], [1, 0, 0, 0], [0, 0, 0, 1]], dtype=float)
    ras = np.diag([-1.0, -1.0, 1.0, 1.0]) @ affine_lps @ swap
    img = nib.Nifti1Image(np.asarray(data, dtype=dtype).transpose(2, 1, 0), ras)
    img.set_sform(ras, code=1)
    img.set_qform(ras, code=1)
    img.header.set_xyzt_units(xyz="mm")
    if intent:
        img.header.set_intent(intent)
    return gzip.compress(img.to_bytes(), compresslevel=9, mtime=0)


def _write_png(path: Path, pixels: np.ndarray) -> None:
    from PIL import Image

    Image.fromarray(np.clip(pixels, 0, 65535).astype(np.uint16)).save(path, optimize=True)


def _orientation_words(affine: np.ndarray) -> str:
    """Which patient direction rows, columns and slices run towards (LPS)."""
    names = (("right", "left"), ("anterior", "posterior"), ("foot", "head"))

    def towards(v: np.ndarray) -> str:
        axis = int(np.argmax(np.abs(v)))
        lo, hi = names[axis]
        return f"{lo} to {hi}" if v[axis] > 0 else f"{hi} to {lo}"

    cols = towards(affine[:3, 2])
    view = " (patient's right on the image's left)" if cols == "right to left" else ""
    return f"Rows run {towards(affine[:3, 1])}, columns {cols}{view}, slices {towards(affine[:3, 0])}."


def _readme(
    case: str, title: str, ph: Phantom, seeds: list[dict[str, object]], png_slice: int, extra: str,
    tissues: Sequence[Tissue],
) -> str:
    n, rows, cols = ph.image.shape
    lines = [
        f"# {title}",
        "",
        "An invented demo study made by `sample_cases/make_cases.py` (run it again to regenerate",
        "these files byte for byte). No real patient: the patient is `Phantom^Isotide`.",
        "",
        f"- `dicom/`: {n} MR-like slices of {rows} x {cols}, {ph.spacing[1]:g} x {ph.spacing[2]:g} mm pixels,",
        f"  {ph.spacing[0]:g} mm apart; {extra}",
        f"  {_orientation_words(ph.affine)}",
        "  Instance numbers run against the spatial order (instance 1 is the last slice),",
        "  file names follow the instance numbers.",
        "- `image.nii.gz`: the same volume as NIfTI-1 (int16).",
        f"- `slice_{png_slice:02d}.png`: slice {png_slice} as a 16-bit grey PNG (stored values).",
        "- `truth_dseg.nii.gz`, `truth_dseg.tsv`: the noise-free ground-truth labels (the",
        "  structure at each voxel centre) for Dice and boundary-error figures.",
        "- `seeds.json`: the seeds below, machine-readable.",
        "",
        "The image is rendered with area-averaged supersampling (partial volume at every",
        "boundary), a smooth multiplicative bias field and Rician noise "
        f"(sigma {ph.noise_sigma:g} per channel).",
        "Slices are numbered from 0 in spatial order along the slice normal, as",
        "`engine.io.load` returns them; rows and columns are pixel indices from 0.",
        "",
        "## Structures and where seeds belong",
        "",
        "| label | structure | slice | row | col | radius (px) | area on that slice (px) |",
        "|---|---|---|---|---|---|---|",
    ]
    for s in seeds:
        lines.append(
            f"| {s['label']} | {s['name']} | {s['slice']} | {s['row']} | {s['col']} "
            f"| {s['radius_px']:g} | {s['area_px']} |"
        )
    lines += [
        "",
        "Labels never overlap: where structures meet, the one listed later in the tissue table",
        "below wins (so, for example, a lesion or a ventricle is a hole in the organ around it).",
        "",
        "## Tissues (noise-free intensity before the bias field)",
        "",
        "| tissue | intensity | label |",
        "|---|---|---|",
        *(f"| {t.name} | {t.intensity:g} | {t.label or '-'} |" for t in tissues),
        "| air | 0 | - |",
        "",
        "Each seed sits on the slice where the structure is largest (near-ties: the one nearest",
        "the middle of the stack), at the pixel deepest inside it; any seed disk well inside",
        "the structure works.",
        "",
    ]
    return "\n".join(lines)


def write_case(
    folder: Path, ph: Phantom, *, case: str, title: str, description: str,
    windows: Sequence[tuple[float, float, str]], rle: bool, png_slice: int, tissues: Sequence[Tissue],
) -> dict[str, object]:
    """Write one case folder; return a summary (sizes in bytes)."""
    folder.mkdir(parents=True, exist_ok=True)
    _write_dicom_series(folder / "dicom", ph, case=case, description=description, windows=windows, rle=rle)
    (folder / "image.nii.gz").write_bytes(_nifti_bytes(ph.image, ph.affine, dtype=np.int16, intent=None))
    for old in folder.glob("slice_*.png"):
        old.unlink()
    _write_png(folder / f"slice_{png_slice:02d}.png", ph.image[png_slice])
    (folder / "truth_dseg.nii.gz").write_bytes(_nifti_bytes(ph.truth, ph.affine, dtype=np.uint8, intent="label"))
    table = _label_table(ph.label_names)
    tsv = ["index\tname\tabbreviation\tcolor"] + [
        f"{e['index']}\t{e['name']}\t{e['abbreviation']}\t{e['color']}" for e in table
    ]
    (folder / "truth_dseg.tsv").write_text("\n".join(tsv) + "\n", encoding="utf-8")
    seeds = suggest_seeds(ph.truth, ph.label_names)
    (folder / "seeds.json").write_text(
        json.dumps({"case": case, "label_table": table, "seeds": seeds}, indent=2) + "\n", encoding="utf-8"
    )
    extra = "RLE Lossless transfer syntax." if rle else "uncompressed (Explicit VR Little Endian)."
    (folder / "README.md").write_text(_readme(case, title, ph, seeds, png_slice, extra, tissues), encoding="utf-8")
    size = sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())
    return {"case": case, "folder": str(folder), "bytes": size, "seeds": seeds}


def main(argv: Sequence[str] | None = None) -> int:
    """Write both cases (next to this script unless ``--out DIR``) and print their sizes."""
    import argparse

    parser = argparse.ArgumentParser(description="Write Isotide's invented demo cases.")
    parser.add_argument("--out", type=Path, default=HERE, help="folder to write the case folders into")
    out = parser.parse_args(argv).out
    abdomen = build_abdomen()
    head = build_head()
    summaries = [
        write_case(
            out / "abdomen_mr", abdomen, case="abdomen_mr", title="Abdomen, axial MR-like phantom",
            description="Phantom abdomen axial T1-like", windows=((450, 900, "WIDE"), (480, 350, "ORGANS")),
            rle=False, png_slice=int(np.argmax((abdomen.truth > 0).sum(axis=(1, 2)))), tissues=abdomen_tissues(),
        ),
        write_case(
            out / "head_mr", head, case="head_mr", title="Head, coronal MR-like phantom",
            description="Phantom head coronal T1-like", windows=((400, 800, "WIDE"), (420, 400, "BRAIN")),
            rle=True, png_slice=int(np.argmax((head.truth == 4).sum(axis=(1, 2)))), tissues=head_tissues(),
        ),
    ]
    for s in summaries:
        print(f"{s['case']}: {s['bytes'] / 1e6:.2f} MB in {s['folder']}")
    print(f"total: {sum(int(s['bytes']) for s in summaries) / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
