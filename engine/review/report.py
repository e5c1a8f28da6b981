"""The review summary: one self-contained HTML file a clinician can read and archive.

:func:`write_report` writes ``NAME_review.html`` beside a result (or where
asked): the record check (:func:`engine.io.verify`), the study (patient
identifiers only when the sidecar holds them, which it does only on
request), the result and how each outline was made (model, settings, seeds,
steps, converged, manual edits), a picture of every outlined slice with its
area and the reviewers' notes, the sign-off with every decision, the
earlier versions, the edit history, and the caution that Isotide is not a
medical device. Pictures are PNG embedded as ``data:`` URIs and the style
sheet is inline, so the file needs nothing else to be read. Every text from
the files is escaped (:func:`html.escape`): a name or comment cannot become
markup.
"""

from __future__ import annotations

import base64
import html
import json
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from engine.review.records import comment_from_record, decision_from_record
from engine.review.steps import NotAResultError, _load, _sidecar

__all__ = ["write_report", "report_html", "ReportResult", "report_path", "CAUTION"]

#: The caution every summary carries (README and About box say the same).
CAUTION = ("Isotide is not a medical device. Every outline it produces must be reviewed by qualified people "
           "before any use. Local regulations and licensed practice govern clinical use.")

#: Setting key -> the word shown (see the Front panel) and its unit.
_SETTING_WORDS = {
    "drive": ("Drive", ""), "smoothness": ("Smoothness", ""), "curvature_weight": ("Smoothness", ""),
    "edge_pull": ("Edge pull", ""), "edge_sigma": ("Edge scale σ", " mm"), "edge_contrast": ("Edge contrast K", ""),
    "edge_weight": ("Edge weight", ""), "window": ("Intensity window", ""), "local_radius": ("Local radius", " mm"),
    "outline_averaging": ("Outline averaging", " mm"), "detail": ("Detail", ""), "band_width": ("Band width", ""),
    "stencil_size": ("Stencil size", ""), "degree": ("Polynomial degree", ""), "integrator": ("Integrator", ""),
    "coarse": ("Coarse start", ""), "nodes": ("Nodes", ""), "max_steps": ("Max steps", ""),
    "smoothness_scale": ("smoothness_scale", ""),
}
_MAIN_SETTINGS = ("drive", "smoothness", "curvature_weight", "outline_averaging", "detail")
_MODEL_SETTINGS = {"edge": ("edge_pull", "edge_sigma", "edge_contrast"), "window": ("window",)}
_MODELS = {"region": "Region (Chan–Vese)", "edge": "Edge (geodesic)", "window": "Intensity window",
           "curvature": "curvature", "constant": "constant"}
_EDITS = {"extend": "Extend", "trim": "Trim", "pin": "Pin", "margin": "Margin", "clear_pins": "Clear pins"}

_CSS = """
body{font:14px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif;color:#1a1a1a;margin:24px auto;max-width:1100px;
padding:0 16px}
h1{font-size:22px;margin:0 0 4px}h2{font-size:18px;border-bottom:1px solid #bbb;padding-bottom:3px;margin-top:28px}
h3{font-size:16px;margin:18px 0 6px}
table{border-collapse:collapse;margin:6px 0}td,th{border:1px solid #ccc;padding:3px 7px;text-align:left;
vertical-align:top}th{background:#f0f0f0;font-weight:600}
.caution{border:2px solid #D55E00;background:#fff4ec;padding:8px 12px;margin:12px 0;font-weight:600}
.ok{border-left:6px solid #009E73;background:#eefaf5;padding:6px 10px}
.bad{border-left:6px solid #D55E00;background:#fff0e8;padding:6px 10px}
.state{font-weight:700;font-size:17px}
.swatch{display:inline-block;width:14px;height:14px;border:1px solid #555;vertical-align:-2px;margin-right:6px}
.slices{display:flex;flex-wrap:wrap;gap:14px}
.card{border:1px solid #ccc;padding:8px;width:340px;box-sizing:border-box;break-inside:avoid;
page-break-inside:avoid}
.card img{display:block;max-width:100%;background:#000}
.muted{color:#555}.small{font-size:12px}
ol.notes{margin:4px 0 0 18px;padding:0}
@media print{body{margin:0;max-width:none}.card{width:46%}}
"""


