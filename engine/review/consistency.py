"""Does a sidecar's review block agree with the review steps in its hash-chained history?

The seal shows any edit of the file that was not followed by resealing, and
the chain any edit of a recorded step. This check closes the gap between
them: a review block edited and resealed (a state set by hand, a decision
removed or reworded, an approval moved onto other voxels) no longer matches
the steps the chain records. It proves integrity, not authorship: someone
who rewrites the whole history and reseals can still forge a record.

Rules (each broken rule is one line of :func:`review_problems`):

1. a decision or comment that names a history entry (``HistorySHA256``)
   matches the review entry with that hash, word for word;
2. every review step of the current version in the history has its decision;
3. with such steps, the block's ``State`` and ``Reviewer`` are the last
   step's state and the last name given, and an ``Approved`` result's mask
   voxels are the ones the approval was given on;
4. a sidecar of schema 1.2 or later (written since steps are recorded in the
   history) holds no other state than ``Draft``, and no decision or comment,
   that the history does not record.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from engine.review.records import derive_review

__all__ = ["review_problems", "RECORDED_SINCE"]

#: First schema version whose review states must all come from recorded steps.
RECORDED_SINCE = (1, 2, 0)


def _schema(block: Mapping[str, Any]) -> tuple[int, ...]:
    try:
        return tuple(int(p) for p in str(block.get("SchemaVersion", "")).split("."))
    except ValueError:
        return (0,)


def _version(block: Mapping[str, Any]) -> int:
    value = block.get("Version")
    return value if isinstance(value, int) and not isinstance(value, bool) and value >= 1 else 1


def review_problems(block: Mapping[str, Any]) -> list[str]:
    """Where the review block of a sidecar's ``Isotide`` block disagrees with its history (empty: it agrees)."""
    review = block.get("Review")
    history = block.get("History")
    if not isinstance(review, Mapping) or not isinstance(history, list):
        return []  # the schema check reports these
    version = _version(block)
    derived = derive_review(history, version)
    by_hash = {}
    if derived is not None:
        by_hash = {d["HistorySHA256"]: d for d in derived["Decisions"]}
    comments_by_hash: dict[str, list[dict[str, Any]]] = {}
    for c in (derived or {}).get("Comments", []):
        comments_by_hash.setdefault(c["HistorySHA256"], []).append(c)
    all_review_hashes = {e.get("SHA256") for e in history if isinstance(e, Mapping) and e.get("Action") == "review"}
    problems: list[str] = []
    strict = _schema(block) >= RECORDED_SINCE
    decisions = review.get("Decisions") if isinstance(review.get("Decisions"), list) else []
    comments = review.get("Comments") if isinstance(review.get("Comments"), list) else []
    seen: set[str] = set()
    for i, decision in enumerate(decisions):
        key = decision.get("HistorySHA256") if isinstance(decision, Mapping) else None
        if not key:
            if strict:
                problems.append(f"review: decision {i} is not recorded in the history (written by hand)")
            continue
        if key not in by_hash:
            where = "of another version" if key in all_review_hashes else "that the history does not hold"
            problems.append(f"review: decision {i} names a review step {where}")
            continue
        if dict(decision) != by_hash[key]:
            problems.append(f"review: decision {i} differs from the step recorded in the history (edited)")
        seen.add(key)
    missing = [d for d in by_hash if d not in seen]
    if missing:
        problems.append(f"review: {len(missing)} recorded review step(s) of version {version} are missing from "
                        "the decisions (removed)")
    recorded_comments: dict[str, list[Any]] = {}
    for i, comment in enumerate(comments):
        key = comment.get("HistorySHA256") if isinstance(comment, Mapping) else None
        if not key:
            if strict:
                problems.append(f"review: comment {i} is not recorded in the history (written by hand)")
            continue
        recorded_comments.setdefault(key, []).append(dict(comment))
    for key in set(recorded_comments) | set(comments_by_hash):
        if recorded_comments.get(key, []) != comments_by_hash.get(key, []):
            problems.append("review: comments differ from the notes of the steps recorded in the history")
            break
    state = review.get("State")
    if derived is not None:
        if state != derived["State"]:
            problems.append(f"review: state {state} differs from the last recorded step's {derived['State']} "
                            "(set by hand)")
        if review.get("Reviewer") != derived["Reviewer"]:
            problems.append("review: reviewer differs from the last name recorded with a step")
        if state == "Approved" == derived["State"]:
            approved = derived["Decisions"][-1].get("VoxelSHA256")
            output = block.get("Output") if isinstance(block.get("Output"), Mapping) else {}
            if approved != output.get("VoxelSHA256"):
                problems.append("review: the mask's voxels are not those the approval was given on")
    elif strict and state not in ("Draft", None):
        problems.append(f"review: state {state} is not recorded in the history (set by hand)")
    elif strict and review.get("Reviewer"):
        problems.append("review: a reviewer is named but no review step is recorded")
    return problems
