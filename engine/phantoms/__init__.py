"""Invented MR-like phantoms (an axial abdomen, a coronal head) for the demo, the sample cases and the tests."""

from engine.phantoms import mr as _mr
from engine.phantoms.mr import *  # noqa: F403

__all__ = list(_mr.__all__)
