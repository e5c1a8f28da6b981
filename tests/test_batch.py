"""Batches in this process: the manifest, a case against the sample truth, resume, bad cases, Ctrl+C, sweeps."""

from __future__ import annotations

import csv
import json
import shutil
from dataclasses import replace
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from PIL import Image

from batch_cases import ABDOMEN, GOOD_ROWS, HEAD, mask_hashes, read_summary, write_manifest
from engine.batch import CaseProblem, CaseSpec, ManifestError, RunOptions, read_manifest, run_case, run_cases
from engine.batch.manifest import case_stem, parse_seeds, parse_slices, slice_text
from engine.batch.sweep import parse_vary, settings_grid
from engine.cli import main
from engine.io import verify
from engine.analysis.metrics import dice
from engine.session import Session


# ------------------------------------------------------------------ manifest
def test_seed_slice_and_window_texts():
    assert parse_seeds("147,136,3") == ((None, 147.0, 136.0, 3.0),)
    assert parse_seeds(" 11:147,136,3 ; 12: 140.5,130,2.5;") == ((11, 147.0, 136.0, 3.0), (12, 140.5, 130.0, 2.5))
    assert parse_seeds([[1, 2, 3], [4, 5, 6, 7]]) == ((None, 1.0, 2.0, 3.0), (4, 5.0, 6.0, 7.0))
    for bad, word in [("", "at least one"), ("1,2", "three"), ("1,2,0", "radius"), ("x:1,2,3", "slice"),
                      ("-1:1,2,3", "slice"), ("1,2,a", "numbers")]:
        with pytest.raises(ValueError, match=word):
            parse_seeds(bad)
    assert parse_slices("") is None and parse_slices("7") == (7, 7) and parse_slices("3-9") == (3, 9)
    with pytest.raises(ValueError, match="after"):
        parse_slices("9-3")
    assert slice_text([9, 10, 11, 13]) == "9-11,13" and slice_text([4]) == "4" and slice_text([]) == ""
    assert case_stem("/a/b/image.nii.gz") == "image" and case_stem("/a/dicom/") == "dicom"


def test_csv_and_json_manifests_give_the_same_cases_with_paths_beside_the_manifest(tmp_path):
    rows = [dict(GOOD_ROWS[0], path="../study/dicom", reference=""), dict(GOOD_ROWS[3], window="")]
    csv_cases = read_manifest(write_manifest(tmp_path / "m" / "cases.csv", rows))
    (tmp_path / "m" / "cases.json").write_text(json.dumps(rows), encoding="utf-8")
    json_cases = read_manifest(tmp_path / "m" / "cases.json")
    assert [c.row for c in csv_cases] == [2, 3] and [c.row for c in json_cases] == [1, 2]  # line / item
    assert [replace(c, row=0) for c in csv_cases] == [replace(c, row=0) for c in json_cases]
    first = csv_cases[0]
    assert isinstance(first, CaseSpec)
    assert first.path == str(tmp_path / "study" / "dicom")
    assert first.seeds == ((11, 147.0, 136.0, 3.0),) and first.slices == (10, 12) and first.reference is None
    assert dict(csv_cases[1].params) == {"smoothness": 1.0}


def test_bad_rows_become_problems_and_a_bad_manifest_is_refused(tmp_path):
    rows = [GOOD_ROWS[2],
            dict(GOOD_ROWS[2], label="spleen", seeds="1,2"),                      # bad seed text
            dict(GOOD_ROWS[2], label="liver", window="10,20"),                    # window on the region model
            dict(GOOD_ROWS[2], label="kidney", slice="4-8", seeds="50,50,3"),     # range without seed slices
            dict(GOOD_ROWS[2], label="bone", model="magic"),                     # unknown model
            dict(GOOD_ROWS[2], label="a/b"),                                      # not a folder name
            dict(GOOD_ROWS[2], label="vessel", case="x"), dict(GOOD_ROWS[3], label="vessel", case="x")]
    cases = read_manifest(write_manifest(tmp_path / "m.csv", rows))
    assert isinstance(cases[0], CaseSpec)
    errors = [c.error for c in cases[1:]]
    assert all(isinstance(c, CaseProblem) for c in cases[1:])
    for error, word in zip(errors, ["seeds", "window", "slice", "unknown model", "label", "same result",
                                    "same result"]):
        assert word in error and error.startswith("row"), error
    (tmp_path / "odd.csv").write_text("path,label,seed,model\nx,y,1,region\n", encoding="utf-8")
    with pytest.raises(ManifestError, match="unknown column"):
        read_manifest(tmp_path / "odd.csv")
    (tmp_path / "short.csv").write_text("path,label,model\nx,y,region\n", encoding="utf-8")
    with pytest.raises(ManifestError, match="seeds"):
        read_manifest(tmp_path / "short.csv")
    with pytest.raises(ManifestError, match="no such file"):
        read_manifest(tmp_path / "none.csv")
    (tmp_path / "bad.json").write_text("{", encoding="utf-8")
    with pytest.raises(ManifestError, match="JSON"):
        read_manifest(tmp_path / "bad.json")


