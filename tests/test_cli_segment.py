"""``isotide segment``: images in, masks and results out, bad input refused.

References used below: analytic disks and ellipses (area pi r^2, and pi r^2
times the pixel area for a disk drawn in pixel indices on anisotropic
pixels), the Dice coefficient (L. R. Dice, Ecology 26(3) (1945) 297-302),
Pillow and nibabel (reading what the command wrote), highdicom (reading the
DICOM SEG back), and the invented abdomen case in ``sample_cases/`` (its
committed truth labels).
"""

from __future__ import annotations

import io
import json
import math
import re
from pathlib import Path

import highdicom as hd
import nibabel as nib
import numpy as np
import pytest
from PIL import Image
from independent_metrics import dice

import engine.io as eio
from engine.cli import main
from engine.commands.segment import TextProgress

ROOT = Path(__file__).resolve().parents[1]
CENTRE = (48.0, 44.0)
RADIUS = 20.0


def disk(shape, centre, radius):
    """Pixel-centre samples of the open disk |x - c| < r (analytic)."""
    rr, cc = np.indices(shape)
    return (rr - centre[0]) ** 2 + (cc - centre[1]) ** 2 < radius**2


def disk_picture(shape=(96, 96), centre=CENTRE, radius=RADIUS, *, seed=0):
    """A bright disk on a dark background with mild Gaussian noise, 8-bit."""
    rng = np.random.default_rng(seed)
    img = np.where(disk(shape, centre, radius), 180.0, 60.0) + rng.normal(0.0, 8.0, shape)
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)



def printed(out: str, key: str) -> str:
    match = re.search(rf"^{key}: (.*)$", out, flags=re.M)
    assert match, f"{key!r} missing from:\n{out}"
    return match.group(1)


def printed_area(out: str) -> float:
    return float(printed(out, "area").split()[0])


@pytest.fixture()
def png(tmp_path):
    path = tmp_path / "disk.png"
    Image.fromarray(disk_picture()).save(path)
    return path


def test_png_in_png_out(tmp_path, png, capsys):
    out = tmp_path / "masks" / "disk_mask.png"
    rc = main(["segment", str(png), "--seed", "48,44,5", "--out", str(out)])
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    assert captured.err == ""  # not a terminal and no --progress: no bar
    mask = np.asarray(Image.open(out))  # Pillow reads the 8-bit mask
    assert mask.shape == (96, 96) and mask.dtype == np.uint8
    assert set(np.unique(mask)) == {0, 255}
    # Analytic disk of radius 20 px: the outline matches it.
    assert dice(mask == 255, disk((96, 96), CENTRE, RADIUS)) >= 0.97
    # Area pi r^2 (1 mm pixels: a PNG carries no spacing).
    assert printed_area(captured.out) == pytest.approx(math.pi * RADIUS**2, rel=0.03)
    assert printed(captured.out, "converged") == "yes"
    assert int(printed(captured.out, "steps")) > 0
    assert "wall time" in captured.out and "evolution time" in captured.out


def test_scattered_nodes_from_the_command_line(tmp_path, png, capsys):
    out = tmp_path / "scattered.png"
    rc = main(["segment", str(png), "--seed", "48,44,5", "--nodes", "scattered", "--out", str(out)])
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    mask = np.asarray(Image.open(out)) == 255
    assert dice(mask, disk((96, 96), CENTRE, RADIUS)) >= 0.97  # analytic disk
    assert printed(captured.out, "converged") == "yes"


