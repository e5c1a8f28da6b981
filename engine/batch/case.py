"""One batch case, outlined headless through a :class:`engine.session.Session`.

:func:`run_case` is what a worker runs: it opens the study, adds the label,
sets the case's front settings, grows a front from the seeds of every seeded
slice and commits it, carries the outline slice by slice through the case's
slice range, scores it against the reference, and saves the result (mask,
label table and sidecar with the provenance record) as
``OUT/<label>/<case>_dseg.*``. A case that is already up to date (see
:mod:`engine.batch.resume`) is not run again. Whatever goes wrong with a
case comes back as a failed :class:`CaseResult` with a one-line error; it
never raises (except ``KeyboardInterrupt`` in the calling process).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

from engine.batch.manifest import CaseProblem, CaseSpec, slice_text
from engine.validation import check_slice
from engine.batch.reference import figure_from_record, plain_figure, reference_mask, score
from engine.batch.resume import ACTION, case_key, recorded_figures, result_prefix

__all__ = ["RunOptions", "CaseResult", "CaseCancelled", "STATUSES", "run_case", "outline_case", "problem_result"]

#: Status of a case in the summary: outlined now, skipped as up to date, failed, or not run.
STATUSES = ("done", "up to date", "failed", "cancelled")


class CaseCancelled(Exception):
    """The batch was cancelled while the case ran."""


@dataclass(frozen=True)
class RunOptions:
    """How every case of a batch runs.

    Attributes
    ----------
    out_dir : str
        Results go to ``out_dir/<label>/<case>_dseg.*``.
    force : bool
        Run cases again even when their result is up to date.
    operator : str
        Recorded in every result as who ran the batch.
    cancel_event : str or None
        Name of a ``distributed.Event``; a case running on a Dask worker
        stops at its next check (about once a second) once it is set.
    """

    out_dir: str
    force: bool = False
    operator: str = ""
    cancel_event: str | None = None


@dataclass(frozen=True)
class CaseResult:
    """A case's outcome: one row of ``summary.csv``."""

    row: int
    name: str
    label: str
    status: str
    slices: str = ""
    steps: int = 0
    seconds: float = 0.0
    area_mm2: float = math.nan
    dice: float = math.nan
    hd95_mm: float = math.nan
    error: str = ""
    output: str = ""
    variant: tuple[tuple[str, Any], ...] = field(default=())
    attempts: int = 1
    worker_seconds: float = 0.0  # wall time inside the worker, loading and saving included
    cpu_seconds: float = 0.0  # processor time of the worker process over the case (all its threads)
    unconverged: str = ""  # slices whose front stopped at the step limit


def problem_result(case: CaseProblem | CaseSpec, error: str, *, status: str = "failed") -> CaseResult:
    """A case that did not run (a bad manifest row, a lost worker, cancelled)."""
    variant = case.variant if isinstance(case, CaseSpec) else ()
    return CaseResult(case.row, case.name, case.label, status, error=" ".join(str(error).split()), variant=variant)


def _cancel_check(event_name: str | None) -> Callable[[], bool]:
    """A cheap ``cancel()`` for Session.evolve: looks at the batch's Dask event at most once a second."""
    if not event_name:
        return lambda: False
    try:
        from distributed import Event, get_worker

        get_worker()
    except (ImportError, ValueError):
        return lambda: False
    event = Event(event_name)
    state = {"next": 0.0, "set": False}

    def check() -> bool:
        now = time.monotonic()
        if not state["set"] and now >= state["next"]:
            state["next"] = now + 1.0
            try:
                state["set"] = bool(event.is_set())
            except Exception:  # noqa: BLE001 - a lost scheduler connection is the batch's to report
                pass
        return state["set"]

    return check


