"""The clinician's review of a saved result: sign-off steps, their record, and the review summary.

A saved result (``NAME_dseg.json`` and its mask) goes ``Draft`` →
``Submitted`` → ``Approved`` or ``Returned``; a returned or approved result
is reworked as a new version, which starts as a ``Draft`` (see
:mod:`engine.review.workflow`). :func:`record_step` records a step on the
sidecar (hash-chained, resealed, written atomically); :func:`read_review`
reads the review back; :func:`review_problems` is the check
:func:`engine.io.verify` runs on the review block; :func:`write_report`
writes the HTML review summary. No Qt here.
"""

from engine.review.consistency import review_problems
from engine.review.records import Comment, Decision, Mark
from engine.review.steps import (
    LabelInfo,
    NotAResultError,
    ResultChangedError,
    ResultMismatchError,
    ReviewRecord,
    VersionInfo,
    check_marks,
    read_review,
    record_step,
)
from engine.review.workflow import STEPS, ReviewStepError, Step, allowed_steps, check_step, next_state

__all__ = [
    "STEPS",
    "Step",
    "ReviewStepError",
    "allowed_steps",
    "check_step",
    "next_state",
    "Mark",
    "Decision",
    "Comment",
    "record_step",
    "read_review",
    "check_marks",
    "ReviewRecord",
    "VersionInfo",
    "LabelInfo",
    "NotAResultError",
    "ResultMismatchError",
    "ResultChangedError",
    "review_problems",
]
