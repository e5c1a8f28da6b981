"""One step of the front: derivatives, curvature of the front, rates, the time step, convergence.

One step is Runge–Kutta–Legendre super time stepping (RKL2, Meyer, Balsara &
Aslam, J. Comput. Phys. 257 (2014) 594-626; see :mod:`engine.numerics.time_stepping`) of

    φ_t = −V |∇φ|_G + a κ |∇φ|

on every node whose stencil is complete: the normal speed V through the
Godunov Hamiltonian of one-sided RBF-FD derivatives (upwind, so expanding
corners round into arcs and shrinking corners stay sharp: the entropy
solution) and curvature κ from centred RBF-FD derivatives. Speeds and
curvature are those of the front at each node's closest point (extension
velocities, Adalsteinsson & Sethian, J. Comput. Phys. 148 (1999) 2-22), so
all level sets in the band move together and φ stays a signed distance. The
nodes at the band's edge, whose stencil is incomplete, take the rate of the
node nearest to their closest point on the front; that node's stencil never
reaches the edge, so there is no feedback loop, the whole band moves as one
and no kink forms at its edge. The image speed at the layer is averaged
along the outline (``outline_averaging``, :mod:`engine.numerics.outline_averaging`):
noise is pooled along the boundary, not blurred across it.
The time step lets the front move at most ``cfl`` node spacings and the
number of RKL2 stages grows with √(dt / dt_Euler) to keep the stiff
curvature term stable, so fine detail does not force tiny steps
(``integrator="ssp_rk3"`` takes Shu & Osher's three-stage steps instead,
each within forward Euler's limit for the curvature term: the reference
the super time steps are checked against). When the front nears the edge of the part of the band
where c = 1, the band is rebuilt around it and φ is reinitialised to a signed
distance by Newton closest points on the zero set of the local RBF
interpolant (Saye 2014).

With ``nodes="scattered"`` (2-D and 3-D) the band is a subset of one fixed,
edge-adaptive scattered node set per image
(:class:`engine.nodes.node_set.ScatteredNodeSet`): band nodes are global node ids,
each node carries its own cached RBF-FD weights (same operator columns as the
lattice stencil), zero crossings lie on the edges of the nodes' neighbour
graph, the pixel inside image follows φ interpolated to pixel centres, the
time step follows the finest local spacing of the active nodes and the
stage count the node set's Arnoldi estimate of the curvature operator's
spectral radius. Contours are marching squares (surfaces: marching cubes) on
φ interpolated to the band's pixel centres, contours projected onto the
interpolant's zero set. In 3-D a scattered front must not cross the
volume's border (refused: the scheme is not stable there yet). The coarse
start of :func:`engine.segment.segment` stays lattice-only.

Part of :class:`engine.front.Front` (see :mod:`engine.front.core`).

References
----------
.. [1] D. Adalsteinsson, J. A. Sethian, "A fast level set method for
   propagating interfaces", J. Comput. Phys. 118 (1995) 269-277.
.. [2] D. Peng, B. Merriman, S. Osher, H. Zhao, M. Kang, "A PDE-based fast
   local level set method", J. Comput. Phys. 155 (1999) 410-438.
.. [3] R. I. Saye, Commun. Appl. Math. Comput. Sci. 9(1) (2014) 107-141.
.. [4] S. Osher, R. Fedkiw, "Level Set Methods and Dynamic Implicit
   Surfaces", Springer (2003).
"""

from __future__ import annotations

import time as _time
from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from engine.front.constants import (KINK_GRADIENT, LAYER_WIDTH, MIN_SPEED, NEAR_EVERY, REINIT_DRIFT, SETTLING,
                                    STATISTICS_EVERY)
from engine.front.convergence import OutlineMotion
from engine.front.speeds import NodeSpeeds
from engine.front.state import FrontVanished
from engine.nodes.band_stencils import layer_labels
from engine.numerics.time_stepping import rkl2, rkl2_stages, rkl2_step, ssp_rk3
from engine.numerics.upwind import clip, sum_rows, upwind_squares


