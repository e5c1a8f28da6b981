"""Messages that say what is wrong, in the project's own words, on one line.

References used below: pydicom's bundled ``CT_small.dcm`` (edited to carry
a zero or NaN PixelSpacing), nibabel (NIfTI files with a zero or NaN
pixdim and no sform/qform, so the spacing comes from pixdim alone; NIfTI-1
standard, Cox et al. 2004).
"""

from __future__ import annotations

import json
import shutil
import warnings

import nibabel as nib
import numpy as np
import pydicom
import pytest
from PIL import Image
from pydicom.data import get_testdata_file

import engine.io as eio
from engine.cli import main


def disk_array(shape=(48, 48)):
    rr, cc = np.indices(shape)
    return np.where((rr - 24) ** 2 + (cc - 22) ** 2 < 10**2, 180, 60).astype(np.int16)


@pytest.mark.parametrize("value", [0.0, float("nan")])
def test_nifti_pixdim_zero_or_nan_gets_a_note_naming_the_file_and_the_assumption(tmp_path, value, capfd):
    path = tmp_path / "scan.nii"
    img = nib.Nifti1Image(disk_array().T[:, :, None], None)
    img.header["pixdim"][1:4] = [value, 0.8, 3.0]
    img.header.set_sform(None, code=0)
    img.header.set_qform(None, code=0)
    nib.save(img, path)
    capfd.readouterr()
    rc = main(["segment", str(path), "--seed", "24,22,4", "--max-steps", "3", "--out", str(tmp_path / "m.png")])
    out, err = capfd.readouterr()
    assert rc == 0 and err == ""  # nothing from nibabel's own log
    notes = [line for line in out.splitlines() if line.startswith("note: ")]
    assert any(str(path) in n and "1 mm assumed" in n and "pixdim" in n for n in notes), out
    vol = eio.load(path)
    assert vol.spacing == pytest.approx((3.0, 0.8, 1.0))  # (slice, row, col): the bad column spacing -> 1 mm


@pytest.mark.parametrize("value", [["0", "0"], ["nan", "nan"]])
def test_dicom_pixel_spacing_zero_or_nan_gets_a_note_naming_the_file_and_the_assumption(tmp_path, value, capfd):
    ds = pydicom.dcmread(get_testdata_file("CT_small.dcm"))
    with warnings.catch_warnings():  # pydicom warns that 'nan' is no valid decimal string: that is the point
        warnings.simplefilter("ignore")
        ds.PixelSpacing = value
    folder = tmp_path / "series"
    folder.mkdir()
    ds.save_as(folder / "one.dcm")
    capfd.readouterr()
    rc = main(["segment", str(folder), "--seed", "64,64,4", "--max-steps", "3", "--out", str(tmp_path / "m.png")])
    out, err = capfd.readouterr()
    assert rc == 0 and err == "", err
    notes = [line for line in out.splitlines() if line.startswith("note: ")]
    assert any("one.dcm" in n and "PixelSpacing (0028,0030)" in n and "1 mm assumed" in n for n in notes), out


def test_zero_row_array_is_called_empty(tmp_path, capsys):
    path = tmp_path / "empty.npy"
    np.save(path, np.zeros((0, 5), np.float32))
    rc = main(["segment", str(path), "--seed", "0,0,1", "--out", str(tmp_path / "o")])
    lines = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(lines) == 1 and "empty" in lines[0] and "0 rows" in lines[0] and str(path) in lines[0]


def test_seed_at_the_corner_is_said_to_be_on_the_border(tmp_path, capsys):
    # Noise only: the flood finds no boundary and gives the seed back, whose
    # disk is cut by the border. (Beside a structure, a corner click floods
    # the background around it: an outline of what is there.)
    path = tmp_path / "noise.png"
    rng = np.random.default_rng(0)
    Image.fromarray(np.clip(60 + rng.normal(0, 10, (96, 96)), 0, 255).astype(np.uint8)).save(path)
    rc = main(["segment", str(path), "--seed", "0,0,3", "--out", str(tmp_path / "o")])
    lines = capsys.readouterr().err.splitlines()
    assert rc in (2, 3) and len(lines) == 1
    assert "border" in lines[0] and "too small" not in lines[0]
    assert not any(p.name.startswith("o") for p in tmp_path.iterdir() if p != path)


def test_out_under_a_regular_file_says_so(tmp_path, capsys):
    path = tmp_path / "disk.png"
    Image.fromarray(disk_array().astype(np.uint8)).save(path)
    blocker = tmp_path / "notes.txt"
    blocker.write_text("a file")
    rc = main(["segment", str(path), "--seed", "24,22,4", "--out", str(blocker / "sub" / "res")])
    lines = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(lines) == 1 and f"{blocker} is a file, not a folder" in lines[0]


@pytest.mark.parametrize("content", ['{"Isotide": {}}', '{"Isotide": {"SchemaVersion": "1.0.0"}}', "[1, 2]",
                                     '{"Description": "another program\'s sidecar"}'])
def test_verify_exits_2_for_a_file_that_is_not_a_result(tmp_path, content, capsys):
    for name in ("thing_dseg.json", "thing.json"):
        path = tmp_path / name
        path.write_text(content)
        rc = main(["verify", str(path)])
        captured = capsys.readouterr()
        lines = captured.err.splitlines()
        assert rc == 2 and len(lines) == 1 and "not an Isotide" in lines[0] and str(path) in lines[0]


def test_verify_quiet_says_when_inputs_were_not_checked(tmp_path, capsys):
    source = tmp_path / "input" / "disk.png"
    source.parent.mkdir()
    Image.fromarray(disk_array().astype(np.uint8)).save(source)
    prefix = tmp_path / "out" / "res"
    assert main(["segment", str(source), "--seed", "24,22,4", "--out", str(prefix)]) == 0
    capsys.readouterr()
    assert main(["verify", "--quiet", str(prefix)]) == 0
    assert capsys.readouterr() == ("", "")  # everything checked and matching: silence
    shutil.rmtree(source.parent)
    assert main(["verify", "--quiet", str(prefix)]) == 0
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1 and "1 input file not present, so not checked" in lines[0]
    assert json.loads(eio.result_paths(prefix)["json"].read_text())["Isotide"]["Input"]["Files"]
