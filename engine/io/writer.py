"""Save a labelled result: ``NAME_dseg.nii.gz``, ``NAME_dseg.tsv``,
``NAME_dseg.json`` and optionally ``NAME.seg.dcm``, all or nothing.

The mask is a NIfTI-1 integer volume (0 = background) stored ``[i, j, k] =
[col, row, slice]`` with the source geometry converted from LPS to RAS
(:mod:`engine.io.geometry`); sform and qform are both set (code 1,
scanner-based). The gzip stream carries no time stamp, so the same labels
and geometry always give the same bytes and the same SHA-256.
"""

from __future__ import annotations

import gzip
import hashlib
import json
import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import nibabel as nib
import numpy as np

from engine.io.atomic import commit_files, finish_interrupted
from engine.io.errors import ReviewedResultError
from engine.io.geometry import lps_affine_to_nifti
from engine.io.hashing import sha256_bytes
from engine.io.sidecar import (
    build_sidecar,
    label_table_tsv,
    normalise_label_table,
    seal_sidecar,
    sidecar_bytes,
    validate_sidecar,
)
from engine.io.volume import Volume

__all__ = [
    "save_result",
    "save_sidecar",
    "result_paths",
    "journal_path",
    "finish_interrupted_save",
    "check_replaceable",
    "voxel_sha256",
    "label_nifti_bytes",
    "as_label_volume",
]


def result_paths(prefix: str | os.PathLike[str]) -> dict[str, Path]:
    """File paths of the result ``prefix`` (= ``DIR/NAME``).

    Returns
    -------
    dict
        ``{"nifti": DIR/NAME_dseg.nii.gz, "tsv": DIR/NAME_dseg.tsv,
        "json": DIR/NAME_dseg.json, "seg": DIR/NAME.seg.dcm}``.
    """
    p = Path(os.fspath(prefix))
    name = p.name
    if not name or name in (".", ".."):
        raise ValueError(f"prefix: expected DIR/NAME, got {os.fspath(prefix)!r}")
    return {
        "nifti": p.with_name(f"{name}_dseg.nii.gz"),
        "tsv": p.with_name(f"{name}_dseg.tsv"),
        "json": p.with_name(f"{name}_dseg.json"),
        "seg": p.with_name(f"{name}.seg.dcm"),
    }


def journal_path(prefix: str | os.PathLike[str]) -> Path:
    """The journal a save of ``prefix`` (= ``DIR/NAME``) writes before its renames: ``DIR/.NAME_dseg.commit``.

    Only present while a save's renames run, or after a kill stopped them
    (see :mod:`engine.io.atomic`).
    """
    p = result_paths(prefix)["json"]
    return p.with_name(f".{p.name[: -len('.json')]}.commit")


def finish_interrupted_save(prefix: str | os.PathLike[str]) -> bool:
    """Complete a save of ``prefix`` that a kill stopped during its renames; True when there was one.

    Afterwards the result's files are the whole new set that save wrote.
    :func:`save_result`, :func:`save_sidecar` and :func:`engine.io.verify`
    call it first.

    Raises
    ------
    SaveError
        The journal is unreadable or a rename fails.
    """
    return finish_interrupted(journal_path(prefix))


def voxel_sha256(labels: np.ndarray) -> str:
    """SHA-256 of a label volume's content, independent of file encoding.

    Hashes ``"<slices>x<rows>x<cols>\\n"`` followed by the labels as
    little-endian uint16 in ``[slice, row, col]`` C order.
    """
    arr = np.ascontiguousarray(labels, dtype="<u2")
    h = hashlib.sha256(f"{arr.shape[0]}x{arr.shape[1]}x{arr.shape[2]}\n".encode("ascii"))
    h.update(arr.tobytes())
    return h.hexdigest()