def test_png_in_result_out_with_provenance(tmp_path, png, capsys, monkeypatch):
    monkeypatch.setenv("USER", "tester")
    prefix = tmp_path / "results" / "disk"
    rc = main(["segment", str(png), "--seed", "48,44,5", "--seed", "50,40,3", "--smoothness", "0.3",
               "--outline-averaging", "2.5", "--label", "bright disk", "--out", str(prefix)])
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    paths = eio.result_paths(prefix)
    for key in ("nifti", "tsv", "json"):
        assert paths[key].is_file()
    assert not paths["seg"].exists()
    report = eio.verify(paths["json"])
    assert report.ok, report.problems
    labels = np.asarray(nib.load(paths["nifti"]).dataobj)[:, :, 0].T  # nibabel: [i, j, k] = [col, row, slice]
    assert set(np.unique(labels)) == {0, 1}
    assert dice(labels == 1, disk((96, 96), CENTRE, RADIUS)) >= 0.97  # analytic disk
    doc = json.loads(paths["json"].read_text())
    block = doc["Isotide"]
    assert block["Operator"] == ""  # only --operator names one; the login name is never recorded
    assert "tester" not in paths["json"].read_text()
    (label,) = block["Labels"]
    assert label["Name"] == "bright disk" and label["Index"] == 1
    (record,) = label["Slices"]
    assert record["Slice"] == 0 and record["Model"] == "region"
    assert record["Parameters"]["smoothness"] == 0.3 and record["Parameters"]["model"] == "region"
    assert record["Parameters"]["outline_averaging"] == 2.5
    assert record["Seeds"] == [[48.0, 44.0, 5.0], [50.0, 40.0, 3.0]]
    assert record["Steps"] == int(printed(captured.out, "steps"))
    assert {"evolve_s", "wall_s", "load_s"} <= set(record["TimingsS"])
    # saved through a Session: the label's creation, then the outline grown by the command
    added, entry = block["History"]
    assert added["Action"] == "label_add" and added["Details"]["name"] == "bright disk"
    assert entry["Action"] == "segment" and entry["Label"] == 1 and entry["Slice"] == 0
    assert entry["Details"]["settings"] == {"smoothness": 0.3, "outline_averaging": 2.5}
    assert entry["Details"]["coarse"] == "auto"
    assert entry["Details"]["nodes"] == "lattice"
    assert record["Parameters"]["coarse"] == 1  # a 96² image starts at full resolution
    assert entry["Details"]["converged"] is (printed(captured.out, "converged") == "yes")
    # The label table names the structure (BIDS dseg.tsv columns).
    rows = paths["tsv"].read_text().splitlines()
    assert rows[0] == "index\tname\tabbreviation\tcolor" and rows[1].startswith("1\tbright disk\t")


def test_volume_slices_and_anisotropic_pixels(tmp_path, capsys):
    """A 3-slice NIfTI with 1.3 x 0.7 mm pixels: default middle slice, --slice, area in mm²."""
    rows, cols = 56, 64
    stack = np.stack([
        disk_picture((rows, cols), (28.0, 34.0), 9.0, seed=1),
        disk_picture((rows, cols), (28.0, 30.0), 14.0, seed=2),
        disk_picture((rows, cols), (28.0, 30.0), 14.0, seed=3) // 2,
    ]).astype(np.int16)
    path = tmp_path / "stack.nii.gz"
    # nibabel: data[i, j, k] = [col, row, slice]; pixdim (col 0.7, row 1.3, slice 4) mm.
    nib.save(nib.Nifti1Image(stack.transpose(2, 1, 0), np.diag([0.7, 1.3, 4.0, 1.0])), path)
    rc = main(["segment", str(path), "--seed", "28,30,4", "--out", str(tmp_path / "mid")])
    out = capsys.readouterr().out
    assert rc == 0
    assert "slice 1 of 3" in out
    # A disk of radius r pixels on 1.3 x 0.7 mm pixels is an ellipse of area pi r^2 * 0.91 mm².
    assert printed_area(out) == pytest.approx(math.pi * 14.0**2 * 1.3 * 0.7, rel=0.03)
    labels = np.asarray(nib.load(tmp_path / "mid_dseg.nii.gz").dataobj).transpose(2, 1, 0)
    assert labels[0].max() == 0 and labels[2].max() == 0 and labels[1].max() == 1
    assert dice(labels[1], disk((rows, cols), (28.0, 30.0), 14.0)) >= 0.97
    assert eio.verify(tmp_path / "mid_dseg.json").ok

    rc = main(["segment", str(path), "--slice", "0", "--seed", "28,34,3", "--out", str(tmp_path / "s0.png")])
    out = capsys.readouterr().out
    assert rc == 0 and "slice 0 of 3" in out
    assert printed_area(out) == pytest.approx(math.pi * 9.0**2 * 1.3 * 0.7, rel=0.05)
    mask = np.asarray(Image.open(tmp_path / "s0.png")) == 255
    assert dice(mask, disk((rows, cols), (28.0, 34.0), 9.0)) >= 0.95