@dataclass(frozen=True)
class ReportResult:
    """What :func:`write_report` wrote: the file, whether the record verified, and the pictures drawn."""

    path: Path
    verified: bool
    pictures: int
    study_found: bool


def report_path(sidecar: str | os.PathLike[str]) -> Path:
    """``DIR/NAME_review.html`` for the result whose sidecar is ``DIR/NAME_dseg.json``."""
    p = _sidecar(sidecar)
    name = p.name[: -len("_dseg.json")] if p.name.endswith("_dseg.json") else p.stem
    return p.with_name(f"{name}_review.html")


def _e(value: Any) -> str:
    """Escaped text of any value ("–" for None)."""
    if value is None or value == "":
        return "–"
    return html.escape(str(value), quote=True)


def _local(iso: Any) -> str:
    """An ISO 8601 UTC time as shown: date and time, UTC."""
    try:
        return datetime.fromisoformat(str(iso).replace("Z", "+00:00")).strftime("%Y-%m-%d %H:%M UTC")
    except ValueError:
        return str(iso or "")


def _number(value: Any, digits: int = 1) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return _e(value)
    return f"{value:,.{digits}f}"


def _setting_text(key: str, value: Any) -> str:
    if isinstance(value, (list, tuple)) and len(value) == 2 and key == "window":
        return f"{value[0]:g} to {value[1]:g}"
    if key == "detail":
        return f"{value}×"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def settings_text(model: Any, parameters: Mapping[str, Any] | None) -> str:
    """The settings an outline was made with, in the window's words (main ones, then any changed advanced one)."""
    from engine.front import FrontParams

    params = dict(parameters or {})
    model = str(model or params.get("model") or "")
    try:
        defaults = FrontParams(model=model).as_dict() if model else {}
    except (ValueError, TypeError):
        defaults = {}
    keys = [k for k in _MAIN_SETTINGS if k in params] + [k for k in _MODEL_SETTINGS.get(model, ()) if k in params]
    keys += [k for k in params if k not in keys and k not in ("model",) and k in _SETTING_WORDS
             and (k not in defaults or params[k] != defaults[k]) and params[k] is not None]
    parts = [f"{_SETTING_WORDS[k][0]} {_setting_text(k, params[k])}{_SETTING_WORDS[k][1]}" for k in keys
             if params[k] is not None]
    head = _MODELS.get(model, model)
    return "; ".join([head, *parts]) if head else "; ".join(parts)


def _study(sidecar: Path, block: Mapping[str, Any], volume: Any) -> tuple[Any, str]:
    """The study the result was drawn on (or None) and a note when it is not used."""
    from engine.io import list_series, load

    expected = sorted(f["SHA256"] for f in block["Input"].get("Files", []))
    if volume is None:
        recorded = block["Input"].get("Path", "")
        if not recorded or recorded == "(in memory)":
            return None, "the study was held in memory when the result was saved; pictures show the outlines only"
        path = Path(recorded) if Path(recorded).is_absolute() else sidecar.parent / recorded
        if not path.exists():
            return None, (f"the study is not at {recorded} beside the result; pictures show the outlines only")
        try:
            several = path.is_dir() and len(list_series(str(path))) > 1
            volume = load(str(path), series=block["Input"].get("SeriesInstanceUID") if several else None)
        except (ValueError, OSError) as exc:
            return None, f"the study could not be read ({' '.join(str(exc).split())}); pictures show the outlines only"
    if expected and sorted(volume.sha256.values()) != expected:
        return None, "the study's files differ from those recorded; pictures show the outlines only"
    if tuple(volume.shape) != tuple(block["Input"]["Shape"]):
        return None, "the study's shape differs from the result's; pictures show the outlines only"
    return volume, ""


