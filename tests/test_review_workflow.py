"""The sign-off workflow on saved results: allowed steps, their record in the hash chain, and tampering.

References used below: the hash chain is re-checked with hashlib's SHA-256
(NIST FIPS 180-4) over the canonical JSON the sidecar documents, the sidecar
with jsonschema against the shipped schema, and the head phantom's truth
labels (``sample_cases/head_mr``) stand in for a technician's outlines.
"""

from __future__ import annotations

import copy
import getpass
import hashlib
import json
import random

import numpy as np
import pytest

import engine.io as eio
from engine.io.sidecar import seal_sidecar, sidecar_bytes
from engine.review import (
    STEPS,
    Mark,
    ResultChangedError,
    ResultMismatchError,
    ReviewStepError,
    allowed_steps,
    check_step,
    read_review,
    record_step,
)
from tests.review_cases import make_result

STATES = ("Draft", "Submitted", "Approved", "Returned")
#: The transitions the sign-off names (Draft -> Submitted -> Approved or Returned); nothing else is a step.
EXPECTED = {("Draft", "submit"): "Submitted", ("Submitted", "approve"): "Approved",
            ("Submitted", "return"): "Returned"}


@pytest.mark.parametrize("state", STATES)
@pytest.mark.parametrize("step", sorted(STEPS))
def test_only_the_named_transitions_are_steps_and_a_refusal_names_the_state(state, step):
    if (state, step) in EXPECTED:
        assert check_step(state, step).target == EXPECTED[(state, step)]
        assert step in allowed_steps(state)
    else:
        with pytest.raises(ReviewStepError, match=f"the result is {state}") as info:
            check_step(state, step)
        assert info.value.state == state and step not in allowed_steps(state)
        assert "\n" not in str(info.value)


def _doc(path):
    return json.loads(path.read_text(encoding="utf-8"))


def _chain_ok(history, inputs):
    """Re-check the chain independently: SHA-256 (hashlib) over canonical JSON without the entry's own hash."""
    prev = hashlib.sha256(json.dumps({"inputs": sorted(inputs)}, sort_keys=True, separators=(",", ":"),
                                     ensure_ascii=False).encode()).hexdigest()
    for i, entry in enumerate(history):
        body = {k: v for k, v in entry.items() if k != "SHA256"}
        digest = hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":"),
                                           ensure_ascii=False).encode()).hexdigest()
        if entry["Index"] != i or entry["PrevSHA256"] != prev or entry["SHA256"] != digest:
            return False
        prev = digest
    return True


def test_submit_then_approve_is_recorded_in_the_chain_and_verifies(tmp_path):
    sidecar = make_result(tmp_path)
    mask_before = (sidecar.parent / "case_dseg.nii.gz").read_bytes()
    before = _doc(sidecar)["Isotide"]
    record = record_step(sidecar, "submit", comment="ready for review", now="2030-01-02T03:04:05Z")
    assert record.state == "Submitted" and record.reviewer is None and eio.verify(sidecar).ok
    record = record_step(sidecar, "approve", reviewer="Dr A. Reviewer", comment="outlines acceptable",
                         marks=[Mark(1, 10, "upper edge hugs the rim", (46.0, 101.5))],
                         now="2030-01-02T04:00:00Z")
    assert record.state == "Approved" and record.reviewer == "Dr A. Reviewer"
    report = eio.verify(sidecar)
    assert report.ok and "review record" in report.checked
    doc = _doc(sidecar)
    assert eio.validate_sidecar(doc) == []
    block = doc["Isotide"]
    inputs = [f["SHA256"] for f in block["Input"]["Files"]]
    assert _chain_ok(block["History"], inputs)
    assert block["History"][:len(before["History"])] == before["History"]  # earlier entries kept as they were
    steps = block["History"][len(before["History"]):]
    assert [e["Action"] for e in steps] == ["review", "review"]
    assert [e["Details"]["state"] for e in steps] == ["Submitted", "Approved"]
    assert block["HistoryHead"] == steps[-1]["SHA256"]
    decisions = block["Review"]["Decisions"]
    assert [d["Step"] for d in decisions] == ["Submit", "Approve"]
    assert [d["HistorySHA256"] for d in decisions] == [e["SHA256"] for e in steps]
    assert decisions[1]["VoxelSHA256"] == block["Output"]["VoxelSHA256"]
    assert decisions[1]["Marks"] == [{"Label": 1, "Slice": 10, "Note": "upper edge hugs the rim",
                                      "Point": [46.0, 101.5]}]
    assert [c["Text"] for c in block["Review"]["Comments"]] == ["ready for review", "outlines acceptable",
                                                               "upper edge hugs the rim"]
    assert (sidecar.parent / "case_dseg.nii.gz").read_bytes() == mask_before  # the mask is not touched
    with pytest.raises(ReviewStepError, match="the result is Approved"):
        record_step(sidecar, "return", reviewer="Dr B", comment="no")
    with pytest.raises(eio.ReviewedResultError, match="Approved"):
        eio.save_result(sidecar.parent / "case", np.zeros(eio.load(tmp_path / "study" / "image.nii.gz").shape,
                                                           np.uint8), eio.load(tmp_path / "study" / "image.nii.gz"),
                        label_table=[{"index": 1, "name": "x"}], provenance={})


