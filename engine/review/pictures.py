"""Pictures of outlined slices for the review summary: the slice with the outline drawn, as PNG bytes.

A picture shows the part of a slice around one label's outline (with room
around it) the way the window shows the slice: laid out from the volume's
affine in the radiological convention (:func:`engine.session.planes.plane_views`),
in its physical aspect ratio, with the patient's directions at the edges, a
10 mm scale bar, the label's outline drawn over the windowed image, other
labels' outlines thinner, and numbered circles where a reviewer's note
points. Outlines are the mask's pixel edges, traced by marching squares
(Lorensen & Cline 1987, as :func:`skimage.measure.find_contours` does it).
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["SlicePicture", "slice_picture", "crop_box"]

#: Long side of a picture (screen pixels).
PICTURE_PX = 320
#: Room around an outline: at least this much (mm) on each side, and at least the outline's own size.
CONTEXT_MM = 15.0


@dataclass(frozen=True)
class SlicePicture:
    """A PNG picture and where its numbered markers are (note number -> picture pixel ``(x, y)``)."""

    png: bytes
    width: int
    height: int
    markers: Mapping[int, tuple[float, float]]


def crop_box(mask: NDArray[np.bool_], spacing: Sequence[float]) -> tuple[int, int, int, int]:
    """Rows and columns ``(r0, r1, c0, c1)`` (ends excluded) around the mask's pixels, with room around them.

    The room on each side is the larger of :data:`CONTEXT_MM` and the
    outline's own extent along that axis; an empty mask gives the whole slice.
    """
    rows, cols = mask.shape
    if not mask.any():
        return 0, rows, 0, cols
    rr = np.flatnonzero(mask.any(axis=1))
    cc = np.flatnonzero(mask.any(axis=0))
    boxes = []
    for (lo, hi), sp in (((rr[0], rr[-1] + 1), spacing[0]), ((cc[0], cc[-1] + 1), spacing[1])):
        pad = int(np.ceil(max(CONTEXT_MM / sp, hi - lo)))
        boxes.append([lo - pad, hi + pad])
    # no narrower than 3/4 of the other side (a thin structure keeps its surroundings in view)
    mm = [(b[1] - b[0]) * sp for b, sp in zip(boxes, spacing)]
    for axis in (0, 1):
        short = 0.75 * mm[1 - axis] - mm[axis]
        if short > 0:
            grow = int(np.ceil(short / spacing[axis] / 2))
            boxes[axis] = [boxes[axis][0] - grow, boxes[axis][1] + grow]
            mm[axis] = (boxes[axis][1] - boxes[axis][0]) * spacing[axis]
    r0, r1 = max(0, boxes[0][0]), min(rows, boxes[0][1])
    c0, c1 = max(0, boxes[1][0]), min(cols, boxes[1][1])
    return int(r0), int(r1), int(c0), int(c1)


def _display(view, shape: tuple[int, int]):
    """Functions taking a natural ``[row, col]`` array / points to the screen layout of ``view``."""
    h = view.horizontal

    def image(a: NDArray) -> NDArray:
        d = a if h == 1 else a.T
        if view.flip_h:
            d = d[:, ::-1]
        if view.flip_v:
            d = d[::-1, :]
        return d

    n_v, n_h = (shape[0], shape[1]) if h == 1 else (shape[1], shape[0])

    def points(p: NDArray) -> NDArray:
        """``(row, col)`` natural pixel positions -> ``(x, y)`` display pixel positions."""
        ph, pv = (p[:, 1], p[:, 0]) if h == 1 else (p[:, 0], p[:, 1])
        x = (n_h - 1 - ph) if view.flip_h else ph
        y = (n_v - 1 - pv) if view.flip_v else pv
        return np.column_stack([x, y])

    return image, points


def _grey(image: NDArray, window: tuple[float, float]) -> NDArray[np.uint8]:
    centre, width = window
    lo = centre - width / 2.0
    scaled = (np.asarray(image, dtype=float) - lo) / max(width, 1e-12)
    return np.clip(np.rint(scaled * 255.0), 0, 255).astype(np.uint8)


def _contours(mask: NDArray[np.bool_]) -> list[NDArray[np.floating]]:
    from skimage.measure import find_contours

    padded = np.pad(mask.astype(float), 1)
    return [c - 1.0 for c in find_contours(padded, 0.5)]


def slice_picture(image: NDArray | None, masks: Mapping[int, NDArray[np.bool_]], colours: Mapping[int, str],
                  label: int, *, spacing: Sequence[float], view, window: tuple[float, float] | None = None,
                  notes: Sequence[tuple[int, tuple[float, float]]] = (), size_px: int = PICTURE_PX
                  ) -> SlicePicture:
    """The picture of ``label``'s outline on one slice.

    Parameters
    ----------
    image : 2-D array or None
        The slice's intensities (None when the study is not at hand: the
        outlines are drawn on black).
    masks : dict of int to 2-D bool array
        Every label's pixels on the slice (``label`` among them).
    colours : dict of int to str
        ``#RRGGBB`` per label.
    label : int
        The label the picture is of (drawn thicker; the crop is around it).
    spacing : (float, float)
        Pixel spacing (row, col) in mm.
    view : engine.session.planes.PlaneView
        How the slice is laid out on a screen.
    window : (centre, width), optional
        Display window of ``image``.
    notes : sequence of (number, (row, col))
        Reviewer notes with a point: drawn as numbered circles.
    size_px : int
        Long side of the picture.
    """
    from PIL import Image, ImageDraw, ImageFont

    mask = np.asarray(masks[label], dtype=bool)
    r0, r1, c0, c1 = crop_box(mask, spacing)
    crop_shape = (r1 - r0, c1 - c0)
    to_image, to_points = _display(view, crop_shape)
    if image is None or window is None:
        grey = np.zeros(crop_shape, dtype=np.uint8)
    else:
        grey = _grey(np.asarray(image)[r0:r1, c0:c1], window)
    disp = to_image(grey)
    h = view.horizontal
    mm_x, mm_y = (spacing[1], spacing[0]) if h == 1 else (spacing[0], spacing[1])
    n_y, n_x = disp.shape
    scale = size_px / max(n_x * mm_x, n_y * mm_y)
    width, height = max(1, int(round(n_x * mm_x * scale))), max(1, int(round(n_y * mm_y * scale)))
    picture = Image.fromarray(disp, mode="L").resize((width, height), Image.Resampling.BILINEAR).convert("RGB")
    draw = ImageDraw.Draw(picture)
    fx, fy = width / n_x, height / n_y

    def screen(points_rc: NDArray) -> list[tuple[float, float]]:
        xy = to_points(np.asarray(points_rc, dtype=float) - np.array([r0, c0]))
        return [((x + 0.5) * fx, (y + 0.5) * fy) for x, y in xy]

    for other, other_mask in masks.items():
        if other == label:
            continue
        for c in _contours(np.asarray(other_mask, dtype=bool)[r0:r1, c0:c1]):
            draw.line(screen(c + np.array([r0, c0])), fill=colours.get(other, "#FFFFFF"), width=1)
    for c in _contours(mask[r0:r1, c0:c1]):
        pts = screen(c + np.array([r0, c0]))
        draw.line(pts + pts[:1], fill=colours.get(label, "#FFFFFF"), width=2, joint="curve")
    try:
        font = ImageFont.load_default(size=14)
    except TypeError:  # Pillow before 10.1: one small bitmap font
        font = ImageFont.load_default()
    markers: dict[int, tuple[float, float]] = {}
    for number, point in notes:
        (x, y), = screen(np.array([point]))
        radius = 10
        draw.ellipse((x - radius, y - radius, x + radius, y + radius), outline="#FFFFFF", width=2)
        draw.text((x + radius + 2, y - radius - 2), str(number), fill="#FFFFFF", font=font,
                  stroke_width=2, stroke_fill="#000000")
        markers[number] = (x, y)
    # 10 mm scale bar and the patient's directions at the edges
    bar = 10.0 * scale
    draw.line([(8, height - 10), (8 + bar, height - 10)], fill="#FFFFFF", width=3)
    draw.text((8, height - 26), "10 mm", fill="#FFFFFF", font=font, stroke_width=2, stroke_fill="#000000")
    left, right, top, bottom = view.edges
    for text, (x, y) in ((left, (3, height / 2 - 6)), (right, (width - 10, height / 2 - 6)),
                         (top, (width / 2 - 3, 2)), (bottom, (width / 2 - 3, height - 14))):
        if text:
            draw.text((x, y), text, fill="#FFE680", font=font, stroke_width=2, stroke_fill="#000000")
    buffer = io.BytesIO()
    picture.save(buffer, format="PNG", optimize=True)
    return SlicePicture(buffer.getvalue(), width, height, markers)
