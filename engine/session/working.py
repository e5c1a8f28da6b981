"""Working-session files (``<name>.tide``): a case being outlined, kept to go on later or recovered after a crash.

A ``.tide`` file is a zip of ``session.json`` (schema
``isotide-working-session``, version :data:`VERSION`) and ``arrays.npz``.
It holds what undo would restore at this moment: the labels, every committed
outline (mask, the φ box around it, contours and curvature), per-label
settings, the live front (seeds and its exact snapshot), the history of the
commands in effect (their sidecar entries and History texts), and a
reference to the study (path, series and file SHA-256s). A study that was
not read from files (an array) is stored in the file itself.

:func:`capture` takes an immutable copy of a session (no arrays copied:
the states are immutable) so that :func:`write_working` can run in another
thread while work goes on. :func:`open_working` reads a file back into a new
:class:`~engine.session.Session` whose undo stack starts empty and whose
history holds the recorded commands, so a later save keeps them in its
hash-chained edit history. Writes are atomic (:func:`engine.io.atomic.commit_files`).
"""

from __future__ import annotations

import io
import json
import os
import zipfile
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

import numpy as np

from engine.front import FrontSnapshot
from engine.io.sidecar import utc_now
from engine.session.outline import Outline, frozen_array
from engine.session.settings import FrontSettings
from engine.session.state import Command, Label, LiveState, SessionState
from engine.front import FrontParams

if TYPE_CHECKING:
    from engine.io.volume import Volume
    from engine.session.session import Session

__all__ = ["SCHEMA", "VERSION", "SUFFIX", "WorkingCopy", "WorkingSummary", "capture", "write_working",
           "save_working", "open_working", "read_summary"]

SCHEMA = "isotide-working-session"
VERSION = 1
SUFFIX = ".tide"
_MANIFEST = "session.json"
_ARRAYS = "arrays.npz"


@dataclass(frozen=True, eq=False)
class WorkingCopy:
    """An immutable picture of a session to write (see :func:`capture`)."""

    volume: "Volume"
    operator: str
    state: SessionState
    history: tuple[Command, ...]
    default_settings: FrontSettings
    hidden: frozenset[int]
    prior_history: tuple[Mapping[str, Any], ...]
    prior_review: Mapping[str, Any] | None
    created: str | None
    modified: bool
    meta: Mapping[str, Any]
    prior_operator: str = ""


@dataclass(frozen=True)
class WorkingSummary:
    """What a working-session file holds, read without its arrays (for a recovery prompt)."""

    path: Path
    saved: str
    study: str
    source: str
    labels: tuple[str, ...]
    outlines: int
    live: bool
    commands: int
    meta: Mapping[str, Any]


def capture(session: "Session", *, meta: Mapping[str, Any] | None = None, blocking: bool = True
            ) -> WorkingCopy | None:
    """An immutable copy of ``session`` for :func:`write_working` (cheap: states are shared, not copied).

    With ``blocking=False`` returns None instead of waiting while another
    thread holds the session (a front taking a step).
    """
    lock = session._lock
    if not lock.acquire(blocking=blocking):
        return None
    try:
        return WorkingCopy(session.volume, session.operator, session.state, session._stack.applied(),
                           session.settings(None), session.hidden_labels(), tuple(session.prior_history),
                           session.prior_review, session.created, session.modified,
                           MappingProxyType(dict(meta or {})), session.prior_operator)
    finally:
        lock.release()


