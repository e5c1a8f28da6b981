"""A sweep: every combination of a few front settings over one or more cases, scored against references.

``--vary smoothness=0.1:2:8`` gives eight values evenly spaced from 0.1 to 2
(ends included); ``--vary drive=0.5,1,2`` gives a list. The grid is every
combination of the varied settings; each (case, grid point) is one batch
case whose result is named ``<case>_<setting>-<value>..._dseg.*``.
:func:`plot_sweep` draws Dice and HD95 against each varied setting (one line
per case, averaged over the other settings' values).
"""

from __future__ import annotations

import io
import itertools
import math
import os
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
import numpy as np

from engine.batch.case import CaseResult
from engine.batch.manifest import CaseProblem, CaseSpec, mark_collisions

__all__ = ["VARIABLE", "parse_vary", "settings_grid", "sweep_cases", "plot_sweep", "variant_columns"]

#: Front settings a sweep may vary (numbers).
VARIABLE = ("smoothness", "drive", "edge_pull", "edge_sigma", "edge_contrast", "edge_weight", "outline_averaging")
#: Most values of one varied setting.
MAX_VALUES = 100


def parse_vary(text: str) -> tuple[str, tuple[float, ...]]:
    """``"NAME=START:STOP:COUNT"`` or ``"NAME=V1,V2,..."`` -> ``(name, values)``.

    Raises
    ------
    ValueError
        ``--vary``: unknown setting, bad numbers, COUNT < 1 or > 100.
    """
    name, sep, spec = str(text).partition("=")
    key = name.strip().lower().replace("-", "_")
    if not sep or not key:
        raise ValueError(f"--vary {text!r}: expected NAME=START:STOP:COUNT or NAME=V1,V2,...")
    if key not in VARIABLE:
        raise ValueError(f"--vary {text!r}: {name.strip()!r} cannot be varied; choose one of "
                         f"{', '.join(v.replace('_', '-') for v in VARIABLE)}")
    spec = spec.strip()
    try:
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop = float(parts[0]), float(parts[1])
            count = int(parts[2])
            if count < 1 or count > MAX_VALUES:
                raise ValueError(f"--vary {text!r}: COUNT must be 1 to {MAX_VALUES}")
            values = tuple(float(v) for v in np.linspace(start, stop, count)) if count > 1 else (start,)
        else:
            values = tuple(float(v) for v in spec.split(","))
    except ValueError as exc:
        if str(exc).startswith("--vary"):
            raise
        raise ValueError(f"--vary {text!r}: expected NAME=START:STOP:COUNT (COUNT a whole number) "
                         "or NAME=V1,V2,... (numbers)") from None
    if not values or not all(math.isfinite(v) for v in values):
        raise ValueError(f"--vary {text!r}: values must be finite numbers")
    if len(set(values)) != len(values) or len(values) > MAX_VALUES:
        raise ValueError(f"--vary {text!r}: expected 1 to {MAX_VALUES} different values")
    return key, tuple(round(v, 12) for v in values)


def settings_grid(varies: Sequence[tuple[str, Sequence[float]]]) -> list[tuple[tuple[str, float], ...]]:
    """Every combination of the varied settings, the first setting varying slowest."""
    names = [name for name, _ in varies]
    if len(set(names)) != len(names):
        raise ValueError("--vary: a setting is given twice")
    return [tuple(zip(names, point)) for point in itertools.product(*[values for _, values in varies])]


def sweep_cases(cases: Sequence[CaseSpec | CaseProblem], varies: Sequence[tuple[str, Sequence[float]]]
                ) -> list[CaseSpec | CaseProblem]:
    """One case per (case, grid point), case by case; a value the case's model refuses makes a problem."""
    from engine.session.settings import FrontSettings

    out: list[CaseSpec | CaseProblem] = []
    for case in cases:
        for point in settings_grid(varies):
            if isinstance(case, CaseProblem):
                out.append(case)
                continue
            params = dict(case.params)
            params.update(point)
            spec = replace(case, params=tuple(sorted(params.items())), variant=point)
            try:
                FrontSettings(model=case.model).updated(**params)
            except ValueError as exc:
                out.append(CaseProblem(case.row, spec.name, case.label, " ".join(str(exc).split())))
                continue
            out.append(spec)
    return mark_collisions(out, unit="case")


def _mean_by(results: Sequence[CaseResult], setting: str, figure: str) -> tuple[list[float], list[float]]:
    groups: dict[float, list[float]] = {}
    for r in results:
        value = dict(r.variant).get(setting)
        y = getattr(r, figure)
        if value is not None and r.status in ("done", "up to date") and math.isfinite(y):
            groups.setdefault(float(value), []).append(float(y))
    xs = sorted(groups)
    return xs, [float(np.mean(groups[x])) for x in xs]


def plot_sweep(results: Sequence[CaseResult], varied: Sequence[str], path: str | os.PathLike[str]) -> Path:
    """A PNG of Dice and HD95 (mm) against each varied setting: one line per case, written atomically.

    Where several settings vary, each point is the mean over the other
    settings' values. Failed cases are left out.
    """
    from matplotlib.figure import Figure

    from engine.io.atomic import commit_files

    cols = max(1, len(varied))
    fig = Figure(figsize=(4.2 * cols, 6.0), dpi=100, layout="constrained")
    axes = fig.subplots(2, cols, squeeze=False)
    cases: dict[tuple[str, str], list[CaseResult]] = {}
    for r in results:
        cases.setdefault((r.label, r.name), []).append(r)
    for j, setting in enumerate(varied):
        for (label, name), rows in cases.items():
            for i, (figure, title) in enumerate((("dice", "Dice"), ("hd95_mm", "HD95 (mm)"))):
                xs, ys = _mean_by(rows, setting, figure)
                if xs:
                    axes[i][j].plot(xs, ys, marker="o", label=f"{name} ({label})")
                axes[i][j].set_ylabel(title)
                axes[i][j].grid(True, alpha=0.3)
        axes[1][j].set_xlabel(setting.replace("_", " "))
        axes[0][j].set_title(f"{setting.replace('_', ' ')}")
    if cases and len(cases) <= 12:
        handles, labels = axes[0][0].get_legend_handles_labels()
        if handles:
            axes[0][0].legend(fontsize="small")
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    target = Path(os.fspath(path))
    commit_files({target: buf.getvalue()})
    return target


def variant_columns(results: Sequence[CaseResult]) -> list[str]:
    """The varied settings, in the order they were given."""
    seen: list[str] = []
    for r in results:
        for name, _ in r.variant:
            if name not in seen:
                seen.append(name)
    return seen

