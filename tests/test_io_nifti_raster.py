"""NIfTI, PNG, TIFF and NPY input of engine.io.

Files are written here with nibabel, Pillow, tifffile and numpy, and what
engine.io reads back is compared with what those libraries say the files hold.
"""

from __future__ import annotations

import gzip

import nibabel as nib
import numpy as np
import pytest
import tifffile
from nibabel.affines import apply_affine, from_matvec
from PIL import Image

import engine.io as eio
from engine.io import LoadError, SeriesSelectionError, VolumeTooLargeError
from engine.io.loader import sniff

RNG = np.random.default_rng(7)


def oblique_ras_affine() -> np.ndarray:
    """An oblique, anisotropic voxel-to-RAS affine (rotation x scaling + shift)."""
    a, b = np.deg2rad(20.0), np.deg2rad(-35.0)
    rz = np.array([[np.cos(a), -np.sin(a), 0], [np.sin(a), np.cos(a), 0], [0, 0, 1]])
    rx = np.array([[1, 0, 0], [0, np.cos(b), -np.sin(b)], [0, np.sin(b), np.cos(b)]])
    return from_matvec(rz @ rx @ np.diag([0.8, 1.1, 3.0]), [-40.0, 12.5, 7.0])


@pytest.mark.parametrize("cls,suffix", [(nib.Nifti1Image, ".nii.gz"), (nib.Nifti2Image, ".nii")])
def test_nifti_axes_and_affine_follow_nibabel(tmp_path, cls, suffix):
    data = RNG.normal(size=(7, 5, 4)).astype(np.float32)  # (i, j, k)
    affine = oblique_ras_affine()
    path = tmp_path / f"img{suffix}"
    nib.save(cls(data, affine), path)
    vol = eio.load(path)
    assert vol.shape == (4, 5, 7) and vol.kind == "nifti"
    np.testing.assert_array_equal(vol.array, data.transpose(2, 1, 0))
    # Reference: nibabel's apply_affine gives RAS mm of voxel (i, j, k); our
    # affine gives LPS mm of (k, j, i); LPS = RAS with x and y negated.
    ijk = np.stack(np.meshgrid(*(np.arange(n) for n in data.shape), indexing="ij"), -1).reshape(-1, 3)
    ras = apply_affine(affine, ijk)
    lps = apply_affine(vol.affine, ijk[:, ::-1])
    np.testing.assert_allclose(lps * [-1, -1, 1], ras, atol=1e-4)
    np.testing.assert_allclose(vol.spacing, [3.0, 1.1, 0.8], rtol=1e-6)
    assert vol.sha256 and f"NIfTI-{2 if cls is nib.Nifti2Image else 1}" in vol.source


def test_nifti_scaling_is_applied(tmp_path):
    raw = RNG.integers(-100, 100, size=(6, 6, 3)).astype(np.int16)
    img = nib.Nifti1Image(raw, np.eye(4))
    img.header.set_slope_inter(0.5, 10.0)
    path = tmp_path / "scaled.nii"
    nib.save(img, path)
    vol = eio.load(path)
    # NIfTI-1: value = scl_slope * stored + scl_inter (Cox et al. 2004).
    np.testing.assert_allclose(vol.array, (raw * 0.5 + 10.0).transpose(2, 1, 0))


def test_nifti_pair_2d_and_4d(tmp_path):
    data = RNG.normal(size=(5, 6, 2)).astype(np.float32)
    nib.save(nib.Nifti1Pair(data, np.eye(4)), tmp_path / "pair.img")
    vol = eio.load(tmp_path / "pair.hdr")
    np.testing.assert_array_equal(vol.array, data.transpose(2, 1, 0))
    assert {p.split("/")[-1] for p in vol.sha256} == {"pair.hdr", "pair.img"}

    flat = RNG.normal(size=(5, 6)).astype(np.float32)
    nib.save(nib.Nifti1Image(flat, np.eye(4)), tmp_path / "flat.nii")
    assert eio.load(tmp_path / "flat.nii").shape == (1, 6, 5)

    nib.save(nib.Nifti1Image(data[..., None], np.eye(4)), tmp_path / "one_volume.nii")
    assert eio.load(tmp_path / "one_volume.nii").shape == (2, 6, 5)
    nib.save(nib.Nifti1Image(np.stack([data] * 3, -1), np.eye(4)), tmp_path / "series.nii")
    with pytest.raises(LoadError, match="4-D") as err:
        eio.load(tmp_path / "series.nii")
    assert "series.nii" in str(err.value)


def test_nifti_presets_nan_and_spacing_argument(tmp_path):
    data = np.arange(24, dtype=np.float32).reshape(2, 3, 4)
    data[0, 0, 0] = np.nan
    img = nib.Nifti1Image(data, np.eye(4))
    img.header["cal_min"], img.header["cal_max"] = 10.0, 30.0
    nib.save(img, tmp_path / "a.nii")
    vol = eio.load(tmp_path / "a.nii")
    assert vol.presets == ((20.0, 20.0),)
    assert vol.array[0, 0, 0] == 0.0 and any("non-finite" in w for w in vol.warnings)
    assert vol.nonfinite == 1
    assert eio.load(tmp_path / "a.nii").nonfinite == 1
    with pytest.raises(ValueError, match="spacing"):
        eio.load(tmp_path / "a.nii", spacing=(1.0, 1.0))


