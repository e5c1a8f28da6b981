"""A session's saved result: the label volume, the label table and the provenance record; and reading one back.

:func:`save_session` writes the committed outlines through
:func:`engine.io.save_result` (mask, table, sidecar, optionally DICOM SEG,
all or nothing). The provenance record is built here, for every caller (the
window, ``isotide segment``, ``isotide demo``, a batch): per label and slice
the model, the settings actually used, seeds, steps and notes; the commands
of the undo stack in effect become the sidecar's hash-chained edit history,
after the history of the result the session was opened from.

:func:`open_result` reads a result back over its study (checked with
:func:`engine.io.verify` and against the study's file hashes) so work can go
on: labels, outlines (from the mask: φ is the mask's signed distance, so the
outlines follow the pixel edges) and the earlier history and review.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Mapping
from dataclasses import fields
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from engine.session.outline import outline_from_mask
from engine.front import FrontParams
from engine.session.settings import FrontSettings
from engine.session.state import Label, SessionState

if TYPE_CHECKING:
    from engine.session.session import Session

__all__ = ["save_session", "open_result", "label_volume", "provenance_record", "StudyNotFoundError"]


class StudyNotFoundError(ValueError):
    """The study a result was drawn on is not where its record points (give it explicitly)."""


#: History actions that are outlines drawn by hand.
_MANUAL = ("extend", "trim", "margin")


def label_volume(session: "Session") -> NDArray[np.uint16]:
    """Every committed outline as one integer volume ``[slice, row, col]``; where outlines overlap the
    label listed later wins."""
    out = np.zeros(session.volume.shape, dtype=np.uint16)
    for outline in session.outlines():
        out[outline.slice][outline.mask] = outline.label
    return out


def provenance_record(session: "Session", *, operator: str | None = None,
                      description: str | None = None) -> dict[str, Any]:
    """The ``provenance`` of :func:`engine.io.save_result` for the session's committed outlines."""
    who = session.operator if operator is None else str(operator)
    who = who or session.prior_operator
    per_label: dict[int, list[dict[str, Any]]] = {lab.index: [] for lab in session.labels}
    for outline in session.outlines():
        record = dict(outline.record)
        per_label.setdefault(outline.label, []).append({"slice": int(outline.slice), **record})
    labels = [{"index": index, "slices": slices} for index, slices in per_label.items()]
    history: list[Mapping[str, Any]] = list(session.prior_history)
    history += [command.history_entry(who) for command in session._stack.applied()]
    names = ", ".join(lab.name for lab in session.labels if per_label.get(lab.index))
    out: dict[str, Any] = {
        "operator": who,
        "labels": labels,
        "history": history,
        "description": description or (f"Outlines of {names} drawn with Isotide (level-set fronts grown from seeds, "
                                       "with manual corrections)." if names else "No outlines."),
        "manual": any(c.action in _MANUAL for c in session._stack.applied())
        or any(str(h.get("Action", "")) in _MANUAL for h in session.prior_history),
    }
    if session.created:
        out["created"] = session.created
    return out


def save_session(session: "Session", out: str | os.PathLike[str], *, dicom_seg: bool = False,
                 operator: str | None = None, new_version: bool = False,
                 include_patient_identifiers: bool = False, description: str | None = None,
                 now: str | None = None, history_entry: Mapping[str, Any] | None = None,
                 checkpoint: Callable[[], None] | None = None) -> dict[str, Path]:
    """Save the session's committed outlines as the result ``out`` (= ``DIR/NAME``).

    The live front is not saved until it is committed. ``history_entry``
    (``{"action": ..., "details": {...}}``) is one more entry of the saved
    history, after the session's commands: how the session was driven (a
    batch case records its settings and figures there). ``checkpoint`` is
    called at the save's safe points (the command line's Ctrl-C). Returns the paths
    written (see :func:`engine.io.save_result`, whose errors it raises).
    """
    from engine.io import save_result

    table = [{"index": lab.index, "name": lab.name, "abbreviation": lab.name[:16], "color": lab.colour}
             for lab in session.labels]
    if not table:
        raise ValueError("the session has no label to save")
    prov = provenance_record(session, operator=operator, description=description)
    if history_entry is not None:
        if not isinstance(history_entry, Mapping) or not str(history_entry.get("action") or "").strip():
            raise ValueError("history_entry: expected a mapping with an 'action' text")
        prov["history"].append(dict(history_entry))
    paths = save_result(out, label_volume(session), session.volume, label_table=table, provenance=prov,
                        dicom_seg=dicom_seg, new_version=new_version,
                        include_patient_identifiers=include_patient_identifiers, now=now,
                        checkpoint=checkpoint)
    session.saved_index = session.undo_index
    return paths


