"""Benchmark: the window while a front evolves on a 512² slice (figures printed, nothing asserted).

    python tests/bench/bench_window.py [--seconds 6] [--repeats 5]

Runs the real window (offscreen unless a screen is given) on a two-slice
stack of the 512² phantom of ``bench_front_scaling.py`` and measures, in
this one process:

- frames per second reaching the view while a front evolves from a click
  (paint events of the Slice view that show a new frame; goal ≥ 25);
- the longest stall of the GUI event loop meanwhile, from a 2 ms ``QTimer``
  probe (the largest gap between its ticks less 2 ms; goal < 50 ms);
- seed click → first drawn front: from the mouse click to the first paint
  of the Slice view showing the new front (goal < 100 ms);
- carry → first frame: from Shift+PageDown to the first paint showing the
  carried front on the next slice;
- the engine's steps per second in the window against a headless
  ``Session.evolve`` of the same seed in the same process (the ratio is
  what the window costs the front).
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")
sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np  # noqa: E402
from bench_front_scaling import make_phantom  # noqa: E402
from PySide6.QtCore import QEvent, QObject, QSettings, Qt, QTimer  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402


class PaintClock(QObject):
    """Times every paint of a widget."""

    def __init__(self, widget) -> None:
        super().__init__()
        self.times: list[float] = []
        widget.installEventFilter(self)

    def eventFilter(self, obj, ev) -> bool:  # noqa: N802
        if ev.type() == QEvent.Type.Paint:
            self.times.append(time.perf_counter())
        return False


class StallProbe(QObject):
    """A 2 ms timer; the largest gap between its ticks (less 2 ms) is the longest stall."""

    def __init__(self) -> None:
        super().__init__()
        self.timer = QTimer(self)
        self.timer.setInterval(2)
        self.timer.timeout.connect(self._tick)
        self.last = None
        self.gaps: list[float] = []

    def start(self) -> None:
        self.gaps.clear()
        self.last = time.perf_counter()
        self.timer.start()

    def stop(self) -> None:
        self.timer.stop()

    def _tick(self) -> None:
        now = time.perf_counter()
        self.gaps.append(now - self.last - 0.002)
        self.last = now


def wait(app, condition, timeout: float = 120.0) -> None:
    end = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > end:
            raise TimeoutError("timed out")
        app.processEvents()
        time.sleep(0.0005)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=6.0, help="evolution time measured for frames/s")
    parser.add_argument("--repeats", type=int, default=5, help="seed clicks timed")
    parser.add_argument("--no-probe", action="store_true",
                        help="leave the stall probe off (its 500 wake-ups a second cost the front some steps)")
    args = parser.parse_args()

    from app.application import make_application, settle_memory
    from app.main_window import MainWindow
    from app.study_io import Opened
    from engine.session import Session

    app = make_application()
    folder = Path(tempfile.mkdtemp(prefix="isotide-bench-"))
    w = MainWindow(settings=QSettings(str(folder / "s.ini"), QSettings.Format.IniFormat), recovery_folder=folder)
    w.resize(1400, 900)
    w.show()
    settle_memory()  # as isotide does once its window is up
    QTest.qWaitForWindowExposed(w)
    a, b = make_phantom(512, noise_seed=7), make_phantom(512, noise_seed=8)
    stack = np.stack([a["image"], b["image"]]).astype(np.float32)
    session = Session.from_array(stack, spacing=(1.0, 1.0, 1.0))
    w.show_opened(Opened(session, "512² phantom", "study"))
    w.views.set_slice(0)
    w.activateWindow()
    QTest.qWait(300)  # let the layout settle before clicking on it
    c, canvas = w.controller, w.views.main
    paints = PaintClock(canvas.viewport())
    probe = StallProbe()
    row, col, _ = a["seed"]
    seed_px = 4.0
    w.seed_radius.setValue(seed_px)
    drawn: list[tuple[float, int, int]] = []  # time, frame revision, slice of each drawn frame
    seeds_drawn: list[float] = []  # when a frame showing seeds (before any front) was drawn
    costs: list[float] = []  # GUI time spent turning each frame into drawing commands
    original = w.refresh_frame

    def counting_refresh() -> None:
        t = time.perf_counter()
        original()
        costs.append(time.perf_counter() - t)
        f = session.frame()
        if f.seeds and not f.contours:
            seeds_drawn.append(time.perf_counter())
        if f.contours:
            drawn.append((time.perf_counter(), f.revision, f.slice))

    c.frameReady.disconnect(w.refresh_frame)
    c.frameReady.connect(counting_refresh)

    def first_paint_after(t: float) -> float:
        wait(app, lambda: any(p > t for p in paints.times), timeout=30)
        return min(p for p in paints.times if p > t)

    # seed click -> first drawn front
    latencies, disk_latencies = [], []
    for _ in range(args.repeats):
        drawn.clear()
        seeds_drawn.clear()
        t0 = time.perf_counter()
        QTest.mouseClick(canvas.viewport(), Qt.MouseButton.LeftButton, pos=canvas.to_widget(row, col))
        wait(app, lambda: bool(drawn))
        latencies.append(first_paint_after(drawn[0][0]) - t0)
        if seeds_drawn:
            disk_latencies.append(first_paint_after(seeds_drawn[0]) - t0)
        c.pause()
        wait(app, lambda: c.idle)
        c.submit("Clear front", lambda s: s.clear_front())
        c.submit("Remove seed", lambda s: s.remove_seed(0))
        wait(app, lambda: c.idle)

    # frames per second while it evolves, and the longest stall
    drawn.clear()
    paints.times.clear()
    if not args.no_probe:
        probe.start()
    QTest.mouseClick(canvas.viewport(), Qt.MouseButton.LeftButton, pos=canvas.to_widget(row, col))
    wait(app, lambda: bool(drawn))
    t_start = time.perf_counter()
    steps_start = session.frame().steps
    wait(app, lambda: time.perf_counter() - t_start >= args.seconds or not c.evolving, timeout=args.seconds + 60)
    t_end = time.perf_counter()
    steps = session.frame().steps - steps_start
    frames = sum(1 for t, _, _ in drawn if t_start <= t <= t_end)
    shown = len({rev for t, rev, _ in drawn if t_start <= t <= t_end})
    painted = sum(1 for p in paints.times if t_start <= p <= t_end)
    probe.stop()
    stall = max(probe.gaps) if probe.gaps else float("nan")
    p95 = float(np.percentile(probe.gaps, 95)) if probe.gaps else float("nan")
    frame_cost = float(np.median(costs)) if costs else float("nan")
    c.pause()
    wait(app, lambda: c.idle)
    window_rate = steps / (t_end - t_start)
    front_nodes = session._front.node_count if session._front is not None else 0

    # carry -> first frame on the next slice
    key_target = canvas
    c.submit("Commit outline", lambda s: s.commit())
    wait(app, lambda: c.idle)
    drawn.clear()
    t0 = time.perf_counter()
    QTest.keyClick(key_target, Qt.Key.Key_PageDown, Qt.KeyboardModifier.ShiftModifier)
    wait(app, lambda: any(s == 1 for _, _, s in drawn))
    t_carry = first_paint_after(min(t for t, _, s in drawn if s == 1)) - t0
    c.pause()
    wait(app, lambda: c.idle)

    # the same run headless, for the engine's own rate and its time to a first frame
    headless = Session.from_array(stack, spacing=(1.0, 1.0, 1.0))
    lab = headless.add_label().index
    setups = []
    for _ in range(3):
        headless.seed(row, col, seed_px, label=lab, slice=0)
        first: list[float] = []
        t0 = time.perf_counter()
        headless.evolve(steps=1, on_frame=lambda f: first.append(time.perf_counter()) if not first else None)
        setups.append(first[0] - t0)
        headless.clear_front()
        headless.remove_seed(0)
    setup = statistics.median(setups)
    headless.seed(row, col, seed_px, label=lab, slice=0)
    t0 = time.perf_counter()
    headless.evolve(steps=max(steps, 10))
    headless_rate = max(steps, 10) / (time.perf_counter() - t0)

    w._closing = True
    w.close()
    print("Isotide window benchmark (512² phantom of bench_front_scaling.py, seed radius "
          f"{seed_px:g} px at its centre; {os.environ.get('QT_QPA_PLATFORM')} platform; "
          f"{os.cpu_count()} CPUs, shared: figures are noisy)")
    print(f"seed click -> first drawn front: median {1e3 * statistics.median(latencies):.0f} ms "
          f"(runs: {', '.join(f'{1e3 * x:.0f}' for x in latencies)} ms; goal < 100 ms); the seed disk itself is "
          f"drawn after {1e3 * statistics.median(disk_latencies or [float('nan')]):.0f} ms")
    print(f"  of which the engine starts the front headless in {1e3 * setup:.0f} ms (Session.evolve to its first "
          "frame, median of 3)")
    print(f"frames reaching the view while evolving: {frames / (t_end - t_start):.1f} /s "
          f"({shown} distinct frames drawn, {painted} paints of the Slice view in {t_end - t_start:.1f} s; "
          "goal >= 25)")
    print(f"longest GUI event-loop stall (2 ms QTimer probe): {1e3 * stall:.1f} ms (goal < 50 ms); "
          f"95th percentile gap {1e3 * p95:.1f} ms")
    print(f"GUI time per frame (redrawing the front and its figures): median {1e3 * frame_cost:.1f} ms")
    print(f"carry -> first frame on the next slice: {1e3 * t_carry:.0f} ms")
    print(f"front steps/s: {window_rate:.0f} in the window, {headless_rate:.0f} headless "
          f"(ratio {window_rate / headless_rate:.2f}; {steps} steps, band of {front_nodes} nodes at the end)")


if __name__ == "__main__":
    main()
