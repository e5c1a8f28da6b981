"""Saving results (mask, label table, sidecar, DICOM SEG) and verifying them.

References used below: pydicom's bundled test files (the source images),
hashlib (SHA-256), nibabel (reading the NIfTI mask and its affine), jsonschema
(validating the sidecar and the schema itself) and highdicom (reading the
DICOM SEG back).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import stat
from pathlib import Path

import highdicom as hd
import jsonschema
import nibabel as nib
import numpy as np
import pydicom
import pytest
from nibabel.affines import apply_affine
from pydicom.uid import generate_uid

from pydicom_series import ct5n_folder
import engine.io as eio
from engine.cli import main as cli_main
from engine.io import ApprovedResultError, SaveError
from engine.io.sidecar import seal_sidecar

TABLE = [
    {"index": 1, "name": "organ", "abbreviation": "ORG"},
    {"index": 3, "name": "lesion", "abbreviation": "LES", "color": "#d55e00"},
]


@pytest.fixture()
def series(tmp_path):
    """A copy of pydicom's 5-slice CT series (so inputs can be tampered with)."""
    dest = tmp_path / "input" / "ct"
    shutil.copytree(ct5n_folder(), dest)
    return dest


def make_labels(shape):
    labels = np.zeros(shape, dtype=np.uint8)
    labels[1:4, 3:12, 4:13] = 1
    labels[2, 6:9, 7:10] = 3
    return labels


def provenance(**extra):
    prov = {
        "operator": "Test Operator",
        "labels": [
            {
                "index": 1,
                "slices": [
                    {
                        "slice": 2,
                        "model": "region",
                        "parameters": {"drive": 1.0, "smoothness": 0.2},
                        "seeds": [(7.0, 8.0, 2.5)],
                        "steps": np.int64(140),
                        "timings": {"evolve": 0.8},
                    }
                ],
            }
        ],
        "history": [
            {"action": "seed", "label": 1, "slice": 2, "details": {"row": 7, "col": 8, "radius_px": 2.5}},
            {"action": "evolve", "label": 1, "slice": 2, "details": {"steps": 140}},
            {"action": "extend", "label": 3, "slice": 2},
        ],
    }
    prov.update(extra)
    return prov


def save(tmp_path, volume, labels=None, **kwargs):
    labels = make_labels(volume.shape) if labels is None else labels
    kwargs.setdefault("provenance", provenance())
    return eio.save_result(tmp_path / "out" / "case1", labels, volume, label_table=TABLE, **kwargs)


def sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


# --------------------------------------------------------------------------- round trip


def test_round_trip_labels_and_geometry(tmp_path, series):
    vol = eio.load(series)
    labels = make_labels(vol.shape)
    paths = save(tmp_path, vol, labels)
    assert set(paths) == {"nifti", "tsv", "json"}
    assert paths["nifti"].name == "case1_dseg.nii.gz" and paths["json"].name == "case1_dseg.json"
    back = eio.load(paths["nifti"])
    np.testing.assert_array_equal(back.array, labels)
    # NIfTI-1 stores the sform rows as float32 (Cox et al. 2004), hence the tolerance.
    np.testing.assert_allclose(back.affine, vol.affine, rtol=1e-6, atol=1e-4)
    img = nib.load(paths["nifti"])
    assert img.get_data_dtype() == np.uint8
    assert int(img.header.get_sform(coded=True)[1]) == 1 and int(img.header.get_qform(coded=True)[1]) == 1
    assert img.header.get_intent()[0] == "label"
    # Independent geometry check: the RAS position nibabel gives a labelled voxel
    # equals the DICOM position (PS3.3 C.7.6.2.1.1: IPP + row/col cosines x spacing)
    # of that pixel in the source file, with x and y negated (LPS -> RAS).
    k, r, c = 2, 6, 7
    ds = pydicom.dcmread(vol.source_files[k])
    iop = np.asarray(ds.ImageOrientationPatient, float)
    ps = np.asarray(ds.PixelSpacing, float)
    lps = np.asarray(ds.ImagePositionPatient, float) + c * ps[1] * iop[:3] + r * ps[0] * iop[3:]
    np.testing.assert_allclose(apply_affine(img.affine, [c, r, k]), lps * [-1, -1, 1], atol=1e-3)
    assert np.asarray(img.dataobj)[c, r, k] == labels[k, r, c] == 3


