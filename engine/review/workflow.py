"""The sign-off workflow: which step each review state allows, and the error for one it does not.

States (:data:`engine.io.REVIEW_STATES`) and steps::

    Draft --submit--> Submitted --approve--> Approved   (final for that version)
                                \\--return---> Returned  (with comments)
    Returned / Approved --(save a new version)--> Draft  (version n + 1)

A step is recorded on a saved result's sidecar (:mod:`engine.review.steps`);
going back to ``Draft`` is not a step but a save of reworked outlines as a
new version (:func:`engine.io.save_result` with ``new_version=True``), which
keeps the earlier versions' reviews.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["STEPS", "Step", "ReviewStepError", "allowed_steps", "check_step", "next_state", "step_named"]


@dataclass(frozen=True)
class Step:
    """One review step: its key, the word shown, the state it leaves from and the state it leads to."""

    key: str
    word: str
    source: str
    target: str
    needs_reviewer: bool
    needs_comment: bool


#: Every step, keyed by name. An approval or a return names who took it; a
#: return says why (a comment or a note on an outline).
STEPS: dict[str, Step] = {
    "submit": Step("submit", "Submit", "Draft", "Submitted", needs_reviewer=False, needs_comment=False),
    "approve": Step("approve", "Approve", "Submitted", "Approved", needs_reviewer=True, needs_comment=False),
    "return": Step("return", "Return", "Submitted", "Returned", needs_reviewer=True, needs_comment=True),
}

#: Why nothing can be done in a state, for messages (what to do instead).
_WHY = {
    "Draft": "a Draft is submitted for review first",
    "Submitted": "it is already Submitted and waits for approval or return",
    "Approved": "an approval is final for its version; edit the outlines and save them as a new version, "
                "a Draft, to review them again",
    "Returned": "rework the outlines and save them as a new version, a Draft, then submit that",
}


class ReviewStepError(ValueError):
    """A step the result's review state does not allow (the message names the state).

    Attributes
    ----------
    state : str
        The result's review state.
    step : str
        The step asked for.
    """

    def __init__(self, message: str, *, state: str, step: str) -> None:
        self.state = state
        self.step = step
        super().__init__(message)


def step_named(step: str) -> Step:
    """The :class:`Step` called ``step`` (``submit``, ``approve`` or ``return``).

    Raises
    ------
    ValueError
        ``step``: not one of them.
    """
    found = STEPS.get(str(step).strip().lower())
    if found is None:
        raise ValueError(f"step: expected one of {', '.join(STEPS)}, got {step!r}")
    return found


def allowed_steps(state: str) -> tuple[str, ...]:
    """The steps a result in review state ``state`` allows (empty for Approved and Returned)."""
    return tuple(key for key, s in STEPS.items() if s.source == state)


def next_state(state: str, step: str) -> str:
    """The review state after ``step`` from ``state`` (see :func:`check_step` for the errors)."""
    return check_step(state, step).target


def check_step(state: str, step: str) -> Step:
    """The step ``step`` when state ``state`` allows it.

    Raises
    ------
    ReviewStepError
        ``state`` does not allow ``step``; the message names the state and
        what to do instead.
    ValueError
        ``step`` is no step, or ``state`` no review state.
    """
    from engine.io import REVIEW_STATES

    s = step_named(step)
    if state not in REVIEW_STATES:
        raise ValueError(f"state: expected one of {', '.join(REVIEW_STATES)}, got {state!r}")
    if s.source != state:
        raise ReviewStepError(f"cannot {s.key}: the result is {state} ({_WHY[state]})", state=state, step=s.key)
    return s
