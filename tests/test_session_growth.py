"""A Session grows seeds as segment() does: the flood, then the front; live frames of the flood; locked labels."""

from __future__ import annotations

import numpy as np
import pytest

import growth_phantoms as gp
from engine.analysis.metrics import dice
from engine.segment import segment
from engine.session import Session


def _session(case: gp.Case) -> tuple[Session, int]:
    s = Session.from_array(case.image, spacing=case.spacing)
    return s, s.add_label("structure").index


@pytest.mark.parametrize("make", [gp.star, gp.annulus], ids=["star", "annulus"])
def test_a_click_in_the_session_outlines_what_segment_outlines(make) -> None:
    # The invented star and ring of the growth tests (partial-volume renderings,
    # truth at pixel centres), one 4 px seed: the session's outline after a full
    # evolve agrees with the truth (Dice >= 0.99, the growth tests' figure for
    # these shapes) and with segment() from the same seed (Dice >= 0.998: the
    # same flood and front; segment() also drops parts holding no seed).
    case = make()
    s, lab = _session(case)
    s.seed(*case.seed, label=lab, slice=0)
    frames = []
    s.evolve(on_frame=frames.append, frame_interval=0.0)
    assert s.frame().converged
    outline = s.commit()
    reference = segment(case.image, [case.seed], spacing=case.spacing)
    assert dice(outline.mask, case.truth) >= 0.99
    assert dice(outline.mask, reference.mask) >= 0.998
    growing = [f for f in frames if f.stage == "growing"]
    assert growing, "the flood gave no frame to draw"
    # the flood's frames grow, and each is closed (a viewer draws them as they are)
    areas = [f.area_mm2 for f in growing]
    assert areas == sorted(areas) and areas[0] > 4 * np.pi * case.seed[2] ** 2
    for f in growing:
        for c in f.contours:
            assert np.allclose(c[0], c[-1])
    steps = [f.steps for f in frames]
    assert steps[-1] >= 1 and frames[-1].stage != "growing"
    # the step count never runs backwards (none while the flood grows), and the run's History
    # entry counts the steps the live view counted
    assert all(f.steps == 0 for f in growing) and steps == sorted(steps)
    run = s.history[-2]  # the run, then the commit
    assert run.action == "evolve" and run.text.startswith(f"Evolve {steps[-1]} steps, converged")
    assert run.details["steps"] == steps[-1] and run.details["passes"] >= 2


def test_a_pause_during_the_flood_leaves_a_front_to_edit_and_undo_restores_the_seeds() -> None:
    case = gp.star()
    s, lab = _session(case)
    s.seed(*case.seed, label=lab, slice=0)
    s.evolve(steps=2)  # two flood passes, then paused
    assert s.history[-1].text == "Evolve 2 growth passes, paused (structure, slice 0)"
    live = s.live
    assert live is not None and live.snapshot is not None
    area = s.frame().area_mm2
    assert area > np.pi * case.seed[2] ** 2  # it grew beyond the seed disk
    s.trim([[case.seed[0], case.seed[1]]], 2.0, label=lab, slice=0)
    s.undo()
    assert abs(s.frame().area_mm2 - area) < 1e-9
    s.undo()  # the evolve run
    assert s.live.snapshot is None and s.frame().stage == "seeds"
    s.evolve()
    assert dice(s.commit().mask, case.truth) >= 0.99


def test_the_flood_never_enters_a_locked_label() -> None:
    # Two touching squares of the same intensity (nothing in the image between
    # them): the left one is committed and locked; a seed in the right one must
    # stay out of it, at the flood and at the front (no pixel of the locked
    # outline taken), and still fill its own square (Dice >= 0.97).
    rng = np.random.default_rng(5)
    image = np.zeros((120, 160))
    image[30:90, 20:80] = 100.0
    image[30:90, 80:140] = 100.0
    image += rng.normal(0.0, 5.0, image.shape)
    left = np.zeros(image.shape, bool)
    left[30:90, 20:80] = True
    right = np.zeros(image.shape, bool)
    right[30:90, 80:140] = True
    s = Session.from_array(image)
    lab_left = s.add_label("left").index
    s.extend(np.array([[r, c] for r in np.arange(31.5, 89.0, 4.0) for c in np.arange(21.5, 79.0, 4.0)]), 2.9,
             label=lab_left, slice=0)
    locked = s.commit().mask
    assert dice(locked, left) >= 0.95  # the left square drawn with the Extend brush
    s.set_label_locked(lab_left, True)
    lab_right = s.add_label("right").index
    s.seed(60.0, 110.0, 4.0, label=lab_right, slice=0)
    s.evolve()
    mask = s.commit().mask
    assert not np.any(mask & locked)
    assert dice(mask, right & ~locked) >= 0.97


