"""The front's state is what its snapshot holds, read-outs leave it alone, and a reader thread may watch a worker.

The images are invented disks with Gaussian noise (seeded). Equality is bit
for bit: the front is deterministic, so any read-out that touched its state,
or any state the snapshot missed, shows up as a different φ.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest

from engine import Front


def noisy_disk(seed: int, shape=(80, 80), centre=(40.0, 38.0), radius=18.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    rr, cc = np.indices(shape)
    inside = (rr - centre[0]) ** 2 + (cc - centre[1]) ** 2 < radius**2
    return np.where(inside, 160.0, 70.0) + rng.normal(0.0, 8.0, shape)


def read_everything(front: Front) -> None:
    front.contours()
    front.mask()
    front.pixel_phi()
    front.area_mm2()
    front.perimeter_mm()
    front.curvature_at([[40.0, 38.0]])
    front.phi_at([[40.0, 38.0]])
    front.region_means()


@pytest.mark.parametrize("barrier", [False, True])
@pytest.mark.parametrize("nodes", ["lattice", "scattered"])
@pytest.mark.parametrize("seed", range(3))
def test_read_outs_between_steps_leave_the_evolution_unchanged(nodes, seed, barrier):
    img = noisy_disk(seed)
    quiet = Front.from_seeds(img, [(40.0, 38.0, 5.0)], nodes=nodes)
    watched = Front.from_seeds(img, [(40.0, 38.0, 5.0)], nodes=nodes)
    if barrier:  # another label's locked outline across the disk's lower part
        locked = np.zeros(img.shape, dtype=bool)
        locked[44:, :] = True
        quiet.step(5)
        watched.step(5)
        quiet.set_barrier(locked)
        watched.set_barrier(locked)
    for _ in range(6):
        quiet.step(5)
        watched.step(5)
        before = watched.snapshot()
        read_everything(watched)
        after = watched.snapshot()
        assert np.array_equal(before.phi, after.phi) and np.array_equal(before.inside_bits, after.inside_bits)
        assert before.sums == after.sums and before.steps == after.steps
    assert np.array_equal(quiet.phi, watched.phi)
    assert np.array_equal(quiet.mask(), watched.mask())


@pytest.mark.parametrize("seed", range(3))
def test_a_snapshot_restored_into_a_new_front_steps_bit_for_bit(seed):
    # the way an undo rebuilds a front: a new object started from the snapshot's inside, then restored
    img = noisy_disk(seed)
    front = Front.from_seeds(img, [(40.0, 38.0, 5.0)])
    front.step(30)
    snap = front.snapshot()
    front.step(20)
    inside = np.unpackbits(snap.inside_bits, count=img.size).astype(bool).reshape(img.shape)
    other = Front.from_mask(img, inside)
    other.restore(snap)
    other.step(20)
    assert np.array_equal(front.phi, other.phi)
    assert other.steps == front.steps and other.time == front.time


def test_a_reader_thread_sees_whole_steps_while_a_worker_steps():
    img = noisy_disk(0)
    alone = Front.from_seeds(img, [(40.0, 38.0, 5.0)])
    alone.step(120)
    front = Front.from_seeds(img, [(40.0, 38.0, 5.0)])
    errors: list[BaseException] = []

    def work() -> None:
        try:
            for _ in range(120):
                front.step()
        except BaseException as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    worker = threading.Thread(target=work)
    worker.start()
    seen_steps, reads = [], 0
    while worker.is_alive() or reads == 0:
        lines = front.contours()
        assert lines and all(len(c) >= 3 and np.all(np.isfinite(c)) for c in lines)
        assert front.mask().any()
        seen_steps.append(front.steps)
        reads += 1
    worker.join()
    assert not errors
    assert seen_steps == sorted(seen_steps)  # step counts never go back
    assert np.array_equal(front.phi, alone.phi)  # the reads changed nothing


def test_a_front_has_a_short_repr_and_compares_by_identity():
    front = Front.from_seeds(noisy_disk(0), [(40.0, 38.0, 5.0)])
    text = repr(front)
    assert len(text) < 200 and "region" in text and "lattice" in text
    assert front == front and front != Front.from_seeds(noisy_disk(0), [(40.0, 38.0, 5.0)])
