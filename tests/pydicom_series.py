"""pydicom's bundled 5-slice CT series (``98892001/CT5N`` beside its ``DICOMDIR`` test file), shared by tests."""

from __future__ import annotations

from pathlib import Path

import pytest
from pydicom.data import get_testdata_file


def ct5n_folder() -> Path:
    path = get_testdata_file("DICOMDIR", download=False)  # pydicom test data
    if path is None:
        pytest.skip("pydicom's dicomdirtests are not bundled with the installed pydicom")
    return Path(path).parent / "98892001" / "CT5N"
