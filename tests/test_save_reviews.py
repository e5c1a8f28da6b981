"""A reviewer's work is never lost by saving over a result, from Python or the command line.

References used below: pydicom's bundled test files (the source series and
two series in one folder), jsonschema (the sidecar validated against its
schema) and hashlib (SHA-256 of the replaced sidecar).
"""

from __future__ import annotations

import hashlib
import json
import shutil

import numpy as np
import pytest
from PIL import Image
from pydicom.data import get_testdata_file

from pydicom_series import ct5n_folder
import engine.io as eio
from engine.cli import main

TABLE = [{"index": 1, "name": "organ"}]


@pytest.fixture()
def volume(tmp_path):
    dest = tmp_path / "input" / "ct"
    shutil.copytree(ct5n_folder(), dest)
    return eio.load(dest)


def labels(shape, grow=0):
    out = np.zeros(shape, dtype=np.uint8)
    out[1:4, 3:12 + grow, 4:13] = 1
    return out


def save(tmp_path, vol, *, grow=0, review=None, **kwargs):
    prov = {"history": [{"action": "segment", "label": 1, "slice": 2}]}
    if review is not None:
        prov["review"] = review
    return eio.save_result(tmp_path / "out" / "case", labels(vol.shape, grow), vol, label_table=TABLE,
                           provenance=prov, **kwargs)


REVIEWS = {
    "Submitted": {"state": "Submitted", "reviewer": None, "decisions": [], "comments": []},
    "Returned": {"state": "Returned", "reviewer": "Dr Reviewer", "decisions": [{"label": 1, "decision": "redo"}],
                 "comments": ["the lower edge leaks into fat"]},
    "Approved": {"state": "Approved", "reviewer": "Dr Reviewer", "decisions": [{"label": 1}], "comments": ["fine"]},
    "Draft": {"state": "Draft", "reviewer": "Dr Reviewer", "decisions": [], "comments": ["look again at slice 2"]},
}


@pytest.mark.parametrize("state", sorted(REVIEWS))
def test_saving_over_a_review_is_refused_naming_the_state_and_the_way(tmp_path, volume, state):
    paths = save(tmp_path, volume, review=REVIEWS[state])
    before = {p: p.read_bytes() for p in paths.values()}
    with pytest.raises(eio.SaveError, match=state) as info:
        save(tmp_path, volume, grow=2)
    assert getattr(info.value, "state", None) == state and "new_version=True" in str(info.value)
    assert {p: p.read_bytes() for p in paths.values()} == before  # nothing written


@pytest.mark.parametrize("state", sorted(REVIEWS))
def test_a_new_version_carries_the_review_history_forward(tmp_path, volume, state):
    paths = save(tmp_path, volume, review=REVIEWS[state])
    old_bytes = paths["json"].read_bytes()
    old = json.loads(old_bytes)["Isotide"]
    save(tmp_path, volume, grow=2, new_version=True)
    doc = json.loads(paths["json"].read_text())
    block = doc["Isotide"]
    assert block["Review"]["State"] == "Draft" and block["Version"] == 2
    (earlier,) = block["Versions"]
    assert earlier["Version"] == 1
    assert earlier["Review"] == old["Review"]  # state, reviewer, decisions, comments kept word for word
    assert earlier["SidecarSHA256"] == hashlib.sha256(old_bytes).hexdigest()
    assert earlier["VoxelSHA256"] == old["Output"]["VoxelSHA256"]  # what was reviewed
    assert eio.validate_sidecar(doc) == []
    assert eio.verify(paths["json"]).ok
    # Reworking the new draft keeps the earlier versions; reviewing it again and saving makes version 3.
    save(tmp_path, volume, grow=1)
    block = json.loads(paths["json"].read_text())["Isotide"]
    assert block["Version"] == 2 and block["Versions"][0]["Review"] == old["Review"]
    save(tmp_path, volume, review=REVIEWS["Submitted"])
    save(tmp_path, volume, grow=3, new_version=True)
    block = json.loads(paths["json"].read_text())["Isotide"]
    assert [v["Version"] for v in block["Versions"]] == [1, 2] and block["Version"] == 3
    assert block["Versions"][1]["Review"]["State"] == "Submitted"