# --------------------------------------------------------------- one case
def test_a_case_outlines_its_slices_through_the_session_and_records_how(tmp_path):
    # the abdomen's aorta (label 5 of the truth volume, sample_cases/abdomen_mr/README.md)
    # seeded on slice 11 and carried to 10 and 12; the noise-free truth is the reference
    spec = read_manifest(write_manifest(tmp_path / "m.csv", [GOOD_ROWS[0]]))[0]
    result = run_case(spec, RunOptions(str(tmp_path / "out")))
    assert result.status == "done", result.error
    assert result.slices == "10-12" and result.steps > 0
    truth = np.asarray(nib.load(str(ABDOMEN / "truth_dseg.nii.gz")).dataobj).transpose(2, 1, 0) == 5
    saved = np.asarray(nib.load(result.output + "_dseg.nii.gz").dataobj).transpose(2, 1, 0) == 1
    assert not saved[:10].any() and not saved[13:].any()
    for k in (10, 11, 12):
        assert dice(saved[k], truth[k]) >= 0.95
    assert result.dice == pytest.approx(dice(saved[10:13], truth[10:13]), abs=1e-12)
    sidecar = Path(result.output + "_dseg.json")
    assert verify(sidecar).ok
    history = json.loads(sidecar.read_text())["Isotide"]["History"]
    actions = [h["Action"] for h in history]
    assert actions[0] == "label_add" and actions[-1] == "batch"
    assert actions.count("carry") == 2 and actions.count("commit") == 3
    assert history[-1]["Details"]["result"]["slices"] == "10-12"


def test_a_step_limit_stops_each_slice_and_is_reported(tmp_path):
    rows = [dict(GOOD_ROWS[3], max_steps="7")]
    code = main(["batch", str(write_manifest(tmp_path / "m.csv", rows)), "--out", str(tmp_path / "out"),
                 "--workers", "0"])
    assert code == 0
    row = read_summary(tmp_path / "out" / "summary.csv")["right lateral ventricle/head"]
    assert row["status"] == "done" and row["steps"] == "21" and row["not_converged"] == "6-8"
    problem = read_manifest(write_manifest(tmp_path / "bad.csv", [dict(GOOD_ROWS[3], max_steps="0")]))[0]
    assert isinstance(problem, CaseProblem) and "max_steps" in problem.error


# ------------------------------------------------------------------- resume
def test_resume_skips_finished_cases_and_reruns_changed_ones(tmp_path, monkeypatch):
    calls: list[str] = []
    real_evolve = Session.evolve

    def counting_evolve(self, *args, **kwargs):
        calls.append(self.labels[-1].name)
        return real_evolve(self, *args, **kwargs)

    monkeypatch.setattr(Session, "evolve", counting_evolve)
    study = tmp_path / "head.nii.gz"
    shutil.copyfile(HEAD / "image.nii.gz", study)
    rows = [GOOD_ROWS[0], dict(GOOD_ROWS[3], path=str(study))]
    manifest = write_manifest(tmp_path / "m.csv", rows)
    options = RunOptions(str(tmp_path / "out"))
    first = run_cases(read_manifest(manifest), options)
    assert [r.status for r in first] == ["done", "done"]
    assert len(calls) == 6  # 3 slices each: one seeded, two carried
    hashes = mask_hashes(tmp_path / "out")

    calls.clear()
    again = run_cases(read_manifest(manifest), options)
    assert calls == [] and [r.status for r in again] == ["up to date", "up to date"]
    for a, b in zip(first, again):
        assert (a.slices, a.steps, a.dice) == (b.slices, b.steps, pytest.approx(b.dice, abs=1e-12))

    # another setting for the first case: only it runs again
    rows[0] = dict(rows[0], smoothness="0.8")
    write_manifest(manifest, rows)
    changed = run_cases(read_manifest(manifest), options)
    assert [r.status for r in changed] == ["done", "up to date"] and set(calls) == {"aorta"}

    # the second case's study changes (one voxel): it runs again
    calls.clear()
    img = nib.load(str(study))
    data = np.asarray(img.dataobj).copy()
    data[0, 0, 0] += 1
    nib.save(nib.Nifti1Image(data, img.affine, img.header), str(study))
    changed = run_cases(read_manifest(manifest), options)
    assert [r.status for r in changed] == ["up to date", "done"] and set(calls) == {"right lateral ventricle"}

    # a damaged mask is not up to date either
    calls.clear()
    mask = tmp_path / "out" / "aorta" / "abdomen_dseg.nii.gz"
    mask.write_bytes(mask.read_bytes()[:-10])
    assert [r.status for r in run_cases(read_manifest(manifest), options)] == ["done", "up to date"]

    # --force: everything runs again, to the same masks as before the changes where nothing changed
    calls.clear()
    rows[0] = dict(rows[0], smoothness="")
    write_manifest(manifest, rows)
    forced = run_cases(read_manifest(manifest), RunOptions(str(tmp_path / "out"), force=True))
    assert [r.status for r in forced] == ["done", "done"] and len(calls) == 6
    assert mask_hashes(tmp_path / "out")["aorta/abdomen_dseg.nii.gz"] == hashes["aorta/abdomen_dseg.nii.gz"]


