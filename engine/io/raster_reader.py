"""Read pictures and arrays without patient geometry: PNG, TIFF and NPY.

A 2-D picture becomes a volume of one slice; a multi-page TIFF or a 3-D NPY
array becomes a stack. Colour pictures are turned into grey with the ITU-R
BT.601 luma weights (common practice); an alpha channel is dropped. Spacing
is 1 mm unless the caller gives one; the affine is a pure scaling.
"""

from __future__ import annotations

import os
from collections.abc import Callable

import numpy as np

from engine.io.errors import LoadError
from engine.io.geometry import scaling_affine
from engine.io.hashing import sha256_file
from engine.io.volume import SeriesInfo, Volume, check_size

__all__ = ["load_raster", "raster_info", "RASTER_KINDS"]

#: File kinds this module reads (as returned by :func:`engine.io.loader.sniff`).
RASTER_KINDS = ("png", "tiff", "npy")

_LUMA = np.array([0.299, 0.587, 0.114])


def _grey(path: str, arr: np.ndarray, colour_axis: bool) -> tuple[np.ndarray, list[str]]:
    """Drop alpha and convert RGB to grey when the last axis holds channels."""
    notes: list[str] = []
    if colour_axis:
        channels = arr.shape[-1]
        if channels in (2, 4):
            arr = arr[..., :-1]
            notes.append("alpha channel dropped")
            channels -= 1
        if channels == 3:
            arr = np.tensordot(arr.astype(np.float32), _LUMA.astype(np.float32), axes=([-1], [0]))
            notes.append("colour picture converted to grey (ITU-R BT.601 luma)")
        elif channels == 1:
            arr = arr[..., 0]
        else:
            raise LoadError(path, f"{channels} colour channels; grey, grey+alpha, RGB or RGBA expected")
    return arr, notes


def _read_png(path: str, max_bytes: int) -> tuple[np.ndarray, list[str]]:
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as im:
            check_size(path, (1, im.height, im.width), max_bytes)
            if im.mode == "P":
                im = im.convert("RGBA" if "transparency" in im.info else "RGB")
            elif im.mode == "1":
                im = im.convert("L")
            arr = np.asarray(im)
    except (UnidentifiedImageError, OSError, SyntaxError, ValueError) as exc:
        if isinstance(exc, PermissionError):
            raise LoadError(path, "cannot be read: permission denied") from None
        raise LoadError(path, f"damaged PNG ({type(exc).__name__}: {exc})") from None
    return _grey(path, arr, arr.ndim == 3)


def _read_tiff(path: str, max_bytes: int) -> tuple[np.ndarray, list[str]]:
    import tifffile

    try:
        with tifffile.TiffFile(path) as tif:
            series = tif.series[0]
            shape = tuple(int(n) for n in series.shape)
            axes = series.axes
            colour = "S" in axes
            grey_shape = tuple(n for n, a in zip(shape, axes) if a != "S")
            if len(grey_shape) not in (2, 3):
                raise LoadError(path, f"TIFF holds a {len(grey_shape)}-D image {shape} (axes {axes})")
            check_size(path, grey_shape if len(grey_shape) == 3 else (1, *grey_shape), max_bytes)
            arr = series.asarray()
            if colour:  # samples (planar or interleaved) on the last axis
                arr = np.moveaxis(arr, axes.index("S"), -1)
    except LoadError:
        raise
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except Exception as exc:
        raise LoadError(path, f"damaged TIFF ({type(exc).__name__}: {exc})") from None
    return _grey(path, arr, colour)


