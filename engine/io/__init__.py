"""Opening studies and saving results.

Readers (:func:`load`, :func:`list_series`) turn DICOM series, folders,
DICOMDIRs and multi-frame objects, NIfTI-1/2 files and PNG/TIFF/NPY pictures
into one :class:`Volume` (float32 ``[slice, row, col]`` with spacing in mm and
an index-to-patient LPS affine). :func:`save_result` writes a labelled result
(``NAME_dseg.nii.gz``, ``NAME_dseg.tsv``, ``NAME_dseg.json`` and optionally
``NAME.seg.dcm``) atomically; :func:`verify` checks one against its sidecar.

Modules: ``volume`` (the Volume type), ``geometry`` (affines, slice sorting,
LPS/RAS), ``dicom_header``/``dicom_scan``/``dicom_reader`` (DICOM),
``nifti_reader``, ``raster_reader``, ``loader`` (dispatch), ``hashing``
(SHA-256, canonical JSON, hash chain), ``sidecar`` (BIDS sidecar + Isotide
block, label table), ``dicom_seg`` (highdicom), ``atomic`` (all-or-nothing
writes), ``writer`` (save_result), ``verify``, ``errors``.
"""

from engine.io.errors import (
    ApprovedResultError,
    DecodeError,
    LoadError,
    ReviewedResultError,
    SaveError,
    SeriesSelectionError,
    VolumeTooLargeError,
)
from engine.io.loader import list_series, load
from engine.io.sidecar import (
    OKABE_ITO,
    REVIEW_STATES,
    SCHEMA_VERSION,
    build_sidecar,
    load_schema,
    seal_sidecar,
    validate_sidecar,
)
from engine.io.verify import VerifyReport, verify
from engine.io.volume import DEFAULT_MAX_BYTES, SeriesInfo, Volume
from engine.io.writer import finish_interrupted_save, result_paths, save_result, save_sidecar

__all__ = [
    "Volume",
    "SeriesInfo",
    "DEFAULT_MAX_BYTES",
    "load",
    "list_series",
    "save_result",
    "save_sidecar",
    "result_paths",
    "build_sidecar",
    "seal_sidecar",
    "validate_sidecar",
    "load_schema",
    "SCHEMA_VERSION",
    "OKABE_ITO",
    "REVIEW_STATES",
    "verify",
    "VerifyReport",
    "LoadError",
    "DecodeError",
    "SeriesSelectionError",
    "VolumeTooLargeError",
    "SaveError",
    "ReviewedResultError",
    "ApprovedResultError",
    "finish_interrupted_save",
]
