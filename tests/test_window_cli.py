"""The ``isotide`` program where no window can be shown, and the checks it makes before loading Qt.

``isotide demo`` without a screen runs the headless demo and says so in one
line; ``isotide`` and ``isotide open`` exit 2 with one line naming the
headless verbs instead of letting Qt abort. The real installed program is
run in a child process, as a user would run it.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from app.screen import APT_LINE, XCB_PACKAGES, missing_library, screen_problem, xcb_problem

ROOT = Path(__file__).resolve().parents[1]


def isotide(*args: str, env_changes: dict[str, str | None], cwd: Path) -> subprocess.CompletedProcess:
    exe = shutil.which("isotide", path=str(Path(sys.executable).parent)) or "isotide"
    env = dict(os.environ)
    for k, v in env_changes.items():
        if v is None:
            env.pop(k, None)
        else:
            env[k] = v
    return subprocess.run([exe, *args], capture_output=True, text=True, env=env, cwd=cwd, timeout=300)


def test_demo_without_a_screen_runs_headless_and_says_so(tmp_path):
    out = tmp_path / "demo"
    run = isotide("demo", "--out", str(out), env_changes={"QT_QPA_PLATFORM": "offscreen"}, cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    lines = run.stderr.strip().splitlines()
    assert lines[0] == ("isotide demo: the window needs a screen (QT_QPA_PLATFORM is offscreen); "
                        "running the headless demo")
    assert (out / "abdomen_dseg.json").is_file() and "Dice" in run.stdout


@pytest.mark.parametrize("args", [(), ("open", "STUDY")])
@pytest.mark.parametrize("env_changes", [{"QT_QPA_PLATFORM": "offscreen"},
                                         {"QT_QPA_PLATFORM": None, "DISPLAY": None, "WAYLAND_DISPLAY": None}])
def test_window_verbs_without_a_screen_exit_2_with_one_line(tmp_path, args, env_changes):
    if "DISPLAY" in env_changes and not sys.platform.startswith("linux"):
        pytest.skip("a missing DISPLAY means no screen on Linux only")
    args = tuple(str(ROOT / "sample_cases" / "head_mr" / "image.nii.gz") if a == "STUDY" else a for a in args)
    run = isotide(*args, env_changes=env_changes, cwd=tmp_path)
    assert run.returncode == 2
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1, run.stderr
    assert "the window needs a screen" in lines[0]
    verbs = lines[0].split("without one use the headless verbs: ")[1].split(", ")
    assert {"segment", "verify", "demo --headless"} <= set(verbs) and "open" not in verbs
    assert "Traceback" not in run.stderr and run.stdout == ""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="X11 displays are a Linux matter here")
def test_an_unreachable_x_display_exits_2_with_one_line_instead_of_aborting(tmp_path):
    import ctypes.util

    if ctypes.util.find_library("xcb") is None:
        pytest.skip("libxcb is not installed: the missing libraries are reported instead")
    env = {"QT_QPA_PLATFORM": None, "WAYLAND_DISPLAY": None, "DISPLAY": ":4711"}
    missing = xcb_problem({k: v for k, v in dict(os.environ, **env).items() if v is not None})
    if missing is not None:
        # libxcb is there but not every library Qt's xcb plugin needs: that is reported first
        pytest.skip(f"Qt's xcb plugin cannot load here ({missing}): the missing library is reported instead")
    study = str(ROOT / "sample_cases" / "head_mr" / "image.nii.gz")
    run = isotide("open", study, env_changes=env, cwd=tmp_path)
    assert run.returncode == 2, run.stderr
    lines = run.stderr.strip().splitlines()
    assert len(lines) == 1 and "the X display :4711 cannot be reached" in lines[0]
    assert "headless verbs" in lines[0]


def test_open_of_a_missing_path_exits_2_before_any_window(tmp_path):
    run = isotide("open", str(tmp_path / "nope.nii.gz"), env_changes={}, cwd=tmp_path)
    assert run.returncode == 2
    assert run.stderr.strip() == f"isotide open: {tmp_path / 'nope.nii.gz'}: no such file or folder"


def test_other_verbs_are_the_engines(tmp_path):
    run = isotide("verify", str(tmp_path / "missing_dseg.json"), env_changes={"QT_QPA_PLATFORM": "offscreen"},
                  cwd=tmp_path)
    assert run.returncode != 0 and "missing_dseg.json" in run.stderr
    assert "window" not in run.stderr


def test_screen_problem_reads_the_environment():
    assert screen_problem({"QT_QPA_PLATFORM": "offscreen", "DISPLAY": ":0"}, "linux") == "QT_QPA_PLATFORM is offscreen"
    assert screen_problem({"QT_QPA_PLATFORM": "minimal:foo"}, "darwin") == "QT_QPA_PLATFORM is minimal"
    assert "no display" in screen_problem({}, "linux")
    assert screen_problem({"DISPLAY": ":1"}, "linux") is None
    assert screen_problem({"WAYLAND_DISPLAY": "wayland-0"}, "linux") is None
    assert screen_problem({}, "win32") is None and screen_problem({}, "darwin") is None


def test_a_missing_system_library_is_named_with_the_line_that_installs_it():
    # the dynamic loader's message format (glibc ld.so, common practice)
    text = "OSError: libxcb-cursor.so.0: cannot open shared object file: No such file or directory"
    assert missing_library(text) == "libxcb-cursor.so.0"
    assert missing_library("some other failure") is None
    assert APT_LINE.startswith("sudo apt-get install -y ") and "libxcb-cursor0" in XCB_PACKAGES
    assert len(APT_LINE.splitlines()) == 1


def test_the_qt_binding_keeps_reference_counts():
    # PySide6 6.12.0 under Python 3.11 dropped a reference to None on every call of a void virtual
    # (setVisible); the interpreter then aborts. Guard against such a binding being installed.
    from PySide6.QtWidgets import QApplication, QWidget

    QApplication.instance() or QApplication([])
    widget = QWidget()
    before = sys.getrefcount(None)
    for _ in range(200):
        widget.setVisible(False)
    assert sys.getrefcount(None) >= before - 5
