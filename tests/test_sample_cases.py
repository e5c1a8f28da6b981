"""The invented demo cases in sample_cases/ and the phantom generator (engine.phantoms.mr).

The committed files are read with pydicom, highdicom, nibabel and Pillow and
compared with each other and with engine.io; the generator is checked against
analytic facts (area of a disk, Rayleigh statistics of pure noise).
"""

from __future__ import annotations

import json
from pathlib import Path

import highdicom as hd
import nibabel as nib
import numpy as np
import pydicom
import pytest
from PIL import Image

import engine.io as eio
import engine.phantoms.mr as phantoms

ROOT = Path(__file__).resolve().parents[1] / "sample_cases"
CASES = {"abdomen_mr": (24, 256, 256), "head_mr": (16, 160, 160)}


@pytest.fixture(scope="module", params=sorted(CASES))
def case(request):
    folder = ROOT / request.param
    if not (folder / "dicom").is_dir():
        pytest.fail(f"{folder} is missing: run python sample_cases/make_cases.py")
    return request.param, folder


def test_total_size_is_a_few_megabytes():
    total = sum(p.stat().st_size for p in ROOT.rglob("*") if p.is_file())
    assert total < 8e6, f"sample_cases holds {total / 1e6:.1f} MB"


def test_dicom_series_is_valid_and_synthetic(case):
    name, folder = case
    files = sorted((folder / "dicom").iterdir())
    datasets = [pydicom.dcmread(f) for f in files]
    assert len(datasets) == CASES[name][0]
    for ds in datasets:
        assert str(ds.PatientName) == "Phantom^Isotide"
        for uid in (ds.SOPInstanceUID, ds.SeriesInstanceUID, ds.StudyInstanceUID, ds.FrameOfReferenceUID):
            assert pydicom.uid.UID(uid).is_valid  # pydicom's UID syntax check (PS3.5 9.1)
    assert len({ds.SOPInstanceUID for ds in datasets}) == len(datasets)
    assert len({ds.SeriesInstanceUID for ds in datasets}) == 1
    vol = eio.load(folder / "dicom")
    assert vol.shape == CASES[name] and vol.modality == "MR" and not vol.warnings
    assert len(vol.presets) == 2
    # Instance numbers run against the spatial order.
    by_slice = [int(pydicom.dcmread(f, stop_before_pixels=True).InstanceNumber) for f in vol.source_files]
    assert by_slice == sorted(by_slice, reverse=True)
    # Reference: highdicom builds its own volume from the same files.
    ref = hd.get_volume_from_series(datasets)
    world_ours = _world(vol.affine, vol.shape)
    inv = np.linalg.inv(ref.affine)
    idx = np.rint((inv[:3, :3] @ world_ours.T).T + inv[:3, 3]).astype(int)
    np.testing.assert_array_equal(vol.array.reshape(-1), ref.array[idx[:, 0], idx[:, 1], idx[:, 2]].astype(np.float32))


def _world(affine, shape):
    idx = np.stack(np.meshgrid(*(np.arange(n) for n in shape), indexing="ij"), -1).reshape(-1, 3)
    return (affine[:3, :3] @ idx.T).T + affine[:3, 3]


def test_nifti_copy_agrees_with_the_dicom_in_patient_space(case):
    name, folder = case
    datasets = [pydicom.dcmread(f) for f in sorted((folder / "dicom").iterdir())]
    ref = hd.get_volume_from_series(datasets)  # highdicom: (slice, row, col) -> LPS
    img = nib.load(folder / "image.nii.gz")  # nibabel: (i, j, k) -> RAS
    data = np.asarray(img.dataobj)
    ijk = np.stack(np.meshgrid(*(np.arange(n) for n in data.shape), indexing="ij"), -1).reshape(-1, 3)
    ras = nib.affines.apply_affine(img.affine, ijk)
    lps = ras * [-1, -1, 1]
    inv = np.linalg.inv(ref.affine)
    idx = (inv[:3, :3] @ lps.T).T + inv[:3, 3]
    assert np.max(np.abs(idx - np.rint(idx))) < 1e-3
    idx = np.rint(idx).astype(int)
    np.testing.assert_array_equal(data.reshape(-1), ref.array[idx[:, 0], idx[:, 1], idx[:, 2]])
    # And engine.io reads both to the same array and geometry.
    a, b = eio.load(folder / "dicom"), eio.load(folder / "image.nii.gz")
    np.testing.assert_array_equal(a.array, b.array)
    np.testing.assert_allclose(a.affine, b.affine, atol=1e-3)


def test_png_slice_holds_the_stored_values(case):
    name, folder = case
    (png,) = folder.glob("slice_*.png")
    k = int(png.stem.split("_")[1])
    pixels = np.asarray(Image.open(png))  # Pillow reads the 16-bit grey PNG
    vol = eio.load(folder / "dicom")
    np.testing.assert_array_equal(pixels.astype(np.float32), vol.array[k])
    np.testing.assert_array_equal(eio.load(png).array[0], vol.array[k])