def test_a_return_needs_a_reason_and_an_approval_a_name(tmp_path):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    raw = sidecar.read_bytes()
    with pytest.raises(ValueError, match="^comment:"):
        record_step(sidecar, "return", reviewer="Dr A")
    with pytest.raises(ValueError, match="^reviewer:"):
        record_step(sidecar, "approve")
    with pytest.raises(ValueError, match="^reviewer:"):
        record_step(sidecar, "approve", reviewer="two\nlines")
    with pytest.raises(ValueError, match="^marks: note 0: the result has no label 7"):
        record_step(sidecar, "return", reviewer="Dr A", marks=[Mark(7, 10, "x")])
    with pytest.raises(ValueError, match="^marks: note 0: slice 16 is outside 0..15"):
        record_step(sidecar, "return", reviewer="Dr A", marks=[Mark(1, 16, "x")])
    with pytest.raises(ValueError, match="^marks: note 0 is empty"):
        record_step(sidecar, "return", reviewer="Dr A", marks=[{"label": 1, "slice": 10, "note": "  "}])
    assert sidecar.read_bytes() == raw  # nothing recorded by a refused step
    record = record_step(sidecar, "return", reviewer="Dr A", marks=[{"label": 1, "slice": 11, "note": "leaks"}])
    assert record.state == "Returned" and record.marks == (Mark(1, 11, "leaks"),)
    with pytest.raises(ReviewStepError, match="new version"):
        record_step(sidecar, "submit")


def test_no_login_name_is_recorded(tmp_path, monkeypatch):
    login = "zq-login-name-7f3"
    for var in ("USER", "LOGNAME", "USERNAME"):
        monkeypatch.setenv(var, login)
    monkeypatch.setattr(getpass, "getuser", lambda: login)
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit", comment="please look")
    record_step(sidecar, "return", reviewer="Reviewer 2", comment="redo slice 9")
    text = sidecar.read_text(encoding="utf-8")
    assert login not in text and "Reviewer 2" in text
    assert all(d.get("Reviewer") in (None, "Reviewer 2") for d in _doc(sidecar)["Isotide"]["Review"]["Decisions"])


def test_a_step_on_a_result_that_changed_meanwhile_is_refused(tmp_path):
    sidecar = make_result(tmp_path)
    seen = read_review(sidecar).sidecar_sha256
    record_step(sidecar, "submit")  # someone else's step comes first
    raw = sidecar.read_bytes()
    with pytest.raises(ResultChangedError, match="changed since it was read"):
        record_step(sidecar, "approve", reviewer="Dr A", expect_sha256=seen)
    assert sidecar.read_bytes() == raw
    record_step(sidecar, "approve", reviewer="Dr A", expect_sha256=read_review(sidecar).sidecar_sha256)


def test_a_result_that_no_longer_matches_its_record_is_not_reviewed(tmp_path):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    mask = sidecar.parent / "case_dseg.nii.gz"
    mask.write_bytes(mask.read_bytes()[:-7] + b"\x00" * 7)
    raw = sidecar.read_bytes()
    with pytest.raises(ResultMismatchError, match="not reviewed") as info:
        record_step(sidecar, "approve", reviewer="Dr A")
    assert info.value.problems and sidecar.read_bytes() == raw


def _reviewed(tmp_path):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit", comment="first pass")
    record_step(sidecar, "return", reviewer="Dr A", comment="tumour too small",
                marks=[Mark(1, 9, "lower rim missed", (55.0, 100.0)), Mark(2, 7, "fine")])
    return sidecar


def _paths(value, prefix=()):
    """Every leaf of a JSON value with its path."""
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _paths(v, (*prefix, i))
    else:
        yield prefix, value


def _changed(value, rng):
    if isinstance(value, bool):
        return not value
    if isinstance(value, int):
        return value + rng.choice([-1, 1, 5])
    if isinstance(value, float):
        return value + 0.5
    if value is None:
        return "Someone"
    text = str(value)
    return text + "x" if not text else text[:-1] + ("y" if text[-1] != "y" else "z")


