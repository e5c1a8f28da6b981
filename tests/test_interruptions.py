"""Ctrl-C and kills of a real ``isotide segment`` process, at many moments.

Each try starts from a saved result (the "old" set: mask, table, sidecar),
runs ``isotide segment`` over it with other settings (the "new" set) in a
subprocess and stops it with a signal: at a time after the start (imports,
loading, evolving), or at a marked moment of the save (``interrupt_runner``
marks every ``fsync`` and ``os.replace`` and waits there). Afterwards:

- Ctrl-C (SIGINT) always ends with the one line ``isotide segment:
  interrupted`` on stderr and exit code 130 (or 0 when the run had already
  finished), never a traceback or a crash;
- the files are the whole old set or the whole new one, which ``verify``
  (nibabel reading the mask, SHA-256 of every file) confirms, and a kill
  (SIGKILL) that stopped the renames is completed by the next reader;
- temporary files a kill left behind are gone after the next save there.

Each try's outcome is printed as one row of a table (``pytest -s`` shows it).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import engine.io as eio
from engine.cli import main

ROOT = Path(__file__).resolve().parents[1]
RUNNER = Path(__file__).with_name("interrupt_runner.py")
NAMES = ("res_dseg.nii.gz", "res_dseg.tsv", "res_dseg.json")

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    """A noisy bright disk (radius 40 px) as NPY, and the old result saved from a short run."""
    base = tmp_path_factory.mktemp("interrupt")
    rr, cc = np.indices((128, 128))
    rng = np.random.default_rng(7)
    img = np.where((rr - 64) ** 2 + (cc - 60) ** 2 < 40**2, 180.0, 60.0) + rng.normal(0.0, 8.0, (128, 128))
    image = base / "disk.npy"
    np.save(image, img.astype(np.float32))
    old_dir = base / "old"
    done = _run(["segment", str(image), "--seed", "64,60,4", "--coarse", "1", "--max-steps", "20",
                 "--out", str(old_dir / "res")], base / "marks0")
    assert done.returncode == 0, done.stderr
    return {"base": base, "image": image, "old": {n: (old_dir / n).read_bytes() for n in NAMES}}


def _env(marks: Path, pause_at: str = "", pause: float = 0.0) -> dict:
    env = dict(os.environ, ISOTIDE_TEST_MARKS=str(marks), ISOTIDE_TEST_PAUSE=str(pause),
               ISOTIDE_TEST_PAUSE_AT=pause_at, PYTHONFAULTHANDLER="1")
    env.pop("PYTEST_CURRENT_TEST", None)
    return env


def _run(args, marks: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, str(RUNNER), *args], capture_output=True, text=True, env=_env(marks),
                          timeout=120)


def _new_args(case, folder: Path) -> list[str]:
    return ["segment", str(case["image"]), "--seed", "64,60,4", "--coarse", "1", "--max-steps", "60",
            "--out", str(folder / "res")]


def _fresh_folder(case, name: str) -> Path:
    folder = case["base"] / name
    if folder.exists():
        shutil.rmtree(folder)
    folder.mkdir()
    for n, data in case["old"].items():
        (folder / n).write_bytes(data)
    return folder


def _which_set(case, folder: Path) -> str:
    """'old', 'new' or what is wrong, after letting verify finish an interrupted save."""
    report = eio.verify(folder / "res_dseg.json")
    now = {n: (folder / n).read_bytes() for n in NAMES}
    if now == case["old"]:
        return "old" if report.ok else f"old but verify fails: {report.problems[:1]}"
    if not report.ok:
        return f"MIX: {report.problems[:2]}"
    return "new"


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name not in NAMES)


def _try(case, name: str, signum: int, *, after: float | None = None, at: str = "",
         command: list[str] | None = None) -> dict:
    """Start a run over the old set, send ``signum`` ``after`` seconds or at mark ``at``; return the outcome."""
    folder = _fresh_folder(case, name)
    marks = case["base"] / f"{name}.marks"
    marks.unlink(missing_ok=True)
    args = _new_args(case, folder)
    cmd = command + args if command else [sys.executable, str(RUNNER), *args]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=_env(marks, at, 0.4 if at else 0.0))
    start = time.monotonic()
    sent = False
    while proc.poll() is None and time.monotonic() - start < 60:
        if after is not None and time.monotonic() - start >= after:
            proc.send_signal(signum)
            sent = True
            break
        if at and marks.exists() and any(" ".join(line.split()[:2]) == at
                                         for line in marks.read_text().splitlines()):
            proc.send_signal(signum)
            sent = True
            break
        time.sleep(0.005)
    out, err = proc.communicate(timeout=90)
    return {"try": name, "signal": signal.Signals(signum).name, "moment": at or f"{after:.2f} s",
            "sent": sent, "rc": proc.returncode, "stderr": err, "files": _which_set(case, folder),
            "folder": folder}


def _table(rows: list[dict]) -> None:
    print("\n| signal | moment | exit | stderr | files after |")
    print("|---|---|---|---|---|")
    for r in rows:
        err = r["stderr"].strip().splitlines()
        shown = err[0] if len(err) == 1 else f"{len(err)} lines" if err else "(none)"
        print(f"| {r['signal']} | {r['moment']}{'' if r['sent'] else ' (finished first)'} | {r['rc']} | "
              f"{shown} | {r['files']} |")


def _interrupted_cleanly(r: dict) -> bool:
    if not r["sent"]:
        return r["rc"] == 0
    return (r["rc"] == 130 and r["stderr"] == "isotide segment: interrupted\n") or (
        r["rc"] == 0 and "interrupted" not in r["stderr"])


def test_ctrl_c_at_any_time_ends_with_one_line_and_exit_130(case):
    # The console command itself (python -m engine.cli) while it imports, loads and evolves,
    # then the runner at times spread over the evolution.
    rows = []
    for k, after in enumerate((0.25, 0.4, 0.6, 0.9)):
        rows.append(_try(case, f"cli{k}", signal.SIGINT, after=after, command=[sys.executable, "-m", "engine.cli"]))
    for k, after in enumerate((1.0, 1.3, 1.6, 2.0)):
        rows.append(_try(case, f"run{k}", signal.SIGINT, after=after))
    _table(rows)
    for r in rows:
        assert _interrupted_cleanly(r), r
        assert r["files"] in ("old", "new"), r
        if r["rc"] == 130:  # an interrupted run never replaced the old result half-way
            assert _leftovers(r["folder"]) == [], r


SAVE_MOMENTS = {  # mark -> which set a Ctrl-C there leaves
    "fsync 1": "old",  # writing the new mask's temporary file
    "fsync 3": "old",  # the new sidecar's temporary file
    "fsync 4": "new",  # the journal: Ctrl-C is held from here until the renames are done
    "replace 2": "new",  # the mask renamed
    "replace 4": "new",  # the sidecar renamed
    "fsync 6": "new",  # the folder flushed after the renames
}


def test_ctrl_c_inside_the_save_leaves_one_whole_set(case):
    rows = [_try(case, f"save-int-{at.replace(' ', '')}", signal.SIGINT, at=at) for at in SAVE_MOMENTS]
    _table(rows)
    for r in rows:
        assert r["sent"], r
        assert r["rc"] == 130 and r["stderr"] == "isotide segment: interrupted\n", r
        assert r["files"] == SAVE_MOMENTS[r["moment"]], r
        assert _leftovers(r["folder"]) == [], r


KILL_MOMENTS = {
    "fsync 2": "old",  # temporary files half written: the old set stays, leftovers until the next save
    "fsync 4": "old",  # the journal's temporary file: not yet the commit point
    "replace 2": "new",  # the journal is in place: the next reader finishes the renames
    "replace 3": "new",  # new mask beside the old table and sidecar until then
    "fsync 6": "new",
}


def test_a_kill_inside_the_save_is_finished_or_undone_and_leftovers_go(case):
    rows = [_try(case, f"save-kill-{at.replace(' ', '')}", signal.SIGKILL, at=at) for at in KILL_MOMENTS]
    rows.append(_try(case, "kill-evolving", signal.SIGKILL, after=1.2))
    _table(rows)
    for r in rows:
        if not r["sent"]:
            continue
        assert r["rc"] == -signal.SIGKILL, r
        expected = KILL_MOMENTS.get(r["moment"])
        assert r["files"] == expected if expected else r["files"] in ("old", "new"), r
        # The next save to the same place removes what the killed process left.
        assert main(_new_args(case, r["folder"])) == 0
        assert _leftovers(r["folder"]) == [], r
        assert eio.verify(r["folder"] / "res_dseg.json").ok
