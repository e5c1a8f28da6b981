"""Write a label volume as a DICOM Segmentation object with highdicom.

One segment per entry of the label table (segment numbers 1..n in table
order; the label index is kept as the segment's tracking ID), algorithm type
SEMIAUTOMATIC, algorithm identification ``Isotide`` with its version and the
family "Deformable models" (a level-set front). The object refers to the
source DICOM images the volume was loaded from, whose headers are re-read
here (never their pixel data).

The SEG is part of the source study: it necessarily carries the study's
patient name, ID, birth date and study identifiers, copied from the source
images (PS3.3 requires them).

References
----------
.. [1] NEMA PS3.3, section A.51 "Segmentation IOD" and C.8.20.
.. [2] C. P. Bridge et al., "Highdicom: a Python library for standardized
   encoding of image annotations and machine learning model outputs in
   pathology and radiology", J. Digit. Imaging 35 (2022) 1719-1737.
"""

from __future__ import annotations

import io
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from engine.io.volume import Volume

__all__ = ["dicom_seg_bytes", "build_dicom_seg"]


def _code(triple: Sequence[str] | None, default: Any) -> Any:
    from pydicom.sr.coding import Code

    if triple is None:
        return default
    value, scheme, meaning = triple
    return Code(value=value, scheme_designator=scheme, meaning=meaning)


def _person_name(operator: str) -> str | None:
    """DICOM PN from free text: a name without ``^`` is one family-name component."""
    operator = operator.strip()
    if not operator:
        return None
    return operator if "^" in operator else f"{operator}^"


def _source_datasets(volume: Volume) -> tuple[list[Any], np.ndarray]:
    """Source headers in SEG frame order and, per volume slice, its SEG frame."""
    import pydicom

    files = list(dict.fromkeys(volume.source_files))
    if len(files) == 1 and len(volume.source_files) > 1:
        # One multi-frame object: SEG frames follow the source's frame order.
        frame_of_slice = np.asarray(volume.frame_numbers, dtype=np.int64) - 1
    else:
        frame_of_slice = np.arange(len(volume.source_files))
    datasets = []
    for f in files:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            datasets.append(pydicom.dcmread(f, stop_before_pixels=True))
    return datasets, frame_of_slice


def build_dicom_seg(
    labels: np.ndarray,
    volume: Volume,
    label_table: Sequence[Mapping[str, Any]],
    *,
    operator: str = "",
    series_description: str = "Isotide outlines",
) -> Any:
    """Build the :class:`highdicom.seg.Segmentation` of a label volume.

    Parameters
    ----------
    labels : ndarray of int
        ``volume.shape``; values are label indices of ``label_table``.
    volume : Volume
        Loaded from DICOM (``kind == "dicom"``).
    label_table : sequence of dict
        Normalised table (:func:`engine.io.sidecar.normalise_label_table`);
        optional ``category``/``type`` codes ``(value, scheme, meaning)``
        (default SNOMED CT "Tissue"/"Tissue").
    operator : str
        Content creator's name (may be empty).
    series_description : str
        SeriesDescription of the SEG.

    Raises
    ------
    ValueError
        ``volume``: not loaded from DICOM.
    """
    import highdicom as hd
    from pydicom.sr.codedict import codes
    from pydicom.uid import generate_uid

    from engine import __version__

    if volume.kind != "dicom" or not volume.source_files:
        raise ValueError("volume: a DICOM SEG needs a volume loaded from DICOM")
    datasets, frame_of_slice = _source_datasets(volume)
    algorithm = hd.AlgorithmIdentificationSequence(
        name="Isotide", family=codes.cid7162.DeformableModels, version=__version__
    )
    descriptions = []
    segment_of_label = np.zeros(int(max(e["index"] for e in label_table)) + 1, dtype=np.uint16)
    for number, entry in enumerate(label_table, start=1):
        segment_of_label[entry["index"]] = number
        rgb = tuple(int(entry["color"][i : i + 2], 16) for i in (1, 3, 5))
        descriptions.append(
            hd.seg.SegmentDescription(
                segment_number=number,
                segment_label=entry["name"][:64],
                segmented_property_category=_code(entry.get("category"), codes.cid7150.Tissue),
                segmented_property_type=_code(entry.get("type"), codes.SCT.Tissue),
                algorithm_type=hd.seg.SegmentAlgorithmTypeValues.SEMIAUTOMATIC,
                algorithm_identification=algorithm,
                tracking_id=f"label {entry['index']}: {entry['abbreviation']}"[:64],
                tracking_uid=generate_uid(),
                display_color=hd.color.CIELabColor.from_rgb(*rgb),
            )
        )
    mapped = segment_of_label[np.asarray(labels, dtype=np.int64)]
    pixel_array = np.zeros_like(mapped)
    pixel_array[frame_of_slice] = mapped
    dtype = np.uint8 if len(label_table) <= 255 else np.uint16
    seg = hd.seg.Segmentation(
        source_images=datasets,
        pixel_array=pixel_array.astype(dtype),
        segmentation_type=hd.seg.SegmentationTypeValues.BINARY,
        segment_descriptions=descriptions,
        series_instance_uid=generate_uid(),
        series_number=900,
        sop_instance_uid=generate_uid(),
        instance_number=1,
        manufacturer="Isotide project",
        manufacturer_model_name="Isotide",
        software_versions=__version__,
        device_serial_number="none",
        content_description="Outlines drawn with Isotide (level-set front)"[:64],
        content_creator_name=_person_name(operator),
        content_label="ISOTIDE",
        series_description=series_description[:64],
    )
    return seg


def dicom_seg_bytes(
    labels: np.ndarray,
    volume: Volume,
    label_table: Sequence[Mapping[str, Any]],
    *,
    operator: str = "",
    series_description: str = "Isotide outlines",
) -> bytes:
    """The Part 10 file bytes of :func:`build_dicom_seg`."""
    seg = build_dicom_seg(labels, volume, label_table, operator=operator, series_description=series_description)
    buffer = io.BytesIO()
    seg.save_as(buffer, enforce_file_format=True)
    return buffer.getvalue()
