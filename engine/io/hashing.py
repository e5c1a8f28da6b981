"""SHA-256 of files and canonical JSON, and the hash chain of the edit history.

Canonical JSON (the bytes that are hashed) is ``json.dumps`` with sorted keys,
no whitespace (``","`` and ``":"`` separators), non-ASCII characters kept,
NaN/Infinity refused, encoded as UTF-8.

The edit history is a hash chain: entry *n* carries ``PrevSHA256`` (the
``SHA256`` of entry *n - 1*; for the first entry, the *anchor*, a hash of the
input files' hashes) and its own ``SHA256`` over its canonical JSON without
the ``SHA256`` field. Changing, removing, inserting or reordering any entry
breaks every later link.

References
----------
.. [1] NIST FIPS 180-4, *Secure Hash Standard* (SHA-256), 2015.
.. [2] S. Haber and W. S. Stornetta, "How to time-stamp a digital document",
   J. Cryptology 3(2) (1991) 99-111 (linking each record to the hash of the
   previous one).
"""

from __future__ import annotations

import copy
import hashlib
import json
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

__all__ = [
    "HASH_RE",
    "sha256_file",
    "sha256_bytes",
    "canonical_json",
    "chain_anchor",
    "entry_sha256",
    "chain_history",
    "check_chain",
]

#: Pattern of a hex SHA-256 digest (used by the sidecar schema too).
HASH_RE = r"^[0-9a-f]{64}$"


def sha256_file(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes, read in chunks."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of ``data``."""
    return hashlib.sha256(data).hexdigest()


def canonical_json(obj: Any) -> bytes:
    """The canonical JSON bytes of ``obj`` (see the module docstring).

    Raises
    ------
    ValueError
        ``obj``: holds NaN/Infinity or something JSON cannot represent.
    """
    try:
        text = json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"obj: not representable as canonical JSON ({exc})") from exc
    return text.encode("utf-8")


def chain_anchor(input_hashes: Iterable[str]) -> str:
    """The ``PrevSHA256`` of the first history entry: binds the chain to the inputs."""
    return sha256_bytes(canonical_json({"inputs": sorted(str(h) for h in input_hashes)}))


def entry_sha256(entry: Mapping[str, Any]) -> str:
    """SHA-256 of a history entry's canonical JSON, its own ``SHA256`` field left out."""
    return sha256_bytes(canonical_json({k: v for k, v in entry.items() if k != "SHA256"}))


def chain_history(
    entries: Sequence[Mapping[str, Any]], *, anchor: str, now: str | None = None
) -> list[dict[str, Any]]:
    """Link history entries into a hash chain.

    Entries that already carry ``SHA256`` (recorded by an earlier save) are
    checked and kept as they are; the others get ``Index``, ``Time`` (when
    missing), ``PrevSHA256`` and ``SHA256``.

    Parameters
    ----------
    entries : sequence of dict
        Oldest first. Each needs an ``Action`` string.
    anchor : str
        :func:`chain_anchor` of the inputs.
    now : str, optional
        Timestamp given to new entries without ``Time``.

    Returns
    -------
    list of dict
        New dictionaries; the input is not modified.

    Raises
    ------
    ValueError
        ``entries``: not dicts, no ``Action``, or an already recorded entry
        that no longer matches its hash or its place in the chain.
    """
    out: list[dict[str, Any]] = []
    prev = anchor
    sealed = True
    for i, entry in enumerate(entries):
        if not isinstance(entry, Mapping):
            raise ValueError(f"entries: history entry {i} is not a dict")
        if not isinstance(entry.get("Action"), str) or not entry["Action"]:
            raise ValueError(f"entries: history entry {i} has no 'Action' text")
        item = copy.deepcopy(dict(entry))
        if "SHA256" in item:
            if not sealed:
                raise ValueError(f"entries: recorded history entry {i} follows an unrecorded one")
            if item.get("Index") != i or item.get("PrevSHA256") != prev or entry_sha256(item) != item["SHA256"]:
                raise ValueError(
                    f"entries: recorded history entry {i} was altered after it was recorded "
                    "(its hash or its link to the previous entry does not match)"
                )
        else:
            sealed = False
            item.pop("PrevSHA256", None)
            item["Index"] = i
            if "Time" not in item and now is not None:
                item["Time"] = now
            item["PrevSHA256"] = prev
            item["SHA256"] = entry_sha256(item)
        prev = item["SHA256"]
        out.append(item)
    return out


def check_chain(entries: Sequence[Any], *, anchor: str) -> list[str]:
    """Problems found in a recorded hash chain (empty when it is intact).

    Each problem names the entry (0-based index) and what does not match.
    """
    problems: list[str] = []
    prev = anchor
    for i, entry in enumerate(entries):
        if not isinstance(entry, Mapping):
            problems.append(f"history entry {i} is not an object")
            prev = ""
            continue
        if entry.get("Index") != i:
            problems.append(f"history entry {i} carries Index {entry.get('Index')!r}")
        if entry.get("PrevSHA256") != prev:
            what = "the inputs' anchor" if i == 0 else f"entry {i - 1}"
            problems.append(f"history entry {i}: PrevSHA256 does not match the hash of {what}")
        recorded = entry.get("SHA256")
        try:
            actual = entry_sha256(entry)
        except ValueError:
            actual = None
        if recorded != actual:
            problems.append(f"history entry {i}: content does not match its SHA256 (entry changed)")
        prev = recorded if isinstance(recorded, str) else ""
    return problems