def _mask(sidecar: Path, block: Mapping[str, Any]) -> np.ndarray | None:
    import nibabel as nib

    try:
        image = nib.load(str(sidecar.parent / block["Output"]["Mask"]["Path"]))
        labels = np.asarray(image.dataobj).transpose(2, 1, 0)
    except Exception:  # noqa: BLE001 - reported in the summary (verify says what is wrong)
        return None
    return labels if list(labels.shape) == list(block["Input"]["Shape"]) else None


def _history_by_outline(history: Sequence[Any]) -> dict[tuple[int, int], dict[str, Any]]:
    """Per (label, slice): manual edits counted by kind, and the last commit's figures."""
    out: dict[tuple[int, int], dict[str, Any]] = {}
    for entry in history:
        if not isinstance(entry, Mapping) or entry.get("Label") is None or entry.get("Slice") is None:
            continue
        key = (int(entry["Label"]), int(entry["Slice"]))
        item = out.setdefault(key, {"edits": {}, "commit": None})
        action = entry.get("Action")
        if action in _EDITS:
            item["edits"][_EDITS[action]] = item["edits"].get(_EDITS[action], 0) + 1
        if action == "commit":
            item["commit"] = entry.get("Details") or {}
    return out


def _picture_tag(png: bytes, alt: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{_e(alt)}">'


def _decisions_table(decisions: Sequence[Any], labels: Mapping[int, str]) -> str:
    if not decisions:
        return '<p class="muted">No review step recorded for this version.</p>'
    rows = ["<tr><th>When</th><th>Step</th><th>State</th><th>Reviewer</th><th>Comment and notes</th></tr>"]
    for d in decisions:
        notes = "".join(f"<li>{_e(labels.get(m.label, f'label {m.label}'))}, slice {m.slice}: {_e(m.note)}</li>"
                        for m in d.marks)
        text = (_e(d.comment) if d.comment else "") + (f'<ol class="notes">{notes}</ol>' if notes else "")
        state = f"{_e(d.source)} → {_e(d.state)}" if d.source else _e(d.state)
        rows.append(f"<tr><td>{_e(_local(d.time))}</td><td>{_e(d.step)}</td><td>{state}</td>"
                    f"<td>{_e(d.reviewer)}</td><td>{text or '–'}</td></tr>")
    return "<table>" + "".join(rows) + "</table>"


def report_html(path: str | os.PathLike[str], *, volume: Any = None,
                checkpoint: Callable[[], None] | None = None) -> tuple[str, Any, int, bool]:
    """The summary's HTML for the result at ``path``.

    Returns
    -------
    (str, VerifyReport, int, bool)
        The HTML, the record check, the number of pictures and whether the
        study was at hand for them.

    Raises
    ------
    NotAResultError
        No such result sidecar, or not one.
    """
    from engine import __version__
    from engine.io import verify
    from engine.io.sidecar import utc_now
    from engine.analysis.metrics import area_mm2
    from engine.review.pictures import slice_picture
    from engine.session.planes import auto_window, plane_views

    sidecar = _sidecar(path)
    report = verify(sidecar)
    if not report.readable:
        raise NotAResultError(" ".join(report.problems[0].split()))
    _, doc = _load(sidecar)
    block = doc["Isotide"]
    name = sidecar.name[: -len("_dseg.json")] if sidecar.name.endswith("_dseg.json") else sidecar.stem
    study, study_note = _study(sidecar, block, volume)
    labels_vol = _mask(sidecar, block)
    shape = [int(v) for v in block["Input"]["Shape"]]
    spacing = [float(v) for v in block["Input"]["SpacingMM"]]
    kind = block["Input"].get("Kind", "")
    view = plane_views(np.asarray(block["Input"]["AffineLPS"], dtype=float), patient_frame=kind in ("dicom", "nifti"))[0]
    window = None
    if study is not None:
        window = tuple(map(float, study.presets[0])) if study.presets else auto_window(study.array)
    review = block["Review"]
    version = block.get("Version") if isinstance(block.get("Version"), int) else 1
    decisions = [decision_from_record(d) for d in review.get("Decisions") or []]
    label_names = {int(lab["Index"]): str(lab["Name"]) for lab in block["Labels"]}
    colours = {int(lab["Index"]): str(lab["Color"]) for lab in block["Labels"]}
    parts: list[str] = []
    add = parts.append
    add(f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Isotide review summary: {_e(name)}"
        f"</title><style>{_CSS}</style></head><body>")
    add(f"<h1>Review summary: {_e(name)}</h1>")
    add(f'<p class="muted">Result {_e(sidecar.name)}, version {version}, saved {_e(_local(block.get("Saved")))}. '
        f"Summary written {_e(_local(utc_now()))} by Isotide {_e(__version__)}.</p>")
    add(f'<div class="caution">{_e(CAUTION)}</div>')

    # the record check
    add("<h2>Record check</h2>")
    if report.ok:
        add(f'<div class="ok">The mask, label table and record match ({len(report.checked)} checks passed: '
            f"{_e(', '.join(report.checked))}).</div>")
    else:
        items = "".join(f"<li>{_e(p)}</li>" for p in report.problems)
        add(f'<div class="bad"><b>The result no longer matches its record.</b> Do not rely on it before it is '
            f"checked.<ul>{items}</ul></div>")
    if report.notes:
        add("<ul class=\"small muted\">" + "".join(f"<li>{_e(n)}</li>" for n in report.notes) + "</ul>")
    add('<p class="small muted">The checks show whether the files were changed after they were recorded; they do '
        "not prove who made them.</p>")

    # sign-off
    add("<h2>Sign-off</h2>")
    add(f'<p><span class="state">{_e(review.get("State"))}</span> (version {version})'
        + (f", reviewer {_e(review.get('Reviewer'))}" if review.get("Reviewer") else "") + "</p>")
    add(_decisions_table(decisions, label_names))
    plain = [c for c in (comment_from_record(c) for c in review.get("Comments") or [])
             if not c.step and c.text]
    if plain:
        add("<p>Comments:</p><ul>" + "".join(f"<li>{_e(c.text)}</li>" for c in plain) + "</ul>")
    earlier = [v for v in block.get("Versions") or [] if isinstance(v, Mapping)]
    add("<h3>Versions</h3><table><tr><th>Version</th><th>State</th><th>Reviewer</th><th>Saved</th>"
        "<th>Review steps</th></tr>")
    for v in earlier:
        rv = v.get("Review") if isinstance(v.get("Review"), Mapping) else None
        count = len((rv or {}).get("Decisions") or [])
        add(f"<tr><td>{_e(v.get('Version'))}</td><td>{_e(rv.get('State') if rv else v.get('Note'))}</td>"
            f"<td>{_e(rv.get('Reviewer') if rv else None)}</td><td>{_e(_local(v.get('Saved')))}</td>"
            f"<td>{count}</td></tr>")
    add(f"<tr><td><b>{version}</b> (these files)</td><td>{_e(review.get('State'))}</td>"
        f"<td>{_e(review.get('Reviewer'))}</td><td>{_e(_local(block.get('Saved')))}</td><td>{len(decisions)}</td>"
        "</tr></table>")
    for v in reversed(earlier):
        rv = v.get("Review") if isinstance(v.get("Review"), Mapping) else None
        if not rv:
            continue
        ds = [decision_from_record(d) for d in rv.get("Decisions") or []]
        add(f"<h3>Version {_e(v.get('Version'))}: {_e(rv.get('State'))}</h3>")
        add(f'<p class="small muted">Replaced by a later version; the outlines reviewed here are identified by '
            f"their mask's voxel hash {_e(str(v.get('VoxelSHA256', ''))[:16])}….</p>")
        add(_decisions_table(ds, label_names))

    # study and result
    inp = block["Input"]
    add("<h2>Study</h2><table>")
    rows = [("Description", inp.get("Description")), ("Kind", inp.get("Kind")), ("Modality", inp.get("Modality")),
            ("Slices × rows × columns", " × ".join(map(str, shape))),
            ("Pixel spacing (mm)", " × ".join(f"{s:g}" for s in spacing)),
            ("Recorded at", inp.get("Path")), ("Files", len(inp.get("Files", []))),
            ("Study UID", inp.get("StudyInstanceUID")), ("Series UID", inp.get("SeriesInstanceUID"))]
    patient = block.get("Patient")
    if isinstance(patient, Mapping):
        rows += [("Patient name", patient.get("Name")), ("Patient ID", patient.get("ID")),
                 ("Patient birth date", patient.get("BirthDate"))]
    for key, value in rows:
        if value not in (None, ""):
            add(f"<tr><th>{_e(key)}</th><td>{_e(value)}</td></tr>")
    add("</table>")
    if not isinstance(patient, Mapping):
        add('<p class="small muted">No patient identifiers: the record holds none.</p>')
    add("<h2>Result</h2><table>")
    operators = sorted({str(e.get("Operator")) for e in block.get("History") or []
                        if isinstance(e, Mapping) and e.get("Operator")})
    for key, value in (("Outlined by", block.get("Operator") or ", ".join(operators) or "not recorded"), ("First saved", _local(block.get("Created"))),
                       ("Saved", _local(block.get("Saved"))),
                       ("Drawn by hand in part", "yes" if doc.get("Manual") or any(
                           isinstance(e, Mapping) and e.get("Action") in _EDITS for e in block.get("History") or [])
                        else "no"),
                       ("Description", doc.get("Description")),
                       ("Software", f"Isotide {block.get('Software', {}).get('Version', '')}, Python "
                                    f"{block.get('Software', {}).get('Python', '')}"),
                       ("Record format", f"schema {block.get('SchemaVersion')}")):
        add(f"<tr><th>{_e(key)}</th><td>{_e(value)}</td></tr>")
    add("</table>")

    # labels, with a picture of every outlined slice
    add("<h2>Outlines</h2>")
    if study_note:
        add(f'<p class="bad">{_e(study_note)}.</p>')
    by_outline = _history_by_outline(block.get("History") or [])
    marks_by_outline: dict[tuple[int, int], list[tuple[int, Any, Any]]] = {}
    number = 0
    for d in decisions:
        for m in d.marks:
            number += 1
            marks_by_outline.setdefault((m.label, m.slice), []).append((number, m, d))
    pictures = 0
    pixel_mm2 = spacing[1] * spacing[2]
    for lab in block["Labels"]:
        index = int(lab["Index"])
        records = {int(r["Slice"]): r for r in lab.get("Slices", []) if isinstance(r, Mapping)}
        present = sorted(int(k) for k in np.flatnonzero((labels_vol == index).any(axis=(1, 2)))) \
            if labels_vol is not None else sorted(records)
        noted = sorted({k for (li, k) in marks_by_outline if li == index})
        add(f'<h3><span class="swatch" style="background:{_e(colours[index])}"></span>{_e(lab["Name"])}</h3>')
        add(f'<p>Label {index}: {lab.get("Voxels", 0):,} voxels, {_number(lab.get("VolumeMM3"), 1)} mm³, outlined on '
            f"{len(present)} slice{'s' if len(present) != 1 else ''}"
            + (f" ({', '.join(map(str, present))})" if present else "") + ".</p>")
        add('<div class="slices">')
        for k in sorted(set(present) | set(noted)):
            if checkpoint is not None:
                checkpoint()
            record = records.get(k, {})
            notes = marks_by_outline.get((index, k), [])
            masks = {}
            if labels_vol is not None:
                masks = {int(v): labels_vol[k] == v for v in np.unique(labels_vol[k]) if v != 0 and int(v) in colours}
            masks.setdefault(index, np.zeros(shape[1:], dtype=bool))
            image = study.array[k] if study is not None else None
            pic = slice_picture(image, masks, colours, index, spacing=spacing[1:], view=view, window=window,
                                notes=[(n, m.point) for n, m, _ in notes if m.point is not None])
            pictures += 1
            area = area_mm2(masks[index], spacing=spacing[1:]) if masks[index].any() else 0.0
            info = by_outline.get((index, k), {"edits": {}, "commit": None})
            commit = info["commit"] or {}
            converged = commit.get("converged")
            notes_text = record.get("Notes")
            if converged is None and isinstance(notes_text, str):
                converged = True if notes_text and "not converged" not in notes_text and "converged" in notes_text \
                    else (False if "not converged" in (notes_text or "") else None)
            edits = ", ".join(f"{word} × {n}" for word, n in info["edits"].items()) or "none recorded"
            add('<div class="card">')
            add(_picture_tag(pic.png, f"{lab['Name']}, slice {k}"))
            add(f"<p><b>Slice {k}</b>: {area:,.1f} mm² ({int(masks[index].sum()):,} pixels of "
                f"{pixel_mm2:.3g} mm²)</p><table class=\"small\">")
            seeds = record.get("Seeds") or []
            seeds_text = "; ".join("(" + ", ".join(f"{float(v):g}" for v in s) + ")" for s in seeds) if seeds else None
            steps = record.get("Steps", commit.get("steps"))
            for key, value in (("Made with", settings_text(record.get("Model"), record.get("Parameters"))
                                if record else None),
                               ("Seeds (row, col, radius px)", seeds_text), ("Steps", steps),
                               ("Converged", {True: "yes", False: "no"}.get(converged)),
                               ("Manual edits", edits), ("Notes", notes_text)):
                add(f"<tr><th>{_e(key)}</th><td>{_e(value)}</td></tr>")
            add("</table>")
            if notes:
                add('<p class="small">Reviewers\' notes:</p><ol class="notes small">')
                for n, m, d in notes:
                    where = "" if m.point is not None else " (no point given)"
                    add(f'<li value="{n}">{_e(m.note)} <span class="muted">— {_e(d.reviewer or "unnamed")}, '
                        f"{_e(d.step)}, {_e(_local(d.time))}{where}</span></li>")
                add("</ol>")
            add("</div>")
        add("</div>")

    # edit history
    history = block.get("History") or []
    add(f"<h2>Edit history</h2><details open><summary>{len(history)} entries, oldest first (hash-chained)"
        "</summary><table class=\"small\"><tr><th>#</th><th>When</th><th>Action</th><th>Label</th><th>Slice</th>"
        "<th>Details</th></tr>")
    for entry in history:
        if not isinstance(entry, Mapping):
            continue
        details = entry.get("Details")
        text = json.dumps(details, ensure_ascii=False, sort_keys=True)[:300] if details else ""
        label = entry.get("Label")
        add(f"<tr><td>{_e(entry.get('Index'))}</td><td>{_e(_local(entry.get('Time')))}</td><td>{_e(entry.get('Action'))}"
            f"</td><td>{_e(label_names.get(label, label) if label is not None else None)}</td>"
            f"<td>{_e(entry.get('Slice'))}</td><td>{_e(text)}</td></tr>")
    add("</table></details>")
    add(f'<div class="caution">{_e(CAUTION)}</div></body></html>')
    return "\n".join(parts), report, pictures, study is not None


def write_report(path: str | os.PathLike[str], out: str | os.PathLike[str] | None = None, *, volume: Any = None,
                 checkpoint: Callable[[], None] | None = None) -> ReportResult:
    """Write the review summary of the result at ``path`` (see the module docstring).

    Parameters
    ----------
    path : str or path-like
        The result's sidecar, mask or ``DIR/NAME``.
    out : str or path-like, optional
        The HTML file (default :func:`report_path`: ``DIR/NAME_review.html``).
    volume : engine.io.Volume, optional
        The study, when it is at hand (else it is read from the path the
        record keeps, if it is there and hashes as recorded).
    checkpoint : callable, optional
        Called before each picture; raise from it to stop (nothing written).

    Returns
    -------
    ReportResult

    Raises
    ------
    NotAResultError
        No such result sidecar, or not one.
    ValueError
        ``out``: not an ``.html`` file name.
    SaveError
        Writing failed (an earlier summary there is intact).
    """
    from engine.io.atomic import commit_files

    target = report_path(path) if out is None else Path(os.fspath(out))
    if target.suffix.lower() not in (".html", ".htm"):
        raise ValueError(f"out: expected a .html file, got {os.fspath(target)!r}")
    text, report, pictures, found = report_html(path, volume=volume, checkpoint=checkpoint)
    target.parent.mkdir(parents=True, exist_ok=True)
    commit_files({target: text.encode("utf-8")})
    return ReportResult(target, report.ok, pictures, found)
