"""The engine's public face: ``from engine import ...`` gives the documented API, loaded on first use."""

from __future__ import annotations

import subprocess
import sys

import engine


def test_public_names_are_importable_from_the_package():
    from engine import Front, FrontParams, Session, load, save_result, segment, verify  # noqa: F401

    for name in engine.__all__:
        assert getattr(engine, name) is not None
    assert Session.__module__.startswith("engine.session")


def test_importing_the_package_loads_no_numerics():
    # the command line imports engine for its version: that must not pull in the front or scipy
    code = "import sys, engine; print(any(m.startswith(('engine.front.core', 'scipy')) for m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
