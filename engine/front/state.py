"""A front's state as one frozen value (:class:`FrontState`), the error of a vanished front, the lock its methods hold."""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from engine.front.speeds import FrontParams


if TYPE_CHECKING:  # pragma: no cover
    from engine.front.core import Front


def _locked(method: Callable) -> Callable:
    """Run ``method`` holding the front's lock (see the module docstring's threading contract)."""

    @functools.wraps(method)
    def locked(self: "Front", *args: object, **kwargs: object) -> object:
        with self._lock:
            return method(self, *args, **kwargs)

    return locked


class FrontVanished(ValueError):
    """The zero set disappeared (the outline shrank to nothing or filled the image)."""


def _freeze(value: object) -> None:
    """Make the arrays in ``value`` (an array or a tuple holding arrays) read-only."""
    if isinstance(value, np.ndarray):
        value.flags.writeable = False
    elif isinstance(value, tuple):
        for item in value:
            _freeze(item)


@dataclass(frozen=True, eq=False)
class FrontState:
    """Everything a front is at one moment; a front holds one and replaces it whole at every change.

    Its arrays are read-only, so a state taken from :meth:`Front.snapshot`
    stays what it was while the front moves on, and restoring it gives the
    same steps bit for bit. What a front derives from its state (stencils,
    lookups, interpolants, image features) is kept apart as caches.
    """

    indices: NDArray[np.int64]  # the band's node keys (lattice indices or scattered node ids)
    phi: NDArray[np.floating]  # φ at them (mm, negative inside)
    phi_at_rebuild: NDArray[np.floating]  # |φ| when the band was last built
    inside: NDArray[np.bool_]  # per pixel: inside the front
    sums: tuple[float, float, float, float]  # intensity sum and pixel count, inside then outside
    time: float
    steps: int
    converged: bool
    motion: tuple  # checkpoints of the convergence monitor (engine.front.convergence)
    params: FrontParams
    pins: NDArray[np.bool_] | None
    barrier: NDArray[np.bool_] | None
    local_out: NDArray[np.floating] | None = None
    since_reinit: int = 0
    rebuild_drift: float = 1.0
    layer: tuple[NDArray, ...] = ()  # layer, source, edge_source and layer_phi of the last refresh
    thickness: NDArray[np.floating] | None = None  # half-width behind each layer node at the last refresh
    rest_reinitialised: bool = False  # reinitialised once already at the present rest
    noise: float | None = None  # robust std of the smoothed intensities inside the initial front (region model)
    vanished: bool = False  # the zero set is gone: stepping only counts steps
    rim: tuple[float, float, float, float] | None = None  # the same over the pixels the outline may cut
    resolved_block: int = 1  # pixels a side of the block the image resolves (engine.image.resolution)
    near: NDArray[np.int64] | None = None  # active positions evolved by their own derivatives (the last pick)
    detail: int | None = None  # lattice nodes per pixel of the layout it was taken on (None: stored before it was kept)
    flattenings: int = 0  # reinitialisations because φ next to the front flattened (engine.front.band)

    def __post_init__(self) -> None:
        for f in fields(self):
            _freeze(getattr(self, f.name))

    def updated(self, **changes: object) -> "FrontState":
        """The next state: this one with ``changes`` (arrays in them become read-only; nothing is copied)."""
        new = object.__new__(FrontState)
        state = new.__dict__
        state.update(self.__dict__)
        state.update(changes)
        for value in changes.values():
            _freeze(value)
        return new

    @property
    def inside_bits(self) -> NDArray[np.uint8]:
        """The inside image bit-packed (row-major), as stored on disk."""
        return np.packbits(self.inside.reshape(-1))

    @property
    def nbytes(self) -> int:
        return int(self.indices.nbytes + self.phi.nbytes + self.phi_at_rebuild.nbytes + self.inside.nbytes)

    def __getstate__(self) -> dict:
        # pickled with the inside image bit-packed (an eighth of its size)
        state = dict(self.__dict__)
        inside = state.pop("inside")
        state["inside_bits"], state["inside_shape"] = np.packbits(inside.reshape(-1)), inside.shape
        return state

    def __setstate__(self, state: dict) -> None:
        state = dict(state)
        shape = state.pop("inside_shape")
        bits = state.pop("inside_bits")
        state["inside"] = np.unpackbits(bits, count=int(np.prod(shape))).astype(bool).reshape(shape)
        self.__dict__.update(state)
        for value in self.__dict__.values():
            _freeze(value)


class StateAccess:
    """Part of :class:`~engine.front.Front`: its state's fields read as attributes; changes swap the state whole.

    Nothing here writes into a state: :meth:`_swap` builds the next one
    (:meth:`FrontState.updated`) and replaces the front's reference, under
    the front's lock (held by every method that changes a front).
    """

    _state: FrontState

    def _swap(self, **changes: object) -> None:
        self._state = self._state.updated(**changes)

    @property
    def params(self) -> FrontParams:
        return self._state.params

    @property
    def time(self) -> float:
        return self._state.time

    @time.setter
    def time(self, value: float) -> None:
        with self._lock:  # type: ignore[attr-defined]
            self._swap(time=float(value))

    @property
    def steps(self) -> int:
        return self._state.steps

    @steps.setter
    def steps(self, value: int) -> None:
        with self._lock:  # type: ignore[attr-defined]
            self._swap(steps=int(value))

    @property
    def converged(self) -> bool:
        return self._state.converged

    @property
    def flattenings(self) -> int:
        """How often φ next to the front flattened and was reinitialised (a layer that cannot hold a distance)."""
        return int(self._state.flattenings)

    @property
    def _phi(self) -> NDArray[np.floating]:
        return self._state.phi

    @property
    def _phi_at_rebuild(self) -> NDArray[np.floating]:
        return self._state.phi_at_rebuild

    @property
    def _inside(self) -> NDArray[np.bool_]:
        return self._state.inside

    @property
    def _sums(self) -> tuple[float, float, float, float]:
        return self._state.sums

    @property
    def _pins(self) -> NDArray[np.bool_] | None:
        return self._state.pins

    @property
    def _barrier(self) -> NDArray[np.bool_] | None:
        return self._state.barrier

    @property
    def _noise(self) -> float:
        return self._state.noise  # type: ignore[return-value]

    @property
    def _rebuild_drift(self) -> float:
        return self._state.rebuild_drift

    @property
    def _since_reinit(self) -> int:
        return self._state.since_reinit

    @property
    def _rest_reinitialised(self) -> bool:
        return self._state.rest_reinitialised

    @property
    def _vanished(self) -> bool:
        return self._state.vanished


#: The name the session and files know a front's state by: a snapshot *is* the state.
FrontSnapshot = FrontState
