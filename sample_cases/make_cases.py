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

The phantoms themselves (smooth star-shaped structures in patient
millimetres, partial volume, bias field, Rician noise, truth labels) come
from :mod:`engine.phantoms.mr`; this script only writes them as DICOM, NIfTI,
PNG, JSON and Markdown. Everything is deterministic: a fixed random seed,
UIDs derived from fixed entropy sources with :func:`pydicom.uid.generate_uid`,
fixed dates. The patient is ``Phantom^Isotide``.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Sequence
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent

try:
    import engine.phantoms.mr  # noqa: F401  (installed package)
except ImportError:  # run from a source checkout without installing
    sys.path.insert(0, str(HERE.parent))

from engine.phantoms.mr import (  # noqa: E402
    Phantom,
    Tissue,
    abdomen_tissues,
    build_abdomen,
    build_head,
    head_tissues,
    label_table,
    suggest_seeds,
)

__all__ = ["write_case", "main"]


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
    table = label_table(ph.label_names)
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
