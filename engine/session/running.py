"""The Session's runs: the live front evolving step by step (the flood's passes first), and label settings.

Part of :class:`engine.session.Session` (its threading contract is in :mod:`engine.session.session`).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import replace
from typing import Any

from engine.front import Front
from engine.front.finer_lattice import at_thin_detail, cannot_hold_distance
from engine.segmenter import fine_tolerance
from engine.session import fronts
from engine.session.settings import FrontSettings
from engine.session.state import Frame, SessionState
from engine.validation import check_steps

__all__ = ["Running", "SessionBusy"]


class SessionBusy(RuntimeError):
    """A front is evolving: pause it before changing anything else."""


def _cancelled(cancel: Any) -> Callable[[], bool]:
    if cancel is None:
        return lambda: False
    if hasattr(cancel, "is_set"):
        return cancel.is_set
    if callable(cancel):
        return cancel
    raise ValueError("cancel: expected a threading.Event or a callable returning True to stop")


class Running:
    """Evolving the live front, and changing the settings of a label's fronts (a part of the Session)."""

    def evolve(self, steps: int | None = None, *, cancel: Any = None, on_frame: Callable[[Frame], None] | None = None,
               frame_interval: float = 1.0 / 30.0) -> Frame:
        """Grow the live front: ``steps`` steps, or until it converges, vanishes or reaches its step limit.

        ``cancel`` (a ``threading.Event`` or a callable) is checked between
        steps. ``on_frame(frame)`` is called with a fresh frame on a beat of
        ``frame_interval`` seconds (never more often on average) and once at the end. The whole run is one
        command on the undo stack. Returns the last frame.
        """
        if steps is not None:
            check_steps(steps)
        stop = _cancelled(cancel)
        with self._lock:
            self._idle()
            before = self._stack.state
            live = before.live
            if live is None:
                raise ValueError("there is no front to evolve: place a seed first")
            self._writable(live.label)
            if live.snapshot is None:
                if not live.seeds:
                    raise ValueError("the front vanished and has no seeds to start again from")
                settings = self.settings(live.label)
                self._grower = fronts.grow_from_seeds(self.image(live.slice), live.seeds, self.spacing, settings,
                                                      barrier=self._barrier(before, live.label, live.slice),
                                                      features=self.features(live.slice, settings))
            self._run_settings = self.settings(live.label)
            self._running = True
            t0 = time.perf_counter()
            first_step = self._front.steps if self._grower is None and self._front is not None else 0
        taken, passes, due = 0, 0, 0.0
        try:
            while not stop() and (steps is None or taken < steps):
                with self._lock:
                    grower = self._grower
                    if grower is not None and grower.stage not in ("growing", "coarse"):
                        self._adopt_grown(before)  # the flood (and a coarse start) done, the front built from it
                        continue
                    if grower is not None:
                        # one flood pass, one step of a coarse start (an oversampled image), or a hand-over
                        if grower.stage == "growing":
                            passes += 1
                        grower.step(1)
                    else:
                        front = self._front
                        if front.vanished or (steps is None and front.converged):
                            break
                        if front.steps >= self._run_settings.max_steps and steps is None:
                            break
                        front.step(1)
                        if cannot_hold_distance(front):
                            # as segment() does: one node per pixel cannot hold a distance next to this outline
                            self._adopt(at_thin_detail(front), self._stack.state, live.label, live.slice)
                    taken += 1
                    now = time.perf_counter()
                    if now >= due:
                        # frames on a fixed beat (at most one per frame_interval on average), not an
                        # interval after the last one: a step's overrun no longer lowers the rate
                        due = due + frame_interval if now - due < frame_interval else now + frame_interval
                        self._publish(running=True, rate=taken / max(now - t0, 1e-9))
                        if on_frame is not None:
                            on_frame(self._frame)
                # a thread waiting for the lock (a setting, a busy edit) takes it now: a lock
                # released and taken again at once would keep it waiting for many steps
                time.sleep(0)
        finally:
            with self._lock:
                if self._grower is not None and taken:
                    self._adopt_grown(before)  # paused during the flood: the front starts from what it took
                self._grower = None
                self._running = False
                settings, self._run_settings = self._run_settings, None
                if taken:
                    self._finish_run(before.with_settings(live.label, settings), first_step, passes,
                                     time.perf_counter() - t0)
                else:
                    self._publish(refine=True)
        if on_frame is not None:
            on_frame(self._frame)
        return self._frame

    def _adopt_grown(self, state: SessionState) -> None:
        """Make the grower's full-resolution front the live front (building it from the flood if needed)."""
        grower, self._grower = self._grower, None
        live = state.live
        self._adopt(grower.front(), state, live.label, live.slice)

    def _finish_run(self, before: SessionState, first_step: int, passes: int, seconds: float) -> None:
        """Push the run as one command (``before``: the state it started from, with the settings it ended with).

        The run's steps are the front's (as the live step count shows them);
        ``passes`` counts the flood's passes and its hand-over to the front.
        """
        front = self._front
        live = before.live
        settings = before.settings[live.label]
        taken = max(int(front.steps) - first_step, 0)
        details = {"steps": taken, "passes": passes, "front_steps": int(front.steps),
                   "converged": bool(front.converged),
                   "vanished": bool(front.vanished), "seconds": round(seconds, 3), "settings": settings.as_record()}
        if front.vanished:
            after = replace(before, live=replace(live, snapshot=None, front_id=None, vanished=True))
            self._drop_front()
        else:
            after = self._with_live_snapshot(before)
        word = "vanished" if front.vanished else ("converged" if front.converged else "paused")
        count = f"{taken} steps" if taken or not passes else f"{passes} growth passes"
        self._push(f"Evolve {count}, {word}", "evolve", after, label=live.label, slice_index=live.slice,
                   details=details)
        self._frame = replace(self._frame, steps_per_s=(taken + passes) / max(seconds, 1e-9))

    def set_params(self, label: int | None = None, **changes: Any) -> None:
        """Change a label's front settings; a running front takes them at its next step.

        ``label`` defaults to the live front's label (with no live front: the
        settings new labels start with). Outside a run the change is a
        command; during a run it becomes part of the run's command.
        """
        with self._lock:
            state = self._stack.state
            live = state.live
            if label is None:
                label = live.label if live is not None else None
            if label is not None:
                self.label(label)
            old = self.settings(label)
            if changes.get("model") == "window" and changes.get("window") is None \
                    and "window" not in old.front_params and self._front is not None and live.label == label:
                changes["window"] = fronts.window_for_mask(self.image(live.slice), self.spacing, self._front.mask())
            new = old.updated(**changes)
            if new == old:
                return
            if label is None:
                self._default_settings = new
                return
            on_live = live is not None and live.label == label
            if self._running:
                if not on_live:
                    raise SessionBusy("a front is evolving; pause it before changing another label's settings")
                self._apply_settings(old, new)
                self._run_settings = new
                return
            self._idle()
            after = state.with_settings(label, new)
            if on_live and self._front is not None:
                self._apply_settings(old, new)
                after = self._with_live_snapshot(after)
            changed = _changes(old, new)
            self._push("Settings " + ", ".join(f"{k} {v}" for k, v in changed.items()), "settings", after,
                       label=label, details={"changes": changed, "settings": new.as_record()})

    def _apply_settings(self, old: FrontSettings, new: FrontSettings) -> None:
        if self._front is None and self._grower is not None:
            self._adopt_grown(self._stack.state)  # new settings during the flood: the front takes over now
        front = self._front
        # a front grown from seeds converges at a fraction of the pixel the image resolves
        # (engine.segmenter.fine_tolerance): its tolerance is the asked one times that block, and
        # keeps that block under every later setting
        block = front.resolved_block
        tolerance = fine_tolerance(new.resolved().convergence_tol, block)
        if new.detail != old.detail:
            live = self.live
            phi = front.pixel_phi()
            rebuilt = Front.from_pixel_phi(self.image(live.slice), phi, spacing=self.spacing, model=new.model,
                                           detail=new.detail, features=self.features(live.slice, new),
                                           **dict(new.front_params, convergence_tol=tolerance))
            rebuilt.steps, rebuilt.time = front.steps, front.time
            rebuilt.set_resolved_block(block)
            self._adopt(rebuilt, self._stack.state, live.label, live.slice)
            return
        params = dict(new.front_params)
        for key in old.front_params:
            if key not in params:  # back to the default
                params[key] = getattr(type(front.params)(model=new.model), key)
        if "convergence_tol" in params:
            params["convergence_tol"] = tolerance
        front.set_params(model=new.model, **params)


def _changes(old: FrontSettings, new: FrontSettings) -> dict[str, Any]:
    """Settings that differ between ``old`` and ``new`` (new values; None where a parameter went back to its default)."""
    a, b = old.as_record(), new.as_record()
    out = {k: v for k, v in b["params"].items() if a["params"].get(k) != v}
    out.update({k: None for k in a["params"] if k not in b["params"]})
    out.update({k: b[k] for k in ("model", "detail", "max_steps") if a[k] != b[k]})
    return out
