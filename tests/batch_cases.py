"""Shared pieces of the batch tests: a manifest of small sample cases and reading results back."""

from __future__ import annotations

import csv
import hashlib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
ABDOMEN = ROOT / "sample_cases" / "abdomen_mr"
HEAD = ROOT / "sample_cases" / "head_mr"

# Seeds from the sample cases' README tables (sample_cases/*/README.md): the slice where
# each structure is largest, at its deepest pixel; a few slices each so that a case takes
# about half a second and still carries outlines slice to slice.
GOOD_ROWS = [
    {"path": str(ABDOMEN / "dicom"), "label": "aorta", "seeds": "11:147,136,3", "model": "region",
     "slice": "10-12", "reference": str(ABDOMEN / "truth_dseg.nii.gz"), "case": "abdomen"},
    {"path": str(ABDOMEN / "image.nii.gz"), "label": "liver lesion", "seeds": "113,75,4", "model": "region",
     "slice": "15", "reference": str(ABDOMEN / "truth_dseg.nii.gz"), "case": "abdomen"},
    {"path": str(HEAD / "dicom"), "label": "tumour", "seeds": "50,102,4", "model": "region", "slice": "10",
     "reference": str(HEAD / "truth_dseg.nii.gz"), "case": "head"},
    {"path": str(HEAD / "image.nii.gz"), "label": "right lateral ventricle", "seeds": "7:64,71,3",
     "model": "region", "slice": "6-8", "smoothness": "1", "reference": str(HEAD / "truth_dseg.nii.gz"),
     "case": "head"},
]

COLUMNS = ["path", "label", "seeds", "model", "series", "slice", "window", "smoothness", "drive", "max_steps",
           "reference", "case"]


def write_manifest(path: Path, rows: list[dict]) -> Path:
    """A CSV manifest of ``rows``."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=COLUMNS)
        writer.writeheader()
        for row in rows:
            writer.writerow({k: row.get(k, "") for k in COLUMNS})
    return path


def mask_hashes(out: Path) -> dict[str, str]:
    """SHA-256 of every saved mask under ``out``, by ``label/name``."""
    return {p.relative_to(out).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(out.glob("*/*_dseg.nii.gz"))}


def read_summary(path: Path) -> dict[str, dict]:
    """summary.csv rows by ``label/case``."""
    with open(path, newline="", encoding="utf-8") as fh:
        return {f"{r['label']}/{r['case']}": r for r in csv.DictReader(fh)}
