"""The scripts in examples/ run as documented and say what they promise."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def run_example(name: str, *args: str) -> str:
    done = subprocess.run([sys.executable, str(ROOT / "examples" / name), *args], cwd=ROOT, capture_output=True,
                          text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    return done.stdout


def test_drive_a_session_saves_a_result_that_verifies(tmp_path: Path) -> None:
    out = run_example("drive_a_session.py", str(tmp_path / "aorta"))
    assert "verify: ok" in out
    assert (tmp_path / "aorta_dseg.nii.gz").is_file()
    assert out.count("Commit outline") == 3


def test_plot_curvature_follows_the_analytic_star(tmp_path: Path) -> None:
    # The polar-curve curvature formula (differential geometry, common practice):
    # the valleys' −0.42/mm must be reached within 0.1/mm and the median
    # vertex-wise difference stay under 0.1/mm (the image's noise moves the outline).
    out = run_example("plot_curvature.py", str(tmp_path / "k.png"))
    assert (tmp_path / "k.png").stat().st_size > 10_000
    low, high, a_low, a_high, median = map(float, re.search(
        r"curvature (\S+) to (\S+) 1/mm \(analytic (\S+) to (\S+); median difference (\S+)", out).groups())
    assert abs(low - a_low) < 0.1 and median < 0.1
    # as the curvature colours show it (averaged along the outline), against the analytic
    # curvature averaged alike: the speckle falls (median difference below the raw one and 0.04/mm)
    s_low, s_high, sa_low, sa_high, s_median = map(float, re.search(
        r"as shown .*: (\S+) to (\S+) 1/mm \(analytic averaged alike (\S+) to (\S+); median difference (\S+)",
        out).groups())
    assert s_median < min(median, 0.04) and abs(s_low - sa_low) < 0.05


@pytest.mark.slow
def test_segment_sample_case_scores_every_structure() -> None:
    out = run_example("segment_sample_case.py")
    rows = [line.split() for line in out.splitlines()[1:] if line.strip()]
    assert len(rows) == 7
    assert all(float(r[-3]) >= 0.95 and r[-1] == "yes" for r in rows), out
