"""Speed models of the level-set front and their settings.

The front obeys φ_t = −V_adv |∇φ|_upwind + a κ |∇φ|, where V_adv is the
image-driven normal speed (drive · S, plus the edge attraction −∇g · n of
the edge model) and a ≥ 0 the curvature coefficient (Smoothness, times g for
the edge model). S is dimensionless and clamped to [−1, 1], so ``drive`` is a
speed in mm per unit time whatever the intensity scale. All quantities are
taken at the closest point of the front (extension velocities), so that
every level set in the band moves with the front and φ stays a signed
distance between reinitialisations.

Models
------
``region``
    Chan & Vese, "Active contours without edges", IEEE Trans. Image Process.
    10(2) (2001) 266-277, with λ_in = λ_out: S = [(I − c_out)² − (I − c_in)²]
    / (c_in − c_out)², which equals (2I − c_in − c_out) / (c_in − c_out) and
    does not depend on the intensity scale. With ``local_radius`` the means
    are taken in a Gaussian ball around each point (Lankton & Tannenbaum,
    "Localizing region-based active contours", IEEE Trans. Image Process.
    17(11) (2008) 2029-2039) for bias fields and cluttered surroundings.
    Multiplying by the edge stopping function g (``edge_weight``) makes the
    front slow down on edges even where the region contrast fades.
``edge``
    Geodesic active contours, Caselles, Kimmel & Sapiro, Int. J. Comput. Vis.
    22(1) (1997) 61-79: V = g (c − κ) − ∇g · n with c = drive.
``window``
    S = (ε − |I − T|) / ε for a window [low, high] (T its centre, ε its half
    width), as in Lefohn, Kniss, Hansen & Whitaker, IEEE TVCG 10(4) (2004)
    422-433: positive inside the window, negative outside.
``curvature``
    V = −κ (mean-curvature flow).
``constant``
    V = drive.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np
from numpy.typing import NDArray

from engine.validation.inputs import check_names

MODELS = ("region", "edge", "window", "curvature", "constant")
#: Time integrators of a front step (:mod:`engine.numerics.time_stepping`).
INTEGRATORS = ("rkl2", "ssp_rk3")


@dataclass(frozen=True)
class FrontParams:
    """Settings of a front (names as the window shows them, in snake case)."""

    model: str = "region"
    drive: float = 1.0
    smoothness: float | None = None  # mm; default depends on the model
    edge_pull: float = 3.0
    edge_sigma: float = 1.0  # mm
    edge_contrast: float | None = None  # intensity per mm; None = automatic
    edge_weight: float = 0.0  # region model: 0 = pure region term, 1 = fully gated by g
    window: tuple[float, float] | None = None  # (low, high) for the window model
    local_radius: float | None = None  # mm; region model with local statistics
    outline_averaging: float = 1.0  # mm; σ of the image speed's average along the outline (0 = none)
    band_width: float = 10.0  # band half-width in node spacings
    stencil_size: int | None = None  # default: 2M in 2-D (30), 1.6M in 3-D (56) for degree 4
    degree: int = 4
    phs: int = 5
    cfl: float = 0.25
    integrator: str = "rkl2"  # "rkl2": super time steps; "ssp_rk3": three-stage steps within every stability limit
    convergence_tol: float = 0.05  # largest outline displacement over the window, in pixel spacings
    convergence_window: int = 20  # steps

    def __post_init__(self) -> None:
        if self.model not in MODELS:
            raise ValueError(f"model must be one of {', '.join(MODELS)}; got {self.model!r}")
        for name in ("drive", "edge_pull", "edge_sigma", "band_width", "cfl", "convergence_tol"):
            value = getattr(self, name)
            if not np.isfinite(value):
                raise ValueError(f"{name} must be finite, got {value!r}")
        if self.smoothness is not None and (not np.isfinite(self.smoothness) or self.smoothness < 0):
            raise ValueError(f"smoothness must be >= 0, got {self.smoothness!r}")
        if self.edge_sigma < 0:
            raise ValueError(f"edge_sigma must be >= 0 mm, got {self.edge_sigma}")
        if self.edge_contrast is not None and not self.edge_contrast > 0:
            raise ValueError(f"edge_contrast must be > 0, got {self.edge_contrast}")
        if not 0.0 <= self.edge_weight <= 1.0:
            raise ValueError(f"edge_weight must be in [0, 1], got {self.edge_weight}")
        if self.window is not None:
            low, high = self.window
            if not (np.isfinite(low) and np.isfinite(high)) or low >= high:
                raise ValueError(f"window must be (low, high) with low < high, got {self.window!r}")
        if not (np.isfinite(self.outline_averaging) and self.outline_averaging >= 0):
            raise ValueError(f"outline_averaging must be >= 0 mm, got {self.outline_averaging!r}")
        if self.local_radius is not None and not self.local_radius > 0:
            raise ValueError(f"local_radius must be > 0 mm, got {self.local_radius}")
        if self.band_width < 8:
            raise ValueError(f"band_width must be >= 8 node spacings, got {self.band_width}")
        if not 0 < self.cfl <= 0.9:
            raise ValueError(f"cfl must be in (0, 0.9], got {self.cfl}")
        if self.integrator not in INTEGRATORS:
            raise ValueError(f"integrator must be one of {', '.join(INTEGRATORS)}; got {self.integrator!r}")
        if self.stencil_size is not None and not 10 <= self.stencil_size <= 200:
            raise ValueError(f"stencil_size must be between 10 and 200, got {self.stencil_size}")
        if self.degree not in (2, 3, 4, 5, 6):
            raise ValueError(f"degree must be 2 to 6, got {self.degree}")
        if self.phs not in (3, 5, 7, 9) or self.degree < (self.phs - 1) // 2:
            raise ValueError(f"phs must be 3, 5, 7 or 9 with degree >= (phs - 1)/2, got phs={self.phs}")
        if self.convergence_window < 2:
            raise ValueError(f"convergence_window must be >= 2, got {self.convergence_window}")

    def stencil_size_for(self, dim: int) -> int:
        """Stencil size actually used in ``dim`` dimensions.

        The setting, or by default 2M in 2-D and 1.6M in 3-D (M monomials):
        the symmetric 3-D lattice patterns jump from 57 to 81 nodes, and 57
        already resolves degree 4 with a well-behaved curvature operator.
        """
        from engine.numerics.polynomials import monomial_count

        if self.stencil_size is not None:
            return int(self.stencil_size)
        factor = 2.0 if dim == 2 else 1.6
        return int(round(factor * monomial_count(dim, self.degree)))

    @property
    def curvature_weight(self) -> float:
        """Smoothness actually used: the given value or the model's default."""
        if self.smoothness is not None:
            return float(self.smoothness)
        return {"curvature": 1.0, "constant": 0.0, "region": 1.0}.get(self.model, 0.5)

    def updated(self, **changes: object) -> "FrontParams":
        """A copy with ``changes`` applied (unknown names raise ``ValueError``)."""
        check_names(changes, {f.name for f in fields(self)}, "a front")
        if "window" in changes and changes["window"] is not None:
            changes["window"] = tuple(float(v) for v in changes["window"])  # type: ignore[union-attr]
        return replace(self, **changes)

    def as_dict(self) -> dict:
        """Plain values for provenance records."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["smoothness"] = self.curvature_weight
        if self.window is not None:
            out["window"] = list(self.window)
        return out


@dataclass(frozen=True)
class NodeSpeeds:
    """Speed terms at the nodes next to the front."""

    normal: NDArray[np.floating]  # V_adv (mm per unit time)
    curvature: NDArray[np.floating] | float  # coefficient a of κ|∇φ| (mm² per unit time)
    slope: NDArray[np.floating] | None = None  # ∂V_adv/∂n along the outward normal (per unit time)

    def relaxed(self, dt: float) -> "NodeSpeeds":
        """Normal speeds for one explicit step of length ``dt``, the restoring part linearly implicit.

        Where V falls along the outward normal (slope s < 0) the front is
        pulled toward the zero of V; an explicit step overshoots it once
        dt·|s| > 1 and oscillates about it once dt·|s| > 2 (a steep image
        speed next to a low-contrast boundary). Linearising V about the
        present position and stepping implicitly (backward Euler for
        x' = V(x), i.e. a Rosenbrock step: Hairer & Wanner, "Solving Ordinary
        Differential Equations II", Springer 1996, §IV.7) divides the
        front's whole normal velocity, V and the curvature term alike, by
        1 + dt |s|: unchanged where V is flat, never overshooting where it is
        steep, and the same resting place V = a κ.
        """
        factor = self.relax_factor(dt)
        if factor is None:
            return self
        return replace(self, normal=self.normal * factor, curvature=self.curvature * factor)

    def relax_factor(self, dt: float) -> NDArray[np.floating] | None:
        """The factor 1 / (1 + dt·max(−slope, 0)) of :meth:`relaxed` (None without a slope)."""
        if self.slope is None:
            return None
        return 1.0 / (1.0 + dt * np.maximum(-self.slope, 0.0))


def clamp_unit(x: NDArray[np.floating]) -> NDArray[np.floating]:
    return np.clip(x, -1.0, 1.0)


def region_speed(intensity: NDArray[np.floating], c_in: NDArray[np.floating] | float,
                 c_out: NDArray[np.floating] | float) -> NDArray[np.floating]:
    """Scale-free Chan–Vese speed (2I − c_in − c_out)/(c_in − c_out), clamped to [−1, 1]."""
    diff = np.asarray(c_in - c_out, dtype=float)
    safe = np.where(np.abs(diff) > 1e-12, diff, 1.0)
    s = (2.0 * intensity - c_in - c_out) / safe
    return clamp_unit(np.where(np.abs(diff) > 1e-12, s, 0.0))


def window_speed(intensity: NDArray[np.floating], low: float, high: float) -> NDArray[np.floating]:
    """ε − |I − T| normalised by ε and clamped (Lefohn et al. 2004)."""
    centre = 0.5 * (low + high)
    half = 0.5 * (high - low)
    return clamp_unit((half - np.abs(intensity - centre)) / half)


def node_speeds(
    params: FrontParams,
    *,
    intensity: NDArray[np.floating] | None,
    edge: NDArray[np.floating] | None,
    edge_gradient: NDArray[np.floating] | None,
    normal: NDArray[np.floating] | None,
    c_in: NDArray[np.floating] | float,
    c_out: NDArray[np.floating] | float,
    sigma_mm: float,
    count: int,
) -> NodeSpeeds:
    """Speed terms of ``params.model`` at ``count`` nodes from image features at their closest points.

    ``normal`` is the unit outward normal (needed by the edge model's
    attraction term −∇g · n). For the region model ``c_out`` may hold two
    rows, the local outside means on the darker and the brighter side of the
    inside (the second NaN where that side is absent): the speed is then the
    smaller of the two sides' speeds, so the structure is held by whatever
    borders it on either side (region competition among more than two
    tissues; Zhu & Yuille, IEEE Trans. PAMI 18(9) (1996) 884-900).
    """
    a = params.curvature_weight
    model = params.model
    if model == "constant":
        return NodeSpeeds(np.full(count, params.drive), a)
    if model == "curvature":
        return NodeSpeeds(np.zeros(count), a)
    if model == "window":
        low, high = params.window  # type: ignore[misc]
        return NodeSpeeds(params.drive * window_speed(intensity, low, high), a)
    if model == "region":
        if np.ndim(c_out) == 2:
            # local outside means on both sides of the inside (second row NaN where absent)
            s = region_speed(intensity, c_in, c_out[0])
            other = np.isfinite(c_out[1])
            if np.any(other):
                s = np.where(other, np.minimum(s, region_speed(intensity, c_in, np.where(other, c_out[1], c_out[0]))), s)
        else:
            s = region_speed(intensity, c_in, c_out)
        if params.edge_weight > 0:
            s = s * (1.0 - params.edge_weight + params.edge_weight * edge)
        return NodeSpeeds(params.drive * s, a)
    # edge: geodesic active contour, V = g (c − κ) − ∇g · n
    pull = params.edge_pull * max(sigma_mm, 1e-6)
    attraction = -pull * np.einsum("ni,ni->n", edge_gradient, normal)
    return NodeSpeeds(params.drive * edge + attraction, a * edge)


def needed_features(model: str, *, edge_weight: float = 0.0) -> tuple[str, ...]:
    """Image features each model samples at the closest points (the region model needs edges when gated)."""
    region = ("smoothed", "edge") if edge_weight > 0 else ("smoothed",)
    return {"region": region, "window": ("smoothed",), "edge": ("edge", "edge_gradient"),
            "curvature": (), "constant": ()}[model]


#: Keywords that name a setting of :class:`FrontParams` (besides ``model``, which every caller takes itself).
SETTING_NAMES = frozenset(f.name for f in fields(FrontParams)) - {"model"}