def test_dicom_series_with_dicom_seg(tmp_path, capsys):
    """The committed abdomen case: aorta on slice 11 (seed from its README), SEG read back by highdicom."""
    series = ROOT / "sample_cases" / "abdomen_mr" / "dicom"
    prefix = tmp_path / "aorta"
    rc = main(["segment", str(series), "--slice", "11", "--seed", "147,136,3", "--label", "aorta",
               "--out", str(prefix), "--dicom-seg"])
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    paths = eio.result_paths(prefix)
    assert paths["seg"].is_file()
    assert eio.verify(paths["json"]).ok
    labels = np.asarray(nib.load(paths["nifti"]).dataobj).transpose(2, 1, 0)
    truth = np.asarray(nib.load(ROOT / "sample_cases" / "abdomen_mr" / "truth_dseg.nii.gz").dataobj).transpose(2, 1, 0)
    assert labels.shape == truth.shape == (24, 256, 256)
    assert np.count_nonzero(labels[np.arange(24) != 11]) == 0
    # Against the case's committed truth (label 5 = aorta on that slice).
    assert dice(labels[11] == 1, truth[11] == 5) >= 0.9
    vol = eio.load(series)
    seg = hd.seg.segread(paths["seg"])  # highdicom reads the SEG
    assert seg.number_of_segments == 1 and seg.get_segment_description(1).segment_label == "aorta"
    pixels = seg.get_pixels_by_source_instance(list(vol.sop_instance_uids), combine_segments=True)
    np.testing.assert_array_equal(pixels, labels)


def _garbage(tmp_path):
    path = tmp_path / "broken.png"
    path.write_bytes(b"this is not a picture")
    return path


def _nan_npy(tmp_path):
    arr = disk_picture().astype(np.float32)
    arr[5, 7] = np.nan
    path = tmp_path / "nan.npy"
    np.save(path, arr)
    return path