def as_label_volume(labels: Any, shape: tuple[int, int, int], slice_index: int | None) -> np.ndarray:
    """Check ``labels`` and return them as an integer ``[slice, row, col]`` volume.

    Parameters
    ----------
    labels : array_like of int
        The volume's shape, or one 2-D ``(rows, cols)`` slice with
        ``slice_index`` (for a one-slice volume ``slice_index`` may be omitted).
    shape : tuple of int
        The volume's shape.
    slice_index : int or None
        Where a 2-D slice goes; other slices are background.

    Raises
    ------
    ValueError
        ``labels`` / ``slice_index``: wrong shape, type, sign or range.
    """
    arr = np.asarray(labels)
    if arr.dtype == bool:
        arr = arr.astype(np.uint8)
    if not np.issubdtype(arr.dtype, np.integer):
        raise ValueError(f"labels: expected an integer array, got {arr.dtype}")
    if arr.ndim == 2:
        if slice_index is None:
            if shape[0] != 1:
                raise ValueError("slice_index: needed when labels is one 2-D slice of a multi-slice volume")
            slice_index = 0
        if isinstance(slice_index, bool) or not isinstance(slice_index, (int, np.integer)):
            raise ValueError(f"slice_index: expected an int, got {slice_index!r}")
        if not 0 <= int(slice_index) < shape[0]:
            raise ValueError(f"slice_index: {slice_index} outside 0..{shape[0] - 1}")
        if arr.shape != shape[1:]:
            raise ValueError(f"labels: slice shape {arr.shape} differs from the volume's {shape[1:]}")
        full = np.zeros(shape, dtype=np.uint16)
        full[int(slice_index)] = arr
        arr_min = int(arr.min()) if arr.size else 0
        if arr_min < 0 or (arr.size and int(arr.max()) > 65535):
            raise ValueError("labels: values must lie in 0..65535")
        return full
    if slice_index is not None:
        raise ValueError("slice_index: only used with a 2-D labels slice")
    if arr.shape != shape:
        raise ValueError(f"labels: shape {arr.shape} differs from the volume's {shape}")
    if arr.size and (int(arr.min()) < 0 or int(arr.max()) > 65535):
        raise ValueError("labels: values must lie in 0..65535")
    return arr.astype(np.uint16, copy=False)


def label_nifti_bytes(labels: np.ndarray, affine_lps: np.ndarray) -> bytes:
    """Gzipped NIfTI-1 bytes of an integer label volume (see the module docstring)."""
    dtype = np.uint8 if labels.size == 0 or int(labels.max()) <= 255 else np.uint16
    data = np.asarray(labels, dtype=dtype).transpose(2, 1, 0)
    affine = lps_affine_to_nifti(affine_lps)
    img = nib.Nifti1Image(data, affine)
    img.set_sform(affine, code=1)
    img.set_qform(affine, code=1)
    header = img.header
    header.set_xyzt_units(xyz="mm")
    header.set_intent("label")
    header["descrip"] = b"Isotide label volume"
    header["cal_min"] = 0
    header["cal_max"] = float(data.max()) if data.size else 0.0
    return gzip.compress(img.to_bytes(), compresslevel=6, mtime=0)


def _patient_identifiers(volume: Volume) -> dict[str, str]:
    import pydicom

    if volume.kind != "dicom" or not volume.source_files:
        raise ValueError("include_patient_identifiers: only DICOM input carries patient identifiers")
    ds = pydicom.dcmread(volume.source_files[0], stop_before_pixels=True)
    return {
        "Name": str(ds.get("PatientName", "")),
        "ID": str(ds.get("PatientID", "")),
        "BirthDate": str(ds.get("PatientBirthDate", "")),
    }


