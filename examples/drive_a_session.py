"""Drive a Session as the window does, headless: seed, evolve, trim, undo, commit, carry, save, verify.

Run from the project folder:  python examples/drive_a_session.py [OUT]

The invented abdomen study's aorta is grown from one click on slice 11,
trimmed by a brush stroke (then the trim is undone), committed, carried to
slices 12 and 13, and saved as ``OUT`` (default ``./example-out/aorta``)
with its provenance record; :func:`engine.verify` then checks the files.
"""

from __future__ import annotations

import sys
import threading
from pathlib import Path

from engine import Session, verify

CASE = Path(__file__).resolve().parents[1] / "sample_cases" / "abdomen_mr"


def main(out: str) -> None:
    session = Session.open(str(CASE / "dicom"), operator="example")
    aorta = session.add_label("aorta").index
    session.seed(147.0, 136.0, 3.0, label=aorta, slice=11)

    # A viewer would draw these frames; here we count them. ``cancel`` (a
    # threading.Event) would pause the run between two steps.
    frames = []
    session.evolve(cancel=threading.Event(), on_frame=frames.append)
    frame = session.frame()
    print(f"slice 11: {frame.steps} steps, area {frame.area_mm2:.1f} mm², converged {frame.converged}, "
          f"{len(frames)} frames")

    session.trim([[147.0, 140.0], [150.0, 143.0]], 2.0, label=aorta, slice=11)
    print(f"after a trim stroke: {session.frame().area_mm2:.1f} mm²")
    session.undo()
    print(f"undone: {session.frame().area_mm2:.1f} mm²")
    session.commit()

    for k in (12, 13):  # each carry starts the next slice's front from the committed outline
        session.carry(k, label=aorta)
        session.evolve()
        session.commit()
        print(f"slice {k}: area {session.outlines(k, aorta)[0].area_mm2:.1f} mm²")

    print("history:", "; ".join(c.text for c in session.history))
    paths = session.save(out)
    report = verify(paths["json"])
    print(f"saved {paths['nifti']}; verify: {'ok' if report.ok else report.problems}")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "example-out/aorta")
