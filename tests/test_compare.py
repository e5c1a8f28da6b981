"""The Compare board's engine: variants start alike, run in threads, and are scored with engine.analysis.metrics.

References used below: Dice's overlap 2|A∩B|/(|A|+|B|) (L. R. Dice, Ecology 26(3) (1945) 297-302)
recomputed with numpy; the symmetric Hausdorff distance from scipy.spatial.distance.directed_hausdorff
as an upper bound of HD95; curvature flow shortens a curve (Gage & Hamilton, J. Differential Geom. 23
(1986) 69-96), so more Smoothness gives a rounder outline; the head phantom's truth labels
(sample_cases/head_mr) for the tumour.
"""

from __future__ import annotations

import threading

import nibabel as nib
import numpy as np
import pytest
from scipy.spatial.distance import directed_hausdorff

from engine.compare import (
    Start,
    Variant,
    VariantRun,
    compare_table,
    default_variants,
    settings_changes,
    starts_for,
)
from engine.session import FrontSettings, Session
from tests.review_cases import HEAD, TUMOUR, head_truth


def head_slice(k: int = 10) -> np.ndarray:
    return np.asarray(nib.load(str(HEAD / "image.nii.gz")).dataobj).transpose(2, 1, 0)[k].astype(float)


def run_all(runs):
    threads = [threading.Thread(target=r.run) for r in runs]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    return [r.frame for r in runs]


def surface_mm(mask, spacing):
    from scipy import ndimage

    edge = mask & ~ndimage.binary_erosion(mask)
    return np.argwhere(edge) * np.asarray(spacing)


def test_variants_run_in_threads_alike_when_their_settings_agree_and_are_scored_as_the_metrics_say():
    image, spacing = head_slice(), (1.5, 1.5)
    start = Start("seeds", 1, 10, "seeds", seeds=((50.0, 102.0, 4.0),))
    base = FrontSettings()
    variants = [Variant("A", base), Variant("B", base), Variant("C", base.updated(smoothness=4.0))]
    frames = run_all([VariantRun(image, spacing, start, v) for v in variants])
    assert all(f.finished and f.mask is not None and not f.error for f in frames)
    a, b, c = frames
    assert np.array_equal(a.mask, b.mask) and a.steps == b.steps  # threads do not disturb one another
    truth = head_truth()[10] == TUMOUR
    table = compare_table(frames, spacing=spacing, reference=truth, committed=a.mask)
    for row, f in zip(table.rows, frames):
        overlap = 2 * np.count_nonzero(f.mask & truth) / (np.count_nonzero(f.mask) + np.count_nonzero(truth))
        assert row.dice_reference == pytest.approx(overlap, abs=1e-12)
        hd = max(directed_hausdorff(surface_mm(f.mask, spacing), surface_mm(truth, spacing))[0],
                 directed_hausdorff(surface_mm(truth, spacing), surface_mm(f.mask, spacing))[0])
        assert 0.0 <= row.hd95_reference <= hd + 1e-9
        assert row.dice_reference > 0.9  # the phantom's tumour, from its listed seed (sample_cases/head_mr)
    assert table.rows[0].dice_committed == 1.0 and table.rows[0].hd95_committed == 0.0
    assert table.pairs[("A", "B")] == (1.0, 0.0)
    d_ac = table.pairs[("A", "C")][0]
    assert 0.8 < d_ac < 1.0 and table.pairs[("B", "C")][0] == d_ac


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_more_smoothness_gives_a_rounder_outline_on_a_noisy_lobed_shape(seed):
    """Curvature flow shortens curves (Gage & Hamilton 1986): P²/(4πA) falls as Smoothness grows."""
    rng = np.random.default_rng(seed)
    rr, cc = np.indices((72, 72), dtype=float)
    theta = np.arctan2(rr - 36, cc - 36)
    radius = 18 + 4 * np.cos(5 * theta)
    image = np.where(np.hypot(rr - 36, cc - 36) < radius, 1.0, 0.0) + rng.normal(0, 0.25, (72, 72))
    start = Start("seeds", 1, 0, "seeds", seeds=((36.0, 36.0, 6.0),))
    base = FrontSettings(max_steps=600)
    runs = [VariantRun(image, (1.0, 1.0), start, Variant(n, base.updated(smoothness=s)))
            for n, s in (("A", 0.25), ("B", 2.0))]
    low, high = run_all(runs)
    ratio = [f.perimeter_mm ** 2 / (4 * np.pi * f.area_mm2) for f in (low, high)]
    assert ratio[1] < ratio[0]


def test_a_stopped_run_ends_within_a_step_and_keeps_its_outline():
    image = head_slice()
    start = Start("seeds", 1, 10, "seeds", seeds=((101.0, 80.0, 8.0),))  # the brain: many steps
    run = VariantRun(image, (1.5, 1.5), start, Variant("A", FrontSettings()))
    cancel = threading.Event()
    seen = []

    def on_frame(frame):
        seen.append(frame.steps)
        if frame.steps >= 5:
            cancel.set()

    last = run.run(cancel, frame_interval=0.0, on_frame=on_frame)
    assert last.finished and last.state == "stopped" and last.steps <= max(s for s in seen[:-1]) + 1
    assert last.mask is not None and last.mask.any() and last.contours


def test_a_variant_that_cannot_start_reports_its_error_in_its_frame():
    image = head_slice()
    start = Start("seeds", 1, 10, "seeds", seeds=((500.0, 80.0, 8.0),))  # outside the slice
    frame = VariantRun(image, (1.5, 1.5), start, Variant("A", FrontSettings())).run()
    assert frame.finished and frame.state == "error" and frame.error and "\n" not in frame.error
    assert frame.mask is None


def test_the_starts_a_session_offers():
    volume = np.stack([head_slice(k) for k in (9, 10, 11)])
    s = Session.from_array(volume, spacing=(5.0, 1.5, 1.5))
    lab = s.add_label("tumour").index
    s.seed(50, 102, 4, label=lab, slice=1)
    assert [st.description for st in starts_for(s, lab, 1)] == ["the front's seeds (1)"]
    s.evolve(300)
    outline = s.commit()
    s.carry(2, label=lab)
    s.evolve(300)
    s.commit()
    found = starts_for(s, lab, 1)
    assert [st.description for st in found] == ["the committed outline's seeds (1)", "the committed outline",
                                                "the outline of slice 2, carried"]
    # from the committed outline with its own settings, the front stays where it came to rest
    from_outline = VariantRun(s.image(1), s.spacing, found[1], Variant("A", s.settings(lab))).run()
    table = compare_table([from_outline], spacing=s.spacing, committed=outline.mask)
    assert table.rows[0].dice_committed > 0.97
    assert [st.kind for st in starts_for(s, lab, 0)] == ["outline"]  # slice 0: its neighbour's, carried


def test_default_variants_and_adopting_one():
    base = FrontSettings(model="edge").updated(edge_pull=2.0)
    variants = default_variants(base, 3)
    assert [v.name for v in variants] == ["A", "B", "C"] and variants[0].settings == base
    assert variants[1].settings.resolved().smoothness == pytest.approx(base.resolved().curvature_weight / 4)
    for v in default_variants(base, 4):
        assert base.updated(**settings_changes(base, v.settings)) == v.settings
        assert v.settings.updated(**settings_changes(v.settings, base)) == base
    with pytest.raises(ValueError, match="count"):
        default_variants(base, 5)