def save_result(
    prefix: str | os.PathLike[str],
    labels: Any,
    volume: Volume,
    *,
    label_table: Sequence[Mapping[str, Any]],
    provenance: Mapping[str, Any],
    dicom_seg: bool = False,
    new_version: bool = False,
    overwrite_approved: bool = False,
    slice_index: int | None = None,
    include_patient_identifiers: bool = False,
    now: str | None = None,
    checkpoint: Callable[[], None] | None = None,
) -> dict[str, Path]:
    """Write the result ``prefix`` (= ``DIR/NAME``) atomically.

    Parameters
    ----------
    prefix : str or path-like
        ``DIR/NAME``; ``DIR`` is created when missing.
    labels : array_like of int
        Label volume of ``volume.shape`` (0 = background), or one 2-D slice
        ``(rows, cols)`` together with ``slice_index`` (other slices are then
        background; for a one-slice volume ``slice_index`` may be omitted).
        Every non-zero value must be in ``label_table``.
    volume : Volume
        The image the labels were drawn on (its geometry and input hashes go
        into the files).
    label_table : sequence of dict
        ``{"index", "name", "abbreviation", "color"}`` per label; see
        :func:`engine.io.sidecar.normalise_label_table`.
    provenance : dict
        Models, parameters, seeds, steps, timings, operator, edit history and
        review; see :func:`engine.io.sidecar.build_sidecar`. This function
        adds software versions, input hashes, the mask hash, timestamps, the
        schema version and the history hash chain.
    dicom_seg : bool
        Also write ``NAME.seg.dcm`` (DICOM input only). It necessarily carries
        the study's patient and study identifiers. When False, a stale
        ``NAME.seg.dcm`` from an earlier save is removed.
    new_version : bool
        Allow replacing a result that carries a review (state ``Submitted``,
        ``Approved`` or ``Returned``, or a ``Draft`` with a reviewer, comments
        or decisions): the new files become the next version, a ``Draft``,
        and the sidecar keeps every earlier version's review (``Versions``:
        state, reviewer, decisions, comments, and the hashes of what was
        reviewed). Earlier versions are always carried forward, whatever
        this flag says; a result without a review is simply replaced.
    overwrite_approved : bool
        Former name of ``new_version`` (same effect).
    slice_index : int, optional
        See ``labels``.
    include_patient_identifiers : bool
        Copy patient name, ID and birth date into the sidecar (DICOM only).
    now : str, optional
        Timestamp to record (default: now, UTC).
    checkpoint : callable, optional
        Called between the steps of building and writing the files (see
        :func:`engine.io.atomic.commit_files`); raise from it to stop the
        save, which then changes nothing.

    Returns
    -------
    dict of str to Path
        ``"nifti"``, ``"tsv"``, ``"json"`` and, with ``dicom_seg``, ``"seg"``.

    Raises
    ------
    ReviewedResultError
        The existing result carries a review (or its sidecar cannot be read)
        and ``new_version`` is False. Nothing is written.
    SaveError
        Writing failed; the previous result is intact.
    ValueError
        A bad argument, named in the message.
    """
    if not isinstance(volume, Volume):
        raise ValueError(f"volume: expected an engine.io.Volume, got {type(volume).__name__}")
    paths = result_paths(prefix)
    table = normalise_label_table(label_table)
    full = as_label_volume(labels, volume.shape, slice_index)
    present = np.unique(full)
    known = {e["index"] for e in table}
    unknown = [int(v) for v in present if v != 0 and int(v) not in known]
    if unknown:
        raise ValueError(f"labels: values {unknown[:10]} have no entry in label_table")
    if dicom_seg and volume.kind != "dicom":
        raise ValueError("dicom_seg: a DICOM SEG needs DICOM input (the source images it refers to)")
    finish_interrupted(journal_path(prefix))
    version, versions = _carried_versions(paths["json"], new_version or overwrite_approved)
    counts = np.bincount(full.ravel(), minlength=int(full.max()) + 1 if full.size else 1)
    label_voxels = {e["index"]: int(counts[e["index"]]) if e["index"] < len(counts) else 0 for e in table}
    nifti = label_nifti_bytes(full, volume.affine)
    tsv = label_table_tsv(table)
    files: dict[Path, bytes] = {paths["nifti"]: nifti, paths["tsv"]: tsv}
    seg_name = seg_hash = None
    if dicom_seg:
        from engine.io.dicom_seg import dicom_seg_bytes

        operator = str(provenance.get("operator") or "") if isinstance(provenance, Mapping) else ""
        if checkpoint is not None:
            checkpoint()
        seg = dicom_seg_bytes(full, volume, table, operator=operator, series_description=paths["seg"].name)
        files[paths["seg"]] = seg
        seg_name, seg_hash = paths["seg"].name, sha256_bytes(seg)
    patient = _patient_identifiers(volume) if include_patient_identifiers else None
    doc = build_sidecar(
        volume,
        table,
        provenance,
        output_dir=paths["json"].parent,
        mask_file=paths["nifti"].name,
        mask_sha256=sha256_bytes(nifti),
        voxel_sha256=voxel_sha256(full),
        table_file=paths["tsv"].name,
        table_sha256=sha256_bytes(tsv),
        label_voxels=label_voxels,
        seg_file=seg_name,
        seg_sha256=seg_hash,
        patient=patient,
        now=now,
        version=version,
        versions=versions,
    )
    files[paths["json"]] = sidecar_bytes(doc)
    remove = [] if dicom_seg or not paths["seg"].exists() else [paths["seg"]]
    commit_files(files, remove=remove, journal=journal_path(prefix), checkpoint=checkpoint)
    out = {"nifti": paths["nifti"], "tsv": paths["tsv"], "json": paths["json"]}
    if dicom_seg:
        out["seg"] = paths["seg"]
    return out


