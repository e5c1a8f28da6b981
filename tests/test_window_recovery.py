"""Crash recovery: a window killed after edits, started again, recovers; nothing older than the autosave
interval is lost.

The working window runs in a child process with its autosave interval set
to 2 s, draws an outline on a new slice every 0.4 s and kills itself with
SIGKILL (no clean-up of any kind). A second child process starts a window,
finds the recovery file the dead one left (its lock file is stale) and
recovers it: every outline drawn more than the interval (plus the time a
write takes) before the kill must come back bit for bit.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.gui

ROOT = Path(__file__).resolve().parents[1]
DRIVER = ROOT / "tests" / "window_crash_driver.py"
INTERVAL_S = 2.0
WRITE_ALLOWANCE_S = 1.0


def run_driver(*args: str, home: Path) -> tuple[int, list[dict], str]:
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", XDG_CONFIG_HOME=str(home / "config"),
               XDG_DATA_HOME=str(home / "data"), PYTHONPATH=str(ROOT))
    run = subprocess.run([sys.executable, str(DRIVER), *args], capture_output=True, text=True, env=env,
                         timeout=300, cwd=ROOT)
    lines = [json.loads(line) for line in run.stdout.splitlines() if line.startswith("{")]
    return run.returncode, lines, run.stderr


def test_work_killed_after_edits_is_recovered_at_the_next_start(tmp_path):
    study = ROOT / "sample_cases" / "head_mr" / "image.nii.gz"
    code, work, err = run_driver("work", str(study), str(INTERVAL_S), home=tmp_path)
    assert code == -9, err  # killed, as a crash would
    edits = [e for e in work if "slice" in e]
    killed = next(e["killed"] for e in work if "killed" in e)
    assert len(edits) == 12 and killed - edits[0]["time"] > INTERVAL_S + WRITE_ALLOWANCE_S + 1.0
    code, back, err = run_driver("recover", home=tmp_path)
    assert code == 0, err
    assert back[0]["found"] == 1
    recovered = back[1]
    assert recovered["labels"] == ["disk"]
    must = [e for e in edits if e["time"] < killed - INTERVAL_S - WRITE_ALLOWANCE_S]
    assert must, "the run was too short to test anything"
    for e in must:
        assert recovered["outlines"].get(str(e["slice"])) == e["mask"], f"slice {e['slice']} lost"
    # nothing made up: every recovered outline is one that was drawn
    drawn = {str(e["slice"]): e["mask"] for e in edits}
    assert all(drawn[k] == v for k, v in recovered["outlines"].items())
    assert recovered["left"] == []  # the recovered file is gone once its work is in view
