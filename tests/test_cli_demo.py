"""``isotide demo``: files written, figures printed, outlines close to the phantom's truth.

References used below: the Dice coefficient (L. R. Dice, Ecology 26(3)
(1945) 297-302), computed here with numpy; nibabel and Pillow (reading what
the demo wrote); the committed truth labels of ``sample_cases/abdomen_mr``
(slice 11, where its README documents the demo's seeds); the Okabe-Ito
colours orange #E69F00 and sky blue #56B4E9 (M. Okabe and K. Ito, "Color
Universal Design", 2008).
"""

from __future__ import annotations

import contextlib
import io
import json
import re
from pathlib import Path

import nibabel as nib
import numpy as np
import pytest
from PIL import Image
from scipy import ndimage
from independent_metrics import dice

import engine.io as eio
from engine.cli import main
from engine.commands.demo import DEMO_SLICE, STRUCTURES, demo_phantom, draw_contour

ROOT = Path(__file__).resolve().parents[1]
FILES = ("image.png", "abdomen_dseg.nii.gz", "abdomen_dseg.tsv", "abdomen_dseg.json", "overlay.png", "summary.json")



@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo") / "out"
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(["demo", "--out", str(folder), "--no-window"])
    return rc, folder, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def truth():
    """The committed case's truth on the demo slice, read with nibabel ([i, j, k] = [col, row, slice])."""
    data = np.asarray(nib.load(ROOT / "sample_cases" / "abdomen_mr" / "truth_dseg.nii.gz").dataobj)
    return data[:, :, DEMO_SLICE].T


def test_demo_writes_its_files(demo):
    rc, folder, out, err = demo
    assert rc == 0, err
    for name in FILES:
        assert (folder / name).is_file(), name
        assert f"wrote: {folder / name}" in out
    report = eio.verify(folder / "abdomen_dseg.json")
    assert report.ok, report.problems
    rows = (folder / "abdomen_dseg.tsv").read_text().splitlines()
    assert rows[0] == "index\tname\tabbreviation\tcolor"
    assert [r.split("\t")[1] for r in rows[1:]] == [s.name for s in STRUCTURES]
    picture = np.asarray(Image.open(folder / "image.png"))  # Pillow reads the 16-bit grey slice
    assert picture.shape == (256, 256) and picture.max() > 255


def test_demo_slice_has_the_committed_truth(truth):
    # The demo renders one slice at the height of slice 11 of the committed
    # case: its truth labels must be that slice's (noise does not change them).
    ph = demo_phantom(supersample=1, noise_sigma=0.0)
    np.testing.assert_array_equal(ph.truth[0], truth)


def test_demo_outlines_match_the_truth(demo, truth):
    rc, folder, out, err = demo
    labels = np.asarray(nib.load(folder / "abdomen_dseg.nii.gz").dataobj)[:, :, 0].T
    summary = json.loads((folder / "summary.json").read_text())
    for index, (structure, figures) in enumerate(zip(STRUCTURES, summary["structures"]), start=1):
        ours = labels == index
        reference = truth == structure.truth_label
        score = dice(ours, reference)
        assert score >= 0.85, f"{structure.name}: Dice {score:.3f}"
        assert figures["name"] == structure.name and figures["dice"] == pytest.approx(score, abs=1e-9)
        line = next(x for x in out.splitlines() if x.startswith(f"{structure.name}:"))
        assert re.search(r"\d+ steps", line) and " s, area " in line and "mm²" in line
        assert float(re.search(r"Dice (\d\.\d+)", line).group(1)) == pytest.approx(score, abs=5e-4)
        # Printed area in mm² agrees with the pixel count times the pixel area to ~3 %.
        area = float(re.search(r"area ([\d.]+) mm²", line).group(1))
        assert area == pytest.approx(np.count_nonzero(ours) * 1.5625**2, rel=0.03)


def test_overlay_draws_each_outline_in_its_colour_on_its_boundary(demo, truth):
    rc, folder, out, err = demo
    rgb = np.asarray(Image.open(folder / "overlay.png").convert("RGB"))
    assert rgb.shape == (512, 512, 3)
    for structure, colour in zip(STRUCTURES, ((0xE6, 0x9F, 0x00), (0x56, 0xB4, 0xE9))):
        painted = np.all(rgb == colour, axis=2)
        painted[:40] = False  # the legend
        assert painted.sum() > 50, structure.name
        # Every painted pixel (in original pixels) lies within 2.5 px of the structure's truth boundary.
        region = truth == structure.truth_label
        boundary = region ^ ndimage.binary_erosion(region)
        distance = ndimage.distance_transform_edt(~boundary)
        rows, cols = np.nonzero(painted)
        assert distance[rows // 2, cols // 2].max() <= 2.5, structure.name


def test_draw_contour_paints_a_circle_where_it_is():
    rgb = np.zeros((80, 80, 3), np.uint8)
    t = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    centre, radius = np.array([20.0, 18.0]), 10.0
    draw_contour(rgb, centre + radius * np.c_[np.sin(t), np.cos(t)], "#56B4E9", scale=2, thickness=1)
    rows, cols = np.nonzero(np.all(rgb == (0x56, 0xB4, 0xE9), axis=2))
    # Back in original pixel coordinates, painted pixels lie on the circle (analytic) within a pixel.
    r = np.hypot((rows - 0.5) / 2 - centre[0], (cols - 0.5) / 2 - centre[1])
    assert np.abs(r - radius).max() <= 0.5
    assert len(rows) >= 0.9 * 2 * np.pi * radius * 2  # a closed ring, no gaps


def test_demo_refuses_an_unwritable_folder(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    rc = main(["demo", "--out", str(blocker / "inside")])
    captured = capsys.readouterr()
    assert rc == 2
    lines = captured.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("isotide demo: error: ") and str(blocker) in lines[0]