BAD = {
    "missing file": (lambda t, p: [str(t / "nope.png"), "--seed", "10,10,3", "--out", str(t / "o")], "no such file"),
    "seed outside": (lambda t, p: [str(p), "--seed", "120,10,3", "--out", str(t / "o")], "outside the image"),
    "negative seed": (lambda t, p: [str(p), "--seed=-3,10,3", "--out", str(t / "o")], "outside the image"),
    "radius zero": (lambda t, p: [str(p), "--seed", "10,10,0", "--out", str(t / "o")], "radius must be > 0"),
    "radius negative": (lambda t, p: [str(p), "--seed", "10,10,-2", "--out", str(t / "o")], "radius must be > 0"),
    "unknown model": (lambda t, p: [str(p), "--seed", "10,10,3", "--model", "magic", "--out", str(t / "o")],
                      "unknown model"),
    "window low >= high": (lambda t, p: [str(p), "--seed", "10,10,3", "--model", "window", "--window", "90,20",
                                         "--out", str(t / "o")], "LOW must be less than HIGH"),
    "window equal": (lambda t, p: [str(p), "--seed", "10,10,3", "--model", "window", "--window", "50,50",
                                   "--out", str(t / "o")], "LOW must be less than HIGH"),
    "NaN image": (lambda t, p: [str(_nan_npy(t)), "--seed", "10,10,3", "--out", str(t / "o")], "non-finite"),
    "unreadable file": (lambda t, p: [str(_garbage(t)), "--seed", "10,10,3", "--out", str(t / "o")],
                        "unrecognised file"),
    "3-D seed": (lambda t, p: [str(p), "--seed", "0,10,10,3", "--out", str(t / "o")], "3-D seeds"),
    "seed not numbers": (lambda t, p: [str(p), "--seed", "a,b,c", "--out", str(t / "o")], "ROW,COL,RADIUS"),
    "slice out of range": (lambda t, p: [str(p), "--seed", "10,10,3", "--slice", "3", "--out", str(t / "o")],
                           "--slice 3"),
    "no seed": (lambda t, p: [str(p), "--out", str(t / "o")], "--seed"),
    "no out": (lambda t, p: [str(p), "--seed", "10,10,3"], "--out"),
    "bad smoothness": (lambda t, p: [str(p), "--seed", "10,10,3", "--smoothness", "-1", "--out", str(t / "o")],
                       "--smoothness"),
    "bad outline averaging": (lambda t, p: [str(p), "--seed", "10,10,3", "--outline-averaging", "-2",
                                            "--out", str(t / "o")], "--outline-averaging"),
    "bad detail": (lambda t, p: [str(p), "--seed", "10,10,3", "--detail", "3", "--out", str(t / "o")], "--detail"),
    "bad nodes": (lambda t, p: [str(p), "--seed", "10,10,3", "--nodes", "grid", "--out", str(t / "o")], "--nodes"),
    "coarse with scattered nodes": (lambda t, p: [str(p), "--seed", "10,10,3", "--nodes", "scattered", "--coarse", "2",
                                                 "--out", str(t / "o")], "--coarse"),
    "bad coarse": (lambda t, p: [str(p), "--seed", "10,10,3", "--coarse", "3", "--out", str(t / "o")], "--coarse"),
    "SEG from PNG": (lambda t, p: [str(p), "--seed", "10,10,3", "--dicom-seg", "--out", str(t / "o")],
                     "needs DICOM input"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_input_gives_one_line_and_exit_code_2(case, tmp_path, png, capsys):
    make_args, words = BAD[case]
    rc = main(["segment", *make_args(tmp_path, png)])
    captured = capsys.readouterr()
    assert rc == 2
    lines = captured.err.splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("isotide segment: error: ")
    assert words in lines[0]
    assert captured.out == ""
    assert not any(p.name.startswith("o") for p in tmp_path.iterdir())  # nothing written


def test_argparse_errors_are_one_line_too(capsys):
    with pytest.raises(SystemExit) as info:
        main(["segment", "--seed", "1,1,1"])
    assert info.value.code == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("isotide segment: error: ") and "IMAGE" in lines[0]


def test_progress_bar_is_throttled_and_erased():
    now = [0.0]
    stream = io.StringIO()
    bar = TextProgress(100, stream=stream, interval=0.5, width=10, clock=lambda: now[0])
    for step in range(1, 101):
        now[0] = step * 0.05  # 20 steps per second
        bar(step, step * 0.1)
    # One draw at the first step, then at most one per 0.5 s over 5 s, plus the last step.
    assert 2 <= bar.draws <= 12
    text = stream.getvalue()
    assert text.count("\r") == bar.draws
    last = text.split("\r")[-1]
    assert "[##########] 100/100 steps" in last and "20 steps/s" in last
    bar.close()
    assert stream.getvalue().endswith("\r") and stream.getvalue().split("\r")[-2].strip() == ""


def test_progress_flag_draws_on_stderr(tmp_path, png, capsys):
    rc = main(["segment", str(png), "--seed", "48,44,5", "--max-steps", "8", "--progress",
               "--out", str(tmp_path / "m.png")])
    captured = capsys.readouterr()
    assert rc == 0
    assert "\r" in captured.err and "/8 steps" in captured.err
    assert printed(captured.out, "steps") == "8"
    assert printed(captured.out, "converged").startswith("no")
