"""The settings a label's fronts are grown with: model, its parameters, detail and step limit."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

from engine.front import FrontParams
from engine.segmenter import DEFAULT_MAX_STEPS
from engine.validation import check_detail, check_names, check_steps

__all__ = ["FrontSettings", "DEFAULT_MAX_STEPS"]

#: Settings that are not front parameters.
_RUN_KEYS = ("model", "detail", "max_steps")
#: Front parameters a user sets (the rest are fixed by the engine or derived).
_PARAM_KEYS = tuple(f.name for f in fields(FrontParams) if f.name != "model")


def _plain(value: Any) -> Any:
    return tuple(float(v) for v in value) if isinstance(value, (list, tuple)) else value


@dataclass(frozen=True)
class FrontSettings:
    """Model, front parameters (only those set), lattice detail and step limit.

    Immutable and hashable; :meth:`updated` validates every change through
    :class:`engine.front.speeds.FrontParams`, so a bad value is refused before any
    front sees it.
    """

    model: str = "region"
    params: tuple[tuple[str, Any], ...] = ()
    detail: int = 1
    max_steps: int = DEFAULT_MAX_STEPS

    def __post_init__(self) -> None:
        FrontParams(model=self.model, **dict(self.params))  # validates model and parameters
        check_detail(self.detail)
        check_steps(self.max_steps, name="max_steps")

    def updated(self, **changes: Any) -> "FrontSettings":
        """A copy with ``changes``; ``None`` for a parameter returns it to its default."""
        check_names(changes, set(_RUN_KEYS) | set(_PARAM_KEYS), "a front")
        params = dict(self.params)
        for key, value in changes.items():
            if key in _PARAM_KEYS:
                if value is None:
                    params.pop(key, None)
                else:
                    params[key] = _plain(value)
        if changes.get("model", self.model) != "window":
            params.pop("window", None)
        return FrontSettings(model=str(changes.get("model", self.model)), params=tuple(sorted(params.items())),
                             detail=check_detail(changes.get("detail", self.detail)),
                             max_steps=check_steps(changes.get("max_steps", self.max_steps), name="max_steps"))

    @property
    def front_params(self) -> dict[str, Any]:
        """Keyword arguments of the front's parameters (without model and detail)."""
        return dict(self.params)

    def resolved(self) -> FrontParams:
        """Every parameter's value, defaults included."""
        return FrontParams(model=self.model, **dict(self.params))

    def as_record(self) -> dict[str, Any]:
        """Plain values for provenance records and working-session files."""
        return {"model": self.model, "params": {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.params},
                "detail": self.detail, "max_steps": self.max_steps}

    @classmethod
    def from_record(cls, record: Mapping[str, Any]) -> "FrontSettings":
        params = {k: _plain(v) for k, v in dict(record.get("params", {})).items()}
        return cls(model=str(record.get("model", "region")), params=tuple(sorted(params.items())),
                   detail=check_detail(record.get("detail", 1)),
                   max_steps=check_steps(record.get("max_steps", DEFAULT_MAX_STEPS), name="max_steps"))
