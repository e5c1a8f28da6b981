"""Check a saved result against its sidecar: :func:`verify`.

What is checked, each mismatch reported as one line:

1. the sidecar is JSON and valid against the shipped JSON Schema;
2. its seal (hash of the document) still matches;
3. the edit history's hash chain is intact, from the inputs' anchor to
   ``HistoryHead``, and the review block agrees with the review steps the
   history records (:func:`engine.review.review_problems`);
4. the mask file's SHA-256, its voxel content, shape and geometry, and that
   its label values are in the table (with the recorded voxel counts);
5. the label table file's SHA-256 and that it lists the sidecar's labels;
6. the DICOM SEG's SHA-256, when one was written;
7. every input file that is still present hashes as recorded (missing inputs
   are noted, not counted as mismatches).

A save that a kill stopped during its renames is completed first (see
:mod:`engine.io.atomic`); a file that is not a result sidecar at all is
reported as unreadable, not as a mismatch.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from engine.io.geometry import nifti_affine_to_lps
from engine.io.hashing import chain_anchor, check_chain, sha256_file
from engine.io.sidecar import read_label_table_tsv, seal_sha256, validate_sidecar

__all__ = ["VerifyReport", "verify", "sidecar_path"]


@dataclass
class VerifyReport:
    """Outcome of :func:`verify`.

    Attributes
    ----------
    path : Path
        The sidecar checked.
    ok : bool
        True when nothing failed to match (and the sidecar was readable).
    readable : bool
        False when the sidecar is missing or is not an Isotide sidecar at all
        (bad input rather than a mismatch).
    problems : list of str
        What no longer matches, one line each.
    notes : list of str
        Things not checked and why (e.g. input files not present).
    checked : list of str
        What was checked and found matching.
    inputs_skipped : int
        Input files recorded but not checked (not present, or unreadable).
    """

    path: Path
    ok: bool = True
    readable: bool = True
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    checked: list[str] = field(default_factory=list)
    inputs_skipped: int = 0

    def fail(self, problem: str) -> None:
        self.ok = False
        self.problems.append(problem)

    def __str__(self) -> str:
        if self.ok:
            return f"OK: {self.path} ({len(self.checked)} checks passed)"
        return "\n".join([f"MISMATCH: {self.path}", *(f"  - {p}" for p in self.problems)])


def sidecar_path(path: str | os.PathLike[str]) -> Path:
    """The ``NAME_dseg.json`` for a sidecar, mask, label table, SEG or ``DIR/NAME`` path (any ``.json`` as it is)."""
    p = Path(os.fspath(path))
    name = p.name
    for suffix in ("_dseg.json", "_dseg.nii.gz", "_dseg.tsv", ".seg.dcm"):
        if name.endswith(suffix):
            return p.with_name(name[: -len(suffix)] + "_dseg.json")
    if name.lower().endswith(".json"):
        return p
    return p.with_name(name + "_dseg.json")


#: Keys every saved result's ``Isotide`` block has; a block with none of them is not a result.
_RESULT_KEYS = ("Seal", "Output", "History")


def _resolve(base: Path, stored: str) -> Path:
    p = Path(stored)
    return p if p.is_absolute() else base / p


def _check_file(report: VerifyReport, base: Path, entry: Any, what: str) -> Path | None:
    if not isinstance(entry, dict) or not isinstance(entry.get("Path"), str):
        report.fail(f"{what}: no file recorded")
        return None
    path = _resolve(base, entry["Path"])
    if not path.is_file():
        report.fail(f"{what} {entry['Path']}: file missing")
        return None
    try:
        actual = sha256_file(path)
    except OSError as exc:
        report.fail(f"{what} {entry['Path']}: cannot be read ({exc.strerror or exc})")
        return None
    if actual != entry.get("SHA256"):
        report.fail(f"{what} {entry['Path']}: SHA-256 differs from the sidecar (file changed)")
        return None
    report.checked.append(f"{what} SHA-256")
    return path


def _check_mask(report: VerifyReport, path: Path, block: dict[str, Any]) -> None:
    import nibabel as nib

    from engine.io.writer import voxel_sha256

    try:
        img = nib.load(str(path))
        data = np.asarray(img.dataobj)
    except Exception as exc:
        report.fail(f"mask {path.name}: cannot be read as NIfTI ({type(exc).__name__}: {exc})")
        return
    if data.ndim != 3 or not np.issubdtype(data.dtype, np.integer):
        report.fail(f"mask {path.name}: not a 3-D integer volume ({data.shape}, {data.dtype})")
        return
    labels = data.transpose(2, 1, 0)
    shape = list(block["Input"].get("Shape", []))
    if list(labels.shape) != shape:
        report.fail(f"mask {path.name}: shape {list(labels.shape)} differs from the input's {shape}")
        return
    if voxel_sha256(labels) != block["Output"].get("VoxelSHA256"):
        report.fail(f"mask {path.name}: voxel content differs from the recorded VoxelSHA256")
    else:
        report.checked.append("mask voxels")
    recorded = np.asarray(block["Input"].get("AffineLPS"), dtype=np.float64)
    actual = nifti_affine_to_lps(img.affine)
    if recorded.shape != (4, 4) or not np.allclose(actual, recorded, atol=1e-4, rtol=1e-6):
        report.fail(f"mask {path.name}: geometry (affine) differs from the input's recorded geometry")
    else:
        report.checked.append("mask geometry")
    counts = np.bincount(labels.ravel().astype(np.int64))
    table = {lab["Index"]: lab for lab in block.get("Labels", [])}
    strays = [int(v) for v in np.nonzero(counts)[0] if v != 0 and int(v) not in table]
    if strays:
        report.fail(f"mask {path.name}: label values {strays[:10]} are not in the sidecar's labels")
    for index, lab in table.items():
        n = int(counts[index]) if index < len(counts) else 0
        if n != lab.get("Voxels"):
            report.fail(f"mask {path.name}: label {index} has {n} voxels, the sidecar records {lab.get('Voxels')}")
    if not strays:
        report.checked.append("mask label values")


def _check_table(report: VerifyReport, path: Path, block: dict[str, Any]) -> None:
    try:
        rows = read_label_table_tsv(path.read_bytes())
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        report.fail(f"label table {path.name}: cannot be read ({exc})")
        return
    expected = [(lab["Index"], lab["Name"], lab["Abbreviation"], lab["Color"]) for lab in block.get("Labels", [])]
    actual = [(r["index"], r["name"], r["abbreviation"], r["color"]) for r in rows]
    if actual != expected:
        report.fail(f"label table {path.name}: rows differ from the sidecar's labels")
    else:
        report.checked.append("label table content")


def verify(path: str | os.PathLike[str]) -> VerifyReport:
    """Check a saved result against its sidecar (see the module docstring).

    Parameters
    ----------
    path : str or path-like
        ``NAME_dseg.json``, or the mask / label table / SEG of the result, or
        ``DIR/NAME``.

    Returns
    -------
    VerifyReport
        ``.ok`` and the list of ``.problems`` (human-readable, one per
        mismatch); ``.readable`` is False when the sidecar is missing or not
        an Isotide sidecar.
    """
    if not isinstance(path, (str, os.PathLike)):
        raise ValueError(f"path: expected a str or path-like, got {type(path).__name__}")
    sidecar = sidecar_path(path)
    report = VerifyReport(path=sidecar)
    name = sidecar.name
    if name.endswith("_dseg.json") and len(name) > len("_dseg.json"):
        from engine.io.errors import SaveError
        from engine.io.writer import finish_interrupted_save

        try:
            if finish_interrupted_save(sidecar.with_name(name[: -len("_dseg.json")])):
                report.notes.append("a save stopped during its renames was completed first (its journal was found)")
        except SaveError as exc:
            report.readable = False
            report.fail(str(exc))
            return report
    try:
        text = sidecar.read_text(encoding="utf-8")
    except FileNotFoundError:
        report.readable = False
        report.fail(f"{sidecar}: no such sidecar")
        return report
    except (OSError, UnicodeDecodeError) as exc:
        report.readable = False
        report.fail(f"{sidecar}: cannot be read ({getattr(exc, 'strerror', None) or exc})")
        return report
    try:
        doc = json.loads(text)
    except ValueError as exc:
        report.readable = False
        report.fail(f"{sidecar}: not JSON ({exc})")
        return report
    if not isinstance(doc, dict) or not isinstance(doc.get("Isotide"), dict):
        report.readable = False
        report.fail(f"{sidecar}: not an Isotide sidecar (no 'Isotide' block)")
        return report
    if not any(key in doc["Isotide"] for key in _RESULT_KEYS):
        report.readable = False
        report.fail(f"{sidecar}: not an Isotide result sidecar (its 'Isotide' block has no "
                    f"{', '.join(_RESULT_KEYS)})")
        return report
    block = doc["Isotide"]
    base = sidecar.parent

    schema_problems = validate_sidecar(doc)
    for problem in schema_problems:
        report.fail(problem)
    if not schema_problems:
        report.checked.append("schema")

    seal = block.get("Seal")
    if not isinstance(seal, dict) or seal.get("SHA256") != seal_sha256(doc):
        report.fail("sidecar: content differs from its seal (the JSON was edited after saving)")
    else:
        report.checked.append("sidecar seal")

    inputs = block.get("Input", {}).get("Files", []) if isinstance(block.get("Input"), dict) else []
    history = block.get("History", [])
    if isinstance(inputs, list) and isinstance(history, list):
        anchor = chain_anchor(str(f.get("SHA256")) for f in inputs if isinstance(f, dict))
        chain = check_chain(history, anchor=anchor)
        for problem in chain:
            report.fail(problem)
        head = history[-1].get("SHA256") if history and isinstance(history[-1], dict) else anchor
        if block.get("HistoryHead") != head:
            report.fail("history: HistoryHead does not match the last entry (entries removed or added)")
        elif not chain:
            report.checked.append(f"history hash chain ({len(history)} entries)")
        from engine.review.consistency import review_problems

        review = review_problems(block)
        for problem in review:
            report.fail(problem)
        if not review:
            report.checked.append("review record")

    output = block.get("Output") if isinstance(block.get("Output"), dict) else {}
    if isinstance(block.get("Input"), dict):
        mask = _check_file(report, base, output.get("Mask"), "mask")
        if mask is not None:
            _check_mask(report, mask, block)
    table = _check_file(report, base, output.get("LabelTable"), "label table")
    if table is not None:
        _check_table(report, table, block)
    if output.get("DicomSeg") is not None:
        _check_file(report, base, output.get("DicomSeg"), "DICOM SEG")

    present = 0
    for entry in inputs if isinstance(inputs, list) else []:
        if not isinstance(entry, dict) or not isinstance(entry.get("Path"), str):
            continue
        file = _resolve(base, entry["Path"])
        if not file.is_file():
            report.notes.append(f"input {entry['Path']}: not present, not checked")
            continue
        present += 1
        try:
            if sha256_file(file) != entry.get("SHA256"):
                report.fail(f"input {entry['Path']}: SHA-256 differs from the sidecar (input changed)")
        except OSError as exc:
            report.notes.append(f"input {entry['Path']}: cannot be read ({exc.strerror or exc}), not checked")
    if present:
        report.checked.append(f"{present} input file(s)")
    report.inputs_skipped = sum(1 for n in report.notes if n.startswith("input "))
    return report