def test_any_edit_of_the_review_or_its_steps_shows_even_when_resealed(tmp_path):
    """A seeded random family of single-value edits of the review block and the review entries, each
    resealed so that the seal matches: every one must fail verify."""
    sidecar = _reviewed(tmp_path)
    doc = _doc(sidecar)
    block = doc["Isotide"]
    leaves = [("Review", *p) for p, _ in _paths(block["Review"])]
    for i, entry in enumerate(block["History"]):
        if entry["Action"] == "review":
            leaves += [("History", i, *p) for p, _ in _paths(entry) if p and p[0] not in ("Index",)]
    rng = random.Random(20300102)
    caught = 0
    trials = rng.sample(leaves, min(60, len(leaves)))
    for where in trials:
        edited = copy.deepcopy(doc)
        target = edited["Isotide"]
        for key in where[:-1]:
            target = target[key]
        target[where[-1]] = _changed(target[where[-1]], rng)
        if eio.validate_sidecar(seal_sidecar(edited)):
            caught += 1  # refused by the schema itself (e.g. a state that does not exist)
            continue
        sidecar.write_bytes(sidecar_bytes(seal_sidecar(edited)))
        report = eio.verify(sidecar)
        caught += not report.ok
    assert len(trials) >= 40 and caught == len(trials)


@pytest.mark.parametrize("forgery", ["state set by hand", "decision removed", "approval on other voxels",
                                     "reviewer renamed", "hand-written approval"])
def test_forged_reviews_show(tmp_path, forgery):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    doc = _doc(sidecar)
    review = doc["Isotide"]["Review"]
    if forgery == "state set by hand":
        review["State"] = "Approved"
    elif forgery == "decision removed":
        review["Decisions"] = []
    elif forgery == "reviewer renamed":
        review["Reviewer"] = "Dr Nobody"
    elif forgery == "hand-written approval":
        review.update(State="Approved", Reviewer="Dr X", Decisions=[{"Step": "Approve"}])
    else:
        record_step(sidecar, "approve", reviewer="Dr A")
        doc = _doc(sidecar)
        doc["Isotide"]["Output"]["VoxelSHA256"] = "0" * 64  # as if another mask had been put in its place
    sidecar.write_bytes(sidecar_bytes(seal_sidecar(doc)))
    report = eio.verify(sidecar)
    assert not report.ok and any(p.startswith(("review:", "mask")) for p in report.problems)


def test_an_older_sidecar_with_a_review_written_by_hand_still_verifies_and_can_be_reviewed(tmp_path):
    sidecar = make_result(tmp_path)
    doc = _doc(sidecar)
    doc["Isotide"]["SchemaVersion"] = "1.1.0"  # written before steps were recorded in the history
    doc["Isotide"]["Review"] = {"State": "Submitted", "Reviewer": None, "Decisions": [{"label": 1}],
                                "Comments": ["look at slice 10"]}
    eio.save_sidecar(sidecar, doc)
    assert eio.verify(sidecar).ok
    record = record_step(sidecar, "approve", reviewer="Dr A")
    assert record.state == "Approved" and eio.verify(sidecar).ok
    review = _doc(sidecar)["Isotide"]["Review"]
    assert review["Comments"][0] == "look at slice 10" and review["Decisions"][0] == {"label": 1}


def test_a_returned_result_reworked_as_a_new_version_starts_a_draft_and_keeps_the_return(tmp_path):
    from engine.session import open_result

    sidecar = _reviewed(tmp_path)
    returned = _doc(sidecar)["Isotide"]
    session = open_result(sidecar)
    k = 9
    session.seed(55.0, 100.0, 3.0, label=1, slice=k)  # the reviewer's note: the lower rim was missed
    session.evolve(40)
    session.commit()
    with pytest.raises(eio.ReviewedResultError, match="Returned"):
        session.save(str(sidecar.parent / "case"))
    session.save(str(sidecar.parent / "case"), new_version=True)
    assert eio.verify(sidecar).ok
    record = read_review(sidecar)
    assert record.state == "Draft" and record.version == 2 and record.decisions == ()
    (earlier, current) = record.versions
    assert earlier.version == 1 and earlier.state == "Returned" and earlier.reviewer == "Dr A"
    assert [d.step for d in earlier.decisions] == ["Submit", "Return"] and current.current
    assert _doc(sidecar)["Isotide"]["Versions"][0]["Review"] == returned["Review"]
    assert read_review(sidecar).allowed == ("submit",)
    record_step(sidecar, "submit")
    record = record_step(sidecar, "approve", reviewer="Dr A", comment="now complete")
    assert record.state == "Approved" and record.version == 2 and eio.verify(sidecar).ok
    # the version-1 steps stay in the chain; the version-2 decisions are only the new ones
    assert [d.version for d in record.decisions] == [2, 2]
