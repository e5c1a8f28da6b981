"""Fixed numbers of the front's method, each with the reason for its value.

Settings a user may change live in :class:`engine.front.speeds.FrontParams`;
these are the ones the method itself fixes.
"""

#: Values standing in for φ beyond the band (in units of the band half-width).
FAR = 1.5
#: Floor of the front speed used for the time step (mm per unit time), so a
#: nearly still front still takes steps of bounded length.
MIN_SPEED = 0.25
#: Reinitialise the whole band at a rebuild when the 90th percentile of
#: ||∇φ| − 1| next to the front exceeds this, or after this many rebuilds
#: without one.
REINIT_DRIFT = 0.05
REINIT_EVERY = 10
#: Rebuild and reinitialise between band rebuilds once that percentile has
#: grown by more than this since the last rebuild (checked every
#: STATISTICS_EVERY steps): a small structure grown from a smaller seed may
#: never reach the band's edge, and φ inside it flattens where growth lags
#: at the centre, so only this check restores the distance there.
FLAT_DRIFT = 0.25
#: Outside pixels this close to the front (plus two smoothing scales) are
#: partial-volume rim and do not count toward the local outside mean.
RIM_PIXELS = 1.5
#: Steps between refreshes of the layer next to the front and of the region
#: model's local statistics.
STATISTICS_EVERY = 10
#: The layer is re-picked (every STATISTICS_EVERY steps) only once the front
#: has moved this many node spacings at some layer node since it was picked
#: (the layer, |φ| <= 1.2 spacings, still straddles the front), and at least
#: every LAYER_IDLE_STEPS steps.
LAYER_DRIFT = 0.25
LAYER_IDLE_STEPS = 100
#: Near rest (the outline moved less than this many convergence tolerances over
#: the convergence window) the layer's drift is checked at every step, so a
#: refresh comes as soon as it is due and each jump of what it reads is small.
SETTLING = 4.0
#: Steps between picks of the active nodes near the front, which evolve by
#: their own derivatives (the rest of the band takes its layer node's rate).
NEAR_EVERY = 5
#: Width of the ring of outside pixels, beyond the rim, of the local statistics.
RING_PIXELS = 3.0
#: A local outside mean on the other side of the inside mean than the global
#: outside mean counts only if it differs from the inside mean by at least
#: this fraction of the global contrast (besides three noise deviations). On
#: a noise-free image a ring that still lies mostly in the structure differs
#: from the inside mean by a trace, on that side once the inside mean has
#: taken in some partial-volume pixels; taken as the outside it would make
#: the whole uniform structure look like outside and turn the front back.
LOCAL_CONTRAST = 0.1
#: Share of the local ring (Gaussian weights) that the pixels beyond the noise on one side of the
#: inside mean must make up to count as a neighbouring tissue: a ring still in the structure has
#: 0.1 % of its pixels three noise deviations out on either side, and a smooth bias field a few per cent.
SIDE_SHARE = 0.25
#: Difference between the centred and the upwind |∇φ| beyond which a node is
#: taken to sit on a kink of φ, where curvature motion uses the upwind value.
KINK_GRADIENT = 0.1
#: Structures of smaller mean radius (mm; in 3-D twice this) get
#: proportionally less smoothness (region and window models), so curvature
#: motion does not shrink them.
SMALL_STRUCTURE = 8.0
#: Half-width of the layer of nodes next to the front, in node spacings.
LAYER_WIDTH = 1.2
#: Radius (mm) of the local outside statistics of the region model.
DEFAULT_LOCAL_RADIUS = 6.0
#: The region and window models' smoothness acts on κ − κ̄, κ̄ the front's curvature averaged
#: along the outline over this many times the image speed's averaging scale (``outline_averaging``;
#: :meth:`engine.front.layer_speeds.LayerSpeeds._smooth_shape_speed`). A wiggle of wavenumber k
#: keeps exp(−k²σ²/2) of the averaged image speed and exp(−2k²σ²) of κ̄: where κ̄ still holds half
#: of a wiggle (kσ = 0.59) the image speed keeps 84 % of its strength, so the smoothness is withheld
#: only from the shape the image fixes by itself. Measured on invented slices (contrast 1, noise
#: σ 0.05-0.125, 256² and 512²): the outline's RMS error on a boundary with lobes of orders 2-24 went
#: from 0.105 to 0.062 px (256²) and 0.073 to 0.058 px (512²), within 0.004 px on smooth noisy
#: boundaries. Wider averages (3, 4) leave more of the lobes' shift (0.070, 0.076 px at 256²) and
#: damp the noise's long wiggles more (fewer steps at SNR 2-3), but at 4 a small blob on pure noise
#: came to rest instead of drifting on.
SHAPE_AVERAGING = 2.0
#: The region model's smoothness acts on κ − κ̄ only where its two means differ by at least this many
#: noise deviations of the smoothed image (:meth:`engine.front.layer_speeds.LayerSpeeds._image_holds_shape`).
#: Measured: the SNR 2-3 family of invented slices reads 6.7-9.1, the other hazard families 34-188, a front
#: on Gaussian noise alone 0.8.
SHAPE_CONTRAST = 3.0