def test_same_labels_give_the_same_mask_bytes(tmp_path, series):
    vol = eio.load(series)
    first = sha(save(tmp_path / "a", vol)["nifti"])
    second = sha(save(tmp_path / "b", vol)["nifti"])
    assert first == second


def test_sidecar_validates_and_records_hashes(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    doc = json.loads(paths["json"].read_text())
    schema = eio.load_schema()
    jsonschema.Draft202012Validator.check_schema(schema)  # the schema itself is valid JSON Schema
    jsonschema.validate(doc, schema, cls=jsonschema.Draft202012Validator)
    assert {"Description", "Sources", "SpatialReference", "Manual"} <= set(doc)
    block = doc["Isotide"]
    assert block["SchemaVersion"] == eio.SCHEMA_VERSION
    assert block["Output"]["Mask"] == {"Path": "case1_dseg.nii.gz", "SHA256": sha(paths["nifti"])}
    assert block["Output"]["LabelTable"]["SHA256"] == sha(paths["tsv"])
    recorded = {f["Path"]: f["SHA256"] for f in block["Input"]["Files"]}
    assert len(recorded) == 5
    for rel, digest in recorded.items():
        assert digest == sha(paths["json"].parent / rel)  # hashlib on the input file
    assert all(len(f["SOPInstanceUIDs"]) == 1 for f in block["Input"]["Files"])
    assert block["Labels"][0]["Voxels"] == int((make_labels(vol.shape) == 1).sum())
    assert block["Labels"][0]["Slices"][0]["Steps"] == 140
    assert block["Created"].endswith("Z") and block["Review"]["State"] == "Draft"
    assert block["Software"]["Libraries"]["pydicom"] == pydicom.__version__
    # BIDS dseg.tsv columns.
    lines = paths["tsv"].read_text().splitlines()
    assert lines[0].split("\t") == ["index", "name", "abbreviation", "color"]
    assert lines[2].split("\t") == ["3", "lesion", "LES", "#D55E00"]


def test_patient_identifiers_only_when_asked(tmp_path, series):
    vol = eio.load(series)
    ds = pydicom.dcmread(vol.source_files[0])
    name, pid = str(ds.PatientName), str(ds.PatientID)
    text = save(tmp_path / "plain", vol)["json"].read_text()
    assert name not in text and pid not in text
    asked = save(tmp_path / "asked", vol, include_patient_identifiers=True)["json"]
    patient = json.loads(asked.read_text())["Isotide"]["Patient"]
    assert patient["Name"] == name and patient["ID"] == pid
    assert eio.verify(asked).ok


def test_single_slice_labels_and_other_inputs(tmp_path, series):
    vol = eio.load(series)
    slice_labels = np.zeros(vol.shape[1:], np.uint8)
    slice_labels[4:9, 4:9] = 1
    paths = save(tmp_path, vol, slice_labels, slice_index=3)
    back = eio.load(paths["nifti"]).array
    assert back[3].sum() == 25 and back.sum() == 25
    with pytest.raises(ValueError, match="slice_index"):
        save(tmp_path / "x", vol, slice_labels)
    with pytest.raises(ValueError, match="labels"):
        save(tmp_path / "x", vol, np.full(vol.shape, 2, np.uint8))  # 2 is not in the table
    with pytest.raises(ValueError, match="labels"):
        save(tmp_path / "x", vol, np.zeros((2, 2, 2), np.uint8))
    with pytest.raises(ValueError, match="label_table"):
        eio.save_result(tmp_path / "x", slice_labels, vol, slice_index=0,
                        label_table=[{"index": 1, "name": "a", "color": "red"}], provenance={})
    with pytest.raises(ValueError, match="provenance"):
        save(tmp_path / "x", vol, provenance={"operater": "typo"})
    # A PNG picture: one slice, so 2-D labels need no slice_index.
    from PIL import Image

    Image.fromarray(np.zeros((6, 8), np.uint8)).save(tmp_path / "pic.png")
    pic = eio.load(tmp_path / "pic.png", spacing=(0.5, 0.5))
    labels = np.zeros((6, 8), np.uint8)
    labels[1:3, 2:5] = 1
    paths = eio.save_result(tmp_path / "pic", labels, pic, label_table=TABLE, provenance={})
    np.testing.assert_array_equal(eio.load(paths["nifti"]).array[0], labels)
    assert eio.verify(paths["json"]).ok
    with pytest.raises(ValueError, match="dicom_seg"):
        eio.save_result(tmp_path / "pic", labels, pic, label_table=TABLE, provenance={}, dicom_seg=True)


# --------------------------------------------------------------------------- verify


def test_verify_ok_and_cli_exit_codes(tmp_path, series, capsys):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    report = eio.verify(paths["json"])
    assert report.ok and not report.problems, report.problems
    assert any("hash chain (3 entries)" in c for c in report.checked)
    assert eio.verify(paths["nifti"]).ok  # the mask path finds its sidecar
    assert cli_main(["verify", str(paths["json"])]) == 0
    assert "OK" in capsys.readouterr().out

    assert cli_main(["verify", str(tmp_path / "missing_dseg.json")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "missing_dseg.json" in err[0]
    (tmp_path / "junk_dseg.json").write_text("{not json")
    assert cli_main(["verify", str(tmp_path / "junk_dseg.json")]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_tampered_mask_is_detected(tmp_path, series, capsys):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    img = nib.load(paths["nifti"])
    data = np.asarray(img.dataobj).copy()
    data[0, 0, 0] = 1
    nib.save(nib.Nifti1Image(data, img.affine, img.header), paths["nifti"])
    report = eio.verify(paths["json"])
    assert not report.ok
    assert any("mask" in p and "SHA-256" in p for p in report.problems)
    assert cli_main(["verify", str(paths["json"])]) == 1
    assert "mask" in capsys.readouterr().out


def test_edited_sidecar_is_detected(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    doc = json.loads(paths["json"].read_text())
    doc["Isotide"]["Labels"][0]["Slices"][0]["Parameters"]["smoothness"] = 0.9
    paths["json"].write_text(json.dumps(doc, indent=2))
    report = eio.verify(paths["json"])
    assert not report.ok and any("seal" in p for p in report.problems)


def test_edited_history_entry_is_detected_even_when_resealed(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    doc = json.loads(paths["json"].read_text())
    doc["Isotide"]["History"][1]["Details"]["steps"] = 10
    paths["json"].write_text(json.dumps(seal_sidecar(doc), indent=2))
    report = eio.verify(paths["json"])
    assert not report.ok
    # The seal was recomputed, so only the chain can tell: entry 1 no longer
    # matches the hash that entry 2 (and HistoryHead) still point to.
    assert report.problems == ["history entry 1: content does not match its SHA256 (entry changed)"]


def test_removed_history_entry_is_detected(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    doc = json.loads(paths["json"].read_text())
    del doc["Isotide"]["History"][2]  # drop the newest entry, then reseal
    paths["json"].write_text(json.dumps(seal_sidecar(doc), indent=2))
    report = eio.verify(paths["json"])
    assert not report.ok and any("HistoryHead" in p for p in report.problems)


def test_changed_table_and_input_are_detected(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    first_input = Path(vol.source_files[0])
    raw = bytearray(first_input.read_bytes())
    raw[-1] ^= 0xFF
    first_input.write_bytes(bytes(raw))
    paths["tsv"].write_text(paths["tsv"].read_text().replace("organ", "organs"))
    problems = eio.verify(paths["json"]).problems
    assert any("label table" in p for p in problems)
    assert any(p.startswith("input ") and "input changed" in p for p in problems)


def test_missing_inputs_are_noted_not_failed(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    shutil.rmtree(series)
    report = eio.verify(paths["json"])
    assert report.ok and len(report.notes) == 5 and "not present" in report.notes[0]


# --------------------------------------------------------------------------- history and review


def test_recorded_history_is_kept_and_extended(tmp_path, series):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    recorded = json.loads(paths["json"].read_text())["Isotide"]["History"]
    prov = provenance(history=[*recorded, {"action": "trim", "label": 1, "slice": 2}])
    paths = save(tmp_path, vol, provenance=prov)
    history = json.loads(paths["json"].read_text())["Isotide"]["History"]
    assert history[:3] == recorded and history[3]["PrevSHA256"] == recorded[2]["SHA256"]
    assert eio.verify(paths["json"]).ok
    forged = [dict(e) for e in recorded]
    forged[0]["Action"] = "something else"
    with pytest.raises(ValueError, match="altered"):
        save(tmp_path, vol, provenance=provenance(history=forged))


def test_approved_result_is_not_overwritten_without_the_flag(tmp_path, series):
    vol = eio.load(series)
    approved = provenance(review={"state": "Approved", "reviewer": "Dr Reviewer", "decisions": [], "comments": []})
    paths = save(tmp_path, vol, provenance=approved)
    before = {k: p.read_bytes() for k, p in paths.items()}
    with pytest.raises(ApprovedResultError, match="Approved"):
        save(tmp_path, vol)
    assert {k: p.read_bytes() for k, p in paths.items()} == before
    save(tmp_path, vol, overwrite_approved=True)
    assert json.loads(paths["json"].read_text())["Isotide"]["Review"]["State"] == "Draft"
    paths["json"].write_text("garbage")
    with pytest.raises(ApprovedResultError, match="cannot be read"):
        save(tmp_path, vol)


def test_review_steps_keep_verify_ok_and_a_review_written_by_hand_shows(tmp_path, series):
    from engine.review import record_step

    vol = eio.load(series)
    paths = save(tmp_path, vol)
    doc = json.loads(paths["json"].read_text())
    doc["Isotide"]["Review"] = {"State": "Approved", "Reviewer": "Dr Reviewer", "Decisions": [{"label": 1}],
                                "Comments": ["fine"]}
    eio.save_sidecar(paths["json"], doc)  # resealed, but no step in the history says so
    report = eio.verify(paths["json"])
    assert not report.ok and any("not recorded in the history" in p for p in report.problems)
    paths = save(tmp_path, vol, overwrite_approved=True)
    record_step(paths["json"], "submit")
    record_step(paths["json"], "approve", reviewer="Dr Reviewer", comment="fine")
    assert eio.verify(paths["json"]).ok
    doc = json.loads(paths["json"].read_text())
    with pytest.raises(ApprovedResultError):
        save(tmp_path, vol)
    doc["Isotide"]["Review"]["State"] = "Lost"
    with pytest.raises(ValueError, match="doc"):
        eio.save_sidecar(paths["json"], doc)


# --------------------------------------------------------------------------- atomic writes


def test_failed_rename_leaves_the_previous_result(tmp_path, series, monkeypatch):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    before = {p: p.read_bytes() for p in paths.values()}
    import engine.io.atomic as atomic

    real = os.replace
    calls = {"n": 0}

    def flaky(src, dst):
        calls["n"] += 1
        if calls["n"] == 3:  # mask and table replaced, sidecar fails
            raise OSError(28, "No space left on device", str(dst))
        return real(src, dst)

    monkeypatch.setattr(atomic.os, "replace", flaky)
    labels = make_labels(vol.shape)
    labels[0] = 1
    with pytest.raises(SaveError, match="previous result restored"):
        save(tmp_path, vol, labels)
    monkeypatch.setattr(atomic.os, "replace", real)
    assert {p: p.read_bytes() for p in paths.values()} == before
    assert sorted(p.name for p in paths["json"].parent.iterdir()) == sorted(p.name for p in paths.values())
    assert eio.verify(paths["json"]).ok


def test_failed_write_changes_nothing(tmp_path, series, monkeypatch):
    vol = eio.load(series)
    paths = save(tmp_path, vol)
    before = {p: p.read_bytes() for p in paths.values()}
    import engine.io.atomic as atomic

    real = atomic._write_temp
    calls = {"n": 0}

    def flaky(target, data):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError(5, "Input/output error", str(target))
        return real(target, data)

    monkeypatch.setattr(atomic, "_write_temp", flaky)
    with pytest.raises(SaveError, match="nothing changed"):
        save(tmp_path, vol, np.zeros(vol.shape, np.uint8))
    assert {p: p.read_bytes() for p in paths.values()} == before
    assert len(list(paths["json"].parent.iterdir())) == 3


# --------------------------------------------------------------------------- DICOM SEG


def test_dicom_seg_reads_back_with_highdicom(tmp_path, series):
    vol = eio.load(series)
    labels = make_labels(vol.shape)
    paths = save(tmp_path, vol, labels, dicom_seg=True)
    assert paths["seg"].name == "case1.seg.dcm"
    seg = hd.seg.segread(paths["seg"])
    assert seg.number_of_segments == 2
    for number, entry in zip((1, 2), TABLE):
        desc = seg.get_segment_description(number)
        assert desc.segment_label == entry["name"]
        assert desc.algorithm_type == hd.seg.SegmentAlgorithmTypeValues.SEMIAUTOMATIC
        assert desc.algorithm_identification[0].AlgorithmName == "Isotide"
    # highdicom maps SEG frames back to the source instances, in our slice order.
    pixels = seg.get_pixels_by_source_instance(list(vol.sop_instance_uids), combine_segments=True)
    lut = np.array([0, 1, 3])
    np.testing.assert_array_equal(lut[pixels], labels)
    # The SEG belongs to the study: it carries the source's patient and study identifiers.
    src = pydicom.dcmread(vol.source_files[0])
    assert seg.PatientName == src.PatientName and seg.StudyInstanceUID == src.StudyInstanceUID
    assert eio.verify(paths["json"]).ok
    # Saving again without a SEG removes the stale one.
    paths2 = save(tmp_path, vol, labels)
    assert "seg" not in paths2 and not paths["seg"].exists()
    assert eio.verify(paths2["json"]).ok


def test_dicom_seg_of_a_multiframe_source(tmp_path):
    datasets = [pydicom.dcmread(f) for f in sorted(ct5n_folder().iterdir())]  # pydicom test data
    datasets = [datasets[i] for i in (3, 1, 4, 0, 2)]  # frames out of spatial order
    enhanced = hd.legacy.LegacyConvertedEnhancedCTImage(datasets, generate_uid(), 1, generate_uid(), 1)
    path = tmp_path / "enhanced.dcm"
    enhanced.save_as(path, enforce_file_format=True)
    vol = eio.load(path)
    labels = make_labels(vol.shape)
    paths = save(tmp_path, vol, labels, dicom_seg=True)
    seg = hd.seg.segread(paths["seg"])
    lut = np.array([0, 1, 3])
    for k, frame in enumerate(vol.frame_numbers):
        got = seg.get_pixels_by_source_frame(
            source_sop_instance_uid=enhanced.SOPInstanceUID,
            source_frame_numbers=[frame],
            combine_segments=True,
            assert_missing_frames_are_empty=True,  # empty frames are omitted from the SEG
        )
        np.testing.assert_array_equal(lut[got[0]], labels[k])


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_saved_files_get_the_usual_permissions(tmp_path):
    # A new file gets 0o666 less the umask, as open() gives (POSIX, common
    # practice); a replaced file keeps the permissions it had.
    from engine.io.atomic import commit_files

    mask = os.umask(0o027)
    try:
        fresh, kept = tmp_path / "fresh.txt", tmp_path / "kept.txt"
        kept.write_bytes(b"old")
        kept.chmod(0o604)
        commit_files({fresh: b"new", kept: b"newer"})
    finally:
        os.umask(mask)
    assert stat.S_IMODE(fresh.stat().st_mode) == 0o640
    assert stat.S_IMODE(kept.stat().st_mode) == 0o604
    assert kept.read_bytes() == b"newer"
