"""Review steps as records: the history entry a step adds, and the review block it implies.

A step is recorded twice in the sidecar, and the two must agree:

- in the hash-chained edit history (``Isotide.History``), as an entry with
  ``Action`` ``"review"`` whose ``Details`` hold ``step``, ``from``,
  ``state``, ``reviewer`` (or null), ``comment`` (or null), ``marks``,
  ``version`` and ``voxel_sha256`` (the mask's voxels the step was taken
  on); editing it breaks the chain;
- in the review block (``Isotide.Review``): ``State``; ``Reviewer`` (the
  last reviewer who gave a name); ``Decisions``, one per step of the current
  version (``Step``, ``From``, ``State``, ``Reviewer``, ``Time``,
  ``Comment``, ``Marks``, ``Version``, ``VoxelSHA256`` and
  ``HistorySHA256``, the hash of its history entry); ``Comments``, one per
  comment and per note on an outline (``Text``, ``Step``, ``Reviewer``,
  ``Time``, ``HistorySHA256`` and, for a note, ``Label``, ``Slice`` and
  optionally ``Point``).

:func:`derive_review` rebuilds the second from the first;
:func:`engine.review.consistency.review_problems` compares them.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from engine.review.workflow import STEPS

__all__ = ["Mark", "Decision", "Comment", "REVIEW_ACTION", "review_entry", "derive_review", "review_entries",
           "decision_from_record", "comment_from_record", "MAX_TEXT", "MAX_NAME", "clean_text"]

#: ``Action`` of a review step's history entry.
REVIEW_ACTION = "review"
#: Longest comment or note (characters).
MAX_TEXT = 10000
#: Longest reviewer name (characters).
MAX_NAME = 128


def clean_text(value: Any, name: str, *, limit: int = MAX_TEXT, one_line: bool = False) -> str | None:
    """``value`` as stripped text (None when empty).

    Raises
    ------
    ValueError
        ``name``: not text, too long, or (``one_line``) more than one line.
    """
    if value is None:
        return None
    if not isinstance(value, str):
        raise ValueError(f"{name}: expected text, got {type(value).__name__}")
    text = value.strip().replace("\r\n", "\n").replace("\r", "\n")
    if not text:
        return None
    if len(text) > limit:
        raise ValueError(f"{name}: at most {limit} characters, got {len(text)}")
    if one_line and "\n" in text:
        raise ValueError(f"{name}: expected one line")
    if any(ord(c) < 32 and c not in "\n\t" for c in text):
        raise ValueError(f"{name}: holds control characters")
    return text


@dataclass(frozen=True)
class Mark:
    """A reviewer's note on one label's outline on one slice (optionally at a point ``(row, col)``)."""

    label: int
    slice: int
    note: str
    point: tuple[float, float] | None = None

    def as_record(self) -> dict[str, Any]:
        out: dict[str, Any] = {"Label": int(self.label), "Slice": int(self.slice), "Note": self.note}
        if self.point is not None:
            out["Point"] = [round(float(self.point[0]), 2), round(float(self.point[1]), 2)]
        return out

    @classmethod
    def from_record(cls, record: Mapping[str, Any]) -> "Mark":
        point = record.get("Point")
        return cls(int(record["Label"]), int(record["Slice"]), str(record["Note"]),
                   (float(point[0]), float(point[1])) if isinstance(point, Sequence) and len(point) == 2 else None)


@dataclass(frozen=True)
class Decision:
    """One review step as read back (``history_sha256`` empty for a decision written by hand before steps were
    recorded in the history)."""

    step: str
    source: str
    state: str
    reviewer: str | None
    time: str
    comment: str | None
    marks: tuple[Mark, ...]
    version: int
    history_sha256: str = ""


@dataclass(frozen=True)
class Comment:
    """A comment or a note on an outline, as read back."""

    text: str
    step: str = ""
    reviewer: str | None = None
    time: str = ""
    label: int | None = None
    slice: int | None = None
    point: tuple[float, float] | None = None


def review_entry(step: str, *, source: str, reviewer: str | None, comment: str | None, marks: Iterable[Mark],
                 version: int, voxel_sha256: str, now: str) -> dict[str, Any]:
    """The history entry of a review step (not yet chained)."""
    s = STEPS[step]
    return {"Action": REVIEW_ACTION, "Time": now,
            "Details": {"step": s.key, "from": source, "state": s.target, "reviewer": reviewer, "comment": comment,
                        "marks": [m.as_record() for m in marks], "version": int(version),
                        "voxel_sha256": voxel_sha256}}


def review_entries(history: Sequence[Any], version: int) -> list[Mapping[str, Any]]:
    """The chained review entries of ``version`` in ``history``, oldest first."""
    out = []
    for entry in history:
        if not isinstance(entry, Mapping) or entry.get("Action") != REVIEW_ACTION:
            continue
        details = entry.get("Details")
        if isinstance(details, Mapping) and details.get("version") == version:
            out.append(entry)
    return out


def _decision_record(entry: Mapping[str, Any]) -> dict[str, Any]:
    d = entry["Details"]
    step = STEPS.get(str(d.get("step")))
    return {"Step": step.word if step else str(d.get("step")), "From": d.get("from"), "State": d.get("state"),
            "Reviewer": d.get("reviewer"), "Time": entry.get("Time"), "Comment": d.get("comment"),
            "Marks": list(d.get("marks") or []), "Version": d.get("version"), "VoxelSHA256": d.get("voxel_sha256"),
            "HistorySHA256": entry.get("SHA256")}


def _comment_records(entry: Mapping[str, Any]) -> list[dict[str, Any]]:
    d = entry["Details"]
    step = STEPS.get(str(d.get("step")))
    base = {"Step": step.word if step else str(d.get("step")), "Reviewer": d.get("reviewer"),
            "Time": entry.get("Time"), "HistorySHA256": entry.get("SHA256")}
    out = []
    if d.get("comment"):
        out.append({"Text": d["comment"], **base})
    for mark in d.get("marks") or []:
        if isinstance(mark, Mapping):
            item = {"Text": mark.get("Note"), "Label": mark.get("Label"), "Slice": mark.get("Slice"), **base}
            if "Point" in mark:
                item["Point"] = mark["Point"]
            out.append(item)
    return out


def derive_review(history: Sequence[Any], version: int) -> dict[str, Any] | None:
    """The review block the history's review entries of ``version`` imply (None when there are none).

    Returns
    -------
    dict or None
        ``State`` (that of the last step), ``Reviewer`` (the last name
        given), ``Decisions`` and ``Comments`` as described in the module
        docstring.
    """
    entries = review_entries(history, version)
    if not entries:
        return None
    reviewer = None
    for entry in entries:
        if entry["Details"].get("reviewer"):
            reviewer = entry["Details"]["reviewer"]
    return {"State": entries[-1]["Details"].get("state"), "Reviewer": reviewer,
            "Decisions": [_decision_record(e) for e in entries],
            "Comments": [c for e in entries for c in _comment_records(e)]}


def _marks(value: Any) -> tuple[Mark, ...]:
    out = []
    for item in value or []:
        try:
            out.append(Mark.from_record(item))
        except (KeyError, TypeError, ValueError):
            continue
    return tuple(out)


def decision_from_record(record: Any) -> Decision:
    """A :class:`Decision` from a review block's decision (tolerant of decisions written by hand)."""
    if not isinstance(record, Mapping):
        return Decision("", "", "", None, "", str(record), (), 0)
    version = record.get("Version")
    return Decision(step=str(record.get("Step") or record.get("decision") or ""),
                    source=str(record.get("From") or ""), state=str(record.get("State") or ""),
                    reviewer=record.get("Reviewer") if isinstance(record.get("Reviewer"), str) else None,
                    time=str(record.get("Time") or ""),
                    comment=record.get("Comment") if isinstance(record.get("Comment"), str) else None,
                    marks=_marks(record.get("Marks")), version=version if isinstance(version, int) else 0,
                    history_sha256=str(record.get("HistorySHA256") or ""))


def comment_from_record(record: Any) -> Comment:
    """A :class:`Comment` from a review block's comment (a plain string in older sidecars)."""
    if not isinstance(record, Mapping):
        return Comment(str(record))
    point = record.get("Point")

    def number(key: str) -> int | None:
        value = record.get(key)
        return value if isinstance(value, int) and not isinstance(value, bool) else None

    return Comment(text=str(record.get("Text") or ""), step=str(record.get("Step") or ""),
                   reviewer=record.get("Reviewer") if isinstance(record.get("Reviewer"), str) else None,
                   time=str(record.get("Time") or ""), label=number("Label"), slice=number("Slice"),
                   point=(float(point[0]), float(point[1])) if isinstance(point, Sequence) and len(point) == 2
                   else None)
