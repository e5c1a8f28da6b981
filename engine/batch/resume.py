"""Resuming a batch: is a case's saved result up to date with its inputs and settings?

Every result a batch saves carries, as the last entry of its hash-chained
history, a ``batch`` entry with the case's *key* (SHA-256 of the case's
settings, the study's path and the engine's version) and its figures. A
case is up to date when its result passes :func:`engine.io.verify` (mask,
table and history intact, every input file present and hashing as
recorded) and that entry's key equals the case's key now.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from engine.batch.manifest import CaseSpec

__all__ = ["ACTION", "case_key", "result_prefix", "recorded_figures"]

#: ``Action`` of the history entry a batch case adds to its result.
ACTION = "batch"


def case_key(spec: CaseSpec) -> str:
    """SHA-256 over the case's settings, study path and the engine's version (canonical JSON)."""
    from engine import __version__
    from engine.io.hashing import canonical_json, sha256_bytes

    return sha256_bytes(canonical_json({"engine": __version__, "case": spec.settings_record()}))


def result_prefix(out_dir: str | os.PathLike[str], spec: CaseSpec) -> Path:
    """``OUT/<label>/<case>`` (the result's ``DIR/NAME``)."""
    return Path(os.fspath(out_dir)) / spec.label / spec.output_name


def _inputs_unchanged(doc: dict[str, Any], study: str | os.PathLike[str]) -> bool:
    """True when every input file the result records is among the files at ``study``, bytes unchanged.

    The record keeps input paths relative to the result, or only their
    names, so the study's own files are hashed and matched by SHA-256.
    """
    from engine.io.hashing import sha256_file

    recorded = {f["SHA256"] for f in doc["Isotide"]["Input"]["Files"]}
    root = Path(os.fspath(study))
    files = [root] if root.is_file() else [p for p in sorted(root.rglob("*")) if p.is_file()]
    present = {sha256_file(p) for p in files}
    return recorded <= present


def recorded_figures(prefix: str | os.PathLike[str], key: str,
                     study: str | os.PathLike[str] | None = None) -> dict[str, Any] | None:
    """The figures recorded with an up-to-date result at ``prefix``, or None when the case must run.

    None when the result is missing or incomplete, fails verification, an
    input file at ``study`` is missing or changed, or it was made with other
    settings.
    """
    from engine.io import result_paths, verify

    paths = result_paths(prefix)
    if not (paths["json"].is_file() and paths["nifti"].is_file() and paths["tsv"].is_file()):
        return None
    try:
        report = verify(paths["json"])
        if not report.ok or any("cannot be read" in note for note in report.notes):
            return None
        doc = json.loads(paths["json"].read_text(encoding="utf-8"))
        if study is not None and not _inputs_unchanged(doc, study):
            return None
        history = doc["Isotide"]["History"]
    except (OSError, ValueError, KeyError, TypeError):
        return None
    entries = [h for h in history if isinstance(h, dict) and h.get("Action") == ACTION]
    if not entries:
        return None
    details = entries[-1].get("Details") or {}
    if details.get("case_key") != key or not isinstance(details.get("result"), dict):
        return None
    return dict(details["result"])
