"""A result is a set of files, replaced whole or not at all (:mod:`engine.io.atomic`).

References used below: hashlib (SHA-256 of the files) and nibabel (the mask
read back by ``verify``); POSIX ``rename`` semantics (common practice).
"""

from __future__ import annotations

import json
import os
import signal
import time
from pathlib import Path

import numpy as np
import pytest

import engine.io as eio
from engine.io import SaveError

TABLE = [{"index": 1, "name": "organ"}]


@pytest.fixture()
def volume(tmp_path):
    path = tmp_path / "input" / "pic.npy"
    path.parent.mkdir()
    np.save(path, np.arange(24 * 32, dtype=np.float32).reshape(24, 32))
    return eio.load(path, spacing=(0.5, 0.5))


def labels(vol, rows=4):
    out = np.zeros(vol.shape, dtype=np.uint8)
    out[0, 2:2 + rows, 3:12] = 1
    return out


def save(prefix, vol, rows=4, **kwargs):
    return eio.save_result(prefix, labels(vol, rows), vol, label_table=TABLE,
                           provenance={"history": [{"action": "segment"}]}, **kwargs)


def files_of(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.is_file()}


class Killed(BaseException):
    """Stands for a kill: nothing after it runs in the saving code."""


def test_a_kill_between_the_renames_is_completed_by_the_next_reader(tmp_path, volume, monkeypatch):
    prefix = tmp_path / "out" / "case"
    paths = save(prefix, volume)
    old = files_of(prefix.parent)
    real = os.replace
    count = {"n": 0}

    def dies_after_the_mask(src, dst):
        count["n"] += 1
        if Path(dst).name == "case_dseg.tsv":  # the new mask is in place, table and sidecar are old
            raise Killed
        return real(src, dst)

    monkeypatch.setattr(os, "replace", dies_after_the_mask)
    with pytest.raises(Killed):
        save(prefix, volume, rows=6)
    monkeypatch.setattr(os, "replace", real)
    assert paths["nifti"].read_bytes() != old["case_dseg.nii.gz"]  # a mix on disk ...
    assert paths["json"].read_bytes() == old["case_dseg.json"]
    report = eio.verify(paths["json"])  # ... that the next reader completes
    assert report.ok, report.problems
    assert any("completed" in n for n in report.notes)
    assert sorted(p.name for p in prefix.parent.iterdir()) == sorted(p.name for p in paths.values())
    assert json.loads(paths["json"].read_text())["Isotide"]["Labels"][0]["Voxels"] == 6 * 9


def test_the_next_save_finishes_an_interrupted_one_before_it_reads_the_review(tmp_path, volume, monkeypatch):
    prefix = tmp_path / "case"
    save(prefix, volume)
    real = os.replace
    monkeypatch.setattr(os, "replace", lambda s, d: (_ for _ in ()).throw(Killed) if d.name.endswith(".json")
                        else real(s, d))
    with pytest.raises(Killed):
        save(prefix, volume, rows=6)
    monkeypatch.setattr(os, "replace", real)
    paths = save(prefix, volume, rows=8)
    assert eio.verify(paths["json"]).ok
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith((".case", "case"))) == sorted(
        p.name for p in paths.values())


def test_leftover_temporary_files_are_cleaned_by_the_next_save(tmp_path, volume):
    prefix = tmp_path / "case"
    save(prefix, volume)
    dead = 2**22 + 12345  # above the usual pid range: no such process
    while True:
        try:
            os.kill(dead, 0)
            dead += 1
        except ProcessLookupError:
            break
        except PermissionError:
            dead += 1
    leftovers = [tmp_path / f".case_dseg.nii.gz.{dead}-0a1b2c3d.part", tmp_path / f".case_dseg.json.{dead}-99.old",
                 tmp_path / ".case_dseg.tsv.k3j2h1x0.part"]
    for p in leftovers:
        p.write_bytes(b"half written")
    stale = time.time() - 7200
    os.utime(leftovers[2], (stale, stale))  # a temporary file without a process number, two hours old
    alive = tmp_path / f".case_dseg.json.{os.getppid()}-1234.part"  # another process saving right now
    alive.write_bytes(b"in progress")
    paths = save(prefix, volume, rows=5)
    assert not any(p.exists() for p in leftovers)
    assert alive.exists()
    assert eio.verify(paths["json"]).ok


@pytest.fixture()
def ctrl_c_raises():
    """Ctrl-C raises KeyboardInterrupt here, as in a terminal (a runner started in the background inherits it ignored)."""
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    yield
    signal.signal(signal.SIGINT, previous)


def test_ctrl_c_during_the_renames_waits_for_them(tmp_path, volume, monkeypatch, ctrl_c_raises):
    prefix = tmp_path / "case"
    paths = save(prefix, volume)
    old = files_of(tmp_path)
    real = os.replace

    def interrupted(src, dst):
        if Path(dst).name == "case_dseg.nii.gz":
            signal.raise_signal(signal.SIGINT)  # Ctrl-C as the first file of the result is renamed
        return real(src, dst)

    monkeypatch.setattr(os, "replace", interrupted)
    with pytest.raises(KeyboardInterrupt):
        save(prefix, volume, rows=6)
    monkeypatch.setattr(os, "replace", real)
    now = files_of(tmp_path)
    assert all(now[name] != old[name] for name in ("case_dseg.nii.gz", "case_dseg.json"))  # the whole new set
    assert eio.verify(paths["json"]).ok
    assert sorted(now) == sorted(p.name for p in paths.values())  # no journal, backup or temporary file left


def test_a_checkpoint_that_raises_changes_nothing(tmp_path, volume):
    prefix = tmp_path / "case"
    save(prefix, volume)
    old = files_of(tmp_path)
    calls = {"n": 0}

    def cancel_at_the_second():
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        save(prefix, volume, rows=6, checkpoint=cancel_at_the_second)
    assert files_of(tmp_path) == old


def test_write_errors_name_the_folder_not_a_temporary_file(tmp_path, volume, monkeypatch):
    real = os.open

    def refuse(path, *args, **kwargs):
        if str(path).endswith(".part"):
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, *args, **kwargs)

    monkeypatch.setattr(os, "open", refuse)
    folder = tmp_path / "results"
    with pytest.raises(SaveError) as info:
        save(folder / "case", volume)
    message = str(info.value)
    assert message.startswith(f"{folder}: ") and "Permission denied" in message
    assert ".part" not in message and "nothing changed" in message


def test_an_output_path_under_a_regular_file_says_so(tmp_path, volume):
    blocker = tmp_path / "notes.txt"
    blocker.write_text("a file")
    with pytest.raises(SaveError, match=f"{blocker} is a file, not a folder"):
        save(blocker / "inside" / "case", volume)
    assert blocker.read_text() == "a file"
