"""Overlap measures computed here, independently of engine.analysis.metrics, for tests that check the engine's results."""

from __future__ import annotations

import numpy as np


def dice(a: np.ndarray, b: np.ndarray) -> float:
    """2|A∩B| / (|A| + |B|) (L. R. Dice, Ecology 26(3) (1945) 297-302); 0 for two empty masks."""
    a, b = np.asarray(a, bool), np.asarray(b, bool)
    return 2.0 * np.count_nonzero(a & b) / max(np.count_nonzero(a) + np.count_nonzero(b), 1)