_PARAM_NAMES = {f.name for f in fields(FrontParams)} - {"model"}


def _settings_from_record(record: Mapping[str, Any]) -> FrontSettings:
    """The settings an outline was grown with, from its slice record (defaults where unknown)."""
    params = dict(record.get("Parameters") or {})
    model = str(record.get("Model") or params.get("model") or "region")
    kept = {k: v for k, v in params.items() if k in _PARAM_NAMES and v is not None}
    if model != "window":
        kept.pop("window", None)
    try:
        detail = int(params.get("detail", 1))
        return FrontSettings(model=model).updated(detail=detail if detail in (1, 2, 4) else 1, **kept)
    except (ValueError, TypeError):
        return FrontSettings(model=model) if model in ("region", "edge", "curvature", "constant") else FrontSettings()


def open_result(path: str | os.PathLike[str], *, study: str | None = None,
                progress: Callable[[int, int], None] | None = None, operator: str = "") -> "Session":
    """A session continuing the saved result at ``path`` (its sidecar, mask or ``DIR/NAME``).

    The study is read from ``study`` or else from the input path the sidecar
    records (relative to the sidecar's folder). The result must pass
    :func:`engine.io.verify` and the study's files must hash as recorded.
    """
    import nibabel as nib

    from engine.io import load, verify
    from engine.io.verify import sidecar_path
    from engine.session.session import Session

    sidecar = sidecar_path(path)
    report = verify(sidecar)
    if not report.ok:
        raise ValueError(f"{sidecar}: cannot be reopened: {report.problems[0]}")
    doc = json.loads(sidecar.read_text(encoding="utf-8"))
    block = doc["Isotide"]
    base = sidecar.parent
    if study is None:
        recorded = block["Input"].get("Path", "")
        if not recorded or recorded == "(in memory)":
            raise StudyNotFoundError(f"{sidecar}: the result was drawn on an image held in memory; open that "
                                     "image and give it as the study")
        study = str((base / recorded).resolve()) if not Path(recorded).is_absolute() else recorded
        if not Path(study).exists():
            raise StudyNotFoundError(f"{sidecar}: its study is not at {recorded!r} beside it (the record keeps "
                                     "input paths relative to the result, or names only); open the study first, "
                                     "then the result")
    volume = load(study, series=block["Input"].get("SeriesInstanceUID") if _several_series(study) else None,
                  progress=progress)
    expected = sorted(f["SHA256"] for f in block["Input"]["Files"])
    if expected and sorted(volume.sha256.values()) != expected:
        raise ValueError(f"{study}: not the study this result was drawn on (its files hash differently from "
                         f"those recorded in {sidecar.name})")
    image = nib.load(str(base / block["Output"]["Mask"]["Path"]))
    labels_vol = np.asarray(image.dataobj).transpose(2, 1, 0)
    if labels_vol.shape != volume.shape:
        raise ValueError(f"{sidecar}: the mask's shape {labels_vol.shape} differs from the study's {volume.shape}")
    session = Session(volume, operator=operator)
    spacing = session.spacing
    labels, outlines, settings = [], {}, {}
    for entry in block["Labels"]:
        index = int(entry["Index"])
        labels.append(Label(index, str(entry["Name"]), str(entry["Color"]).upper()))
        records = {int(r["Slice"]): r for r in entry.get("Slices", [])}
        settings[index] = _settings_from_record(records[max(records)]) if records else FrontSettings()
        for k in np.flatnonzero(np.any(labels_vol == index, axis=(1, 2))):
            record = records.get(int(k), {})
            plain = {"model": record.get("Model"), "parameters": record.get("Parameters"),
                     "seeds": record.get("Seeds"), "steps": record.get("Steps"), "notes": record.get("Notes")}
            outlines[(index, int(k))] = outline_from_mask(index, int(k), labels_vol[k] == index, spacing,
                                                          record={k2: v for k2, v in plain.items() if v is not None})
    state = SessionState(labels=tuple(labels), outlines=MappingProxyType(outlines),
                         settings=MappingProxyType(settings))
    session._stack.reset(state)
    session.prior_history = tuple(block.get("History", []))
    session.prior_review = block.get("Review")
    session.created = block.get("Created")
    session.prior_operator = str(block.get("Operator") or "")
    session.saved_index = 0
    session._publish()
    return session


def _several_series(path: str) -> bool:
    from engine.io import list_series

    try:
        return len(list_series(path)) > 1
    except Exception:  # noqa: BLE001 - load() itself reports what is wrong with the path
        return False
