"""No wrong result reported as a success: empty outlines, bad limits, settings beyond the image.

References used below: Gage & Hamilton, "The heat equation shrinking convex
plane curves", J. Differential Geom. 23 (1986) 69-96 (a circle under
curvature flow shrinks to a point at t = r0²/2: a front with no image force
must vanish), and the analytic disk (area π r²).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from PIL import Image

import engine.io as eio
from engine.cli import main
from engine.front import Front
from engine.segment import segment


def disk_image(shape=(64, 64), centre=(32.0, 30.0), radius=14.0, seed=0):
    rr, cc = np.indices(shape)
    rng = np.random.default_rng(seed)
    inside = (rr - centre[0]) ** 2 + (cc - centre[1]) ** 2 < radius**2
    return np.where(inside, 180.0, 60.0) + rng.normal(0.0, 6.0, shape)


EMPTYING = {
    # a seed on a flat image: no region contrast, curvature alone shrinks it (Gage & Hamilton 1986)
    "constant image": (lambda: np.full((48, 48), 100.0), {}),
    "no image force": (disk_image, {"drive": 0.0}),
    "smoothness without bound": (disk_image, {"smoothness": 1e300}),
}


@pytest.mark.parametrize("case", sorted(EMPTYING))
def test_a_vanished_front_is_not_converged(case):
    make, params = EMPTYING[case]
    seg = segment(make(), [(24.0, 24.0, 5.0)], **params)
    assert seg.vanished and seg.empty
    assert not seg.converged
    assert not seg.mask.any() and seg.area_mm2 == 0.0


def test_front_vanish_leaves_converged_false():
    # r0 = 3 px under curvature flow vanishes at t = 4.5 (Gage & Hamilton 1986)
    front = Front.from_seeds(np.zeros((32, 32)), [(16.0, 16.0, 3.0)], model="curvature")
    front.run(until_time=10.0)
    assert front.vanished and not front.converged


@pytest.fixture()
def flat_png(tmp_path):
    path = tmp_path / "flat.png"
    Image.fromarray(np.full((48, 48), 90, np.uint8)).save(path)
    return path


@pytest.fixture()
def disk_png(tmp_path):
    path = tmp_path / "disk.png"
    Image.fromarray(np.clip(disk_image(), 0, 255).astype(np.uint8)).save(path)
    return path


@pytest.mark.parametrize("extra", [[], ["--drive", "0"], ["--smoothness", "1e300"]])
def test_cli_refuses_to_save_an_empty_outline(tmp_path, disk_png, flat_png, extra, capsys):
    image = flat_png if not extra else disk_png
    rc = main(["segment", str(image), "--seed", "24,24,5", *extra, "--out", str(tmp_path / "out" / "res")])
    captured = capsys.readouterr()
    assert rc == 3
    lines = captured.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("isotide segment: no outline: the outline vanished")
    assert "--save-anyway" in lines[0]
    assert not (tmp_path / "out").exists()  # nothing written


def test_save_anyway_writes_the_empty_outline_but_still_fails(tmp_path, flat_png, capsys):
    prefix = tmp_path / "res"
    rc = main(["segment", str(flat_png), "--seed", "24,24,5", "--save-anyway", "--out", str(prefix)])
    out = capsys.readouterr().out
    assert rc == 3
    assert "converged: no (the outline vanished" in out
    assert eio.verify(eio.result_paths(prefix)["json"]).ok
    png = tmp_path / "res.png"
    assert main(["segment", str(flat_png), "--seed", "24,24,5", "--save-anyway", "--out", str(png)]) == 3
    assert png.is_file()


def test_help_documents_the_exit_codes(capsys):
    with pytest.raises(SystemExit):
        main(["segment", "--help"])
    text = capsys.readouterr().out
    for code, words in (("0", "done"), ("2", "bad input"), ("3", "no outline"), ("130", "interrupted")):
        assert any(line.split()[:1] == [code] and words in line for line in text.splitlines()), text


@pytest.mark.parametrize("steps", [0, -5, 2.5, True])
def test_max_steps_must_be_a_positive_whole_number(steps):
    with pytest.raises(ValueError, match="max_steps"):
        segment(disk_image(), [(32.0, 30.0, 4.0)], max_steps=steps)


def test_a_misspelt_setting_is_a_value_error_naming_it():
    with pytest.raises(ValueError, match=r"smoothnes: not a setting.*did you mean smoothness\?"):
        segment(disk_image(), [(32.0, 30.0, 4.0)], smoothnes=0.5)



FRONT_CONSTRUCTORS = {
    "from_seeds": lambda img, **kw: Front.from_seeds(img, [(32.0, 30.0, 4.0)], **kw),
    "from_mask": lambda img, **kw: Front.from_mask(img, img > 120.0, **kw),
    "from_pixel_phi": lambda img, **kw: Front.from_pixel_phi(img, np.where(img > 120.0, -1.0, 1.0), **kw),
    "from_function": lambda img, **kw: Front.from_function(
        lambda p: np.hypot(p[:, 0] - 32.0, p[:, 1] - 30.0) - 4.0, img.shape, image=img, **kw),
}


@pytest.mark.parametrize("constructor", sorted(FRONT_CONSTRUCTORS))
def test_front_constructors_check_names_and_limits_as_segment_does(constructor):
    make = FRONT_CONSTRUCTORS[constructor]
    # from_mask hands its settings on to from_pixel_phi, which names itself
    where = "from_pixel_phi" if constructor == "from_mask" else constructor
    with pytest.raises(ValueError, match=rf"^smoothnes: not a setting of Front\.{where}\(\); did you mean smoothness\?"):
        make(disk_image(), smoothnes=0.5)
    # 64 x 64 pixels of 0.5 mm: half the smaller side is 16 mm
    with pytest.raises(ValueError, match="outline_averaging") as info:
        make(disk_image(), spacing=(0.5, 0.5), outline_averaging=1e6)
    assert info.value.limit == pytest.approx(16.0)
    with pytest.raises(ValueError, match="spacing"):
        make(disk_image(), spacing=(1.0, 10.0))
    with pytest.raises(ValueError, match=r"^spacing must be 2 positive numbers \(mm\)"):
        make(disk_image(), spacing=(1.0, -1.0))

@pytest.mark.parametrize("name", ["outline_averaging", "edge_sigma", "local_radius"])
def test_sigmas_beyond_the_image_are_refused_before_any_work(name):
    # 64 x 64 pixels of 0.5 mm: half the smaller side is 16 mm
    with pytest.raises(ValueError, match=name) as info:
        segment(disk_image(), [(32.0, 30.0, 4.0)], spacing=(0.5, 0.5), **{name: 1e6})
    assert info.value.limit == pytest.approx(16.0)
    seg = segment(disk_image(), [(32.0, 30.0, 4.0)], spacing=(0.5, 0.5), max_steps=5, **{name: 16.0})
    assert seg.steps == 5  # at the limit it runs


def test_pixels_far_from_square_are_refused():
    from engine.validation.limits import MAX_ANISOTROPY

    with pytest.raises(ValueError, match="spacing"):
        segment(disk_image(), [(32.0, 30.0, 4.0)], spacing=(1.0, 10.0))
    segment(disk_image(), [(32.0, 30.0, 4.0)], spacing=(1.0, MAX_ANISOTROPY), max_steps=3)


@pytest.mark.parametrize("flag", ["--outline-averaging", "--edge-sigma"])
def test_cli_names_the_flag_beyond_the_image(tmp_path, disk_png, flag, capsys):
    rc = main(["segment", str(disk_png), "--seed", "32,30,4", flag, "1e6", "--out", str(tmp_path / "o")])
    lines = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(lines) == 1
    assert lines[0].startswith(f"isotide segment: error: {flag} 1e+06: ") and "32 mm" in lines[0]


def test_cli_names_the_file_whose_pixels_are_far_from_square(tmp_path, capsys):
    import nibabel as nib

    path = tmp_path / "stretched.nii.gz"
    data = np.clip(disk_image(), 0, 255).astype(np.int16)
    nib.save(nib.Nifti1Image(data.T[:, :, None], np.diag([10.0, 1.0, 1.0, 1.0])), path)  # columns 10 mm
    rc = main(["segment", str(path), "--seed", "32,30,4", "--out", str(tmp_path / "o")])
    lines = capsys.readouterr().err.splitlines()
    assert rc == 2 and len(lines) == 1
    assert str(path) in lines[0] and "10 times longer" in lines[0]


def test_loading_progress_is_shown(tmp_path, disk_png, capsys):
    rc = main(["segment", str(disk_png), "--seed", "32,30,4", "--max-steps", "3", "--progress",
               "--out", str(tmp_path / "m.png")])
    err = capsys.readouterr().err
    assert rc == 0 and "loading [" in err and "/3 steps" in err


def test_area_is_the_part_inside_the_image_when_the_outline_touches_the_border(tmp_path, capsys):
    # A disk of radius 30 px centred 10 px from a corner: the image holds part of it.
    shape, centre, radius = (96, 96), (10.0, 10.0), 30.0
    rr, cc = np.indices(shape)
    img = np.where((rr - centre[0]) ** 2 + (cc - centre[1]) ** 2 < radius**2, 180.0, 60.0)
    seg = segment(img, [(10.0, 10.0, 5.0)], spacing=(0.8, 1.2))
    pixels = int(seg.mask.sum())
    assert seg.converged and pixels > 1000
    # The mask and the area agree within a pixel's worth of partial volume along the outline:
    # at most half a pixel per pixel of outline (a quarter circle, 47 px; none along the border).
    outline_px = 0.5 * math.pi * radius
    assert abs(seg.area_mm2 - pixels * 0.96) <= 0.5 * outline_px * 0.96
    # Analytic area of the disk within the image's extent [-0.5, 95.5]² (integrated numerically).
    x = np.linspace(-0.5, 95.5, 200001)
    half = np.sqrt(np.clip(radius**2 - (x - centre[0]) ** 2, 0.0, None))
    chord = np.clip(np.minimum(centre[1] + half, 95.5) - np.maximum(centre[1] - half, -0.5), 0.0, None)
    exact = float(np.sum(chord) * (x[1] - x[0])) * 0.96
    assert seg.area_mm2 == pytest.approx(exact, rel=0.02)


def test_an_outline_at_the_border_is_saved_without_stray_warnings(tmp_path, capfd):
    # A bright half-plane along the top rows: its outline meets the image's border,
    # where open contours are expected; the saved result reports no warning text.
    path = tmp_path / "edge.png"
    rr = np.indices((96, 96))[0]
    Image.fromarray(np.where(rr < 40, 180, 60).astype(np.uint8)).save(path)
    rc = main(["segment", str(path), "--seed", "20,48,4", "--out", str(tmp_path / "edge")])
    out, err = capfd.readouterr()
    assert rc == 0 and err == "", err
    assert "Warning" not in out and "(3840 pixels" in out  # the 40 top rows exactly
