"""DICOM input of engine.io, checked against pydicom's bundled test files.

Every file named here comes from pydicom's own test data
(``pydicom.data.get_testdata_file(name, download=False)``); expected values are
computed from those files with pydicom, highdicom or nibabel, never with
engine.io itself.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import highdicom as hd
import numpy as np
import pydicom
import pytest
from pydicom.data import get_testdata_file
from pydicom.uid import generate_uid

import engine.io as eio
from engine.io import DecodeError, LoadError, SeriesSelectionError, VolumeTooLargeError


def pydicom_file(name: str) -> str:
    """Path of one of pydicom's bundled test files, or skip when not bundled."""
    path = get_testdata_file(name, download=False)
    if path is None:
        pytest.skip(f"{name} is not bundled with the installed pydicom (it lives in pydicom's external data store)")
    return str(path)


def dicomdir_root() -> Path:
    return Path(pydicom_file("DICOMDIR")).parent


def world_to_value(volume_affine: np.ndarray, array: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Patient coordinates (LPS mm) of every voxel centre and its value."""
    idx = np.stack(np.meshgrid(*(np.arange(n) for n in array.shape), indexing="ij"), -1).reshape(-1, 3)
    world = (volume_affine[:3, :3] @ idx.T).T + volume_affine[:3, 3]
    return world, array.reshape(-1)


def assert_same_world_mapping(a_affine, a_array, b_affine, b_array, *, atol=1e-3):
    """Both volumes put the same value at every patient position."""
    world, values = world_to_value(a_affine, a_array)
    inv = np.linalg.inv(b_affine)
    idx = (inv[:3, :3] @ world.T).T + inv[:3, 3]
    rounded = np.rint(idx)
    assert np.max(np.abs(idx - rounded)) < atol
    k, r, c = rounded.astype(int).T
    np.testing.assert_array_equal(values, np.asarray(b_array)[k, r, c])


# --------------------------------------------------------------------------- single files


def test_ct_small_hounsfield_units_follow_the_files_rescale():
    path = pydicom_file("CT_small.dcm")  # pydicom test data
    ds = pydicom.dcmread(path)
    # Reference: the stored values with the file's own RescaleSlope/Intercept
    # (PS3.3 C.11.1), and pydicom's apply_modality_lut on the same data.
    expected = ds.pixel_array.astype(np.float64) * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
    np.testing.assert_array_equal(
        pydicom.pixels.apply_modality_lut(ds.pixel_array, ds).astype(np.float64), expected
    )
    vol = eio.load(path)
    assert vol.array.dtype == np.float32 and vol.shape == (1, 128, 128)
    np.testing.assert_array_equal(vol.array[0].astype(np.float64), expected)
    assert vol.modality == "CT" and vol.kind == "dicom"
    # PixelSpacing is (row, column); slice spacing from SliceThickness for one slice.
    assert vol.spacing == (float(ds.SliceThickness), float(ds.PixelSpacing[0]), float(ds.PixelSpacing[1]))
    assert vol.sop_instance_uids == (ds.SOPInstanceUID,)
    assert vol.series_uid == ds.SeriesInstanceUID


def test_mr_small_geometry_matches_nibabel_dicom_wrapper():
    path = pydicom_file("MR_small.dcm")  # pydicom test data
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # nibabel flags its DICOM reader as experimental
        from nibabel.nicom import dicomwrappers

        wrapper = dicomwrappers.wrapper_from_file(path)
    ref = wrapper.affine  # nibabel: index (row, col, slice) -> LPS mm
    vol = eio.load(path)
    # Same in-plane steps and origin; nibabel's (row, col) columns are our columns 1 and 2.
    np.testing.assert_allclose(vol.affine[:3, 1], ref[:3, 0], atol=1e-6)
    np.testing.assert_allclose(vol.affine[:3, 2], ref[:3, 1], atol=1e-6)
    np.testing.assert_allclose(vol.affine[:3, 3], ref[:3, 3], atol=1e-6)
    ds = pydicom.dcmread(path)
    # Multi-valued window presets are kept as (center, width) pairs.
    assert vol.presets == ((float(ds.WindowCenter), float(ds.WindowWidth)),)


LOSSLESS_VARIANTS = [
    "MR_small_RLE.dcm",
    "MR_small_jp2klossless.dcm",
    "MR_small_jpeg_ls_lossless.dcm",
    "MR_small_bigendian.dcm",
    "MR_small_expb.dcm",
    "MR_small_implicit.dcm",
    "MR_small_padded.dcm",
]


@pytest.mark.filterwarnings("ignore:The pixel data is .* excess padding")
@pytest.mark.parametrize("name", LOSSLESS_VARIANTS)
def test_mr_small_lossless_variants_decode_exactly(name):
    # pydicom test data: the same MR image re-encoded in several transfer syntaxes.
    ref = eio.load(pydicom_file("MR_small.dcm")).array
    vol = eio.load(pydicom_file(name))
    np.testing.assert_array_equal(vol.array, ref)
    # Reference decode by pydicom itself, for the same file.
    np.testing.assert_array_equal(vol.array[0], pydicom.dcmread(pydicom_file(name)).pixel_array.astype(np.float32))


@pytest.mark.parametrize("name", ["MR_small_jp2k.dcm", "MR_small_jpeg_ls_lossy.dcm"])
def test_mr_small_lossy_variants_stay_close(name):
    # pydicom test data (external data store; skipped when not bundled).
    vol = eio.load(pydicom_file(name))
    ref = eio.load(pydicom_file("MR_small.dcm")).array
    # Lossy codecs: close, not equal (tolerance: 5 % of the value range, from memory).
    assert np.max(np.abs(vol.array - ref)) <= 0.05 * float(np.ptp(ref))


def test_jpeg_extended_12bit_decodes_like_pydicom():
    path = pydicom_file("JPGExtended.dcm")  # pydicom test data (fixed JPEG-lossy.dcm)
    vol = eio.load(path)
    np.testing.assert_array_equal(vol.array[0], pydicom.dcmread(path).pixel_array.astype(np.float32))


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_deflated_transfer_syntax_decodes_like_pydicom():
    path = pydicom_file("image_dfl.dcm")  # pydicom test data: Deflated Explicit VR Little Endian
    vol = eio.load(path)
    np.testing.assert_array_equal(vol.array[0], pydicom.dcmread(path).pixel_array.astype(np.float32))


def test_rt_dose_frames_are_placed_by_grid_frame_offsets():
    path = pydicom_file("rtdose.dcm")  # pydicom test data: 15-frame RT Dose
    ds = pydicom.dcmread(path)
    vol = eio.load(path)
    offsets = np.asarray(ds.GridFrameOffsetVector, dtype=float)
    assert vol.shape == (int(ds.NumberOfFrames), int(ds.Rows), int(ds.Columns))
    assert vol.spacing[0] == pytest.approx(float(np.median(np.diff(offsets))))
    # Dose = stored value x DoseGridScaling (PS3.3 C.8.8.3).
    order = np.argsort(offsets)
    expected = ds.pixel_array.astype(np.float64)[order] * float(ds.DoseGridScaling)
    np.testing.assert_allclose(vol.array, expected, rtol=1e-6)
    iop = np.asarray(ds.ImageOrientationPatient, float)
    normal = np.cross(iop[:3], iop[3:])
    # First offset 0: offsets are along the normal from ImagePositionPatient (PS3.3 C.8.8.3.2).
    np.testing.assert_allclose(vol.affine[:3, 3], np.asarray(ds.ImagePositionPatient, float) + offsets[order[0]] * normal)


# --------------------------------------------------------------------------- series


def test_uniform_ct_series_sorted_by_position_matches_highdicom():
    folder = dicomdir_root() / "98892001" / "CT5N"  # pydicom test data: 5-slice CT
    files = sorted(folder.iterdir())
    datasets = [pydicom.dcmread(f) for f in files]
    vol = eio.load(folder)
    assert vol.shape == (5, 16, 16)
    assert vol.spacing[0] == pytest.approx(2.5)
    assert not any("non-uniform" in w for w in vol.warnings)
    # Instance numbers rise while z falls: spatial sort must not follow them.
    z = sorted(float(d.ImagePositionPatient[2]) for d in datasets)
    np.testing.assert_allclose(vol.slice_positions, z)
    # Reference: highdicom builds the same series into a volume with its own
    # affine; both must put the same HU at every patient position.
    ref = hd.get_volume_from_series(datasets)
    assert_same_world_mapping(vol.affine, vol.array, ref.affine, ref.array.astype(np.float32))
    # sha256 covers every file, keyed by path.
    assert set(vol.sha256) == {str(f) for f in files}


def test_series_with_a_gap_is_flagged_non_uniform():
    folder = dicomdir_root() / "77654033" / "CT2"  # pydicom test data: CT with a non-uniform gap
    datasets = [pydicom.dcmread(f) for f in sorted(folder.iterdir())]
    vol = eio.load(folder)
    z = np.sort([float(d.ImagePositionPatient[2]) for d in datasets])
    np.testing.assert_allclose(vol.slice_positions, z)
    assert any("non-uniform slice gaps" in w for w in vol.warnings)
    assert vol.spacing[0] == pytest.approx(float(np.median(np.diff(z))))


def test_one_series_uid_in_two_orientations_is_two_stacks():
    folder = dicomdir_root() / "98892001" / "CT2N"  # pydicom test data: one UID, two planes
    uids = {pydicom.dcmread(f).SeriesInstanceUID for f in folder.iterdir()}
    assert len(uids) == 1
    infos = eio.list_series(folder)
    assert len(infos) == 2 and {i.orientation for i in infos} == {"sagittal", "coronal"}
    uid = uids.pop()
    assert all(i.key.startswith(uid + "#") for i in infos)
    with pytest.raises(SeriesSelectionError) as err:
        eio.load(folder)
    assert set(err.value.choices) == {i.key for i in infos}
    for i, info in enumerate(infos):
        assert eio.load(folder, series=info.key).shape == (1, 16, 16)
        assert eio.load(folder, series=i).sop_instance_uids == eio.load(folder, series=info.key).sop_instance_uids


def test_dicomdir_lists_the_series_pydicom_finds():
    dicomdir = pydicom_file("DICOMDIR")  # pydicom test data
    from pydicom.fileset import FileSet

    fileset = FileSet(pydicom.dcmread(dicomdir))
    expected_uids = {inst.SeriesInstanceUID for inst in fileset}
    infos = eio.list_series(dicomdir)
    assert {i.series_uid for i in infos} == expected_uids
    assert sum(i.slices for i in infos) == len(list(fileset))
    ct5 = [i for i in infos if i.slices == 5]
    assert len(ct5) == 1
    via_dicomdir = eio.load(dicomdir, series=ct5[0].series_uid)
    via_folder = eio.load(dicomdir_root() / "98892001" / "CT5N")
    np.testing.assert_array_equal(via_dicomdir.array, via_folder.array)
    np.testing.assert_allclose(via_dicomdir.affine, via_folder.affine)


def test_unknown_series_is_a_selection_error():
    with pytest.raises(SeriesSelectionError):
        eio.load(dicomdir_root() / "98892001" / "CT5N", series="1.2.3.4")
    with pytest.raises(SeriesSelectionError):
        eio.load(dicomdir_root() / "98892001" / "CT5N", series=7)
    with pytest.raises(ValueError, match="series"):
        eio.load(dicomdir_root() / "98892001" / "CT5N", series=2.5)


def test_monochrome1_is_inverted_for_display():
    folder = dicomdir_root() / "77654033" / "CR1"  # pydicom test data: MONOCHROME1 CR
    ds = pydicom.dcmread(next(folder.iterdir()))
    assert ds.PhotometricInterpretation == "MONOCHROME1"
    vol = eio.load(folder)
    rescaled = ds.pixel_array.astype(np.float64) * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
    # MONOCHROME1: the minimum value is displayed white (PS3.3 C.7.6.3.1.2), so
    # after inversion value + rescaled value is one constant.
    total = vol.array[0].astype(np.float64) + rescaled
    assert np.ptp(total) < 1e-3 * np.abs(total).max()
    assert vol.inverted
    # The window center moves with the inversion; the width does not.
    (center, width), = vol.presets[:1]
    assert width == float(ds.WindowWidth)
    assert center == pytest.approx(total.flat[0] - float(ds.WindowCenter), rel=1e-4)
    assert any("ImagerPixelSpacing" in w for w in vol.warnings)


# --------------------------------------------------------------------------- multi-frame


def _enhanced_from_ct5n(tmp_path: Path, *, shuffle: bool) -> tuple[Path, list]:
    folder = dicomdir_root() / "98892001" / "CT5N"  # pydicom test data
    datasets = [pydicom.dcmread(f) for f in sorted(folder.iterdir())]
    if shuffle:
        datasets = [datasets[i] for i in (2, 0, 4, 1, 3)]
    # highdicom converts the single-frame series into a Legacy Converted
    # Enhanced CT object (rescale goes into the shared functional groups).
    enhanced = hd.legacy.LegacyConvertedEnhancedCTImage(
        datasets, generate_uid(), 1, generate_uid(), 1
    )
    out = tmp_path / "enhanced.dcm"
    enhanced.save_as(out, enforce_file_format=True)
    return out, datasets


def test_enhanced_multiframe_matches_the_single_frame_series(tmp_path):
    path, _ = _enhanced_from_ct5n(tmp_path, shuffle=True)
    ds = pydicom.dcmread(path)
    assert int(ds.NumberOfFrames) == 5 and "PixelValueTransformationSequence" in ds.SharedFunctionalGroupsSequence[0]
    multi = eio.load(path)
    single = eio.load(dicomdir_root() / "98892001" / "CT5N")
    np.testing.assert_array_equal(multi.array, single.array)
    np.testing.assert_allclose(multi.affine, single.affine, atol=1e-6)
    assert multi.frame_numbers != tuple(range(1, 6))  # frames were stored out of spatial order
    # Reference: highdicom's own volume of the multi-frame object.
    ref = hd.Image.from_dataset(ds).get_volume()
    assert_same_world_mapping(multi.affine, multi.array, ref.affine, ref.array.astype(np.float32))


def test_per_frame_rescale_is_applied(tmp_path):
    path, _ = _enhanced_from_ct5n(tmp_path, shuffle=False)
    ds = pydicom.dcmread(path)
    shared = ds.SharedFunctionalGroupsSequence[0]
    del shared.PixelValueTransformationSequence
    slopes = [1.0, 2.0, 0.5, 1.5, 3.0]
    for item, slope in zip(ds.PerFrameFunctionalGroupsSequence, slopes):
        pvt = pydicom.Dataset()
        pvt.RescaleSlope, pvt.RescaleIntercept, pvt.RescaleType = slope, -1000, "US"
        item.PixelValueTransformationSequence = [pvt]
    ds.save_as(path, enforce_file_format=True)
    vol = eio.load(path)
    raw = ds.pixel_array.astype(np.float64)
    # Per-frame Pixel Value Transformation (PS3.3 C.7.6.16.2.9), frame f -> its slice.
    for k, f in enumerate(vol.frame_numbers):
        np.testing.assert_allclose(vol.array[k], raw[f - 1] * slopes[f - 1] - 1000)


# --------------------------------------------------------------------------- bad input


def test_truncated_pixel_data_names_the_file():
    path = pydicom_file("MR_truncated.dcm")  # pydicom test data
    with pytest.raises(LoadError, match="truncated") as err:
        eio.load(path)
    assert err.value.path == path and "MR_truncated.dcm" in str(err.value)


def test_bad_vr_names_the_attribute():
    path = pydicom_file("badVR.dcm")  # pydicom test data: NumberOfFrames '1A'
    with pytest.raises(LoadError, match=r"NumberOfFrames \(0028,0008\).*'1A'") as err:
        eio.load(path)
    assert err.value.path == path


def test_file_without_preamble_is_refused():
    path = pydicom_file("no_meta.dcm")  # pydicom test data: no preamble, no file meta
    with pytest.raises(LoadError, match="DICM") as err:
        eio.load(path)
    assert err.value.path == path


def test_missing_transfer_syntax_is_refused():
    path = pydicom_file("meta_missing_tsyntax.dcm")  # pydicom test data
    with pytest.raises(LoadError, match=r"Transfer Syntax UID \(0002,0010\)"):
        eio.load(path)


def test_undecodable_jpeg_names_file_syntax_and_extra():
    path = pydicom_file("JPEG-lossy.dcm")  # pydicom test data: damaged 12-bit JPEG
    with pytest.raises(DecodeError) as err:
        eio.load(path)
    message = str(err.value)
    assert path in message and "1.2.840.10008.1.2.4.51" in message and "dicom-codecs" in message
    assert err.value.transfer_syntax == "1.2.840.10008.1.2.4.51"


def test_missing_decoder_says_which_extra_to_install(monkeypatch):
    path = pydicom_file("MR_small_jp2klossless.dcm")  # pydicom test data
    import engine.io.dicom_reader as reader

    def fail(*args, **kwargs):
        raise RuntimeError("no plugins")
        yield  # pragma: no cover

    class Unavailable:
        is_available = False

    monkeypatch.setattr(reader, "iter_pixels", fail)
    monkeypatch.setattr(reader, "get_decoder", lambda uid: Unavailable())
    with pytest.raises(DecodeError, match=r"no decoder .* is installed.*pip install 'isotide\[dicom-codecs\]'"):
        eio.load(path)


def test_non_image_object_is_refused():
    with pytest.raises(LoadError, match="not an image"):
        eio.load(pydicom_file("rtplan.dcm"))  # pydicom test data: RT Plan


def _copy_ct5n(dest: Path) -> list[Path]:
    src = dicomdir_root() / "98892001" / "CT5N"  # pydicom test data
    dest.mkdir(parents=True, exist_ok=True)
    out = []
    for i, f in enumerate(sorted(src.iterdir())):
        target = dest / f"x{i}"
        shutil.copy(f, target)
        out.append(target)
    return out


def test_folder_scan_any_depth_skips_other_files_with_reasons(tmp_path):
    files = _copy_ct5n(tmp_path / "a" / "b")
    shutil.move(files[0], tmp_path / "first_slice_without_extension")
    (tmp_path / "notes.txt").write_text("not an image")
    shutil.copy(pydicom_file("no_meta.dcm"), tmp_path / "a" / "no_meta.dcm")  # pydicom test data
    shutil.copy(pydicom_file("rtplan.dcm"), tmp_path / "a" / "plan.dcm")  # pydicom test data
    vol = eio.load(tmp_path)
    assert vol.shape == (5, 16, 16)
    reasons = dict(vol.skipped)
    assert "DICM" in reasons[str(tmp_path / "notes.txt")]
    assert "not an image" in reasons[str(tmp_path / "a" / "plan.dcm")]
    assert str(tmp_path / "a" / "no_meta.dcm") in reasons


def test_empty_folder_and_missing_path(tmp_path):
    with pytest.raises(LoadError, match="empty folder"):
        eio.load(tmp_path)
    (tmp_path / "readme.txt").write_text("hello")
    with pytest.raises(LoadError, match="no DICOM images found among 1 files"):
        eio.load(tmp_path)
    with pytest.raises(LoadError, match="no such file"):
        eio.load(tmp_path / "nothing_here")


def test_mixed_sizes_in_one_series_name_the_files(tmp_path):
    files = _copy_ct5n(tmp_path)
    ds = pydicom.dcmread(files[3])
    ds.Rows, ds.Columns = 8, 8
    ds.PixelData = np.zeros((8, 8), dtype=np.uint16).tobytes()
    ds.save_as(files[3])
    with pytest.raises(LoadError, match="mixed image sizes") as err:
        eio.load(tmp_path)
    assert str(files[3]) in str(err.value)


def test_two_slices_at_one_position_are_refused(tmp_path):
    files = _copy_ct5n(tmp_path)
    ds = pydicom.dcmread(files[1])
    ds.SOPInstanceUID = generate_uid()
    ds.save_as(tmp_path / "duplicate")
    with pytest.raises(LoadError, match="same position") as err:
        eio.load(tmp_path)
    assert "duplicate" in str(err.value)


def test_unreadable_file_is_skipped_with_a_reason(tmp_path, monkeypatch):
    files = _copy_ct5n(tmp_path)
    import engine.io.dicom_header as header

    real = header.pydicom.dcmread

    def dcmread(path, *args, **kwargs):
        if str(path) == str(files[2]):
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, *args, **kwargs)

    monkeypatch.setattr(header.pydicom, "dcmread", dcmread)
    vol = eio.load(tmp_path)
    assert dict(vol.skipped)[str(files[2])] == "cannot be read: permission denied"
    assert any("could not be read" in w for w in vol.warnings)
    # The missing slice shows as an uneven gap rather than silently.
    assert any("non-uniform" in w for w in vol.warnings)


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root reads files regardless of permissions")
def test_unreadable_file_given_explicitly(tmp_path):
    target = tmp_path / "locked.dcm"
    shutil.copy(pydicom_file("CT_small.dcm"), target)  # pydicom test data
    target.chmod(0)
    try:
        with pytest.raises(LoadError, match="permission denied"):
            eio.load(target)
    finally:
        target.chmod(0o600)


def test_size_limit_and_progress():
    folder = dicomdir_root() / "98892001" / "CT5N"  # pydicom test data
    with pytest.raises(VolumeTooLargeError, match="max_bytes") as err:
        eio.load(folder, max_bytes=4 * 16 * 16 * 5 - 1)
    assert err.value.needed_bytes == 4 * 16 * 16 * 5
    calls: list[tuple[int, int]] = []
    eio.load(folder, progress=lambda done, total: calls.append((done, total)))
    dones = [d for d, _ in calls]
    assert dones == sorted(dones) and calls[-1][0] == calls[-1][1] and len(calls) >= 5
    with pytest.raises(ValueError, match="max_bytes"):
        eio.load(folder, max_bytes=0)
    with pytest.raises(ValueError, match="progress"):
        eio.load(folder, progress="yes")


def test_progress_callback_can_cancel():
    folder = dicomdir_root() / "98892001" / "CT5N"  # pydicom test data

    class Stop(Exception):
        pass

    def cancel(done, total):
        if done >= 7:
            raise Stop

    with pytest.raises(Stop):
        eio.load(folder, progress=cancel)


def test_spacing_override_only_for_files_without_spacing():
    with pytest.raises(ValueError, match="spacing"):
        eio.load(pydicom_file("CT_small.dcm"), spacing=(1.0, 1.0))  # pydicom test data


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_no_bundled_test_file_crashes_the_loader():
    # Every file shipped in pydicom's test data folder either loads or gives a
    # LoadError naming it -- never another exception.
    root = Path(pydicom_file("CT_small.dcm")).parent
    loaded = refused = 0
    for path in sorted(p for p in root.rglob("*") if p.is_file()):
        try:
            vol = eio.load(path, max_bytes=64 * 2**20)
        except LoadError as exc:
            assert str(exc).startswith(str(path)), str(exc)
            refused += 1
        else:
            assert vol.array.dtype == np.float32 and np.all(np.isfinite(vol.array))
            loaded += 1
    assert loaded > 40 and refused > 40