try:  # the band's small dense products run far slower with threaded BLAS
    from threadpoolctl import ThreadpoolController

    _BLAS = ThreadpoolController()

    def single_thread_blas():
        """Context in which BLAS uses one thread (the front's products are small)."""
        return _BLAS.limit(limits=1, user_api="blas")
except ImportError:  # pragma: no cover - threadpoolctl is a declared dependency
    from contextlib import nullcontext as single_thread_blas


class Evolution:
    """Part of :class:`~engine.front.Front` (see the module docstring)."""

    def step(self, n: int = 1, *, dt_max: float | None = None) -> None:
        """Advance ``n`` time steps (``params.integrator``: RKL2 super time steps or SSP-RK3; the band is rebuilt when needed)."""
        if n < 0:
            raise ValueError(f"n must be >= 0, got {n}")
        with single_thread_blas():
            self._step(int(n), dt_max)

    @property
    def vanished(self) -> bool:
        """True once the outline has shrunk to nothing (or filled the whole image)."""
        return self._vanished

    def run(self, *, until_time: float | None = None, max_steps: int | None = None,
            progress: Callable[[int, float], None] | None = None) -> None:
        """Step until converged, ``until_time`` is reached, or ``max_steps`` steps were taken."""
        if until_time is None and max_steps is None:
            max_steps = 20000
        with single_thread_blas():
            self._run(until_time, max_steps, progress)

    def _layer_derivatives(self, phi: NDArray[np.floating], *, hessian: bool = True
                           ) -> tuple[NDArray[np.floating], NDArray[np.floating] | None]:
        """Centred gradient (d, L) and, if asked, Hessian (d, d, L) at the layer nodes next to the front."""
        d = self.ndim
        values = self.layout.layer_derivatives(self._band, phi, None if hessian else d)
        return values[:d], (values[_hessian_rows(d)] if hessian else None)

    def _front_curvature(self, phi_act: NDArray[np.floating], grad: NDArray[np.floating],
                         hess: NDArray[np.floating], *, measure: bool = True) -> NDArray[np.floating]:
        """Curvature of the front at each layer node's closest point (1/mm); ``grad`` (d, L), ``hess`` (d, d, L).

        For a signed distance, the level set through x at distance s from the
        front has principal curvatures k_i(x) = k_i(y) / (1 + s k_i(y)), so
        k_i(y) = k_i(x) / (1 − s k_i(x)); summing them gives the extension of
        the front's curvature along the normals. With ``measure`` the largest
        |κ| and the extension's gain (for the time step) are recorded.
        """
        g2 = sum_rows(grad * grad)
        np.maximum(g2, 1e-12, out=g2)
        gnorm = np.sqrt(g2)
        s = phi_act / gnorm
        kmax = 1.0 / self.h
        if self.ndim == 2:
            # κ = (φ_y² φ_xx − 2 φ_x φ_y φ_xy + φ_x² φ_yy) / |∇φ|³
            gx, gy = grad
            k_x = [clip((gy * gy * hess[0, 0] - 2.0 * gx * gy * hess[0, 1] + gx * gx * hess[1, 1])
                         / (g2 * gnorm), kmax)]
        else:
            # principal curvatures: the two eigenvalues of the shape operator S = P H P / |∇φ|
            # (P = I − n nᵀ) other than its exact zero along n, from its invariants:
            # k1 + k2 = tr S, k1 k2 = (tr(S)² − tr(S²)) / 2 (Goldman, Comput. Aided Geom. Des.
            # 22 (2005) 632-658, for curvatures of implicit surfaces)
            n = grad / gnorm
            ph = hess - n[:, None, :] * np.einsum("jl,ijl->il", n, hess)[None, :, :]  # P H, (3, 3, L)
            hn = np.einsum("ijl,jl->il", ph, n)  # (P H) n
            shape_op = (ph - hn[:, None, :] * n[None, :, :]) / gnorm  # P H P / |∇φ|
            trace = shape_op[0, 0] + shape_op[1, 1] + shape_op[2, 2]
            square = np.einsum("ijl,jil->l", shape_op, shape_op)
            gap = np.sqrt(np.maximum(2.0 * square - trace * trace, 0.0))  # (k1 − k2)² = 2 tr(S²) − tr(S)²
            k_x = [clip(0.5 * (trace + gap), kmax), clip(0.5 * (trace - gap), kmax)]
        total = None
        denom_min = None
        for k in k_x:
            denom = 1.0 - s * k
            np.maximum(denom, 0.25, out=denom)
            part = k / denom
            if measure:
                # where the extension is clipped, κ(y) does not follow φ: it adds no gain
                live = np.where(np.abs(part) < kmax, denom, np.inf)
                denom_min = live if denom_min is None else np.minimum(denom_min, live)
            part = clip(part, kmax)
            total = part if total is None else total + part
        if measure and len(total):
            # d k(y) / d k(x) = 1 / (1 − s k)²: the extension amplifies the
            # diffusion-like curvature term; the time step must follow. Only
            # where it is not clipped to 1/h: on the staircase of a flooded
            # outline the clipped corners would otherwise set it (16 instead
            # of 4 to 6) and take 9 RKL2 stages a step instead of 4 to 5.
            smallest = float(np.min(denom_min))
            self._curvature_gain = max(1.0, 1.0 / smallest**2) if np.isfinite(smallest) else 1.0
            self._last_kappa_max = float(np.max(np.abs(total)))
        elif measure:
            self._curvature_gain, self._last_kappa_max = 1.0, 0.0
        return total

    def _stage_speeds(self, speeds: NodeSpeeds) -> _StageSpeeds:
        """The layer's speeds extended to every active node (the extension velocities of one step)."""
        b = self._band
        normal = speeds.normal[b.near_source] if np.any(speeds.normal != 0) else None
        a = speeds.curvature
        curving = bool(np.any(np.asarray(a) != 0))
        a_all = a[b.near_source] if np.ndim(a) else a
        if b.held is None:
            b.held = (np.flatnonzero(b.frozen[b.near_nodes]), np.flatnonzero(b.barrier[b.near_nodes]))
        return _StageSpeeds(normal, a if curving else None, a_all * self.layout.damping, *b.held)

    def _rate(self, phi: NDArray[np.floating], speeds: _StageSpeeds,
              layer: tuple[NDArray[np.floating], NDArray[np.floating] | None] | None = None,
              measure: bool = False) -> NDArray[np.floating]:
        """φ_t at the active nodes (extension velocities from the front's layer).

        The curvature of the front comes from the layer nodes (``layer``: their
        derivatives, if already known); the other derivatives from
        :meth:`_step_derivatives`. ``measure``: record the largest curvature
        and its extension's gain for the time step (:meth:`_front_curvature`).
        """
        b = self._band
        d = self.ndim
        rows = self._step_derivatives(phi)
        grad, back, fwd, hv = rows[:d], rows[d:2 * d], rows[2 * d:3 * d], rows[3 * d]
        outward, inward = upwind_squares(back, fwd)
        if speeds.normal is not None:
            # Godunov Hamiltonian (Osher & Fedkiw 2003, eq. 6.3-6.4).
            rate = -speeds.normal * np.sqrt(np.where(speeds.normal > 0, outward, inward))
        else:
            rate = np.zeros(len(b.near))
        if speeds.curvature is not None:
            grad_l, hess_l = layer if layer is not None and layer[1] is not None else self._layer_derivatives(phi)
            kappa = self._front_curvature(phi[b.active[b.layer]], grad_l, hess_l, measure=measure)
            motion = (speeds.curvature * kappa)[b.near_source]  # curvature part of the normal speed (inward for κ > 0)
            # Centred |∇φ| is accurate where φ is smooth, but on a kink of the
            # distance function (the midline of a part that is collapsing) it
            # tends to 0 and the part would linger there; the upwind |∇φ| of
            # the same motion is the viscosity solution's (Osher & Fedkiw 2003,
            # §6.4). Where the two differ by more than KINK_GRADIENT, take it.
            gnorm = np.sqrt(sum_rows(grad * grad))
            upwind = np.sqrt(np.where(motion < 0, outward, inward))  # the Godunov |∇φ| of speed −motion
            gnorm = np.where(np.abs(gnorm - upwind) > KINK_GRADIENT, upwind, gnorm)
            rate += motion * gnorm - speeds.damping * hv
        if len(speeds.frozen):
            rate[speeds.frozen] = 0.0
        if len(speeds.barrier):
            rate[speeds.barrier] = np.maximum(rate[speeds.barrier], 0.0)
        return rate

    def _step_derivatives(self, phi: NDArray[np.floating]) -> NDArray[np.floating]:
        """(3d + 1, A) at the active nodes, one row per operator (:func:`step_labels`): ∂_i, ∂_i⁻, ∂_i⁺, hyperviscosity.

        Rows keep each derivative contiguous for the element-wise work that
        follows (a column per operator would be strided).
        """
        return self.layout.step_derivatives(self._band, phi)

    def _time_step(self, speeds: NodeSpeeds, kappa_max: float) -> tuple[float, int]:
        """Time step and number of rate evaluations (RKL2 stages, or 3 for SSP-RK3).

        The step lets the front move at most ``cfl`` node spacings (normal
        speed |V| + a|κ|); the stages make the RKL2 stability interval cover
        the curvature term's spectral radius (super time stepping), and the
        step is shortened to one stage fewer's stability limit where that
        advances more time per evaluation (:func:`engine.numerics.time_stepping.rkl2_step`).
        SSP-RK3 instead shortens the step to forward Euler's limit for that
        spectral radius, 2/ρ (its own real-axis limit is about 2.51/ρ).
        """
        h = self.h
        vmax = float(np.max(np.abs(speeds.normal))) if len(speeds.normal) else 0.0
        amax = float(np.max(speeds.curvature)) if np.ndim(speeds.curvature) else float(speeds.curvature)
        speed = max(vmax + amax * kappa_max, MIN_SPEED)
        dt = self.params.cfl * h / speed
        if self.params.integrator == "ssp_rk3":
            if amax > 0:
                dt = min(dt, 2.0 / (amax * self.layout.spectral_radius(self._band) * self._curvature_gain))
            return dt, 3
        stages = 2
        if amax > 0:
            radius = amax * self.layout.spectral_radius(self._band) * self._curvature_gain
            dt, stages = rkl2_step(dt, 2.0 / radius)
        return dt, stages

    def _full_rate(self, phi: NDArray[np.floating], speeds: _StageSpeeds,
                   layer: tuple[NDArray[np.floating], NDArray[np.floating] | None] | None = None,
                   measure: bool = False) -> NDArray[np.floating]:
        """φ_t at every band node; edge nodes take the rate of the layer node nearest their closest front point."""
        b = self._band
        rate = self._rate(phi, speeds, layer, measure)
        full = np.empty_like(phi)
        full[b.near_nodes] = rate
        full[b.far_nodes] = rate[b.far_rate_at]
        full[b.edge_nodes] = rate[b.edge_rate_at]
        return full

    def _step(self, n: int, dt_max: float | None) -> None:
        for _ in range(n):
            with self._lock:  # a reader waits for at most one step
                self._one_step(dt_max)

    def _one_step(self, dt_max: float | None) -> None:
        rk3 = self.params.integrator == "ssp_rk3"
        if self.vanished:
            self._swap(steps=self.steps + 1)
            return
        t0 = _time.perf_counter()
        b = self._band
        phi0 = self._phi
        if self.steps % NEAR_EVERY == 0:
            self._pick_near()
        layer = self._layer_derivatives(phi0)
        speeds = self._speeds(phi0, *layer)
        self._last_kappa_max = 0.0
        r0 = self._full_rate(phi0, self._stage_speeds(speeds), layer, measure=True)
        kappa_max = self._last_kappa_max
        dt, stages = self._time_step(speeds, kappa_max)
        if dt_max is not None and dt_max < dt:
            dt = dt_max
            if not rk3 and np.any(np.asarray(speeds.curvature) != 0):
                radius = float(np.max(speeds.curvature)) * self.layout.spectral_radius(self._band) * self._curvature_gain
                stages = rkl2_stages(dt, 2.0 / radius)
        factor = speeds.relax_factor(dt)
        if factor is not None:
            # every term of the rate scales with the (positive) factor that relaxes
            # the speeds, so the first rate follows without a second evaluation
            r0[b.active] *= factor[b.source]
            r0[b.edge_nodes] *= factor[b.edge_source]
        stage_speeds = self._stage_speeds(speeds.relaxed(dt))
        if rk3:
            new = ssp_rk3(phi0, lambda p: self._full_rate(p, stage_speeds), dt, first_rate=r0)
        else:
            new = rkl2(phi0, lambda p: self._full_rate(p, stage_speeds), dt, stages, first_rate=r0)
        # RKL2 combines stages with some negative weights, so hold pins and
        # barriers on the result, not only on the rates.
        if np.any(b.frozen):
            new[b.frozen] = phi0[b.frozen]
        if np.any(b.barrier):
            new[b.barrier] = np.maximum(new[b.barrier], phi0[b.barrier])
        self._swap(phi=new, time=self.time + dt, steps=self.steps + 1)
        self._coeffs = None
        self._record_motion()
        self.timings["evaluations"] = self.timings.get("evaluations", 0) + stages
        self._sync_inside()
        if np.min(new) >= 0.0 or np.max(new) < 0.0:  # no zero crossing left
            self._vanish()
        elif (self.steps % STATISTICS_EVERY == 0 or self._settling()) and self._layer_is_stale():
            self._refresh_layer()
        self.timings["step"] += _time.perf_counter() - t0
        if self._vanished:
            return
        needs = self._needs_rebuild()
        flattened = not needs and self.steps % STATISTICS_EVERY == 0 and self._has_flattened()
        if flattened:
            self._swap(flattenings=self.flattenings + 1)
        if needs or flattened:
            try:
                self.rebuild(reinitialise=True if flattened else None)
            except FrontVanished:
                self._vanish()

    def _settling(self) -> bool:
        """True while the outline moves less than SETTLING convergence tolerances over the window (near rest)."""
        monitor = self._motion_monitor()
        return monitor.displacement_mm < SETTLING * monitor.tolerance_mm

    def _pick_near(self) -> None:
        """Split the active nodes: those the layer's stencils can read evolve by their own derivatives.

        A node within the layer's width, one stencil reach and the motion of
        NEAR_EVERY steps (``cfl`` node spacings each) of the front evolves by
        the level-set equation; the others take the rate of their layer node,
        as the edge nodes do: with extension velocities a signed distance
        moves by its layer node's rate (D. Adalsteinsson, J. A. Sethian, "The
        fast construction of extension velocities in level set methods",
        J. Comput. Phys. 148 (1999) 2-22). Only the near nodes' values reach
        the outline within a step, so the far part of the band costs no
        derivatives (the local level-set update of D. Peng, B. Merriman,
        S. Osher, H. Zhao, M. Kang, "A PDE-based fast local level set
        method", J. Comput. Phys. 155 (1999) 410-438). The pick is part of
        the state, so a restored snapshot steps as the original did.
        """
        b = self._band
        width = ((LAYER_WIDTH + NEAR_EVERY * self.params.cfl) * self.layout.layer_width(b.indices, b.active)
                 + self.layout.reach_mm(b))
        close = np.abs(self._phi[b.active]) <= width
        close[b.layer] = True
        near = np.flatnonzero(close)
        self._swap(near=near)
        self._use_near(self._state.near)

    def _use_near(self, near: NDArray[np.int64]) -> None:
        """The band's arrays for the near nodes ``near`` (active positions) and the rates the others copy."""
        b = self._band
        at = np.full(len(b.active), -1, dtype=np.int64)
        at[near] = np.arange(len(near))
        far = np.flatnonzero(at < 0)
        b.near, b.near_nodes, b.near_source = near, b.active[near], b.source[near]
        b.far_nodes = b.active[far]
        b.far_rate_at = at[b.layer[b.source[far]]]
        b.edge_rate_at = at[b.layer[b.edge_source]]
        b.near_operators = None
        b.held = None

    def _vanish(self) -> None:
        """The zero set is gone: everything is inside or nothing is; stepping becomes a no-op.

        Not converged: there is no outline left to have come to rest (see :attr:`vanished`).
        """
        self._swap(inside=np.full(self.shape, bool(np.all(self._phi < 0))))
        self._reset_sums()
        self._swap(vanished=True, converged=False)

    def _record_motion(self) -> None:
        """Track the outline's motion (:mod:`engine.front.convergence`) after a step; set ``converged`` when it stopped."""
        monitor = self._motion_monitor()
        crossings = None
        if monitor.due(self.steps):
            b = self._band
            crossings = self._crossings(b.indices, self._phi, b.lookup)
        converged = monitor.update(self.steps, crossings)
        if crossings is None:
            self._swap(converged=converged)
        else:
            self._swap(converged=converged, motion=_motion_state(monitor))
        if self.converged and not self._rest_reinitialised and not self._vanished and (
                self._layer_drift(self._phi) > self._rebuild_drift + REINIT_DRIFT):
            # φ next to the outline is no longer a distance: its speeds were read at
            # the wrong closest points, and the resting place may be a false one (a
            # small structure rests short of its boundary); reinitialise and watch the
            # outline again (once: where φ cannot stay a distance, as in a strip two
            # nodes wide, the next rest counts)
            self._swap(rest_reinitialised=True)
            try:
                self.rebuild(reinitialise=True)
            except FrontVanished:
                self._vanish()
                return
            monitor.clear()
            self._swap(converged=False, motion=_motion_state(monitor))

    def _restart_convergence(self) -> None:
        """Forget the outline's recent motion (after an edit, pins or new settings)."""
        monitor = self._motion_monitor()
        monitor.clear()
        self._swap(rest_reinitialised=False, motion=_motion_state(monitor))

    def _motion_monitor(self) -> OutlineMotion:
        """The convergence monitor, made for the present settings (tolerance in mm, window in steps)."""
        tol = self.params.convergence_tol * float(np.min(self.features.spacing))
        if self._outline is None or (self._outline.tolerance_mm, self._outline.window) != (
                tol, self.params.convergence_window):
            self._outline = OutlineMotion(self.params.convergence_window, tol)
        return self._outline

    def _run(self, until_time: float | None, max_steps: int | None,
             progress: Callable[[int, float], None] | None) -> None:
        taken = 0
        while True:
            if max_steps is not None and taken >= max_steps:
                break
            if self.vanished:  # nothing left to move: the time simply passes
                if until_time is not None:
                    self._swap(time=max(self.time, float(until_time)))
                break
            if until_time is not None:
                remaining = until_time - self.time
                if remaining <= 1e-12:
                    break
                self._step(1, remaining)
            else:
                self._step(1, None)
            taken += 1
            if progress is not None:
                progress(self.steps, self.time)
            if until_time is None and self.converged:
                break