def test_truncated_and_damaged_nifti(tmp_path):
    data = RNG.normal(size=(32, 32, 8)).astype(np.float32)
    nib.save(nib.Nifti1Image(data, np.eye(4)), tmp_path / "full.nii.gz")
    blob = (tmp_path / "full.nii.gz").read_bytes()
    (tmp_path / "cut.nii.gz").write_bytes(blob[: len(blob) // 2])
    with pytest.raises(LoadError, match="truncated or damaged") as err:
        eio.load(tmp_path / "cut.nii.gz")
    assert err.value.path.endswith("cut.nii.gz")
    header = bytearray(gzip.decompress(blob)[:352])
    header[40:56] = b"\xff" * 16  # dim[] garbage
    (tmp_path / "bad.nii").write_bytes(bytes(header))
    with pytest.raises(LoadError, match="bad.nii"):
        eio.load(tmp_path / "bad.nii")


def test_nifti_progress_and_size_limit(tmp_path):
    nib.save(nib.Nifti1Image(np.zeros((4, 4, 6), np.float32), np.eye(4)), tmp_path / "z.nii")
    calls = []
    eio.load(tmp_path / "z.nii", progress=lambda d, t: calls.append((d, t)))
    assert [d for d, _ in calls] == sorted(d for d, _ in calls) and calls[-1] == (6, 6)
    with pytest.raises(VolumeTooLargeError):
        eio.load(tmp_path / "z.nii", max_bytes=4 * 4 * 4 * 6 - 1)


def test_png_grey_16bit_rgb_rgba_palette(tmp_path):
    grey16 = RNG.integers(0, 65535, size=(9, 11)).astype(np.uint16)
    Image.fromarray(grey16).save(tmp_path / "g16.png")
    vol = eio.load(tmp_path / "g16.png")
    assert vol.shape == (1, 9, 11) and vol.spacing == (1.0, 1.0, 1.0)
    np.testing.assert_array_equal(vol.array[0], grey16)  # Pillow stores 16-bit grey exactly
    assert any("1 mm assumed" in w for w in vol.warnings)

    rgb = RNG.integers(0, 256, size=(6, 7, 3)).astype(np.uint8)
    Image.fromarray(rgb).save(tmp_path / "rgb.png")
    vol = eio.load(tmp_path / "rgb.png", spacing=(0.5, 0.25))
    # ITU-R BT.601 luma, the same weights Pillow's convert("L") documents
    # (L = R*299/1000 + G*587/1000 + B*114/1000); Pillow rounds to integers.
    pil_l = np.asarray(Image.fromarray(rgb).convert("L")).astype(np.float32)
    assert np.max(np.abs(vol.array[0] - pil_l)) <= 0.5 + 1e-4
    assert vol.spacing == (1.0, 0.5, 0.25)
    np.testing.assert_allclose(vol.affine, np.diag([1.0, 0.5, 0.25, 1.0]))

    rgba = np.concatenate([rgb, np.full((6, 7, 1), 17, np.uint8)], -1)
    Image.fromarray(rgba).save(tmp_path / "rgba.png")
    np.testing.assert_allclose(eio.load(tmp_path / "rgba.png").array, eio.load(tmp_path / "rgb.png").array)

    pal = Image.fromarray(rgb).convert("P", palette=Image.Palette.ADAPTIVE, colors=8)
    pal.save(tmp_path / "pal.png")
    expected = np.asarray(pal.convert("RGB")).astype(np.float32) @ np.array([0.299, 0.587, 0.114], np.float32)
    np.testing.assert_allclose(eio.load(tmp_path / "pal.png").array[0], expected, atol=1e-3)


def test_tiff_page_stack_and_colour(tmp_path):
    stack = RNG.integers(0, 4000, size=(3, 8, 5)).astype(np.uint16)
    tifffile.imwrite(tmp_path / "stack.tif", stack, photometric="minisblack")
    vol = eio.load(tmp_path / "stack.tif", spacing=(2.0, 0.5, 0.5))
    np.testing.assert_array_equal(vol.array, stack)
    assert vol.spacing == (2.0, 0.5, 0.5)
    page = stack[0]
    tifffile.imwrite(tmp_path / "page.tiff", page)
    np.testing.assert_array_equal(eio.load(tmp_path / "page.tiff").array[0], page)
    rgb = RNG.integers(0, 256, size=(4, 6, 3)).astype(np.uint8)
    luma = rgb.astype(np.float32) @ np.array([0.299, 0.587, 0.114], np.float32)  # ITU-R BT.601
    tifffile.imwrite(tmp_path / "rgb.tif", rgb, photometric="rgb")
    np.testing.assert_allclose(eio.load(tmp_path / "rgb.tif").array[0], luma, atol=1e-3)
    # Planar RGB (samples first) is still one colour picture, not three slices.
    tifffile.imwrite(tmp_path / "planar.tif", np.moveaxis(rgb, -1, 0), photometric="rgb", planarconfig="separate")
    vol = eio.load(tmp_path / "planar.tif")
    assert vol.shape == (1, 4, 6)
    np.testing.assert_allclose(vol.array[0], luma, atol=1e-3)


def test_npy_arrays(tmp_path):
    a2 = RNG.normal(size=(5, 4))
    np.save(tmp_path / "a2.npy", a2)
    np.testing.assert_array_equal(eio.load(tmp_path / "a2.npy").array[0], a2.astype(np.float32))
    a3 = RNG.integers(0, 9, size=(2, 5, 4)).astype(np.int32)
    np.save(tmp_path / "a3.npy", a3)
    assert eio.load(tmp_path / "a3.npy").shape == (2, 5, 4)
    np.save(tmp_path / "mask.npy", a3 > 4)
    np.testing.assert_array_equal(eio.load(tmp_path / "mask.npy").array, (a3 > 4).astype(np.float32))
    np.save(tmp_path / "objects.npy", np.array([{"a": 1}], dtype=object), allow_pickle=True)
    with pytest.raises(LoadError, match="only numeric arrays") as err:
        eio.load(tmp_path / "objects.npy")
    assert "objects.npy" in str(err.value)
    np.save(tmp_path / "a4.npy", np.zeros((2, 2, 2, 2)))
    with pytest.raises(LoadError, match="4-D"):
        eio.load(tmp_path / "a4.npy")
    np.save(tmp_path / "cplx.npy", np.zeros((2, 2), complex))
    with pytest.raises(LoadError, match="complex"):
        eio.load(tmp_path / "cplx.npy")
    with pytest.raises(VolumeTooLargeError):
        eio.load(tmp_path / "a3.npy", max_bytes=100)


def test_kind_is_recognised_by_content_not_name(tmp_path):
    grey = RNG.integers(0, 255, size=(4, 4)).astype(np.uint8)
    Image.fromarray(grey).save(tmp_path / "picture.png")
    (tmp_path / "picture.dat").write_bytes((tmp_path / "picture.png").read_bytes())
    assert sniff(tmp_path / "picture.dat") == "png"
    np.testing.assert_array_equal(eio.load(tmp_path / "picture.dat").array[0], grey)
    (tmp_path / "junk.nii").write_bytes(b"this is not an image at all" * 40)
    with pytest.raises(LoadError, match="unrecognised file"):
        eio.load(tmp_path / "junk.nii")


def test_list_series_and_selection_for_single_images(tmp_path):
    nib.save(nib.Nifti1Image(np.zeros((4, 3, 2), np.float32), np.eye(4)), tmp_path / "v.nii")
    (info,) = eio.list_series(tmp_path / "v.nii")
    assert (info.slices, info.rows, info.cols) == (2, 3, 4)
    assert eio.load(tmp_path / "v.nii", series=info.key).shape == (2, 3, 4)
    with pytest.raises(SeriesSelectionError):
        eio.load(tmp_path / "v.nii", series="other")
    Image.fromarray(np.zeros((3, 5), np.uint8)).save(tmp_path / "p.png")
    (info,) = eio.list_series(tmp_path / "p.png")
    assert (info.slices, info.rows, info.cols) == (1, 3, 5)


def test_bad_arguments_name_themselves(tmp_path):
    np.save(tmp_path / "a.npy", np.zeros((2, 2)))
    with pytest.raises(ValueError, match="spacing"):
        eio.load(tmp_path / "a.npy", spacing=(1.0, -1.0))
    with pytest.raises(ValueError, match="spacing"):
        eio.load(tmp_path / "a.npy", spacing=(1.0,))
    with pytest.raises(ValueError, match="path"):
        eio.load(12)


def test_an_unreadable_file_is_described_by_what_it_claims_to_be(tmp_path):
    # The kind comes from the content; the name only sharpens the message.
    (tmp_path / "empty.png").write_bytes(b"")
    with pytest.raises(LoadError, match=r"empty\.png: the file is empty \(0 bytes\)"):
        eio.load(tmp_path / "empty.png")
    (tmp_path / "noise.png").write_bytes(RNG.bytes(300))
    with pytest.raises(LoadError, match="named as a PNG image, but its content is not one"):
        eio.load(tmp_path / "noise.png")
    nib.save(nib.Nifti1Image(np.ones((8, 8, 2), np.float32), np.eye(4)), tmp_path / "whole.nii.gz")
    data = (tmp_path / "whole.nii.gz").read_bytes()
    (tmp_path / "cut.nii.gz").write_bytes(data[: len(data) // 2])
    with pytest.raises(LoadError, match="gzip data is damaged or cut short"):
        eio.load(tmp_path / "cut.nii.gz")
