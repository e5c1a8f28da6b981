"""Upper limits of the settings whose cost grows without bound: what an image can hold.

Some settings are only checked for sign by :class:`engine.front.speeds.FrontParams`
because their useful range depends on the image:

- ``outline_averaging`` (σ along the outline, mm): the average is k steps of
  a random walk with k ≈ (σ / node spacing)², repeated at every step of the
  front, so its cost grows with σ². Beyond the radius of the largest circle
  the image holds (half its smaller side) the average spans the whole of any
  round outline in it — a circle of radius R keeps exp(−m²σ²/(2R²)) of its
  mode m, under 0.61 of mode 1 at σ = R — so that is the limit.
- ``edge_sigma`` (σ of the edge map's Gaussian, mm) and ``local_radius``
  (σ of the region model's local means, mm): beyond half the image's smaller
  side the Gaussian spreads over the whole image, while the filter's cost
  keeps growing with σ.
- pixel spacing: the lattice steps by the finest axis in time while its band
  spans ``band_width`` steps of the coarsest, so steps grow with the ratio
  of the two, and convergence, measured in steps of the finest axis, is
  reached ever later (the outline keeps stepping back and forth along it).
  Ratios above :data:`MAX_ANISOTROPY` are refused.

References
----------
Chung, F. R. K., *Spectral Graph Theory*, CBMS 92, AMS (1997), ch. 1 (the
heat kernel a random walk approximates).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

__all__ = ["MAX_ANISOTROPY", "SettingLimitError", "largest_sigma_mm", "check_limits"]

#: Largest ratio of the coarsest to the finest pixel spacing the front handles: beyond it a
#: front takes minutes and does not come to rest.
MAX_ANISOTROPY = 3.0


class SettingLimitError(ValueError):
    """A setting is beyond what the image can hold.

    Attributes
    ----------
    name : str
        The setting (``outline_averaging``, ``edge_sigma``, ``local_radius`` or ``spacing``).
    value : object
        The value given.
    limit : float
        The largest value allowed for this image.
    reason : str
        Why, in plain words (without the setting's name).
    """

    def __init__(self, name: str, value: object, limit: float, reason: str) -> None:
        self.name = name
        self.value = value
        self.limit = limit
        self.reason = reason
        super().__init__(f"{name} {value!r}: {reason}")


def largest_sigma_mm(shape: Sequence[int], spacing: Sequence[float]) -> float:
    """Half the image's smaller side in mm: the largest σ of ``outline_averaging``, ``edge_sigma``, ``local_radius``."""
    extent = np.asarray(shape, dtype=float) * np.asarray(spacing, dtype=float)
    return 0.5 * float(np.min(extent))


def check_limits(shape: Sequence[int], spacing: Sequence[float], params: Mapping[str, object]) -> None:
    """Refuse settings beyond what an image of ``shape`` and ``spacing`` (mm) can hold.

    Raises
    ------
    SettingLimitError
        Naming the setting, the value and the limit.
    """
    sp = np.asarray(spacing, dtype=float)
    ratio = float(np.max(sp) / np.min(sp))
    if ratio > MAX_ANISOTROPY:
        values = " x ".join(f"{s:g}" for s in sp)
        raise SettingLimitError(
            "spacing", tuple(float(s) for s in sp), MAX_ANISOTROPY,
            f"pixels {values} mm are {ratio:.3g} times longer along one axis than another; at most "
            f"{MAX_ANISOTROPY:g} is supported (the front would take minutes and not come to rest): "
            "resample the image to squarer pixels",
        )
    limit = largest_sigma_mm(shape, sp)
    for name, what in (("outline_averaging", "an average along the outline"), ("edge_sigma", "an edge scale"),
                       ("local_radius", "a local radius")):
        value = params.get(name)
        if value is None:
            continue
        try:
            number = float(value)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            continue  # FrontParams names a value of the wrong type
        if number > limit:
            raise SettingLimitError(
                name, value, limit,
                f"{what} of {number:g} mm is more than half the image's smaller side ({limit:.4g} mm), the "
                "most this image can hold",
            )