# ----------------------------------------------------------------- encoding
def _plain(value: Any) -> Any:
    """JSON-ready values (numpy scalars and arrays, tuples and mappings converted)."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    return value


class _Arrays:
    """Arrays going into (or read from) ``arrays.npz``, by generated key."""

    def __init__(self, stored: Mapping[str, np.ndarray] | None = None) -> None:
        self.items: dict[str, np.ndarray] = dict(stored or {})

    def put(self, prefix: str, array: np.ndarray) -> str:
        key = f"{prefix}{len(self.items)}"
        self.items[key] = np.asarray(array)
        return key

    def get(self, key: str, *, readonly: bool = True) -> np.ndarray:
        out = np.array(self.items[key], copy=True)
        out.flags.writeable = not readonly
        return out


def _params_record(params: FrontParams) -> dict[str, Any]:
    return {f.name: _plain(getattr(params, f.name)) for f in fields(params)}


def _params_from(record: Mapping[str, Any]) -> FrontParams:
    values = dict(record)
    if values.get("window") is not None:
        values["window"] = tuple(float(v) for v in values["window"])
    return FrontParams(**values)


def _encode_snapshot(snap: FrontSnapshot, arrays: _Arrays) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for f in fields(snap):
        value = getattr(snap, f.name)
        if f.name == "inside":  # stored bit-packed; the slice's shape unpacks it
            out["inside_bits"] = {"array": arrays.put("s", snap.inside_bits)}
        elif value is None:
            out[f.name] = None
        elif f.name == "motion":  # convergence checkpoints (step, crossings) and the last displacement
            *marks, last = value if value else (float("inf"),)
            out[f.name] = {"motion": {"marks": [[int(k), arrays.put("s", p)] for k, p in marks],
                                      "displacement": None if not np.isfinite(last) else float(last)}}
        elif isinstance(value, np.ndarray):
            out[f.name] = {"array": arrays.put("s", value)}
        elif isinstance(value, FrontParams):
            out[f.name] = {"params": _params_record(value)}
        elif isinstance(value, tuple) and value and all(isinstance(v, np.ndarray) for v in value):
            out[f.name] = {"arrays": [arrays.put("s", v) for v in value]}
        elif isinstance(value, tuple):
            out[f.name] = {"tuple": _plain(value)}
        else:
            out[f.name] = {"value": _plain(value)}
    return out


def _decode_snapshot(record: Mapping[str, Any], arrays: _Arrays, shape: tuple[int, ...]) -> FrontSnapshot:
    values: dict[str, Any] = {}
    for f in fields(FrontSnapshot):
        item = record.get(f.name)
        if f.name == "inside":
            bits = arrays.get(record["inside_bits"]["array"])
            values[f.name] = np.unpackbits(bits, count=int(np.prod(shape))).astype(bool).reshape(shape)
        elif item is None:
            values[f.name] = None if f.name in ("pins", "barrier", "local_out") else f.default
        elif "motion" in item:
            marks = tuple((int(k), arrays.get(key, readonly=False)) for k, key in item["motion"]["marks"])
            last = item["motion"]["displacement"]
            values[f.name] = marks + (float("inf") if last is None else float(last),)
        elif "array" in item:
            values[f.name] = arrays.get(item["array"], readonly=f.name in ("pins", "barrier"))
        elif "params" in item:
            values[f.name] = _params_from(item["params"])
        elif "arrays" in item:
            values[f.name] = tuple(arrays.get(k, readonly=False) for k in item["arrays"])
        elif "tuple" in item:
            values[f.name] = tuple(item["tuple"])
        else:
            values[f.name] = item["value"]
    return FrontSnapshot(**values)


def _encode_outline(outline: Outline, arrays: _Arrays) -> dict[str, Any]:
    lengths = [len(c) for c in outline.contours]
    return {
        "label": int(outline.label), "slice": int(outline.slice), "phi_origin": list(outline.phi_origin),
        "shape": list(outline.mask.shape), "area_mm2": float(outline.area_mm2),
        "perimeter_mm": float(outline.perimeter_mm), "record": _plain(outline.record), "lengths": lengths,
        "mask": arrays.put("m", np.packbits(outline.mask.reshape(-1))),
        "phi": arrays.put("p", outline.phi),
        "contours": arrays.put("c", np.concatenate(outline.contours) if lengths else np.zeros((0, 2))),
        "curvature": arrays.put("k", np.concatenate(outline.curvature) if lengths else np.zeros(0)),
    }


def _split(flat: np.ndarray, lengths: list[int]) -> tuple[np.ndarray, ...]:
    bounds = np.cumsum([0, *lengths])
    return tuple(frozen_array(flat[a:b]) for a, b in zip(bounds[:-1], bounds[1:]))


def _decode_outline(record: Mapping[str, Any], arrays: _Arrays) -> Outline:
    shape = tuple(int(n) for n in record["shape"])
    bits = arrays.get(record["mask"])
    mask = np.unpackbits(bits, count=int(np.prod(shape))).astype(bool).reshape(shape)
    lengths = [int(n) for n in record["lengths"]]
    return Outline(int(record["label"]), int(record["slice"]), frozen_array(mask), _split(
        arrays.get(record["contours"]), lengths), _split(arrays.get(record["curvature"]), lengths),
        (int(record["phi_origin"][0]), int(record["phi_origin"][1])), arrays.get(record["phi"]),
        float(record["area_mm2"]), float(record["perimeter_mm"]), MappingProxyType(dict(record["record"])))


def _study_record(volume: "Volume", arrays: _Arrays) -> dict[str, Any]:
    out = {"path": volume.path, "series_uid": volume.series_uid, "sha256": dict(volume.sha256),
           "shape": list(volume.shape), "spacing": list(volume.spacing), "kind": volume.kind, "source": volume.source}
    if not volume.sha256 or not volume.path or not Path(volume.path).exists():
        out["image"] = arrays.put("v", volume.array)
        out["affine"] = volume.affine.tolist()
        out["modality"] = volume.modality
        out["presets"] = [list(p) for p in volume.presets]
    return out


def write_working(copy: WorkingCopy, path: str | os.PathLike[str], *, now: str | None = None) -> Path:
    """Write ``copy`` (from :func:`capture`) to the working-session file ``path`` (atomically)."""
    from engine.io.atomic import commit_files

    target = Path(os.fspath(path))
    if target.suffix != SUFFIX:
        raise ValueError(f"path: a working session ends with {SUFFIX}, got {target.name!r}")
    arrays = _Arrays()
    state = copy.state
    live = state.live
    manifest = {
        "schema": SCHEMA, "version": VERSION, "saved": now or utc_now(),
        "study": _study_record(copy.volume, arrays),
        "operator": copy.operator,
        "labels": [{"index": lab.index, "name": lab.name, "colour": lab.colour, "locked": lab.locked}
                   for lab in state.labels],
        "settings": {str(k): v.as_record() for k, v in state.settings.items()},
        "default_settings": copy.default_settings.as_record(),
        "hidden": sorted(int(i) for i in copy.hidden),
        "outlines": [_encode_outline(o, arrays) for o in state.outlines.values()],
        "live": None if live is None else {
            "label": live.label, "slice": live.slice, "seeds": _plain(live.seeds), "vanished": live.vanished,
            "origin": live.origin,
            "snapshot": None if live.snapshot is None else _encode_snapshot(live.snapshot, arrays)},
        "history": [{"text": c.text, "action": c.action, "time": c.time, "label": c.label, "slice": c.slice,
                     "details": _plain(c.details)} for c in copy.history],
        "prior_history": _plain(copy.prior_history),
        "prior_review": _plain(copy.prior_review),
        "created": copy.created,
        "prior_operator": copy.prior_operator,
        "modified": bool(copy.modified),
        "meta": _plain(copy.meta),
    }
    npz = io.BytesIO()
    np.savez(npz, **arrays.items)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=1) as z:
        z.writestr(_MANIFEST, json.dumps(manifest, ensure_ascii=False, allow_nan=False))
        z.writestr(_ARRAYS, npz.getvalue())
    commit_files({target: buf.getvalue()})
    return target


def save_working(session: "Session", path: str | os.PathLike[str], *, meta: Mapping[str, Any] | None = None
                 ) -> Path:
    """Capture ``session`` and write it to ``path`` (see :func:`write_working`)."""
    return write_working(capture(session, meta=meta), path)


def _read_manifest(path: Path) -> tuple[dict[str, Any], zipfile.ZipFile]:
    try:
        z = zipfile.ZipFile(path)
        manifest = json.loads(z.read(_MANIFEST).decode("utf-8"))
    except FileNotFoundError:
        raise ValueError(f"{path}: no such file") from None
    except (zipfile.BadZipFile, KeyError, UnicodeDecodeError, json.JSONDecodeError, OSError) as exc:
        raise ValueError(f"{path}: not a readable Isotide working session ({exc})") from None
    if manifest.get("schema") != SCHEMA:
        z.close()
        raise ValueError(f"{path}: not an Isotide working session")
    if not isinstance(manifest.get("version"), int) or manifest["version"] > VERSION:
        z.close()
        raise ValueError(f"{path}: working-session version {manifest.get('version')!r} is newer than this "
                         f"Isotide reads ({VERSION})")
    return manifest, z


def read_summary(path: str | os.PathLike[str]) -> WorkingSummary:
    """What the working-session file at ``path`` holds (its arrays are not read)."""
    p = Path(os.fspath(path))
    manifest, z = _read_manifest(p)
    z.close()
    study = manifest["study"]
    return WorkingSummary(p, str(manifest.get("saved", "")), str(study.get("path", "")),
                          str(study.get("source", "")), tuple(lab["name"] for lab in manifest["labels"]),
                          len(manifest["outlines"]), manifest.get("live") is not None, len(manifest["history"]),
                          MappingProxyType(dict(manifest.get("meta") or {})))


def _open_study(study: Mapping[str, Any], arrays: _Arrays, path: Path, given: str | None,
                progress: Callable[[int, int], None] | None) -> "Volume":
    from engine.io import load
    from engine.io.volume import Volume
    from engine.session.record import _several_series

    if "image" in study and given is None:
        return Volume(arrays.get(study["image"]), tuple(study["spacing"]), np.asarray(study["affine"]),
                      str(study.get("modality", "OT")), tuple(tuple(p) for p in study.get("presets", [])),
                      str(study.get("source", "")), {}, path=str(study.get("path", "")),
                      kind=str(study.get("kind", "raster")))
    where = given or str(study.get("path", ""))
    if not where:
        raise ValueError(f"{path}: the working session does not say where its study is; give the study")
    series = study.get("series_uid") if _several_series(where) else None
    volume = load(where, series=series, progress=progress)
    expected = sorted(dict(study.get("sha256") or {}).values())
    if expected and sorted(volume.sha256.values()) != expected:
        raise ValueError(f"{where}: not the study this working session was drawn on (its files hash differently)")
    if list(volume.shape) != list(study["shape"]):
        raise ValueError(f"{where}: the study's shape {volume.shape} differs from the working session's "
                         f"{tuple(study['shape'])}")
    return volume


def open_working(path: str | os.PathLike[str], *, study: str | None = None,
                 progress: Callable[[int, int], None] | None = None,
                 operator: str | None = None) -> tuple["Session", dict[str, Any]]:
    """A session continuing the working-session file at ``path``, and the file's ``meta``.

    The study is read again from where the file says (or from ``study``) and
    must hash as recorded. The undo stack starts empty; the recorded
    commands stay in the session's history (and in its saved provenance).
    """
    from engine.session.session import Session

    p = Path(os.fspath(path))
    manifest, z = _read_manifest(p)
    try:
        with z.open(_ARRAYS) as fh:
            with np.load(io.BytesIO(fh.read()), allow_pickle=False) as npz:
                arrays = _Arrays({k: npz[k] for k in npz.files})
    except (KeyError, ValueError, OSError, zipfile.BadZipFile) as exc:
        raise ValueError(f"{p}: the working session's arrays cannot be read ({exc})") from None
    finally:
        z.close()
    volume = _open_study(manifest["study"], arrays, p, study, progress)
    session = Session(volume, operator=manifest.get("operator", "") if operator is None else operator)
    labels = tuple(Label(int(d["index"]), str(d["name"]), str(d["colour"]), bool(d["locked"]))
                   for d in manifest["labels"])
    outlines = {}
    for record in manifest["outlines"]:
        outline = _decode_outline(record, arrays)
        if outline.mask.shape != volume.shape[1:]:
            raise ValueError(f"{p}: an outline's shape {outline.mask.shape} differs from the study's slices")
        outlines[(outline.label, outline.slice)] = outline
    settings = {int(k): FrontSettings.from_record(v) for k, v in manifest["settings"].items()}
    live = None
    if manifest.get("live") is not None:
        d = manifest["live"]
        snapshot = None if d["snapshot"] is None else _decode_snapshot(d["snapshot"], arrays, tuple(volume.shape[1:]))
        live = LiveState(int(d["label"]), int(d["slice"]), tuple(tuple(float(v) for v in s) for s in d["seeds"]),
                         snapshot, bool(d["vanished"]), str(d["origin"]), None)
        if snapshot is not None:
            from engine.session.fronts import new_front_id

            live = LiveState(live.label, live.slice, live.seeds, snapshot, live.vanished, live.origin, new_front_id())
    state = SessionState(labels=labels, outlines=MappingProxyType(outlines), settings=MappingProxyType(settings),
                         live=live)
    session._stack.reset(state)
    session._stack._folded.extend(
        Command(str(h["text"]), str(h["action"]), str(h["time"]), h.get("label"), h.get("slice"),
                MappingProxyType(dict(h.get("details") or {})), state) for h in manifest["history"])
    session._default_settings = FrontSettings.from_record(manifest["default_settings"])
    session._hidden = frozenset(int(i) for i in manifest.get("hidden", []))
    session.prior_history = tuple(manifest.get("prior_history") or ())
    session.prior_review = manifest.get("prior_review")
    session.created = manifest.get("created")
    session.prior_operator = str(manifest.get("prior_operator") or "")
    session.saved_index = -1 if manifest.get("modified", True) else 0
    with session._lock:
        session._sync_front(state)
        session._publish(refine=True)
    return session, dict(manifest.get("meta") or {})
