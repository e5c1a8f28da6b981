"""A front whose φ keeps flattening next to its outline is rebuilt at two lattice nodes per pixel and comes to rest.

At SNR 2-3 (contrast to noise below about 2.5) one node per pixel cannot hold
a signed distance next to a wiggly outline: φ flattens, is reinitialised, the
outline moves a little each time and cycles instead of resting
(engine.front.finer_lattice). The family is invented blobs under the Rician
noise of an MR magnitude image (Gudbjartsson & Patz, Magn. Reson. Med. 34
(1995) 910-914), tests/growth_phantoms.magnitude_noise_low_snr.
"""

from __future__ import annotations

import numpy as np
import pytest

import engine.front.finer_lattice as finer_lattice
import growth_phantoms as gp
from engine.analysis.metrics import dice
from engine.front.finer_lattice import FLATTENED_LIMIT, THIN_DETAIL, at_thin_detail, cannot_hold_distance
from engine.segment import segment
from engine.segmenter import Segmenter
from engine.session import Session

DRAWS = (2024, 7)


def _flattening_front(monkeypatch: pytest.MonkeyPatch):
    """A draw's fine front, stepped at one node per pixel until it flattened FLATTENED_LIMIT times."""
    case = gp.magnitude_noise_low_snr(np.random.default_rng([2024, 0]))
    monkeypatch.setattr(finer_lattice, "FLATTENED_LIMIT", 10**9)  # segment() would rebuild it itself
    s = Segmenter(case.image, [case.seed], spacing=case.spacing, max_steps=3000)
    while not s.finished and (s.stage != "fine" or s.front().flattenings < FLATTENED_LIMIT):
        s.step(1)
    monkeypatch.undo()
    return case, s.front()


def test_the_rebuilt_front_keeps_the_outline_steps_time_pins_and_barrier(monkeypatch) -> None:
    case, front = _flattening_front(monkeypatch)
    assert front.detail == 1 and front.flattenings == FLATTENED_LIMIT and cannot_hold_distance(front)
    pins = np.zeros(case.image.shape, dtype=bool)
    pins[:4, :4] = True  # a corner far from the outline: pins and barrier must only be carried over
    barrier = np.zeros(case.image.shape, dtype=bool)
    barrier[-4:, -4:] = True
    front.pin(pins)
    front.set_barrier(barrier)
    finer = at_thin_detail(front)
    assert finer.detail == THIN_DETAIL and not cannot_hold_distance(finer)
    assert (finer.steps, finer.time, finer.resolved_block) == (front.steps, front.time, front.resolved_block)
    assert np.array_equal(finer._pins, pins) and np.array_equal(finer._barrier, barrier)
    assert finer.params == front.params
    # the same outline: pixel masks agree but for pixels the outline passes within a hair of
    assert dice(finer.mask(), front.mask()) >= 0.995


@pytest.mark.slow
def test_fronts_at_snr_2_to_3_come_to_rest_and_the_ones_that_flattened_were_rebuilt() -> None:
    # 20 draws (two seeds of 10). Before the rebuild, the slowest took 1 358 and 1 948 steps, still cycling
    # by a few tenths of a pixel between reinitialisations (on 40 more draws, 4 never came to rest in 3 000
    # steps); rebuilt at the fourth flattening, 778 and 1 163 (4 of 4 resting in 398-663). Every front
    # converges within 1 500 steps, and the outline is as good: Dice against the pixel-centre truth at least
    # 0.95 at the 10th percentile (0.962-0.963 measured for both).
    steps, scores, raised = [], [], 0
    for case in [gp.magnitude_noise_low_snr(np.random.default_rng([d, i])) for d in DRAWS for i in range(10)]:
        result = segment(case.image, [case.seed], spacing=case.spacing, max_steps=3000)
        assert result.converged, f"{case.info}: {result.steps} steps"
        steps.append(result.steps)
        scores.append(dice(result.mask, case.truth))
        if "detail_raised_at_step" in result.params:
            raised += 1
            assert result.params["detail"] == THIN_DETAIL and result.params["detail_requested"] == 1
    assert max(steps) <= 1500, steps
    assert np.percentile(scores, 10) >= 0.95, scores
    assert raised >= 1


def test_the_session_rebuilds_a_flattening_front_as_segment_does() -> None:
    # The session holds its image in float32; at SNR 2-3 a front's late steps are sensitive enough that
    # segment() on the float64 image takes another path, so the reference reads the same float32 values.
    case = gp.magnitude_noise_low_snr(np.random.default_rng([2024, 0]))
    image = case.image.astype(np.float32).astype(float)
    reference = segment(image, [case.seed], spacing=case.spacing, max_steps=3000)
    assert "detail_raised_at_step" in reference.params
    s = Session.from_array(case.image, spacing=case.spacing)
    lab = s.add_label("structure").index
    s.seed(*case.seed, label=lab, slice=0)
    s.evolve()
    assert s.frame().converged and s._front.detail == THIN_DETAIL
    # the same steps (the reference's count holds the flood's passes too) and the same outline
    assert s._front.steps == reference.steps - reference.timings["growth_passes"]
    assert np.array_equal(s._front.mask(), reference.mask)
    # the run is one command: undone, the seeds are back; redone, the rebuilt front (its snapshot at two
    # nodes per pixel, the front objects dropped) is back as it was
    grown = s._front.mask()
    s.undo()
    assert s.live.snapshot is None and s.live.seeds
    s._fronts.clear()
    s.redo()
    assert s._front.detail == THIN_DETAIL and np.array_equal(s._front.mask(), grown)
