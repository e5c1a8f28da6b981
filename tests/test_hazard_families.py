"""Default settings on seeded random families of hazards, not on one tuned phantom.

Each family (tests/growth_phantoms.py) draws 10 invented cases: shape,
size, position, seed radius (3-5 px) and its offset from the centre, and
the hazard's own strength (a weak edge at 10-20 % of the contrast, a gap of
1-2 px to a same-intensity neighbour, SNR 2-3, a CT organ 20-40 HU above
soft tissue pressed against bone, a blur of σ 2-3 px, a dark structure on
a bright background, the Rician noise of an MR magnitude image at SNR 3-6,
a concave arc clicked near one end). The assertions are on the family: the 10th
percentile of Dice against the pixel-centre truth and the fraction that
converge, with the default model (region) and settings.
"""

from __future__ import annotations

import numpy as np
import pytest

import growth_phantoms as gp
from engine.analysis.metrics import dice
from engine.segment import segment

#: Cases per family and draw.
COUNT = 10
#: Draws of each family: the first was the one the flood was developed on; the second found a
#: weak edge at a tenth of the contrast that leaked (Dice 0.51) until the homogeneity test also
#: looked at a calmer scale.
DRAWS = (2024, 7)


@pytest.mark.slow
@pytest.mark.parametrize("name", list(gp.FAMILIES))
def test_defaults_hold_on_a_random_family(name: str) -> None:
    scores, converged = [], []
    for case in [c for draw in DRAWS for c in gp.family(name, COUNT, seed=draw)]:
        result = segment(case.image, [case.seed], spacing=case.spacing, max_steps=3000)
        scores.append(dice(result.mask, case.truth))
        converged.append(result.converged)
    assert np.percentile(scores, 10) >= 0.95, f"{name}: Dice {np.round(scores, 4).tolist()}"
    assert np.mean(converged) >= 0.9, f"{name}: converged {converged}"
