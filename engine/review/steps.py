"""Recording a review step on a saved result, and reading a result's review back.

:func:`record_step` checks the result first (:func:`engine.io.verify`: a
result that no longer matches its record is not reviewed), checks that its
state allows the step (:mod:`engine.review.workflow`), appends the step to
the hash-chained history, rebuilds the review block from the recorded steps
(:func:`engine.review.records.derive_review`) and writes the sidecar again,
resealed, atomically (:func:`engine.io.save_sidecar`); the mask and label
table are not touched. :func:`read_review` reads what a reviewer needs to
see: state, decisions, comments, notes on outlines and earlier versions.

Only a name given by the caller is recorded as reviewer: never the login
name of the computer.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from engine.review.records import (
    MAX_NAME,
    Comment,
    Decision,
    Mark,
    clean_text,
    comment_from_record,
    decision_from_record,
    derive_review,
    review_entry,
)
from engine.review.workflow import ReviewStepError, allowed_steps, check_step

__all__ = ["record_step", "read_review", "ReviewRecord", "VersionInfo", "LabelInfo", "ResultMismatchError",
           "ResultChangedError", "NotAResultError", "check_marks"]


class NotAResultError(ValueError):
    """The path is no readable Isotide result sidecar."""


class ResultMismatchError(ValueError):
    """The result no longer matches its record (:func:`engine.io.verify` failed): it is not reviewed.

    Attributes
    ----------
    problems : list of str
        What verify found.
    """

    def __init__(self, message: str, problems: Sequence[str]) -> None:
        self.problems = list(problems)
        super().__init__(message)


class ResultChangedError(ValueError):
    """The sidecar changed since the caller read it (another step or a save came first)."""


@dataclass(frozen=True)
class LabelInfo:
    """A label of the result: index, name, colour, voxels and the slices its outlines are on."""

    index: int
    name: str
    colour: str
    voxels: int
    volume_mm3: float
    slices: tuple[int, ...]


@dataclass(frozen=True)
class VersionInfo:
    """One version of the result: its number and review (``current`` for the version in the files)."""

    version: int
    state: str
    reviewer: str | None
    saved: str
    decisions: tuple[Decision, ...]
    comments: tuple[Comment, ...]
    current: bool
    note: str = ""


@dataclass(frozen=True)
class ReviewRecord:
    """A result's review as read from its sidecar (see :func:`read_review`)."""

    path: Path
    sidecar_sha256: str
    state: str
    reviewer: str | None
    version: int
    decisions: tuple[Decision, ...]
    comments: tuple[Comment, ...]
    versions: tuple[VersionInfo, ...]
    labels: tuple[LabelInfo, ...]
    slices: int
    saved: str
    operator: str

    @property
    def allowed(self) -> tuple[str, ...]:
        """The steps the state allows (``submit``, ``approve``, ``return``)."""
        return allowed_steps(self.state)

    @property
    def marks(self) -> tuple[Mark, ...]:
        """Every note on an outline in this version's decisions."""
        return tuple(m for d in self.decisions for m in d.marks)


def _sidecar(path: str | os.PathLike[str]) -> Path:
    from engine.io.verify import sidecar_path

    if not isinstance(path, (str, os.PathLike)):
        raise ValueError(f"path: expected a str or path-like, got {type(path).__name__}")
    return sidecar_path(path)


def _load(sidecar: Path) -> tuple[bytes, dict[str, Any]]:
    try:
        raw = sidecar.read_bytes()
    except FileNotFoundError:
        raise NotAResultError(f"{sidecar}: no such result sidecar") from None
    except OSError as exc:
        raise NotAResultError(f"{sidecar}: cannot be read ({exc.strerror or exc})") from None
    try:
        doc = json.loads(raw.decode("utf-8"))
        block = doc["Isotide"]
        if not isinstance(block, dict) or not isinstance(block["Review"], dict) or "Output" not in block:
            raise KeyError("Isotide")
    except (ValueError, KeyError, TypeError):
        raise NotAResultError(f"{sidecar}: not an Isotide result sidecar") from None
    return raw, doc


def _labels(block: Mapping[str, Any]) -> tuple[LabelInfo, ...]:
    out = []
    for lab in block.get("Labels", []):
        if not isinstance(lab, Mapping):
            continue
        slices = sorted({int(s["Slice"]) for s in lab.get("Slices", []) if isinstance(s, Mapping) and "Slice" in s})
        out.append(LabelInfo(int(lab.get("Index", 0)), str(lab.get("Name", "")), str(lab.get("Color", "#FFFFFF")),
                             int(lab.get("Voxels", 0)), float(lab.get("VolumeMM3", 0.0)), tuple(slices)))
    return tuple(out)


