"""Working-session files (.tide): what is written comes back exactly, and bad files are refused.

The reference for "exactly" is the session that wrote the file: outlines bit
for bit, the live front's snapshot array for array, and stepping both fronts
on reproduces the same φ bit for bit. Areas are checked against πr²
(analytic) only to show the outline is the one drawn.
"""

from __future__ import annotations

import json
import zipfile

import nibabel as nib
import numpy as np
import pytest

from engine.io import verify
from engine.session import Session
from engine.session.record import provenance_record
from engine.session.working import capture, open_working, read_summary, save_working, write_working


def flat_session(image=None):
    s = Session.from_array(np.full((96, 96), 100.0) if image is None else image, spacing=(0.9, 1.1))
    s.set_params(model="constant", drive=1.0)
    return s


def worked_session():
    s = flat_session()
    a = s.add_label("first").index
    b = s.add_label("second").index
    s.extend([[30, 30]], 9.0, label=a, slice=0)
    s.commit()
    s.set_label_locked(a, True)
    s.seed(60, 60, 5, label=b, slice=0)
    s.evolve(steps=8)
    s.pin([[60, 70]], 3.0, label=b, slice=0)
    s.set_params(b, smoothness=0.3)
    return s, a, b


def snapshot_arrays(snap):
    return [snap.indices, snap.phi, snap.phi_at_rebuild, snap.inside_bits, *snap.layer]


def test_round_trip_restores_outlines_front_and_history_exactly(tmp_path):
    s, a, b = worked_session()
    path = save_working(s, tmp_path / "case.tide", meta={"slice": 0, "result": "x/y"})
    back, meta = open_working(path)
    assert meta == {"slice": 0, "result": "x/y"}
    assert back.labels == s.labels
    assert [o.same_as(p) for o, p in zip(back.outlines(), s.outlines())] == [True]
    assert back.outlines()[0].area_mm2 == s.outlines()[0].area_mm2
    assert np.array_equal(back.outlines()[0].phi, s.outlines()[0].phi)
    assert back.settings(b) == s.settings(b)
    live, old = back.live, s.live
    assert (live.label, live.slice, live.seeds, live.origin) == (old.label, old.slice, old.seeds, old.origin)
    assert all(np.array_equal(x, y) for x, y in zip(snapshot_arrays(live.snapshot), snapshot_arrays(old.snapshot)))
    assert np.array_equal(live.snapshot.pins, old.snapshot.pins) and live.snapshot.params == old.snapshot.params
    # the history in effect goes on into the saved provenance
    assert [h["action"] for h in provenance_record(back)["history"]] == \
        [h["action"] for h in provenance_record(s)["history"]]
    assert back.modified and back.history == () and not back.can_undo()
    # both fronts step on to the same φ, bit for bit (the locked label stays a barrier)
    s.evolve(steps=6)
    back.evolve(steps=6)
    assert np.array_equal(s._front.snapshot().phi, back._front.snapshot().phi)
    assert not np.any(s._front.mask() & s.outlines(0, a)[0].mask)
    summary = read_summary(path)
    assert summary.labels == ("first", "second") and summary.outlines == 1 and summary.live
    assert summary.commands == len(s.history) - 1  # capture was taken before the last evolve


def test_recovered_work_saves_a_verifiable_result_with_the_whole_history(tmp_path):
    s, a, b = worked_session()
    copy = capture(s)
    back, _ = open_working(write_working(copy, tmp_path / "w.tide"))
    back.commit()
    paths = back.save(str(tmp_path / "result"))
    assert verify(paths["json"]).ok
    actions = [h["Action"] for h in json.loads(paths["json"].read_text())["Isotide"]["History"]]
    assert actions == [c.action for c in s.history] + ["commit"]


def test_a_study_read_from_a_file_is_referenced_and_checked(tmp_path):
    rng = np.random.default_rng(3)
    data = (rng.normal(100, 5, size=(40, 48, 3))).astype(np.int16)  # NIfTI axes (i, j, k) = (col, row, slice)
    nifti = tmp_path / "study.nii.gz"
    nib.save(nib.Nifti1Image(data, np.diag([1.2, 1.2, 3.0, 1.0])), str(nifti))
    s = Session.open(str(nifti))
    lab = s.add_label("disk").index
    s.extend([[20, 20]], 6.0, label=lab, slice=1)
    s.commit()
    path = save_working(s, tmp_path / "study.tide")
    with zipfile.ZipFile(path) as z:
        manifest = json.loads(z.read("session.json"))
        npz_names = z.namelist()
    assert "image" not in manifest["study"] and manifest["study"]["path"] == str(nifti)
    assert npz_names == ["session.json", "arrays.npz"]
    back, _ = open_working(path)
    assert np.array_equal(back.volume.array, s.volume.array)
    assert back.outlines()[0].same_as(s.outlines()[0])
    # the study changed since: refused with one line naming it
    nib.save(nib.Nifti1Image(data + 1, np.diag([1.2, 1.2, 3.0, 1.0])), str(nifti))
    with pytest.raises(ValueError, match="hash differently"):
        open_working(path)


def test_bad_files_are_refused_with_one_line(tmp_path):
    junk = tmp_path / "junk.tide"
    junk.write_bytes(b"not a zip at all")
    with pytest.raises(ValueError, match="not a readable Isotide working session"):
        open_working(junk)
    with pytest.raises(ValueError, match="no such file"):
        read_summary(tmp_path / "missing.tide")
    other = tmp_path / "other.tide"
    with zipfile.ZipFile(other, "w") as z:
        z.writestr("session.json", json.dumps({"schema": "something-else", "version": 1}))
    with pytest.raises(ValueError, match="not an Isotide working session"):
        open_working(other)
    newer = tmp_path / "newer.tide"
    with zipfile.ZipFile(newer, "w") as z:
        z.writestr("session.json", json.dumps({"schema": "isotide-working-session", "version": 99}))
    with pytest.raises(ValueError, match="newer"):
        read_summary(newer)
    s, _, _ = worked_session()
    with pytest.raises(ValueError, match=".tide"):
        save_working(s, tmp_path / "case.zip")


def test_an_empty_session_and_a_vanished_front_round_trip(tmp_path):
    s = flat_session()
    back, _ = open_working(save_working(s, tmp_path / "empty.tide"))
    assert back.labels == () and back.live is None
    lab = s.add_label("gone").index
    s.set_params(lab, drive=-2.0)
    s.seed(40, 40, 3, label=lab, slice=0)
    s.evolve()
    assert s.frame().vanished
    back, _ = open_working(save_working(s, tmp_path / "vanished.tide"))
    assert back.live.vanished and back.live.snapshot is None and back.frame().vanished
