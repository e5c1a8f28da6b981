"""Batches and sweeps: many cases outlined headless, here or on a Dask cluster.

- :mod:`engine.batch.manifest` — the manifest (CSV or JSON, one row per case) -> :class:`CaseSpec`
- :mod:`engine.batch.case` — one case through a :class:`engine.session.Session`: seed, evolve, commit,
  carry, score, save (:func:`run_case`)
- :mod:`engine.batch.resume` — is a saved result up to date with its inputs and settings?
- :mod:`engine.batch.reference` — the reference's label mask; Dice and HD95 over the case's slices
- :mod:`engine.batch.cluster` — local cluster or scheduler, submitting, retrying, cancelling (:func:`run_cases`)
- :mod:`engine.batch.summary` — ``summary.csv`` / ``sweep.csv``
- :mod:`engine.batch.sweep` — a grid of settings over cases, ``sweep.csv`` and its plot
"""

from engine.batch.case import CaseResult, RunOptions, run_case
from engine.batch.cluster import BatchInterrupted, batch_client, default_workers, run_cases
from engine.batch.manifest import CaseProblem, CaseSpec, ManifestError, read_manifest

__all__ = [
    "CaseSpec",
    "CaseProblem",
    "ManifestError",
    "read_manifest",
    "RunOptions",
    "CaseResult",
    "run_case",
    "run_cases",
    "batch_client",
    "default_workers",
    "BatchInterrupted",
]
