"""A saved result to review: the head phantom's tumour and right ventricle outlines saved beside a copy of the study.

The outlines are the phantom's truth labels (``sample_cases/head_mr``) on a
few slices, saved through :func:`engine.io.save_result` with the provenance
a window save records (model, settings, steps, notes, history), so review
tests need no front to evolve.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nibabel as nib
import numpy as np

import engine.io as eio

ROOT = Path(__file__).resolve().parents[1]
HEAD = ROOT / "sample_cases" / "head_mr"

TUMOUR, VENTRICLE = 4, 2
TUMOUR_SLICES = (9, 10, 11)
VENTRICLE_SLICES = (7,)


def head_truth() -> np.ndarray:
    """The head phantom's truth labels ``[slice, row, col]``."""
    return np.asarray(nib.load(str(HEAD / "truth_dseg.nii.gz")).dataobj).transpose(2, 1, 0)


def result_labels(shape: tuple[int, int, int]) -> np.ndarray:
    truth = head_truth()
    out = np.zeros(shape, dtype=np.uint8)
    for k in TUMOUR_SLICES:
        out[k][truth[k] == TUMOUR] = 1
    for k in VENTRICLE_SLICES:
        out[k][truth[k] == VENTRICLE] = 2
    return out


TABLE = [{"index": 1, "name": "tumour", "color": "#E69F00"},
         {"index": 2, "name": "right lateral ventricle", "color": "#56B4E9"}]


def provenance(operator: str = "") -> dict:
    params = {"model": "region", "drive": 1.0, "curvature_weight": 1.0, "outline_averaging": 1.0, "detail": 1}
    slices = [{"slice": k, "model": "region", "parameters": params, "seeds": [[50.0, 102.0, 4.0]], "steps": 120 + k,
               "notes": "grown from seeds; converged after 120 steps"} for k in TUMOUR_SLICES]
    history = [{"action": "add_label", "label": 1}, {"action": "seed", "label": 1, "slice": 10,
                                                     "details": {"row": 50.0, "col": 102.0, "radius_px": 4.0}},
               {"action": "evolve", "label": 1, "slice": 10, "details": {"steps": 130, "converged": True}},
               {"action": "trim", "label": 1, "slice": 10, "details": {"radius_mm": 2.0}},
               {"action": "commit", "label": 1, "slice": 10}]
    out = {"labels": [{"index": 1, "slices": slices},
                      {"index": 2, "slices": [{"slice": 7, "model": "edge", "parameters": {"edge_pull": 3.0},
                                               "steps": 80, "notes": "grown from seeds; not converged"}]}],
           "history": history, "manual": True}
    if operator:
        out["operator"] = operator
    return out


def make_result(tmp_path: Path, *, name: str = "case", operator: str = "") -> Path:
    """Save the result ``tmp_path/out/NAME`` over a copy of the head study; returns its sidecar."""
    study = tmp_path / "study"
    study.mkdir(exist_ok=True)
    image = study / "image.nii.gz"
    if not image.exists():
        shutil.copy(HEAD / "image.nii.gz", image)
    volume = eio.load(image)
    paths = eio.save_result(tmp_path / "out" / name, result_labels(volume.shape), volume, label_table=TABLE,
                            provenance=provenance(operator))
    return paths["json"]