def _read_npy(path: str, max_bytes: int) -> tuple[np.ndarray, list[str]]:
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except ValueError as exc:
        raise LoadError(
            path, f"holds Python objects or a damaged header ({exc}); only numeric arrays are read"
        ) from None
    except Exception as exc:
        raise LoadError(path, f"damaged NPY file ({type(exc).__name__}: {exc})") from None
    if not isinstance(arr, np.ndarray) or not (np.issubdtype(arr.dtype, np.number) or arr.dtype == bool):
        raise LoadError(path, f"array of {getattr(arr, 'dtype', type(arr))} is not numeric")
    if np.issubdtype(arr.dtype, np.complexfloating):
        raise LoadError(path, "complex array; grey values expected")
    if arr.ndim not in (2, 3):
        raise LoadError(path, f"{arr.ndim}-D array {arr.shape}; 2-D [row, col] or 3-D [slice, row, col] expected")
    if arr.size == 0:
        names = ("rows", "columns") if arr.ndim == 2 else ("slices", "rows", "columns")
        sizes = " x ".join(f"{n} {name}" for n, name in zip(arr.shape, names))
        raise LoadError(path, f"the array is empty ({sizes}): no pixels to outline")
    check_size(path, arr.shape if arr.ndim == 3 else (1, *arr.shape), max_bytes)
    return arr, []


_READERS = {"png": _read_png, "tiff": _read_tiff, "npy": _read_npy}


def raster_info(path: str, kind: str) -> SeriesInfo:
    """Describe a picture for :func:`engine.io.list_series` (reads the pixels)."""
    arr, _ = _READERS[kind](path, 2**62)
    shape = arr.shape if arr.ndim == 3 else (1, *arr.shape)
    return SeriesInfo(
        key=os.path.basename(path),
        series_uid="",
        modality="OT",
        description="",
        series_number=None,
        slices=int(shape[0]),
        rows=int(shape[1]),
        cols=int(shape[2]),
        orientation="unknown",
        files=(os.path.abspath(path),),
    )


def load_raster(
    path: str,
    kind: str,
    *,
    spacing: tuple[float, ...] | None,
    max_bytes: int,
    tick: Callable[[int], None],
    on_total: Callable[[int], None],
) -> Volume:
    """Read a PNG, TIFF or NPY file into a :class:`Volume`.

    Parameters
    ----------
    path : str
        The file.
    kind : {"png", "tiff", "npy"}
        File kind.
    spacing : tuple of float or None
        ``(row, col)`` or ``(slice, row, col)`` mm; 1 mm when ``None``.
    max_bytes : int
        Memory limit for the float32 volume.
    tick, on_total : callable
        Progress hooks (see :func:`engine.io.load`).
    """
    if kind not in _READERS:
        raise ValueError(f"kind: expected one of {sorted(_READERS)}, got {kind!r}")
    on_total(1)
    arr, notes = _READERS[kind](path, max_bytes)
    if arr.ndim == 2:
        arr = arr[None]
    out = np.array(arr, dtype=np.float32)
    del arr
    tick(1)
    bad = ~np.isfinite(out)
    if bad.any():
        notes.append(f"{int(bad.sum())} non-finite values (NaN/Inf) set to 0")
        out[bad] = 0.0
    if spacing is None:
        full_spacing = (1.0, 1.0, 1.0)
        notes.append("no pixel spacing in the file: 1 mm assumed")
    elif len(spacing) == 2:
        full_spacing = (1.0, float(spacing[0]), float(spacing[1]))
    else:
        full_spacing = (float(spacing[0]), float(spacing[1]), float(spacing[2]))
    n, rows, cols = out.shape
    full = os.path.abspath(path)
    return Volume(
        array=out,
        spacing=full_spacing,
        affine=scaling_affine(full_spacing),
        modality="OT",
        presets=(),
        source=(
            f"{kind.upper()} {'picture' if kind != 'npy' else 'array'} '{os.path.basename(path)}' "
            f"({n} slice{'s' if n != 1 else ''} {rows}x{cols}, {full_spacing[1]:.3g} x {full_spacing[2]:.3g} mm)"
        ),
        sha256={full: sha256_file(full)},
        path=path,
        kind="raster",
        source_files=(full,) * n,
        slice_positions=tuple(float(k * full_spacing[0]) for k in range(n)),
        warnings=tuple(notes),
        nonfinite=int(bad.sum()),
    )
