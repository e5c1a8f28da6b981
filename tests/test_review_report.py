"""The HTML review summary: self-contained, escaped, a registered picture of every outlined slice, and honest
about the record check and the study.

References used below: Python's ``html.parser`` (the text a browser would show), Pillow (decoding the
embedded PNG pictures), the head and abdomen phantoms of ``sample_cases`` (their truth labels stand in for
outlines) and the physical aspect ratio from the pixel spacing (common practice).
"""

from __future__ import annotations

import base64
import io
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
from PIL import Image

import engine.io as eio
from engine.cli import main
from engine.review import Mark, record_step
from engine.review.pictures import crop_box, slice_picture
from engine.review.report import CAUTION, write_report
from engine.session.planes import PlaneView
from tests.review_cases import TUMOUR_SLICES, VENTRICLE_SLICES, make_result

ROOT = Path(__file__).resolve().parents[1]


class _Text(HTMLParser):
    """What a reader sees: the text, and the tags and attributes used."""

    def __init__(self) -> None:
        super().__init__()
        self.text: list[str] = []
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def parse(html_text: str) -> _Text:
    p = _Text()
    p.feed(html_text)
    return p


def pictures(html_text: str) -> list[Image.Image]:
    return [Image.open(io.BytesIO(base64.b64decode(b)))
            for b in re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html_text)]


def colour_pixels(img: Image.Image, colour: str, tol: int = 40) -> np.ndarray:
    rgb = np.asarray(img.convert("RGB"), dtype=int)
    target = np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)])
    return np.all(np.abs(rgb - target) <= tol, axis=-1)


def test_a_reviewed_result_gets_a_self_contained_summary_with_a_picture_of_each_outlined_slice(tmp_path, capsys):
    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit", comment="ready")
    record_step(sidecar, "return", reviewer="Dr A", comment="redo the lower rim",
                marks=[Mark(1, 10, "rim missed here", (58.0, 100.0)), Mark(1, 12, "outline missing on this slice")])
    capsys.readouterr()
    assert main(["report", str(sidecar)]) == 0
    out = capsys.readouterr().out
    page = sidecar.parent / "case_review.html"
    assert out.startswith(str(page))
    text = page.read_text(encoding="utf-8")
    parsed = parse(text)
    words = " ".join(" ".join(parsed.text).split())
    # self-contained: no script, no outside resource
    assert not any(tag in ("script", "link", "iframe") for tag, _ in parsed.tags)
    assert all(a.get("src", "").startswith("data:image/png;base64,") for tag, a in parsed.tags if tag == "img")
    assert "http://" not in text and "https://" not in text
    assert words.count(CAUTION) == 2  # top and bottom
    for needle in ("Returned", "Dr A", "redo the lower rim", "rim missed here", "outline missing on this slice",
                   "tumour", "right lateral ventricle", "Region (Chan–Vese)", "Drive 1", "Smoothness",
                   "Trim × 1", "The mask, label table and record match", "No patient identifiers"):
        assert needle in words, needle
    pics = pictures(text)
    # one per outlined slice, and one for the slice a note names though it has no outline
    assert len(pics) == len(TUMOUR_SLICES) + len(VENTRICLE_SLICES) + 1
    orange = [colour_pixels(p, "#E69F00").sum() for p in pics[:len(TUMOUR_SLICES)]]
    assert min(orange) > 100  # the tumour's outline is drawn on each of its slices
    assert colour_pixels(pics[-1], "#56B4E9").sum() > 50  # the ventricle's outline (sky blue)


def test_every_text_from_the_files_is_escaped(tmp_path):
    sidecar = make_result(tmp_path)
    evil = '<script>alert("x")</script><img src=http://e.invalid/x>'
    record_step(sidecar, "submit", comment=evil)
    record_step(sidecar, "return", reviewer="<b>Dr & Co</b>", marks=[Mark(1, 10, evil)])
    written = write_report(sidecar, tmp_path / "summary.html")
    text = written.path.read_text(encoding="utf-8")
    parsed = parse(text)
    assert not any(tag == "script" for tag, _ in parsed.tags)
    assert "<b>Dr" not in text and "<script" not in text
    srcs = [a.get("src", "") for tag, a in parsed.tags if tag == "img"]
    assert all(s.startswith("data:image/png") for s in srcs)
    shown = "".join(parsed.text)
    assert evil in shown and "<b>Dr & Co</b>" in shown  # shown as text, word for word