def save_sidecar(path: str | os.PathLike[str], doc: Mapping[str, Any]) -> Path:
    """Re-seal an edited sidecar document and write it atomically.

    For changes that do not touch the mask (for example the review block).
    The history chain is not rebuilt: recorded entries must stay as they are.

    Parameters
    ----------
    path : str or path-like
        The ``NAME_dseg.json`` to write.
    doc : dict
        The full document (as read from the file and edited).

    Raises
    ------
    ValueError
        ``doc``: not valid against the sidecar schema after sealing.
    SaveError
        Writing failed; the previous file is intact.
    """
    sealed = seal_sidecar(doc)
    problems = validate_sidecar(sealed)
    if problems:
        raise ValueError(f"doc: {problems[0]}")
    target = Path(os.fspath(path))
    name = target.name
    if name.endswith("_dseg.json") and len(name) > len("_dseg.json"):
        finish_interrupted(journal_path(target.with_name(name[: -len("_dseg.json")])))
    commit_files({target: sidecar_bytes(sealed)})
    return target


def check_replaceable(prefix: str | os.PathLike[str], *, new_version: bool = False) -> None:
    """Raise what :func:`save_result` would raise about the result already at ``prefix``, before any work.

    Completes an interrupted save there first.

    Raises
    ------
    ReviewedResultError
        The existing result carries a review (or cannot be read) and
        ``new_version`` is False.
    SaveError
        An interrupted save there cannot be completed.
    """
    paths = result_paths(prefix)
    finish_interrupted(journal_path(prefix))
    _carried_versions(paths["json"], new_version)


def _has_review(review: Any) -> bool:
    """True when a sidecar's review block holds anything a reviewer did."""
    if not isinstance(review, Mapping):
        return True
    return (review.get("State") != "Draft" or bool(review.get("Reviewer")) or bool(review.get("Decisions"))
            or bool(review.get("Comments")))


def _version_record(doc: Mapping[str, Any], raw: bytes) -> dict[str, Any]:
    """What a new version keeps of the result it replaces: its review and what was reviewed."""
    block = doc["Isotide"]
    output = block.get("Output") if isinstance(block.get("Output"), Mapping) else {}
    mask = output.get("Mask")
    record: dict[str, Any] = {
        "Version": block["Version"] if isinstance(block.get("Version"), int) and block["Version"] >= 1 else 1,
        "SidecarSHA256": sha256_bytes(raw),
        "Review": {key: block["Review"].get(key) for key in ("State", "Reviewer", "Decisions", "Comments")},
    }
    for key, value in (("Saved", block.get("Saved")), ("Operator", block.get("Operator")),
                       ("HistoryHead", block.get("HistoryHead")), ("VoxelSHA256", output.get("VoxelSHA256")),
                       ("MaskSHA256", mask.get("SHA256") if isinstance(mask, Mapping) else None)):
        if isinstance(value, str):
            record[key] = value
    return record


def _carried_versions(sidecar: Path, new_version: bool) -> tuple[int, list[dict[str, Any]]]:
    """Version number and earlier versions for a save over ``sidecar``.

    Raises
    ------
    ReviewedResultError
        The existing result carries a review, or cannot be read, and
        ``new_version`` is False.
    """
    if not sidecar.exists():
        return 1, []
    try:
        raw = sidecar.read_bytes()
        doc = json.loads(raw.decode("utf-8"))
        block = doc["Isotide"]
        review = block["Review"]
        state = str(review["State"])
        earlier = block.get("Versions", [])
        if not isinstance(earlier, list) or not all(isinstance(v, dict) for v in earlier):
            raise ValueError("Versions is not a list of records")
    except (OSError, ValueError, KeyError, TypeError) as exc:
        if not new_version:
            raise ReviewedResultError(
                sidecar, None,
                f"{sidecar}: the existing sidecar cannot be read ({type(exc).__name__}), so its review is "
                "unknown; save under another name, move it away, or save as a new version "
                "(new_version=True), which records the unreadable file's SHA-256",
            ) from None
        try:
            digest = sha256_bytes(sidecar.read_bytes())
        except OSError as read_error:
            raise ReviewedResultError(sidecar, None, f"{sidecar}: cannot be read ({read_error.strerror})") from None
        return 2, [{"Version": 1, "SidecarSHA256": digest, "Review": None,
                    "Note": "the earlier sidecar could not be read as an Isotide sidecar"}]
    current = block["Version"] if isinstance(block.get("Version"), int) and block["Version"] >= 1 else 1
    if not _has_review(review):
        return current, list(earlier)
    if not new_version:
        what = {"Submitted": "is Submitted for review", "Approved": "is Approved", "Returned": "was Returned"}.get(
            state, f"is a {state} with a review")
        raise ReviewedResultError(
            sidecar, state,
            f"{sidecar}: the existing result {what}; replacing it would lose its review. Save as a new "
            "version (new_version=True: the review history is kept in the new sidecar) or under another name",
        )
    return current + 1, [*earlier, _version_record(doc, raw)]
