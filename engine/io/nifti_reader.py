"""Read NIfTI-1 and NIfTI-2 images (``.nii``, ``.nii.gz``, ``.hdr``/``.img``) with nibabel.

The data ``[i, j, k]`` become the engine's ``[slice, row, col]`` as
``[k, j, i]`` (no reorientation: the affine says where each axis points), and
the RAS affine becomes the engine's LPS affine (:mod:`engine.io.geometry`).
Slices are read one at a time into the float32 volume (scaling by
``scl_slope``/``scl_inter`` applied by nibabel).

References
----------
.. [1] R. W. Cox et al., "A (sort of) new image data format standard: NIfTI-1",
   NeuroImage 22 (2004) e1440.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Iterator
from contextlib import contextmanager

import nibabel as nib
import numpy as np
from nibabel.openers import ImageOpener

from engine.io.errors import LoadError
from engine.io.geometry import nifti_affine_to_lps, spacing_from_affine
from engine.io.hashing import sha256_file
from engine.io.volume import SeriesInfo, Volume, check_size

__all__ = ["load_nifti", "nifti_info"]


@contextmanager
def _quiet_nibabel() -> Iterator[None]:
    """Keep nibabel from logging the header fixes it makes on stderr (they become notes here)."""
    log = logging.getLogger("nibabel.global")
    was = log.disabled
    log.disabled = True
    try:
        yield
    finally:
        log.disabled = was


def _open(path: str) -> nib.spatialimages.SpatialImage:
    try:
        with _quiet_nibabel():
            img = nib.load(path)
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except Exception as exc:
        raise LoadError(path, f"damaged NIfTI header ({type(exc).__name__}: {exc})") from None
    if not isinstance(img, (nib.Nifti1Image, nib.Nifti2Image, nib.Nifti1Pair, nib.Nifti2Pair)):
        raise LoadError(path, f"not a NIfTI image ({type(img).__name__})")
    return img


def _stored_pixdim(path: str, img: nib.spatialimages.SpatialImage) -> tuple[float, float, float]:
    """pixdim[1..3] as stored in the file (nibabel replaces zeros by 1 as it reads the header)."""
    holder = img.file_map.get("header") or img.file_map.get("image")
    header_file = (holder.filename if holder is not None else None) or path
    try:
        with _quiet_nibabel(), ImageOpener(header_file) as fh:
            raw = type(img.header).from_fileobj(fh, check=False)
        values = [float(v) for v in raw["pixdim"][1:4]]
    except Exception:  # unreadable a second time: keep what nibabel made of it
        values = [float(v) for v in img.header["pixdim"][1:4]]
    return values[0], values[1], values[2]


def _usable(value: float) -> bool:
    return bool(np.isfinite(value) and value > 0)


def _geometry(path: str, img: nib.spatialimages.SpatialImage,
              notes: list[str]) -> tuple[np.ndarray, tuple[float, float, float]]:
    """LPS affine and (slice, row, col) spacing; unusable spacing in the file is replaced by 1 mm, with a note."""
    pixdim = _stored_pixdim(path, img)
    coded = int(img.header["sform_code"]) > 0 or int(img.header["qform_code"]) > 0
    affine = nifti_affine_to_lps(img.affine)
    spacing = spacing_from_affine(affine)
    if coded and all(_usable(v) for v in spacing):
        return affine, spacing
    if coded:
        notes.append("degenerate affine in the file; spacing taken from pixdim")
    zooms = [v if _usable(v) else 1.0 for v in pixdim]
    bad = [f"{value:g} along {axis}" for axis, value, in zip(("i (columns)", "j (rows)", "k (slices)"), pixdim)
           if not _usable(value)]
    if bad:
        notes.append(f"{path}: pixel spacing {', '.join(bad)} in the file's pixdim is not a spacing: "
                     "1 mm assumed there")
    spacing = (zooms[2], zooms[1], zooms[0])
    base = img.affine if np.all(np.isfinite(img.affine)) else np.eye(4)
    columns = np.asarray(base, dtype=np.float64)[:3, :3]
    lengths = np.linalg.norm(columns, axis=0)
    directions = np.where(lengths > 0, columns / np.where(lengths > 0, lengths, 1.0), np.eye(3))
    fixed = np.eye(4)
    fixed[:3, :3] = directions * np.asarray(zooms)[None, :]
    fixed[:3, 3] = np.asarray(base, dtype=np.float64)[:3, 3]
    return nifti_affine_to_lps(fixed), spacing


def _grid(path: str, img: nib.spatialimages.SpatialImage) -> tuple[int, int, int]:
    """(ni, nj, nk) of a 2-D or 3-D image (4-D with one volume accepted)."""
    shape = tuple(int(n) for n in img.shape)
    if len(shape) > 3 and all(n == 1 for n in shape[3:]):
        shape = shape[:3]
    if len(shape) == 2:
        shape = (*shape, 1)
    if len(shape) != 3:
        raise LoadError(path, f"holds a {len(shape)}-D image {shape}; only 2-D and 3-D images are read")
    if min(shape) <= 0:
        raise LoadError(path, f"empty image {shape}")
    if np.issubdtype(img.get_data_dtype(), np.complexfloating) or img.get_data_dtype().names:
        raise LoadError(path, f"data type {img.get_data_dtype()} is not a grey-value type")
    return shape  # type: ignore[return-value]


def nifti_info(path: str) -> SeriesInfo:
    """Describe a NIfTI file for :func:`engine.io.list_series` (header only)."""
    img = _open(path)
    ni, nj, nk = _grid(path, img)
    return SeriesInfo(
        key=os.path.basename(path),
        series_uid="",
        modality="unknown",
        description=img.header["descrip"].tobytes().rstrip(b"\0").decode("latin-1").strip(),
        series_number=None,
        slices=nk,
        rows=nj,
        cols=ni,
        orientation="unknown",
        files=(os.path.abspath(path),),
    )


def load_nifti(
    path: str,
    *,
    max_bytes: int,
    tick: Callable[[int], None],
    on_total: Callable[[int], None],
) -> Volume:
    """Read a NIfTI-1/2 file into a :class:`Volume` (see the module docstring)."""
    img = _open(path)
    ni, nj, nk = _grid(path, img)
    check_size(path, (nk, nj, ni), max_bytes)
    out = np.empty((nk, nj, ni), dtype=np.float32)
    proxy = img.dataobj
    ndim = len(img.shape)
    on_total(nk)
    try:
        if ndim == 2:
            out[0] = np.asarray(proxy, dtype=np.float32).T
            tick(1)
        else:
            for k in range(nk):
                index = (slice(None), slice(None), k) + (0,) * (ndim - 3)
                out[k] = np.asarray(proxy[index], dtype=np.float32).T
                tick(k + 1)
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except Exception as exc:
        raise LoadError(path, f"image data truncated or damaged ({type(exc).__name__}: {exc})") from None
    notes: list[str] = []
    bad = ~np.isfinite(out)
    if bad.any():
        notes.append(f"{int(bad.sum())} non-finite values (NaN/Inf) set to 0")
        out[bad] = 0.0
    affine, spacing = _geometry(path, img, notes)
    presets: tuple[tuple[float, float], ...] = ()
    cal_min, cal_max = float(img.header["cal_min"]), float(img.header["cal_max"])
    if np.isfinite(cal_min) and np.isfinite(cal_max) and cal_max > cal_min:
        presets = (((cal_min + cal_max) / 2.0, cal_max - cal_min),)
    version = 2 if isinstance(img, (nib.Nifti2Image, nib.Nifti2Pair)) else 1
    full = os.path.abspath(path)
    files = [full]
    if isinstance(img, (nib.Nifti1Pair, nib.Nifti2Pair)) and not isinstance(img, (nib.Nifti1Image, nib.Nifti2Image)):
        files.append(os.path.abspath(img.file_map["image"].filename))
    return Volume(
        array=out,
        spacing=spacing,
        affine=affine,
        modality="unknown",
        presets=presets,
        source=(
            f"NIfTI-{version} image '{os.path.basename(path)}' ({nk} slices {nj}x{ni}, "
            f"{spacing[0]:.3g} x {spacing[1]:.3g} x {spacing[2]:.3g} mm)"
        ),
        sha256={f: sha256_file(f) for f in files},
        path=path,
        kind="nifti",
        source_files=(full,) * nk,
        slice_positions=tuple(float(k * spacing[0]) for k in range(nk)),
        warnings=tuple(notes),
        nonfinite=int(bad.sum()),
    )
