"""The provenance sidecar ``NAME_dseg.json`` and the label table ``NAME_dseg.tsv``.

The sidecar holds the BIDS derivative fields ``Description``, ``Sources``,
``SpatialReference`` and ``Manual`` and an ``Isotide`` block described by the
JSON Schema shipped in ``engine/schemas`` (:data:`SCHEMA_FILE`). The block's
``Seal`` is the SHA-256 of the canonical JSON of the whole document without
the seal itself: any edit of the file shows. It proves integrity, not
authorship (anyone can recompute it).

Patient name, ID and birth date are never copied into the sidecar unless the
caller passes them explicitly (``patient=``). Folder names often hold them
too, so input files are recorded by their path relative to the result's
folder, or by file name alone (with their SHA-256) when the two share no
folder below the file system's root; the operator is recorded only when the
caller names one, and the software record holds versions, not the
computer's platform string.

References
----------
.. [1] BIDS Specification, "Derivatives: common data types and metadata" and
   "Imaging data types: segmentations" (``dseg.tsv`` columns ``index``,
   ``name``, ``abbreviation``, ``color``) -- from memory.
.. [2] JSON Schema draft 2020-12, https://json-schema.org/draft/2020-12.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
import sys
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from functools import lru_cache
from importlib import metadata, resources
from pathlib import Path
from typing import Any

import numpy as np

from engine.io.hashing import canonical_json, chain_anchor, chain_history, sha256_bytes
from engine.io.volume import Volume

__all__ = [
    "SCHEMA_VERSION",
    "SCHEMA_FILE",
    "OKABE_ITO",
    "REVIEW_STATES",
    "utc_now",
    "load_schema",
    "validate_sidecar",
    "normalise_label_table",
    "label_table_tsv",
    "read_label_table_tsv",
    "software_info",
    "build_sidecar",
    "seal_sidecar",
    "seal_sha256",
    "sidecar_bytes",
    "review_state",
    "recorded_path",
]

#: Version of the ``Isotide`` block written by this code.
SCHEMA_VERSION = "1.2.0"

#: File name of the JSON Schema inside ``engine/schemas``.
SCHEMA_FILE = "isotide-dseg-sidecar-1.json"

#: Label colours in order: the Okabe-Ito colour-blind-safe palette
#: (M. Okabe and K. Ito, "Color Universal Design", 2008).
OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")

#: Review workflow states.
REVIEW_STATES = ("Draft", "Submitted", "Approved", "Returned")

_SEAL_ALGORITHM = "SHA-256 of canonical JSON (sorted keys, compact, UTF-8) of this document without Isotide.Seal"
_COLOR_RE = re.compile(r"^#[0-9A-Fa-f]{6}$")
_LIBRARIES = (
    "numpy", "scipy", "scikit-image", "pydicom", "nibabel", "highdicom", "jsonschema",
    "pylibjpeg", "pylibjpeg-libjpeg", "pylibjpeg-openjpeg", "pylibjpeg-rle",
)
_SLICE_KEYS = {
    "slice": "Slice", "model": "Model", "parameters": "Parameters", "seeds": "Seeds",
    "steps": "Steps", "timings": "TimingsS", "notes": "Notes",
}
_HISTORY_KEYS = {
    "action": "Action", "time": "Time", "label": "Label", "slice": "Slice",
    "operator": "Operator", "details": "Details",
}
_REVIEW_KEYS = {"state": "State", "reviewer": "Reviewer", "decisions": "Decisions", "comments": "Comments"}
_PROVENANCE_KEYS = {"operator", "labels", "history", "review", "manual", "description", "created"}


def utc_now() -> str:
    """Current UTC time as ISO 8601 with a ``Z`` suffix, to the second."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


@lru_cache(maxsize=1)
def load_schema() -> dict[str, Any]:
    """The sidecar's JSON Schema (from the installed package data)."""
    text = resources.files("engine").joinpath("schemas", SCHEMA_FILE).read_text(encoding="utf-8")
    return json.loads(text)


def validate_sidecar(doc: Any) -> list[str]:
    """Schema problems of a sidecar document, one line each (empty when valid)."""
    import jsonschema

    validator = jsonschema.Draft202012Validator(load_schema())
    problems = []
    for error in sorted(validator.iter_errors(doc), key=lambda e: list(map(str, e.absolute_path))):
        where = "/".join(str(p) for p in error.absolute_path) or "(document)"
        problems.append(f"schema: {where}: {error.message}")
    return problems