def test_the_pictures_follow_the_window_layout_and_the_physical_aspect(tmp_path):
    """A bright L-shaped block with its mask: under every screen layout the drawn outline surrounds the
    bright pixels, and the picture has the crop's physical aspect ratio."""
    image = np.zeros((60, 80))
    mask = np.zeros((60, 80), dtype=bool)
    mask[20:40, 30:38] = True
    mask[32:40, 30:50] = True  # an L: any flip or transpose of the outline against the image would show
    image[mask] = 1000.0
    spacing = (0.8, 1.3)
    for horizontal in (0, 1):
        for flip_h in (False, True):
            for flip_v in (False, True):
                view = PlaneView(0, "", horizontal, flip_h, flip_v, ("", "", "", ""))
                pic = slice_picture(image, {1: mask}, {1: "#E69F00"}, 1, spacing=spacing, view=view,
                                    window=(500.0, 1000.0))
                img = Image.open(io.BytesIO(pic.png)).convert("RGB")
                rgb = np.asarray(img, dtype=int)
                bright = (rgb.min(axis=-1) > 200)
                outline = colour_pixels(img, "#E69F00")
                # every outline pixel lies within 3 px of a bright pixel, and the bright area inside the outline
                from scipy import ndimage
                near = ndimage.distance_transform_edt(~bright)
                assert np.percentile(near[outline], 95) <= 3.0, (horizontal, flip_h, flip_v)
                r0, r1, c0, c1 = crop_box(mask, spacing)
                mm_w, mm_h = ((c1 - c0) * spacing[1], (r1 - r0) * spacing[0]) if horizontal == 1 else \
                    ((r1 - r0) * spacing[0], (c1 - c0) * spacing[1])
                assert abs(pic.width / pic.height - mm_w / mm_h) < 0.02
                # the L's long arm: in the stored array it runs along the columns at rows 32..40
                ys, xs = np.nonzero(bright)
                horizontal_extent = xs.max() - xs.min()
                vertical_extent = ys.max() - ys.min()
                if horizontal == 1:  # columns across the screen: the 20-column arm (26 mm) is the wider
                    assert horizontal_extent * 1.0 > vertical_extent * 0.9
                else:
                    assert vertical_extent * 1.0 > horizontal_extent * 0.9


def test_without_the_study_the_outlines_are_drawn_alone_and_the_summary_says_so(tmp_path, capsys):
    sidecar = make_result(tmp_path)
    shutil.move(str(tmp_path / "study"), str(tmp_path / "elsewhere"))
    capsys.readouterr()
    assert main(["report", str(sidecar), "--out", str(tmp_path / "r.html")]) == 0
    assert "outlines only" in capsys.readouterr().out
    words = " ".join(" ".join(parse((tmp_path / "r.html").read_text()).text).split())
    assert "the study is not at" in words and "not present, not checked" in words
    pics = pictures((tmp_path / "r.html").read_text())
    assert pics and all(colour_pixels(p, "#E69F00").sum() + colour_pixels(p, "#56B4E9").sum() > 50 for p in pics)


def test_a_result_that_no_longer_matches_is_reported_and_exit_1(tmp_path, capsys):
    sidecar = make_result(tmp_path)
    table = sidecar.parent / "case_dseg.tsv"
    table.write_text(table.read_text().replace("tumour", "tumor"))
    capsys.readouterr()
    assert main(["report", str(sidecar)]) == 1
    err = capsys.readouterr().err
    assert "no longer matches" in err and len(err.splitlines()) == 1
    words = " ".join(" ".join(parse((sidecar.parent / "case_review.html").read_text()).text).split())
    assert "The result no longer matches its record" in words and "label table" in words


def test_bad_arguments_are_one_line(tmp_path, capsys):
    sidecar = make_result(tmp_path)
    capsys.readouterr()
    assert main(["report", str(sidecar), "--out", str(tmp_path / "r.txt")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("isotide report: --out") and len(err.splitlines()) == 1
    assert main(["report", str(tmp_path / "missing_dseg.json")]) == 2
    assert "no such" in capsys.readouterr().err


def test_versions_are_listed_with_their_review(tmp_path):
    from engine.session import open_result

    sidecar = make_result(tmp_path)
    record_step(sidecar, "submit")
    record_step(sidecar, "return", reviewer="Dr A", comment="too small")
    session = open_result(sidecar)
    session.save(str(sidecar.parent / "case"), new_version=True)
    text = write_report(sidecar).path.read_text()
    words = " ".join(" ".join(parse(text).text).split())
    assert "Version 1: Returned" in words and "Return Submitted → Returned Dr A too small" in words
    assert re.search(r"1 Returned Dr A [^|]*? 2 2 \(these files\) Draft", words)


def test_patient_identifiers_appear_only_when_the_record_holds_them(tmp_path):
    volume = eio.load(ROOT / "sample_cases" / "abdomen_mr" / "dicom")
    labels = np.zeros(volume.shape, dtype=np.uint8)
    labels[17, 100:112, 100:112] = 1
    table = [{"index": 1, "name": "liver"}]
    plain = eio.save_result(tmp_path / "plain", labels, volume, label_table=table, provenance={})
    named = eio.save_result(tmp_path / "named", labels, volume, label_table=table, provenance={},
                            include_patient_identifiers=True)
    plain_text = write_report(plain["json"], volume=volume).path.read_text()
    named_text = write_report(named["json"], volume=volume).path.read_text()
    assert "Phantom^Isotide" not in plain_text and "Patient name" not in plain_text
    assert "Phantom^Isotide" in named_text and "Patient name" in named_text