def outline_case(spec: CaseSpec, *, cancel: Callable[[], bool] = lambda: False, operator: str = ""
                 ) -> tuple[Any, int, list[int], int, list[int], list[int]]:
    """Open the study and outline the case's label on its slices.

    Returns
    -------
    session : engine.session.Session
        With the label's committed outlines.
    label : int
        The label's index.
    outlined : list of int
        Slices that hold an outline.
    steps : int
        Front steps over all slices.
    vanished : list of int
        Slices a carried front vanished on (the structure ends there).
    unconverged : list of int
        Slices whose front stopped at the step limit without converging.

    Raises
    ------
    ValueError
        A seed outside the study, a front that vanished on a seeded slice, ...
    CaseCancelled
        ``cancel()`` became true.
    """
    from engine.session import Session

    session = Session.open(spec.path, series=spec.series, operator=operator)
    n = session.slices
    if spec.slices is not None:
        lo, hi = spec.slices
        check_slice(hi, n, name=f"slice {lo}-{hi}: last slice")
        default = lo
    else:
        default = n // 2
    by_slice: dict[int, list[tuple[float, float, float]]] = {}
    for k, row, col, radius in spec.seeds:
        k = default if k is None else k
        check_slice(k, n, name="seeds: slice")
        by_slice.setdefault(k, []).append((row, col, radius))
    if spec.slices is None:
        lo, hi = min(by_slice), max(by_slice)
    label = session.add_label(spec.label).index
    session.set_params(label, model=spec.model, **dict(spec.params))
    steps = 0
    done: set[int] = set()
    unconverged: list[int] = []

    def grow(k: int) -> bool:
        nonlocal steps
        frame = session.evolve(cancel=cancel)
        if cancel():
            raise CaseCancelled()
        steps += int(frame.steps)
        if frame.vanished:
            session.clear_front()
            return False
        if not frame.converged:
            unconverged.append(k)
        session.commit()
        done.add(k)
        return True

    for k in sorted(by_slice):
        for row, col, radius in by_slice[k]:
            session.seed(row, col, radius, label=label, slice=k)
        if not grow(k):
            raise ValueError(f"the front vanished on seeded slice {k} (seeds in the wrong place, or drive too low)")
    vanished: list[int] = []
    for order, step in ((range(lo, hi + 1), -1), (range(hi, lo - 1, -1), 1)):
        for k in order:
            if k not in done and k + step in done and k not in vanished:
                session.carry(k, label=label, from_slice=k + step)
                if not grow(k):
                    vanished.append(k)
    return session, label, sorted(done), steps, vanished, sorted(unconverged)


def run_case(spec: CaseSpec | CaseProblem, options: RunOptions) -> CaseResult:
    """Outline one case and save its result; never raises (but for ``KeyboardInterrupt``).

    Parameters
    ----------
    spec : CaseSpec or CaseProblem
        The case (a problem is returned as a failed result at once).
    options : RunOptions
        Output folder, force, operator, cancel event.
    """
    if isinstance(spec, CaseProblem):
        return problem_result(spec, spec.error)
    t0, c0 = time.perf_counter(), time.process_time()
    prefix = result_prefix(options.out_dir, spec)
    base = CaseResult(spec.row, spec.name, spec.label, "failed", output=str(prefix), variant=spec.variant)
    try:
        key = case_key(spec)
        if not options.force:
            recorded = recorded_figures(prefix, key, spec.path)
            if recorded is not None:
                return replace(base, status="up to date", slices=str(recorded.get("slices", "")),
                               steps=int(recorded.get("steps", 0)), seconds=float(recorded.get("seconds", 0.0)),
                               area_mm2=figure_from_record(recorded.get("area_mm2")),
                               dice=figure_from_record(recorded.get("dice")),
                               hd95_mm=figure_from_record(recorded.get("hd95_mm")),
                               unconverged=str(recorded.get("unconverged", "")),
                               worker_seconds=time.perf_counter() - t0)
        session, label, outlined, steps, vanished, unconverged = outline_case(
            spec, cancel=_cancel_check(options.cancel_event), operator=options.operator)
        from engine.session import label_volume

        labels = label_volume(session) == label
        area = float(sum(o.area_mm2 for o in session.outlines(label=label)))
        dice = hd95 = math.nan
        if spec.reference:
            lo, hi = spec.slices if spec.slices is not None else (min(outlined), max(outlined))
            ref = reference_mask(spec.reference, spec.label, session.volume.shape)
            dice, hd95 = score(labels, ref, (lo, hi), session.volume.spacing)
        seconds = time.perf_counter() - t0
        figures = {"slices": slice_text(outlined), "steps": steps, "seconds": round(seconds, 3),
                   "unconverged": slice_text(unconverged),
                   "area_mm2": plain_figure(area), "dice": plain_figure(dice), "hd95_mm": plain_figure(hd95)}
        details = {"case_key": key, "case": spec.name, "row": spec.row, "settings": spec.settings_record(),
                   "variant": {k: v for k, v in spec.variant}, "vanished_on": vanished, "result": figures}
        session.save(str(prefix), history_entry={"action": ACTION, "details": details})
        return replace(base, status="done", slices=figures["slices"], steps=steps, seconds=seconds, area_mm2=area,
                       dice=dice, hd95_mm=hd95, worker_seconds=time.perf_counter() - t0,
                       cpu_seconds=time.process_time() - c0, unconverged=figures["unconverged"])
    except CaseCancelled:
        return replace(base, status="cancelled", error="the batch was cancelled while the case ran",
                       worker_seconds=time.perf_counter() - t0)
    except Exception as exc:  # noqa: BLE001 - a bad case is reported, never allowed to stop the others
        return replace(base, error=_one_line(exc), worker_seconds=time.perf_counter() - t0)


def _one_line(exc: BaseException) -> str:
    """A one-line error message; unexpected kinds of error keep their type's name."""
    from engine.io import LoadError, SaveError

    text = " ".join(str(exc).split())
    if isinstance(exc, (ValueError, LoadError, SaveError)) and text:
        return text
    if isinstance(exc, FileNotFoundError) and exc.filename:
        return f"{exc.filename}: no such file or folder"
    if isinstance(exc, MemoryError):
        return "out of memory while outlining the case"
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__