# ----------------------------------------------------------------- bad cases
def corrupt_dicom_folder(folder: Path) -> Path:
    """A copy of the head series with one file cut short (its pixel data truncated)."""
    shutil.copytree(HEAD / "dicom", folder)
    victim = sorted(folder.iterdir())[5]
    victim.write_bytes(victim.read_bytes()[: victim.stat().st_size // 2])
    return folder


def test_bad_cases_are_reported_and_the_others_finish(tmp_path, capsys):
    rows = [GOOD_ROWS[2],
            dict(GOOD_ROWS[2], path=str(tmp_path / "missing"), label="missing"),
            dict(GOOD_ROWS[2], path=str(corrupt_dicom_folder(tmp_path / "corrupt")), label="corrupt"),
            dict(GOOD_ROWS[2], label="outside", seeds="50,400,4"),
            dict(GOOD_ROWS[2], label="bad seeds", seeds="50;102"),
            dict(GOOD_ROWS[2], label="bad range", slice="12-40", seeds="12:50,102,4")]
    manifest = write_manifest(tmp_path / "m.csv", rows)
    code = main(["batch", str(manifest), "--out", str(tmp_path / "out"), "--workers", "0"])
    assert code == 1
    summary = read_summary(tmp_path / "out" / "summary.csv")
    assert summary["tumour/head"]["status"] == "done" and float(summary["tumour/head"]["dice"]) >= 0.95
    expected = {"missing/head": "no such file", "corrupt/head": "damaged", "outside/head": "outside",
                "bad seeds/head": "seeds", "bad range/head": "16 slices"}
    for key, word in expected.items():
        assert summary[key]["status"] == "failed" and word in summary[key]["error"].lower(), summary[key]
        assert "Traceback" not in summary[key]["error"]
    out = capsys.readouterr().out
    assert "1 done, 5 failed" in out


# -------------------------------------------------------------------- Ctrl+C
def test_ctrl_c_keeps_finished_cases_and_lists_the_rest_as_cancelled(tmp_path, monkeypatch, capsys):
    real_evolve = Session.evolve
    seen = {"n": 0}

    def interrupted_evolve(self, *args, **kwargs):
        seen["n"] += 1
        if seen["n"] == 3:  # the second case's second slice (the first case has one slice)
            raise KeyboardInterrupt
        return real_evolve(self, *args, **kwargs)

    monkeypatch.setattr(Session, "evolve", interrupted_evolve)
    rows = [GOOD_ROWS[2], GOOD_ROWS[3], GOOD_ROWS[1]]
    manifest = write_manifest(tmp_path / "m.csv", rows)
    code = main(["batch", str(manifest), "--out", str(tmp_path / "out"), "--workers", "0"])
    assert code == 130
    assert "interrupted" in capsys.readouterr().err
    summary = read_summary(tmp_path / "out" / "summary.csv")
    assert [r["status"] for r in summary.values()] == ["done", "cancelled", "cancelled"]
    assert verify(tmp_path / "out" / "tumour" / "head_dseg.json").ok
    assert not (tmp_path / "out" / "right lateral ventricle").exists()  # nothing half-written


# --------------------------------------------------------------------- sweep
def test_vary_texts_give_numpy_linspace_grids():
    name, values = parse_vary("smoothness=0.1:2:8")
    assert name == "smoothness" and np.allclose(values, np.linspace(0.1, 2, 8), atol=1e-12)  # numpy reference
    assert parse_vary("Outline-Averaging=0,1.5") == ("outline_averaging", (0.0, 1.5))
    for bad, word in [("smoothness", "NAME="), ("size=1,2", "cannot be varied"), ("drive=1:2", "START:STOP"),
                      ("drive=1:2:0", "COUNT"), ("drive=1,1", "different"), ("drive=1,nan", "finite")]:
        with pytest.raises(ValueError, match=word):
            parse_vary(bad)
    grid = settings_grid([("smoothness", (0.5, 1.0)), ("drive", (1.0, 2.0, 3.0))])
    assert len(grid) == 6 and grid[0] == (("smoothness", 0.5), ("drive", 1.0)) and grid[-1][1] == ("drive", 3.0)


def test_sweep_runs_the_grid_and_plots_it(tmp_path, capsys):
    # the head's tumour (label 4, sample_cases/head_mr/README.md) on slice 10, two smoothness values
    code = main(["sweep", str(HEAD / "dicom"), "--label", "tumour", "--seed", "50,102,4", "--slice", "10",
                 "--vary", "smoothness=0.5:2:2", "--reference", str(HEAD / "truth_dseg.nii.gz"),
                 "--out", str(tmp_path / "sweep"), "--workers", "0"])
    assert code == 0, capsys.readouterr()
    with open(tmp_path / "sweep" / "sweep.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["smoothness"] for r in rows] == ["0.5", "2"] and all(r["status"] == "done" for r in rows)
    truth = np.asarray(nib.load(str(HEAD / "truth_dseg.nii.gz")).dataobj).transpose(2, 1, 0) == 4
    for row in rows:
        sidecar = tmp_path / "sweep" / (row["output"] + "_dseg.json")
        doc = json.loads(sidecar.read_text())
        assert doc["Isotide"]["Labels"][0]["Slices"][0]["Parameters"]["smoothness"] == float(row["smoothness"])
        saved = np.asarray(nib.load(str(sidecar).replace(".json", ".nii.gz")).dataobj).transpose(2, 1, 0) == 1
        assert float(row["dice"]) == pytest.approx(dice(saved[10], truth[10]), abs=1e-4)
        assert float(row["dice"]) >= 0.9
    assert rows[0]["area_mm2"] != rows[1]["area_mm2"]  # the setting reached the front
    picture = Image.open(tmp_path / "sweep" / "sweep.png")
    assert picture.format == "PNG" and picture.size[0] >= 300 and picture.size[1] >= 300
    # a manifest as CASE: its rows of the label, references from the manifest
    manifest = write_manifest(tmp_path / "m.csv", [dict(GOOD_ROWS[2], case="dicom"), GOOD_ROWS[0]])
    code = main(["sweep", str(manifest), "--label", "tumour", "--vary", "smoothness=0.5,2",
                 "--out", str(tmp_path / "sweep"), "--workers", "0"])
    assert code == 0
    assert "2 up to date" in capsys.readouterr().out  # the same runs as above: nothing to redo


def test_an_unreachable_scheduler_is_one_clear_error():
    from engine.batch import batch_client

    with pytest.raises(ValueError, match="--scheduler tcp://127.0.0.1:9: cannot connect"):
        with batch_client(scheduler="tcp://127.0.0.1:9", timeout=1.0):
            pass
    with pytest.raises(ValueError, match="workers"):
        with batch_client(workers=-1):
            pass


def test_save_records_one_more_history_entry_after_the_commands(tmp_path):
    s = Session.from_array(np.full((64, 64), 100.0))
    lab = s.add_label("disk").index
    s.extend([[32, 32]], 10.0, label=lab, slice=0)
    s.commit()
    with pytest.raises(ValueError, match="history_entry"):
        s.save(str(tmp_path / "r"), history_entry={"details": {}})
    paths = s.save(str(tmp_path / "r"), history_entry={"action": "batch", "details": {"case_key": "k"}})
    assert verify(paths["json"]).ok  # the entry is inside the hash chain
    history = json.loads(paths["json"].read_text())["Isotide"]["History"]
    assert [h["Action"] for h in history] == ["label_add", "extend", "commit", "batch"]
    assert history[-1]["Details"] == {"case_key": "k"} and history[-1]["PrevSHA256"] == history[-2]["SHA256"]
