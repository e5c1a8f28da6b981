"""One variant's run: a front grown on one slice with its own settings, read by a viewer as immutable frames.

A :class:`VariantRun` builds its front the way a session builds its live
front (from the same seed disks, or from an outline's φ, through
:mod:`engine.session.fronts`), then steps it until it converges, vanishes
or reaches its step limit, or until its ``cancel`` token is set. It is
meant to run in a thread of its own: the viewer reads :attr:`frame` at any
rate (an immutable :class:`VariantFrame`, replaced about 30 times a second
and at the end) and never waits for it. The time reported is the processor
time of the run's own thread (:func:`time.thread_time`), so variants run
side by side on shared cores still report what each costs.
"""

from __future__ import annotations

import threading
import time
import traceback
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from engine.compare.variants import Start, Variant

__all__ = ["VariantRun", "VariantFrame"]


@dataclass(frozen=True, eq=False)
class VariantFrame:
    """A picture of a variant's run (safe to read from any thread).

    ``mask`` is set once the run has finished (the pixels inside its
    outline); ``error`` holds a one-line message when the front could not
    be built or stepped.
    """

    name: str
    steps: int = 0
    cpu_s: float = 0.0
    wall_s: float = 0.0
    area_mm2: float = 0.0
    perimeter_mm: float = 0.0
    converged: bool = False
    vanished: bool = False
    finished: bool = False
    stopped: bool = False
    running: bool = False
    contours: tuple[NDArray[np.floating], ...] = ()
    mask: NDArray[np.bool_] | None = None
    error: str = ""
    revision: int = 0

    @property
    def state(self) -> str:
        """``error``, ``vanished``, ``converged``, ``step limit``, ``stopped``, ``running`` or ``waiting``."""
        if self.error:
            return "error"
        if self.vanished:
            return "vanished"
        if self.converged:
            return "converged"
        if self.finished:
            return "stopped" if self.stopped else "step limit"
        return "running" if self.running else "waiting"


def _frozen(a: Any, dtype: Any) -> NDArray:
    out = np.array(a, dtype=dtype, copy=True)
    out.flags.writeable = False
    return out


@dataclass(eq=False)
class VariantRun:
    """A variant run on one slice (see the module docstring).

    Parameters
    ----------
    image : 2-D array
        The slice.
    spacing : (float, float)
        Pixel spacing (row, col) in mm.
    start : Start
        Where the front starts.
    variant : Variant
        Its name and settings (the step limit is ``settings.max_steps``).
    """

    image: NDArray[np.floating]
    spacing: Sequence[float]
    start: Start
    variant: Variant
    _frame: VariantFrame = field(init=False)

    def __post_init__(self) -> None:
        img = np.asarray(self.image, dtype=float)
        if img.ndim != 2 or min(img.shape) < 4:
            raise ValueError(f"image: expected a 2-D slice of at least 4 x 4 pixels, got shape {img.shape}")
        self.image = img
        self._frame = VariantFrame(self.variant.name)
        self._revision = 0
        self._lock = threading.Lock()

    @property
    def frame(self) -> VariantFrame:
        """The latest frame (never blocks)."""
        return self._frame

    def _publish(self, front: Any, **extra: Any) -> None:
        from engine.analysis.metrics import polygon_area_mm2, polyline_length_mm

        final = extra.get("finished", False)
        contours: tuple = ()
        area = perimeter = 0.0
        if front is not None and not front.vanished:
            contours = tuple(_frozen(c, float) for c in front.contours(refine=final))
            area = abs(polygon_area_mm2(list(contours), spacing=self.spacing)) if contours else 0.0
            perimeter = polyline_length_mm(list(contours), spacing=self.spacing) if contours else 0.0
        self._revision += 1
        values = dict(steps=int(front.steps) if front is not None else 0, area_mm2=area, perimeter_mm=perimeter,
                      converged=bool(front.converged) if front is not None else False,
                      vanished=bool(front.vanished) if front is not None else False, contours=contours,
                      revision=self._revision)
        values.update(extra)
        self._frame = VariantFrame(self.variant.name, **values)

    def _build(self) -> Any:
        from engine.session import fronts

        settings = self.variant.settings
        if self.start.kind == "seeds":
            return fronts.start_from_seeds(self.image, self.start.seeds, self.spacing, settings)
        return fronts.start_from_outline(self.image, self.start.outline, self.spacing, settings)

    def run(self, cancel: Any = None, *, frame_interval: float = 1.0 / 30.0,
            on_frame: Callable[[VariantFrame], None] | None = None) -> VariantFrame:
        """Grow the front to the end (or until ``cancel`` is set); returns the last frame.

        ``cancel``: a ``threading.Event`` or a callable returning True to
        stop; it is checked between steps. ``on_frame`` is called with each
        new frame (from this thread). Errors end the run with a frame whose
        ``error`` says what went wrong; they are not raised.
        """
        stop = cancel.is_set if hasattr(cancel, "is_set") else (cancel or (lambda: False))
        cpu0, wall0 = time.thread_time(), time.perf_counter()
        front = None
        limit = int(self.variant.settings.max_steps)

        def times() -> dict[str, float]:
            return {"cpu_s": time.thread_time() - cpu0, "wall_s": time.perf_counter() - wall0}

        def publish(**extra: Any) -> None:
            self._publish(front, **times(), **extra)
            if on_frame is not None:
                on_frame(self._frame)

        try:
            from threadpoolctl import threadpool_limits

            with threadpool_limits(limits=1, user_api="blas"):
                publish(running=True)
                front = self._build()
                publish(running=True)
                due = time.perf_counter() + frame_interval
                while not stop() and not front.vanished and not front.converged and front.steps < limit:
                    front.step(1)
                    if time.perf_counter() >= due:
                        due = time.perf_counter() + frame_interval
                        publish(running=True)
                stopped = bool(stop()) and not (front.vanished or front.converged or front.steps >= limit)
                mask = _frozen(front.mask(), bool) if not front.vanished else None
                publish(finished=True, stopped=stopped, mask=mask)
        except Exception as exc:  # noqa: BLE001 - a variant's failure is shown beside the others, never raised
            text = (str(exc).strip() or type(exc).__name__).splitlines()[0]
            self._revision += 1
            self._frame = VariantFrame(self.variant.name, finished=True, error=text, revision=self._revision,
                                       **times())
            if not isinstance(exc, ValueError):
                self._frame = VariantFrame(self.variant.name, finished=True, revision=self._revision,
                                           error=f"{type(exc).__name__}: {text}", **times())
                traceback.print_exc()
            if on_frame is not None:
                on_frame(self._frame)
        return self._frame