def _version(block: Mapping[str, Any]) -> int:
    value = block.get("Version")
    return value if isinstance(value, int) and not isinstance(value, bool) and value >= 1 else 1


def _record(sidecar: Path, raw: bytes, doc: Mapping[str, Any]) -> ReviewRecord:
    from engine.io.hashing import sha256_bytes

    block = doc["Isotide"]
    review = block["Review"]
    decisions = tuple(decision_from_record(d) for d in review.get("Decisions") or [])
    comments = tuple(comment_from_record(c) for c in review.get("Comments") or [])
    version = _version(block)
    versions = []
    for item in block.get("Versions") or []:
        if not isinstance(item, Mapping):
            continue
        earlier = item.get("Review") if isinstance(item.get("Review"), Mapping) else None
        versions.append(VersionInfo(
            version=int(item.get("Version", 0)), state=str(earlier.get("State")) if earlier else "unknown",
            reviewer=earlier.get("Reviewer") if earlier and isinstance(earlier.get("Reviewer"), str) else None,
            saved=str(item.get("Saved") or ""),
            decisions=tuple(decision_from_record(d) for d in (earlier or {}).get("Decisions") or []),
            comments=tuple(comment_from_record(c) for c in (earlier or {}).get("Comments") or []),
            current=False, note=str(item.get("Note") or "")))
    state = str(review.get("State"))
    reviewer = review.get("Reviewer") if isinstance(review.get("Reviewer"), str) else None
    versions.append(VersionInfo(version, state, reviewer, str(block.get("Saved") or ""), decisions, comments, True))
    shape = block.get("Input", {}).get("Shape", [1])
    return ReviewRecord(path=sidecar, sidecar_sha256=sha256_bytes(raw), state=state, reviewer=reviewer,
                        version=version, decisions=decisions, comments=comments, versions=tuple(versions),
                        labels=_labels(block), slices=int(shape[0]) if shape else 1,
                        saved=str(block.get("Saved") or ""), operator=str(block.get("Operator") or ""))


def read_review(path: str | os.PathLike[str]) -> ReviewRecord:
    """The review of the result at ``path`` (its sidecar, mask or ``DIR/NAME``), as recorded.

    Reads the sidecar only (quick); :func:`engine.io.verify` says whether
    the record still matches the files.

    Raises
    ------
    NotAResultError
        No such file, or not an Isotide result sidecar.
    """
    sidecar = _sidecar(path)
    raw, doc = _load(sidecar)
    return _record(sidecar, raw, doc)


def check_marks(marks: Iterable[Mark | Mapping[str, Any]], *, labels: Iterable[int], slices: int) -> list[Mark]:
    """Marks checked against the result's labels and slices.

    Raises
    ------
    ValueError
        ``marks``: a label the result does not have, a slice outside it, an
        empty note or a point that is not two finite numbers.
    """
    import math

    known = set(labels)
    out = []
    for i, mark in enumerate(marks):
        if isinstance(mark, Mapping):
            try:
                mark = Mark.from_record({"Label": mark.get("Label", mark.get("label")),
                                         "Slice": mark.get("Slice", mark.get("slice")),
                                         "Note": mark.get("Note", mark.get("note")),
                                         **({"Point": mark.get("Point", mark.get("point"))}
                                            if mark.get("Point", mark.get("point")) is not None else {})})
            except (KeyError, TypeError, ValueError):
                raise ValueError(f"marks: note {i} needs a label, a slice and a note") from None
        if not isinstance(mark, Mark):
            raise ValueError(f"marks: note {i} is not a Mark")
        if mark.label not in known:
            raise ValueError(f"marks: note {i}: the result has no label {mark.label} "
                             f"(it has {', '.join(map(str, sorted(known))) or 'none'})")
        if not 0 <= mark.slice < slices:
            raise ValueError(f"marks: note {i}: slice {mark.slice} is outside 0..{slices - 1}")
        note = clean_text(mark.note, f"marks: note {i}")
        if note is None:
            raise ValueError(f"marks: note {i} is empty")
        if mark.point is not None and not all(math.isfinite(v) for v in mark.point):
            raise ValueError(f"marks: note {i}: its point must be two finite numbers")
        out.append(Mark(mark.label, mark.slice, note, mark.point))
    return out