def _jsonable(value: Any, name: str) -> Any:
    """Plain JSON types from numpy scalars/arrays, tuples and paths."""
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v, name) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v, name) for v in value]
    if isinstance(value, np.ndarray):
        return _jsonable(value.tolist(), name)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if not np.isfinite(f):
            raise ValueError(f"{name}: non-finite number {f}")
        return f
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, Path):
        return str(value)
    raise ValueError(f"{name}: {type(value).__name__} cannot be written to JSON")


def normalise_label_table(label_table: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Check a label table and fill in defaults.

    Parameters
    ----------
    label_table : sequence of dict
        Each with ``index`` (int >= 1, unique), ``name`` (non-empty, unique),
        optional ``abbreviation`` (default: the name) and ``color``
        (``#RRGGBB``; default: the Okabe-Ito palette in order). Optional
        ``category`` and ``type`` (``(code value, scheme, meaning)``) are used
        by the DICOM SEG writer.

    Returns
    -------
    list of dict
        Sorted by index, keys ``index``, ``name``, ``abbreviation``, ``color``
        (and ``category``/``type`` when given).

    Raises
    ------
    ValueError
        ``label_table``: naming the bad entry.
    """
    if isinstance(label_table, (str, bytes)) or not isinstance(label_table, Sequence) or not label_table:
        raise ValueError("label_table: expected a non-empty list of dicts")
    out: list[dict[str, Any]] = []
    seen_index: set[int] = set()
    seen_name: set[str] = set()
    for i, entry in enumerate(label_table):
        if not isinstance(entry, Mapping):
            raise ValueError(f"label_table: entry {i} is not a dict")
        unknown = set(entry) - {"index", "name", "abbreviation", "color", "category", "type"}
        if unknown:
            raise ValueError(f"label_table: entry {i} has unknown keys {sorted(unknown)}")
        index = entry.get("index")
        if isinstance(index, bool) or not isinstance(index, (int, np.integer)) or not 1 <= int(index) <= 65535:
            raise ValueError(f"label_table: entry {i} index must be an int in 1..65535, got {index!r}")
        index = int(index)
        name = entry.get("name")
        if not isinstance(name, str) or not name.strip() or "\t" in name or "\n" in name:
            raise ValueError(f"label_table: entry {i} needs a one-line name without tabs")
        if index in seen_index or name in seen_name:
            raise ValueError(f"label_table: entry {i} repeats index {index} or name {name!r}")
        seen_index.add(index)
        seen_name.add(name)
        abbreviation = entry.get("abbreviation") or name
        if not isinstance(abbreviation, str) or "\t" in abbreviation or "\n" in abbreviation:
            raise ValueError(f"label_table: entry {i} abbreviation must be one line without tabs")
        color = entry.get("color") or OKABE_ITO[i % len(OKABE_ITO)]
        if not isinstance(color, str) or not _COLOR_RE.match(color):
            raise ValueError(f"label_table: entry {i} color must be '#RRGGBB', got {color!r}")
        item: dict[str, Any] = {"index": index, "name": name, "abbreviation": abbreviation, "color": color.upper()}
        for key in ("category", "type"):
            if key in entry:
                code = entry[key]
                if not (isinstance(code, Sequence) and len(code) == 3 and all(isinstance(c, str) for c in code)):
                    raise ValueError(f"label_table: entry {i} {key} must be (value, scheme, meaning)")
                item[key] = tuple(code)
        out.append(item)
    return sorted(out, key=lambda e: e["index"])


def label_table_tsv(table: Sequence[Mapping[str, Any]]) -> bytes:
    """BIDS look-up table bytes: columns ``index name abbreviation color``."""
    lines = ["index\tname\tabbreviation\tcolor"]
    lines += [f"{e['index']}\t{e['name']}\t{e['abbreviation']}\t{e['color']}" for e in table]
    return ("\n".join(lines) + "\n").encode("utf-8")


def read_label_table_tsv(data: bytes) -> list[dict[str, Any]]:
    """Parse a ``dseg.tsv`` (as written by :func:`label_table_tsv`).

    Raises
    ------
    ValueError
        ``data``: missing columns or a non-integer index.
    """
    reader = csv.DictReader(io.StringIO(data.decode("utf-8")), delimiter="\t")
    if reader.fieldnames is None or not {"index", "name"} <= set(reader.fieldnames):
        raise ValueError("data: label table lacks the 'index' and 'name' columns")
    rows = []
    for row in reader:
        try:
            index = int(row["index"])
        except (TypeError, ValueError):
            raise ValueError(f"data: label table index {row['index']!r} is not an integer") from None
        rows.append(
            {
                "index": index,
                "name": row["name"],
                "abbreviation": row.get("abbreviation") or "n/a",
                "color": row.get("color") or "n/a",
            }
        )
    return rows


def software_info() -> dict[str, Any]:
    """Isotide, Python and library versions for the sidecar (not the platform: it names the computer's system)."""
    from engine import __version__

    libraries = {}
    for name in _LIBRARIES:
        try:
            libraries[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    return {
        "Name": "Isotide",
        "Version": __version__,
        "Python": sys.version.split()[0],
        "Libraries": libraries,
    }


def recorded_path(path: str, base: Path) -> str:
    """``path`` relative to ``base``; its file name alone when they share no folder below the root.

    A relative path that climbs to the root would spell out the absolute
    one (folder names often hold patients' names).
    """
    p = Path(os.path.abspath(path))
    try:
        common = Path(os.path.commonpath([p, base]))
    except ValueError:  # another drive (Windows)
        return p.name or "(unnamed)"
    if common == Path(common.anchor):
        return p.name or "(unnamed)"
    return Path(os.path.relpath(p, base)).as_posix()


def _mapped(record: Mapping[str, Any], keys: Mapping[str, str], name: str) -> dict[str, Any]:
    unknown = set(record) - set(keys) - set(keys.values())
    if unknown:
        raise ValueError(f"{name}: unknown keys {sorted(unknown)} (allowed: {sorted(keys)})")
    return {keys.get(k, k): _jsonable(v, name) for k, v in record.items()}


def _labels_block(
    table: Sequence[Mapping[str, Any]],
    provenance_labels: Any,
    voxels: Mapping[int, int],
    voxel_mm3: float,
) -> list[dict[str, Any]]:
    per_label: dict[int, list[dict[str, Any]]] = {e["index"]: [] for e in table}
    if provenance_labels is not None:
        if not isinstance(provenance_labels, Sequence) or isinstance(provenance_labels, (str, bytes)):
            raise ValueError("provenance: 'labels' must be a list of {'index': ..., 'slices': [...]}")
        for i, item in enumerate(provenance_labels):
            if not isinstance(item, Mapping) or set(item) - {"index", "slices"}:
                raise ValueError(f"provenance: labels[{i}] must have only 'index' and 'slices'")
            index = item.get("index")
            if index not in per_label:
                raise ValueError(f"provenance: labels[{i}] index {index!r} is not in label_table")
            for j, record in enumerate(item.get("slices", [])):
                if not isinstance(record, Mapping) or "slice" not in record and "Slice" not in record:
                    raise ValueError(f"provenance: labels[{i}].slices[{j}] needs a 'slice' number")
                per_label[index].append(_mapped(record, _SLICE_KEYS, f"provenance: labels[{i}].slices[{j}]"))
    return [
        {
            "Index": e["index"],
            "Name": e["name"],
            "Abbreviation": e["abbreviation"],
            "Color": e["color"],
            "Voxels": int(voxels.get(e["index"], 0)),
            "VolumeMM3": float(voxels.get(e["index"], 0)) * voxel_mm3,
            "Slices": per_label[e["index"]],
        }
        for e in table
    ]


def _input_block(volume: Volume, base: Path) -> dict[str, Any]:
    uids: dict[str, list[str]] = {}
    for file, uid in zip(volume.source_files, volume.sop_instance_uids):
        bucket = uids.setdefault(file, [])
        if uid and uid not in bucket:
            bucket.append(uid)
    files = []
    for file, digest in volume.sha256.items():
        entry: dict[str, Any] = {"Path": recorded_path(file, base), "SHA256": digest}
        if uids.get(file):
            entry["SOPInstanceUIDs"] = uids[file]
        files.append(entry)
    block: dict[str, Any] = {
        "Description": volume.source,
        "Path": recorded_path(volume.path, base) if volume.path else "(in memory)",
        "Kind": volume.kind,
        "Modality": volume.modality,
        "Shape": list(volume.shape),
        "SpacingMM": [float(s) for s in volume.spacing],
        "AffineLPS": [[float(v) for v in row] for row in volume.affine],
        "Files": files,
    }
    for key, value in (
        ("SeriesInstanceUID", volume.series_uid),
        ("StudyInstanceUID", volume.study_uid),
        ("FrameOfReferenceUID", volume.frame_of_reference_uid),
    ):
        if value:
            block[key] = value
    return block


def build_sidecar(
    volume: Volume,
    label_table: Sequence[Mapping[str, Any]],
    provenance: Mapping[str, Any],
    *,
    output_dir: str | Path,
    mask_file: str,
    mask_sha256: str,
    voxel_sha256: str,
    table_file: str,
    table_sha256: str,
    label_voxels: Mapping[int, int],
    seg_file: str | None = None,
    seg_sha256: str | None = None,
    patient: Mapping[str, str] | None = None,
    now: str | None = None,
    version: int = 1,
    versions: Sequence[Mapping[str, Any]] = (),
) -> dict[str, Any]:
    """Build (and seal) the sidecar document of a result.

    Parameters
    ----------
    volume : Volume
        The image the labels belong to.
    label_table : sequence of dict
        See :func:`normalise_label_table`.
    provenance : dict
        Filled by the caller; keys (all optional):

        - ``operator`` (str): who made the outlines.
        - ``labels``: list of ``{"index": int, "slices": [record, ...]}``
          where a record has ``slice`` (int) and any of ``model`` (str),
          ``parameters`` (dict), ``seeds`` (list of ``(row, col, radius_px)``
          or ``(slice, row, col, radius_px)``), ``steps`` (int), ``timings``
          (dict of seconds), ``notes`` (str).
        - ``history``: the ordered edit list, oldest first; a new entry is a
          dict with ``action`` (str) and any of ``time`` (ISO 8601 UTC),
          ``label``, ``slice``, ``operator``, ``details`` (dict). Entries
          already recorded in an earlier sidecar (with ``SHA256``) may be
          passed back unchanged; they are checked, not rewritten.
        - ``review``: ``{"state", "reviewer", "decisions", "comments"}``
          (state one of :data:`REVIEW_STATES`; default ``Draft``).
        - ``manual`` (bool, default False), ``description`` (str),
          ``created`` (ISO time of the first save, kept across saves).
    output_dir : str or Path
        Folder of the result; stored paths are relative to it.
    mask_file, table_file, seg_file : str
        File names of the outputs (in ``output_dir``).
    mask_sha256, table_sha256, seg_sha256 : str
        SHA-256 of those files' bytes.
    voxel_sha256 : str
        SHA-256 of the label voxels (see :func:`engine.io.writer.voxel_sha256`).
    label_voxels : dict of int to int
        Voxel count of every label.
    patient : dict, optional
        ``{"Name", "ID", "BirthDate"}``, only when the user asked for them.
    now : str, optional
        Timestamp (default: :func:`utc_now`).
    version : int
        Version number of this result (1 for the first; a save over a
        reviewed result makes the next one).
    versions : sequence of dict
        Earlier versions, oldest first, as :func:`engine.io.save_result`
        carries them forward: ``Version``, ``SidecarSHA256`` and ``Review``
        (the earlier review block) and, when known, ``Saved``, ``Operator``,
        ``HistoryHead``, ``VoxelSHA256``, ``MaskSHA256`` or a ``Note``.

    Returns
    -------
    dict
        The sealed document (see the JSON Schema in ``engine/schemas``).

    Raises
    ------
    ValueError
        ``provenance`` / ``label_table``: naming the bad entry.
    """
    if not isinstance(provenance, Mapping):
        raise ValueError("provenance: expected a dict")
    unknown = set(provenance) - _PROVENANCE_KEYS
    if unknown:
        raise ValueError(f"provenance: unknown keys {sorted(unknown)} (allowed: {sorted(_PROVENANCE_KEYS)})")
    if isinstance(version, bool) or not isinstance(version, (int, np.integer)) or version < 1:
        raise ValueError(f"version: expected an int >= 1, got {version!r}")
    now = now or utc_now()
    table = normalise_label_table(label_table)
    base = Path(output_dir).resolve()
    input_block = _input_block(volume, base)
    anchor = chain_anchor(f["SHA256"] for f in input_block["Files"])
    history_in = provenance.get("history") or []
    if not isinstance(history_in, Sequence) or isinstance(history_in, (str, bytes)):
        raise ValueError("provenance: 'history' must be a list of dicts")
    entries = []
    for i, entry in enumerate(history_in):
        if not isinstance(entry, Mapping):
            raise ValueError(f"provenance: history[{i}] is not a dict")
        if "SHA256" in entry:
            entries.append(_jsonable(entry, f"provenance: history[{i}]"))
        else:
            entries.append(_mapped(entry, _HISTORY_KEYS, f"provenance: history[{i}]"))
    try:
        history = chain_history(entries, anchor=anchor, now=now)
    except ValueError as exc:
        raise ValueError(f"provenance: {str(exc).split(': ', 1)[1]}") from None
    review_in = provenance.get("review") or {}
    if not isinstance(review_in, Mapping):
        raise ValueError("provenance: 'review' must be a dict")
    review = {"State": "Draft", "Reviewer": None, "Decisions": [], "Comments": []}
    review.update(_mapped(review_in, _REVIEW_KEYS, "provenance: review"))
    if review["State"] not in REVIEW_STATES:
        raise ValueError(f"provenance: review state must be one of {REVIEW_STATES}, got {review['State']!r}")
    manual = provenance.get("manual", False)
    if not isinstance(manual, bool):
        raise ValueError("provenance: 'manual' must be True or False")
    voxel_mm3 = float(np.prod(volume.spacing))
    isotide: dict[str, Any] = {
        "SchemaVersion": SCHEMA_VERSION,
        "Software": software_info(),
        "Input": input_block,
        "Output": {
            "Mask": {"Path": mask_file, "SHA256": mask_sha256},
            "VoxelSHA256": voxel_sha256,
            "LabelTable": {"Path": table_file, "SHA256": table_sha256},
            "DicomSeg": {"Path": seg_file, "SHA256": seg_sha256} if seg_file else None,
        },
        "Labels": _labels_block(table, provenance.get("labels"), label_voxels, voxel_mm3),
        "History": history,
        "HistoryHead": history[-1]["SHA256"] if history else anchor,
        "Operator": str(provenance.get("operator") or ""),
        "Created": str(provenance.get("created") or now),
        "Saved": now,
        "Review": review,
        "Version": int(version),
        "Versions": [_jsonable(v, f"versions[{i}]") for i, v in enumerate(versions)],
    }
    if patient:
        isotide["Patient"] = {k: str(v) for k, v in patient.items() if k in ("Name", "ID", "BirthDate")}
    doc = {
        "Description": str(
            provenance.get("description")
            or "Labelled outlines drawn with Isotide: a level-set front grown from seeds, with manual edits. "
            "Not a medical device; outlines must be reviewed by qualified people."
        ),
        "Sources": [f["Path"] for f in input_block["Files"]],
        "SpatialReference": input_block["Path"],
        "Manual": manual,
        "Isotide": isotide,
    }
    return seal_sidecar(doc)


def seal_sha256(doc: Mapping[str, Any]) -> str:
    """SHA-256 of the canonical JSON of ``doc`` without ``Isotide.Seal``."""
    body = dict(doc)
    block = dict(body.get("Isotide") or {})
    block.pop("Seal", None)
    body["Isotide"] = block
    return sha256_bytes(canonical_json(body))


def seal_sidecar(doc: Mapping[str, Any]) -> dict[str, Any]:
    """Return a copy of ``doc`` with a fresh ``Isotide.Seal`` (after an edit)."""
    out = json.loads(canonical_json(doc))
    out["Isotide"]["Seal"] = {"Algorithm": _SEAL_ALGORITHM, "SHA256": seal_sha256(out)}
    return out


def sidecar_bytes(doc: Mapping[str, Any]) -> bytes:
    """The bytes written to ``NAME_dseg.json`` (indented, UTF-8, final newline)."""
    return (json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


def review_state(path: str | Path) -> str | None:
    """Review state recorded in an existing sidecar, ``None`` when there is none.

    Raises
    ------
    ValueError
        ``path``: the file exists but is not a readable sidecar.
    """
    p = Path(path)
    if not p.exists():
        return None
    try:
        doc = json.loads(p.read_text(encoding="utf-8"))
        state = doc["Isotide"]["Review"]["State"]
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise ValueError(f"path: {p} is not a readable Isotide sidecar ({type(exc).__name__})") from None
    return str(state)
