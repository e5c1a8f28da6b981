"""The sidecar records no absolute input path, login name or platform string unless asked.

Folder names often hold patients' names; login names identify staff; the
platform string names the computer's system. References: Python's
``platform.platform()`` and ``getpass.getuser()`` (what must not appear).
"""

from __future__ import annotations

import json
import platform
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

import engine.io as eio
from engine.cli import main


@pytest.fixture()
def picture(tmp_path):
    folder = tmp_path / "patients" / "Doe^Jane 1961"
    folder.mkdir(parents=True)
    rr, cc = np.indices((64, 64))
    path = folder / "slice.png"
    Image.fromarray(np.where((rr - 32) ** 2 + (cc - 30) ** 2 < 14**2, 180, 60).astype(np.uint8)).save(path)
    return path


def test_sidecar_holds_no_absolute_path_login_or_platform(tmp_path, picture, monkeypatch):
    monkeypatch.setenv("USER", "alice.tech")
    monkeypatch.setenv("LOGNAME", "alice.tech")
    prefix = tmp_path / "results" / "liver"
    assert main(["segment", str(picture.resolve()), "--seed", "32,30,4", "--out", str(prefix.resolve())]) == 0
    text = eio.result_paths(prefix)["json"].read_text()
    doc = json.loads(text)
    block = doc["Isotide"]
    assert str(tmp_path) not in text  # no absolute path anywhere
    assert "alice.tech" not in text and block["Operator"] == ""
    assert platform.platform() not in text and "Platform" not in block["Software"]
    # Inputs relative to the result's folder, so verify still finds and checks them.
    assert [f["Path"] for f in block["Input"]["Files"]] == ["../patients/Doe^Jane 1961/slice.png"]
    assert block["History"][-1]["Details"]["image"] == "../patients/Doe^Jane 1961/slice.png"
    assert block["History"][-1]["Details"]["out"] == "liver"
    report = eio.verify(prefix)
    assert report.ok and any("input file" in c for c in report.checked)


def test_operator_recorded_only_when_given(tmp_path, picture):
    prefix = tmp_path / "res"
    assert main(["segment", str(picture), "--seed", "32,30,4", "--operator", "A. Tech", "--out", str(prefix)]) == 0
    assert json.loads(eio.result_paths(prefix)["json"].read_text())["Isotide"]["Operator"] == "A. Tech"


def test_paths_sharing_only_the_root_are_recorded_by_name():
    from engine.io.sidecar import recorded_path

    base = Path("/srv/results/study7")
    assert recorded_path("/data/Doe_John/ct/IM0001.dcm", base) == "IM0001.dcm"
    assert recorded_path("/srv/inputs/ct/IM0001.dcm", base) == "../../inputs/ct/IM0001.dcm"
    assert recorded_path("/srv/results/study7/IM0001.dcm", base) == "IM0001.dcm"
