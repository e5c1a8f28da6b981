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

import os
from collections.abc import Callable

import nibabel as nib
import numpy as np

from engine.io.errors import LoadError
from engine.io.geometry import nifti_affine_to_lps, spacing_from_affine
from engine.io.hashing import sha256_file
from engine.io.volume import SeriesInfo, Volume, check_size

__all__ = ["load_nifti", "nifti_info"]


def _open(path: str) -> nib.spatialimages.SpatialImage:
    try:
        img = nib.load(path)
    except PermissionError:
        raise LoadError(path, "cannot be read: permission denied") from None
    except Exception as exc:
        raise LoadError(path, f"damaged NIfTI header ({type(exc).__name__}: {exc})") from None
    if not isinstance(img, (nib.Nifti1Image, nib.Nifti2Image, nib.Nifti1Pair, nib.Nifti2Pair)):
        raise LoadError(path, f"not a NIfTI image ({type(img).__name__})")
    return img


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
    affine = nifti_affine_to_lps(img.affine)
    spacing = spacing_from_affine(affine)
    if min(spacing) <= 0:
        zooms = [float(z) for z in img.header.get_zooms()[:3]] + [1.0] * 3
        spacing = (zooms[2] or 1.0, zooms[1] or 1.0, zooms[0] or 1.0)
        notes.append("degenerate affine in the file; spacing taken from pixdim")
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