def test_a_draft_without_review_is_simply_replaced(tmp_path, volume):
    save(tmp_path, volume)
    paths = save(tmp_path, volume, grow=2)
    block = json.loads(paths["json"].read_text())["Isotide"]
    assert block["Version"] == 1 and block["Versions"] == []


def test_an_unreadable_sidecar_is_kept_unless_a_new_version_is_asked(tmp_path, volume):
    paths = save(tmp_path, volume)
    paths["json"].write_text("not json at all")
    with pytest.raises(eio.SaveError, match="cannot be read"):
        save(tmp_path, volume, grow=2)
    assert paths["json"].read_text() == "not json at all"
    save(tmp_path, volume, grow=2, new_version=True)
    (earlier,) = json.loads(paths["json"].read_text())["Isotide"]["Versions"]
    assert earlier["Review"] is None and earlier["SidecarSHA256"] == hashlib.sha256(b"not json at all").hexdigest()


# ---------------------------------------------------------------------------- command line


@pytest.fixture()
def png(tmp_path):
    rr, cc = np.indices((64, 64))
    img = np.where((rr - 32) ** 2 + (cc - 30) ** 2 < 14**2, 180, 60).astype(np.uint8)
    path = tmp_path / "disk.png"
    Image.fromarray(img).save(path)
    return path


def test_cli_refuses_before_evolving_and_new_version_keeps_the_review(tmp_path, png, capsys):
    prefix = tmp_path / "res"
    assert main(["segment", str(png), "--seed", "32,30,4", "--out", str(prefix)]) == 0
    json_path = eio.result_paths(prefix)["json"]
    doc = json.loads(json_path.read_text())
    doc["Isotide"]["Review"] = {"State": "Returned", "Reviewer": "Dr Reviewer", "Decisions": [],
                                "Comments": ["please redo"]}
    eio.save_sidecar(json_path, doc)
    before = json_path.read_bytes()
    capsys.readouterr()
    rc = main(["segment", str(png), "--seed", "32,30,6", "--out", str(prefix)])
    captured = capsys.readouterr()
    lines = captured.err.splitlines()
    assert rc == 2 and len(lines) == 1 and captured.out == ""
    assert "was Returned" in lines[0] and "--new-version" in lines[0] and "new_version" not in lines[0]
    assert json_path.read_bytes() == before
    rc = main(["segment", str(png), "--seed", "32,30,6", "--new-version", "--out", str(prefix)])
    assert rc == 0
    block = json.loads(json_path.read_text())["Isotide"]
    assert block["Versions"][0]["Review"]["Comments"] == ["please redo"] and block["Version"] == 2


def test_cli_chooses_a_series_with_the_flag_the_message_names(tmp_path, capsys):
    folder = tmp_path / "two"
    folder.mkdir()
    for name in ("CT_small.dcm", "MR_small.dcm"):  # pydicom test data: two series
        shutil.copy(get_testdata_file(name), folder / name)
    rc = main(["segment", str(folder), "--seed", "30,30,4", "--max-steps", "3", "--out", str(tmp_path / "o.png")])
    err = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(err) == 1 and "--series KEY" in err[0] and "series=" not in err[0]
    key = eio.list_series(folder)[0].key
    rc = main(["segment", str(folder), "--series", key, "--seed", "30,30,4", "--max-steps", "3",
               "--out", str(tmp_path / "o.png")])
    assert rc == 0, capsys.readouterr().err


def test_cli_memory_limit_is_the_flag_the_message_names(tmp_path, png, capsys):
    rc = main(["segment", str(png), "--seed", "32,30,4", "--memory-limit", "0.001", "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(err) == 1 and "--memory-limit" in err[0] and "max_bytes" not in err[0]