def test_truth_table_readme_and_seeds(case):
    name, folder = case
    truth = eio.load(folder / "truth_dseg.nii.gz")
    vol = eio.load(folder / "dicom")
    np.testing.assert_allclose(truth.affine, vol.affine, atol=1e-3)
    labels = truth.array.astype(int)
    names = phantoms.ABDOMEN_LABELS if name == "abdomen_mr" else phantoms.HEAD_LABELS
    assert set(np.unique(labels)) == {0, *names}
    rows = (folder / "truth_dseg.tsv").read_text().splitlines()
    assert rows[0] == "index\tname\tabbreviation\tcolor"
    assert {int(r.split("\t")[0]): r.split("\t")[1] for r in rows[1:]} == names
    readme = (folder / "README.md").read_text()
    seeds = json.loads((folder / "seeds.json").read_text())["seeds"]
    assert {s["label"] for s in seeds} == set(names)
    for s in seeds:
        assert s["name"] in readme
        assert f"| {s['label']} | {s['name']} | {s['slice']} | {s['row']} | {s['col']} |" in readme
        # The whole seed disk lies inside its structure.
        rr, cc = np.ogrid[: labels.shape[1], : labels.shape[2]]
        disk = (rr - s["row"]) ** 2 + (cc - s["col"]) ** 2 <= s["radius_px"] ** 2
        assert np.all(labels[s["slice"]][disk] == s["label"])


def test_committed_truth_is_reproducible(case):
    name, folder = case
    build = phantoms.build_abdomen if name == "abdomen_mr" else phantoms.build_head
    # Labels are the structure at each voxel centre: no supersampling needed.
    fresh = build(supersample=1, noise_sigma=0.0)
    np.testing.assert_array_equal(eio.load(folder / "truth_dseg.nii.gz").array, fresh.truth)


def test_background_noise_is_rayleigh():
    image, truth, spacing, names = phantoms.make_abdomen_phantom((2, 128, 128), seed=3, noise_sigma=20.0, supersample=1)
    air = image[:, :12, :].astype(np.float64)  # top rows lie outside the body
    # Magnitude of zero signal plus complex Gaussian noise is Rayleigh:
    # mean sigma*sqrt(pi/2), variance (2 - pi/2) sigma^2 (Gudbjartsson & Patz 1995).
    assert air.mean() == pytest.approx(20.0 * np.sqrt(np.pi / 2), rel=0.03)
    assert air.std() == pytest.approx(20.0 * np.sqrt(2 - np.pi / 2), rel=0.05)


def test_partial_volume_matches_the_disk_area():
    radius_px, h = 10.3, 1.0
    disk = phantoms.Tissue("disk", 1.0, (phantoms.Blob((0.0, 0.0, 0.0), (radius_px * h, radius_px * h, 1e6)),), (), 1)
    affine = np.zeros((4, 4))
    affine[:3, 0], affine[:3, 1], affine[:3, 2] = [0, 0, 1.0], [0, h, 0], [h, 0, 0]  # slice z, row y, col x
    affine[:, 3] = [-31.5 * h, -31.5 * h, 0.0, 1.0]
    image, truth = phantoms.render([disk], affine, (1, 64, 64), supersample=16, through_plane=1)
    # Area-averaged supersampling integrates the indicator: the sum is the disk
    # area pi r^2 (analytic) up to the sub-sample discretisation.
    assert image.sum() == pytest.approx(np.pi * radius_px**2, rel=2e-3)
    edge = (image > 0.01) & (image < 0.99)
    assert edge.sum() > 0.5 * 2 * np.pi * radius_px  # a band of mixed pixels around the circle
    # Centre sampling counts lattice points inside the circle (Gauss circle problem).
    assert truth.sum() == pytest.approx(np.pi * radius_px**2, abs=2 * 2 * np.pi * radius_px)


def test_generator_is_deterministic_and_seeded():
    a = phantoms.make_abdomen_phantom((2, 48, 48), supersample=2)
    b = phantoms.make_abdomen_phantom((2, 48, 48), supersample=2)
    c = phantoms.make_abdomen_phantom((2, 48, 48), supersample=2, seed=1)
    np.testing.assert_array_equal(a[0], b[0])
    assert not np.array_equal(a[0], c[0])
    np.testing.assert_array_equal(a[1], c[1])  # the truth does not depend on the noise
    image, truth, spacing, names = a
    assert image.dtype == np.float32 and truth.dtype == np.uint8 and names == phantoms.ABDOMEN_LABELS
    assert spacing == pytest.approx((72.0, 400 / 48, 400 / 48))
    with pytest.raises(ValueError, match="shape"):
        phantoms.make_abdomen_phantom((0, 4, 4))


def test_bias_field_is_smooth_and_multiplicative():
    ph = phantoms.build_abdomen((1, 96, 96), noise_sigma=0.0, bias=0.2, supersample=1)
    tissue = ph.clean > 100
    ratio = ph.image[tissue] / ph.clean[tissue]
    # exp(+-0.2) bounds the field; rounding to integers adds at most 0.5/100.
    assert ratio.min() >= np.exp(-0.2) - 0.006 and ratio.max() <= np.exp(0.2) + 0.006
    assert np.ptp(ratio) > 0.1