def _motion_state(monitor: OutlineMotion) -> tuple:
    """The monitor's checkpoints and last displacement as a state holds them (its arrays are never changed)."""
    return tuple(monitor.checkpoints) + (monitor.displacement_mm,)


@lru_cache(maxsize=4)
def _hessian_rows(dim: int) -> NDArray[np.int64]:
    """(d, d): the row of ∂_i∂_j in :meth:`Front._layer_derivatives`'s values (:func:`layer_labels` order)."""
    labels = layer_labels(dim)
    rows = np.empty((dim, dim), dtype=np.int64)
    for i in range(dim):
        for j in range(dim):
            rows[i, j] = labels.index(f"d{min(i, j)}{max(i, j)}")
    return rows


@dataclass(frozen=True)
class _StageSpeeds:
    """One step's speeds as every RKL2 stage uses them (extended from the layer to the active nodes)."""

    normal: NDArray[np.floating] | None  # V per active node (None: no normal motion)
    curvature: NDArray[np.floating] | float | None  # a per layer node or one value (None: no curvature motion)
    damping: NDArray[np.floating] | float  # a·γ per active node: the hyperviscosity weight
    frozen: NDArray[np.int64]  # active positions that are pinned
    barrier: NDArray[np.int64]  # active positions inside a barrier