def record_step(path: str | os.PathLike[str], step: str, *, reviewer: str | None = None,
                comment: str | None = None, marks: Iterable[Mark | Mapping[str, Any]] = (),
                expect_sha256: str | None = None, now: str | None = None,
                checkpoint: Callable[[], None] | None = None) -> ReviewRecord:
    """Record a review step (``submit``, ``approve`` or ``return``) on the saved result at ``path``.

    Parameters
    ----------
    path : str or path-like
        The result's sidecar, mask or ``DIR/NAME``.
    step : str
        ``"submit"`` (Draft → Submitted), ``"approve"`` (Submitted →
        Approved) or ``"return"`` (Submitted → Returned).
    reviewer : str, optional
        Who takes the step, as they give it (one line). Needed to approve or
        return; recorded only when given.
    comment : str, optional
        The reviewer's comment. A return needs a comment or a note.
    marks : iterable of Mark or dict
        Notes on outlines: label, slice, note and optionally a point
        ``(row, col)``.
    expect_sha256 : str, optional
        SHA-256 of the sidecar as the caller last read it: the step is
        refused if the file changed since.
    now : str, optional
        Time of the step (ISO 8601 UTC; default now).
    checkpoint : callable, optional
        Called after the checks and before the sidecar is written; raise
        from it (a command line's Ctrl-C) to record nothing.

    Returns
    -------
    ReviewRecord
        The review as now recorded.

    Raises
    ------
    NotAResultError
        No such result sidecar, or not one.
    ResultMismatchError
        The result fails :func:`engine.io.verify`; nothing is recorded.
    ReviewStepError
        The result's state does not allow the step (the message names it).
    ResultChangedError
        The sidecar changed since ``expect_sha256`` was taken, or while the
        step was being recorded.
    ValueError
        ``reviewer``, ``comment`` or ``marks``: missing or bad (named).
    SaveError
        Writing failed; the previous sidecar is intact.

    References
    ----------
    .. [1] S. Haber and W. S. Stornetta, "How to time-stamp a digital
       document", J. Cryptology 3(2) (1991) 99-111 (a record linked to the
       hash of the one before).
    """
    from engine.io import save_sidecar, verify
    from engine.io.hashing import chain_anchor, chain_history, sha256_bytes
    from engine.io.sidecar import utc_now

    sidecar = _sidecar(path)
    name = clean_text(reviewer, "reviewer", limit=MAX_NAME, one_line=True)
    text = clean_text(comment, "comment")
    report = verify(sidecar)
    if not report.readable:
        raise NotAResultError(" ".join(report.problems[0].split()))
    raw, doc = _load(sidecar)
    if expect_sha256 is not None and sha256_bytes(raw) != expect_sha256:
        raise ResultChangedError(f"{sidecar}: the result changed since it was read (another review step or a "
                                 "save came first); read it again")
    if not report.ok:
        raise ResultMismatchError(f"{sidecar}: not reviewed: the result no longer matches its record "
                                  f"({report.problems[0]})", report.problems)
    block = doc["Isotide"]
    state = str(block["Review"].get("State"))
    try:
        s = check_step(state, step)
    except ReviewStepError as exc:
        raise ReviewStepError(f"{sidecar}: {exc}", state=exc.state, step=exc.step) from None
    if s.needs_reviewer and name is None:
        raise ValueError(f"reviewer: to {s.key} a result, give the reviewer's name")
    shape = block["Input"]["Shape"]
    checked = check_marks(marks, labels=[int(lab["Index"]) for lab in block["Labels"]], slices=int(shape[0]))
    if s.needs_comment and text is None and not checked:
        raise ValueError(f"comment: to {s.key} a result, say why (a comment or a note on an outline)")
    version = _version(block)
    now = now or utc_now()
    entry = review_entry(s.key, source=state, reviewer=name, comment=text, marks=checked, version=version,
                         voxel_sha256=str(block["Output"]["VoxelSHA256"]), now=now)
    anchor = chain_anchor(str(f.get("SHA256")) for f in block["Input"]["Files"])
    history = chain_history([*block["History"], entry], anchor=anchor, now=now)
    derived = derive_review(history, version)
    review = dict(block["Review"])
    kept_decisions = [d for d in review.get("Decisions") or [] if not (isinstance(d, Mapping) and
                                                                      d.get("HistorySHA256"))]
    kept_comments = [c for c in review.get("Comments") or [] if not (isinstance(c, Mapping) and
                                                                     c.get("HistorySHA256"))]
    block["History"] = history
    block["HistoryHead"] = history[-1]["SHA256"]
    block["Review"] = {"State": derived["State"], "Reviewer": derived["Reviewer"],
                       "Decisions": kept_decisions + derived["Decisions"],
                       "Comments": kept_comments + derived["Comments"]}
    try:
        current = sidecar.read_bytes()
    except OSError as exc:
        raise ResultChangedError(f"{sidecar}: cannot be read again ({exc.strerror or exc})") from None
    if current != raw:
        raise ResultChangedError(f"{sidecar}: the result changed while the step was being recorded; read it again")
    if checkpoint is not None:
        checkpoint()
    save_sidecar(sidecar, doc)
    return read_review(sidecar)