def test_a_setting_changed_during_the_flood_hands_over_to_the_front_at_once() -> None:
    case = gp.star()
    s, lab = _session(case)
    s.seed(*case.seed, label=lab, slice=0)
    changed = []

    def on_frame(frame) -> None:
        if frame.stage == "growing" and not changed:
            s.set_params(smoothness=2.0)  # as the window's Front dock does while the front runs
            changed.append(frame.steps)

    s.evolve(on_frame=on_frame, frame_interval=0.0)
    assert changed and s._front.params.curvature_weight == 2.0
    run = s.history[-1]
    assert run.action == "evolve" and run.details["settings"]["params"]["smoothness"] == 2.0
    assert s.frame().converged and dice(s.commit().mask, case.truth) >= 0.98


def test_a_click_on_an_oversampled_slice_settles_on_its_block_mean_first_as_segment_does() -> None:
    # A disk (radius 30 native px, contrast 1, noise 0.1) on a 128² grid zoomed 2× by a cubic spline
    # (scipy.ndimage.zoom): the image resolves blocks of 2 px, so segment() settles the front on the block
    # mean before finishing at full resolution. The session does the same: it takes segment()'s coarse
    # and fine steps, its live frames count them, its front keeps the block, and the outline is
    # segment()'s (Dice >= 0.998) and the disk's (skimage.draw.disk, Dice >= 0.98).
    case = gp.zoomed_disk()
    image, truth, seed = case.image, case.truth, case.seed
    reference = segment(image, [seed], spacing=case.spacing)
    assert reference.params["coarse"] == 2 and reference.timings["coarse_steps"] > 0
    s, lab = _session(case)
    s.seed(*seed, label=lab, slice=0)
    frames = []
    s.evolve(on_frame=frames.append, frame_interval=0.0)
    assert s.frame().converged and s._front.resolved_block == 2
    # the same coarse and fine steps as segment() (a session that skipped the coarse stage counted 40, not 50)
    run = s.history[-1]
    assert run.details["front_steps"] == reference.steps - reference.timings["growth_passes"]
    assert frames[-1].steps == run.details["front_steps"]
    outline = s.commit()
    assert dice(outline.mask, reference.mask) >= 0.998
    assert dice(outline.mask, truth) >= 0.98


def test_a_live_front_raised_to_two_nodes_a_pixel_comes_back_from_undo_and_from_a_working_session(tmp_path) -> None:
    # A click on a strip 3 px wide: the flood finds a thin part and the front runs at two lattice nodes per
    # pixel, while the label's settings still say one. Its snapshot is rebuilt at the snapshot's detail when
    # the front object is gone (the cache keeps the last few; a working session reopened): at the settings'
    # detail its node keys fell off the image (IndexError), so a saved session with such a live front could
    # not be reopened.
    from engine.session.working import open_working, save_working

    case = gp.strip(3.0)
    s, lab = _session(case)
    s.seed(*case.seed, label=lab, slice=0)
    s.evolve(steps=60)
    assert s._front.detail == 2 and s.settings(lab).detail == 1
    area = s.frame().area_mm2
    s._fronts.clear()  # as after work on more fronts than the cache keeps
    s.undo()
    s.redo()
    assert s._front.detail == 2 and s.frame().area_mm2 == area
    path = tmp_path / "strip.tide"
    save_working(s, path)
    again, _ = open_working(path)
    assert again.frame().area_mm2 == area
    s.evolve(steps=5)
    again.evolve(steps=5)
    assert np.array_equal(again._front.snapshot().phi, s._front.snapshot().phi)  # the same steps, bit for bit


def test_a_snapshot_stored_without_its_detail_is_restored_at_the_detail_its_nodes_fit() -> None:
    # States stored before the detail was kept: the lattice whose pixel-centre nodes agree with the
    # stored inside image is the one (1, 2 or 4 nodes per pixel); a front refuses a snapshot taken at another.
    from engine.front import Front
    from engine.session.fronts import snapshot_detail

    case = gp.strip(3.0)
    for detail in (1, 2):
        front = Front.from_seeds(case.image, [case.seed], spacing=case.spacing, model="region", detail=detail)
        front.step(20)
        snap = front.snapshot()
        assert snap.detail == detail
        old = snap.updated(detail=None)
        assert snapshot_detail(old, 1) == detail and snapshot_detail(old, 2) == detail
    other = Front.from_seeds(case.image, [case.seed], spacing=case.spacing, model="region", detail=1)
    with pytest.raises(ValueError, match="2 lattice nodes per pixel"):
        other.restore(snap)
