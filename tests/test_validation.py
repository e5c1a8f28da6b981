"""engine.validation: every check returns the value in its plain form or a ValueError naming the argument.

The checks are plain input rules of the project (no published reference):
each test pairs values that must pass with values that must fail and the
word the message must carry, so that a check that lets everything through
or refuses everything fails.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from engine import validation as v


@pytest.mark.parametrize("text, kwargs, value", [
    ("2.5", {}, 2.5), (" -1e3 ", {}, -1000.0), ("0", {"minimum": 0.0}, 0.0), ("0.1", {"minimum": 0.0, "strict": True}, 0.1),
])
def test_parse_number_accepts(text, kwargs, value):
    assert v.parse_number(text, name="--x", **kwargs) == value


@pytest.mark.parametrize("text, kwargs, words", [
    ("abc", {}, "expected a number"), ("nan", {}, "finite"), ("inf", {}, "finite"),
    ("-0.5", {"minimum": 0.0}, "must be >= 0"), ("0", {"minimum": 0.0, "strict": True}, "must be > 0"),
])
def test_parse_number_refuses_naming_the_argument(text, kwargs, words):
    with pytest.raises(ValueError, match=r"^--x ") as info:
        v.parse_number(text, name="--x", **kwargs)
    assert words in str(info.value) and repr(text) in str(info.value)


def test_parse_whole():
    assert v.parse_whole("7", name="n") == 7 and v.parse_whole("3.0", name="n") == 3
    assert v.parse_whole("1", name="n", minimum=1) == 1
    for text, words in [("2.5", "whole number"), ("x", "whole number"), ("-1", "must be >= 0")]:
        with pytest.raises(ValueError, match=f"^n {text!r}: .*{words}"):
            v.parse_whole(text, name="n")
    with pytest.raises(ValueError, match="must be >= 1"):
        v.parse_whole("0", name="max_steps", minimum=1)


def test_parse_seed_text_and_sequences():
    assert v.parse_seed("10, 12.5 ,3") == (10.0, 12.5, 3.0)
    assert v.parse_seed([10, 12, 3]) == (10.0, 12.0, 3.0)
    assert v.parse_seed("4:10,12,3", with_slice=True) == (4, 10.0, 12.0, 3.0)
    assert v.parse_seed("10,12,3", with_slice=True) == (None, 10.0, 12.0, 3.0)
    assert v.parse_seed([4, 10, 12, 3], with_slice=True) == (4, 10.0, 12.0, 3.0)
    for text, words in [("a,b,c", "as numbers"), ("1,2", "three numbers"), ("1,2,3,4", "three numbers"),
                        ("1,nan,3", "finite"), ("1,2,0", "radius must be > 0"), ("1,2,-1", "radius must be > 0")]:
        with pytest.raises(ValueError, match=f"^--seed {text!r}: .*{words}"):
            v.parse_seed(text, name="--seed")
    with pytest.raises(ValueError, match="slice"):
        v.parse_seed("-2:1,2,3", name="seeds", with_slice=True)
    with pytest.raises(ValueError, match="slice"):
        v.parse_seed("1.5:1,2,3", name="seeds", with_slice=True)


def test_parse_window():
    assert v.parse_window("-100, 200") == (-100.0, 200.0)
    assert v.parse_window([0, 1]) == (0.0, 1.0)
    for text, words in [("a,b", "as numbers"), ("1", "two finite"), ("1,inf", "two finite"),
                        ("5,5", "LOW must be less than HIGH"), ("6,5", "LOW must be less than HIGH")]:
        with pytest.raises(ValueError, match=f"^--window {text!r}: .*{words}"):
            v.parse_window(text, name="--window")


def test_check_seed_on_the_image_edges_and_outside():
    shape = (20, 30)
    # pixel centres at whole numbers: the image spans -0.5 .. n - 0.5 (common practice)
    assert v.check_seed(-0.5, 29.5, 2, shape) == (-0.5, 29.5, 2.0)
    assert v.check_seed(np.float32(19.5), 0, 1.5, shape) == (19.5, 0.0, 1.5)
    for args, words in [((-0.6, 5, 2), r"outside the image \(20 rows x 30 columns"), ((5, 29.6, 2), "outside"),
                        ((5, 5, 0), "radius must be > 0"), ((5, math.nan, 1), "finite"),
                        ((5, "x", 1), "must be numbers")]:
        with pytest.raises(ValueError, match=f"^seed: .*{words}"):
            v.check_seed(*args, shape)
    with pytest.raises(ValueError, match=r"^--seed 3,40,2: centre \(row 3, col 40\)"):
        v.check_seed(3, 40, 2, shape, name="--seed 3,40,2")


def test_check_stroke():
    pts, r = v.check_stroke([(1, 2), (3.5, 4)], 2)
    assert pts.shape == (2, 2) and pts.dtype == float and r == 2.0
    assert v.check_stroke([5, 6], 0.5)[0].shape == (1, 2)
    for points, radius, words in [([], 1.0, "^stroke: .*points"), ([(1, np.inf)], 1.0, "^stroke: "),
                                  ([(1, 2, 3)], 1.0, "^stroke: "), ([(1, 2)], 0.0, "^radius_mm: "),
                                  ([(1, 2)], -1.0, "^radius_mm: "), ([(1, 2)], math.nan, "^radius_mm: "),
                                  ([(1, 2)], True, "^radius_mm: ")]:
        with pytest.raises(ValueError, match=words):
            v.check_stroke(points, radius)


def test_check_slice():
    assert v.check_slice(0, 5) == 0 and v.check_slice(np.int64(4), 5) == 4
    for index, words in [(5, "slice 5: the image has 5 slices \\(0..4\\)"), (-1, "slice -1: "),
                         (1.0, "slice: expected a whole number"), (True, "slice: expected a whole number")]:
        with pytest.raises(ValueError, match=f"^{words}"):
            v.check_slice(index, 5)
    with pytest.raises(ValueError, match=r"^--slice 1: the image has 1 slice \(0..0\)"):
        v.check_slice(1, 1, name="--slice")


def test_check_steps_detail_nodes_coarse():
    assert v.check_steps(1) == 1 and v.check_steps(np.int32(20)) == 20
    for bad in (0, -3, 2.0, True, None):
        with pytest.raises(ValueError, match="^max_steps: expected a whole number >= 1"):
            v.check_steps(bad, name="max_steps")
    assert [v.check_detail(d) for d in v.DETAILS] == [1, 2, 4]
    for bad in (3, 0, 2.0, "2"):
        with pytest.raises(ValueError, match="^detail: must be 1, 2 or 4"):
            v.check_detail(bad)
    assert v.check_nodes("scattered") == "scattered"
    with pytest.raises(ValueError, match="^nodes: must be lattice or scattered"):
        v.check_nodes("grid")
    assert v.check_coarse(None) is None and [v.check_coarse(c) for c in v.BLOCK_SIZES] == [1, 2, 4, 8]
    assert v.check_coarse(1, nodes="scattered") == 1
    with pytest.raises(ValueError, match="^--coarse 3: must be auto, 1, 2, 4 or 8"):
        v.check_coarse(3, name="--coarse", automatic="auto")
    with pytest.raises(ValueError, match="^coarse 2: the coarse start is for lattice nodes"):
        v.check_coarse(2, nodes="scattered")


def test_check_margin():
    assert v.check_margin(-2, limit_mm=10) == -2.0 and v.check_margin(10.0, limit_mm=10) == 10.0
    for bad, words in [(0, "non-zero"), (math.inf, "finite"), (True, "non-zero"), (10.5, "larger than 10 mm"),
                       (-11, "larger than")]:
        with pytest.raises(ValueError, match=f"^mm: .*{words}"):
            v.check_margin(bad, limit_mm=10)


def test_names_and_colours():
    assert v.check_label_name("  Liver ") == "Liver"
    assert v.check_label_name("x" * v.MAX_LABEL_NAME) == "x" * v.MAX_LABEL_NAME
    for bad in ("", "  ", "a\tb", "a\nb", "x" * (v.MAX_LABEL_NAME + 1), None):
        with pytest.raises(ValueError, match="^--label: expected one line"):
            v.check_label_name(bad, name="--label")
    assert v.check_file_name("left kidney", name="label") == "left kidney"
    for bad in ("a/b", "a:b", "..", "", "a\tb", "x" * (v.MAX_FILE_NAME + 1)):
        with pytest.raises(ValueError, match="^" + re.escape(f"case {bad!r}: expected a name")):
            v.check_file_name(bad, name="case")
    assert v.check_colour("#00aaFF") == "#00AAFF"
    for bad in ("00AAFF", "#00AAF", "#00AAFG", "red"):
        with pytest.raises(ValueError, match="^colour: expected #RRGGBB"):
            v.check_colour(bad)


def test_session_and_command_line_use_the_same_checks(tmp_path, capsys):
    """The Session names its keywords and the command line its flags, with the same words."""
    from engine.cli import main
    from engine.session import Session

    session = Session.from_array(np.zeros((3, 16, 16)), spacing=(2.0, 1.0, 1.0))
    label = session.add_label("a").index
    with pytest.raises(ValueError, match="^seed: centre .* lies outside the image"):
        session.seed(3, 40, 2, label=label, slice=1)
    with pytest.raises(ValueError, match="^slice 3: the image has 3 slices"):
        session.seed(3, 4, 2, label=label, slice=3)
    with pytest.raises(ValueError, match="^radius_mm: "):
        session.extend([(3, 4)], 0, label=label, slice=1)
    with pytest.raises(ValueError, match="^spacing must be 3 positive numbers"):
        Session.from_array(np.zeros((3, 16, 16)), spacing=(2.0, 0.0, 1.0))
    path = tmp_path / "flat.npy"
    np.save(path, np.zeros((16, 16), np.float32))
    assert main(["segment", str(path), "--seed", "3,40,2", "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--seed 3,40,2: centre (row 3, col 40) lies outside the image" in err


def test_validate_seeds_names_the_seed_and_the_image_in_plain_numbers():
    assert v.validate_seeds([(3, 4, 2)], (20, 30)).shape == (1, 3)
    assert v.validate_seeds((1, 3, 4, 2), (4, 20, 30)).shape == (1, 4)
    with pytest.raises(ValueError, match=re.escape("seeds: seed 1: centre (row 3, col 50) lies outside the image "
                                                   "(20 x 30 pixels: rows 0..19, cols 0..29)")):
        v.validate_seeds([(3, 4, 2), (3, 50, 2)], (20, 30))
    with pytest.raises(ValueError, match=re.escape("centre (slice 4, row 3, col 5) lies outside the image (4 x 20 x 30 "
                                                   "voxels: slices 0..3, rows 0..19, cols 0..29)")):
        v.validate_seeds([(4, 3, 5, 2)], (4, 20, 30))
    for seeds, words in [([(1, 2)], "tuples"), ([(1, np.nan, 2)], "NaN"), ([(1, 2, 0)], "radius must be > 0")]:
        with pytest.raises(ValueError, match=f"^seeds.*{words}"):
            v.validate_seeds(seeds, (20, 30))


def test_front_settings_refuse_a_fractional_detail_or_step_limit_instead_of_rounding():
    from engine.session import FrontSettings

    base = FrontSettings()
    assert base.updated(detail=2, max_steps=np.int64(300)).detail == 2
    assert FrontSettings.from_record({"detail": 4, "max_steps": 50}).max_steps == 50
    for changes, words in [({"detail": 1.7}, "detail"), ({"detail": 3}, "detail"), ({"max_steps": 2.5}, "max_steps"),
                           ({"max_steps": 0}, "max_steps")]:
        with pytest.raises(ValueError, match=words):
            base.updated(**changes)
        with pytest.raises(ValueError, match=words):
            FrontSettings.from_record(changes)
