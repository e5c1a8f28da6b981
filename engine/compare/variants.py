"""Variants for the Compare board: where each run starts, and the settings it runs with.

Every variant of a comparison starts alike, so that only its settings
differ: from the same seed disks, or from the same outline (the label's
committed outline on the slice, or the one on a neighbouring slice, as a
carry would start). :func:`starts_for` lists the starts a session offers
for a label and slice; :func:`default_variants` gives a trainer's first set
of variants around the label's own settings; :func:`settings_changes` is
what adopting a variant's settings changes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from engine.session import FrontSettings, Outline

__all__ = ["Start", "Variant", "starts_for", "default_variants", "settings_changes", "NAMES", "MAX_VARIANTS",
           "MIN_VARIANTS"]

#: Names of the variants, in order.
NAMES = ("A", "B", "C", "D")
MIN_VARIANTS, MAX_VARIANTS = 2, 4


@dataclass(frozen=True, eq=False)
class Start:
    """How every variant's front starts: ``kind`` ``"seeds"`` (seed disks ``(row, col, radius_px)``) or
    ``"outline"`` (a committed outline, from ``source_slice``)."""

    kind: str
    label: int
    slice: int
    description: str
    seeds: tuple[tuple[float, float, float], ...] = ()
    outline: Outline | None = None
    source_slice: int | None = None

    def __post_init__(self) -> None:
        if self.kind == "seeds" and not self.seeds:
            raise ValueError("seeds: a start from seeds needs at least one seed disk")
        if self.kind == "outline" and self.outline is None:
            raise ValueError("outline: a start from an outline needs the outline")
        if self.kind not in ("seeds", "outline"):
            raise ValueError(f"kind: expected 'seeds' or 'outline', got {self.kind!r}")


@dataclass(frozen=True)
class Variant:
    """A named set of settings (``description``: what sets it apart)."""

    name: str
    settings: FrontSettings
    description: str = ""


def _seeds(value: Any) -> tuple[tuple[float, float, float], ...]:
    out = []
    for s in value or ():
        try:
            if len(s) == 3:
                out.append((float(s[0]), float(s[1]), float(s[2])))
        except TypeError:
            continue
    return tuple(out)


def starts_for(session: Any, label: int, slice_index: int) -> list[Start]:
    """The starts ``session`` offers for ``label`` on ``slice_index``, most telling first.

    The live front's seeds (when it is this label's on this slice), the
    seeds the committed outline was grown from, the committed outline
    itself, and the outlines of the neighbouring slices (carried).
    """
    out: list[Start] = []
    live = session.live
    if live is not None and live.label == label and live.slice == slice_index and live.seeds:
        n = len(live.seeds)
        out.append(Start("seeds", label, slice_index, f"the front's seeds ({n})", seeds=tuple(live.seeds)))
    outlines = session.state.outlines
    here = outlines.get((label, slice_index))
    if here is not None:
        seeds = _seeds(here.record.get("seeds"))
        if seeds and not any(s.kind == "seeds" and s.seeds == seeds for s in out):
            out.append(Start("seeds", label, slice_index, f"the committed outline's seeds ({len(seeds)})",
                             seeds=seeds))
        out.append(Start("outline", label, slice_index, "the committed outline", outline=here,
                         source_slice=slice_index))
    for k in (slice_index - 1, slice_index + 1):
        near = outlines.get((label, k))
        if near is not None:
            out.append(Start("outline", label, slice_index, f"the outline of slice {k}, carried", outline=near,
                             source_slice=k))
    return out


def default_variants(settings: FrontSettings, count: int = 4) -> list[Variant]:
    """A first set of ``count`` variants: the label's settings, then Smoothness a quarter and four times as
    large, then Outline averaging of 8 mm (a trainer changes them at will).

    Raises
    ------
    ValueError
        ``count``: not 2 to 4.
    """
    if isinstance(count, bool) or not isinstance(count, int) or not MIN_VARIANTS <= count <= MAX_VARIANTS:
        raise ValueError(f"count: expected {MIN_VARIANTS} to {MAX_VARIANTS} variants, got {count!r}")
    smooth = float(settings.resolved().curvature_weight)  # the model's default when Smoothness is not set
    base = smooth if smooth > 0 else 1.0
    out = [Variant(NAMES[0], settings, "the label's settings"),
           Variant(NAMES[1], settings.updated(smoothness=round(base / 4, 4)), f"Smoothness {base / 4:g}"),
           Variant(NAMES[2], settings.updated(smoothness=round(base * 4, 4)), f"Smoothness {base * 4:g}"),
           Variant(NAMES[3], settings.updated(outline_averaging=8.0), "Outline averaging 8 mm")]
    return out[:count]


def settings_changes(old: FrontSettings, new: FrontSettings) -> dict[str, Any]:
    """The changes that turn ``old`` into ``new`` (``None`` returns a setting to its default), for
    :meth:`engine.session.Session.set_params`."""
    a, b = old.as_record(), new.as_record()
    out: dict[str, Any] = {k: (tuple(v) if isinstance(v, list) else v) for k, v in b["params"].items()
                           if a["params"].get(k) != v}
    out.update({k: None for k in a["params"] if k not in b["params"]})
    out.update({k: b[k] for k in ("model", "detail", "max_steps") if a[k] != b[k]})
    return out


def name_check(variants: Sequence[Variant]) -> None:
    """Raise ``ValueError`` naming ``variants`` when there are not 2 to 4 of them with distinct names."""
    if not MIN_VARIANTS <= len(variants) <= MAX_VARIANTS:
        raise ValueError(f"variants: expected {MIN_VARIANTS} to {MAX_VARIANTS}, got {len(variants)}")
    names = [v.name for v in variants]
    if len(set(names)) != len(names):
        raise ValueError(f"variants: names repeat ({', '.join(names)})")
