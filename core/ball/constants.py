"""The ball finder's and the flight's constants: rulebook sizes, bands, floors, limits."""

from __future__ import annotations

import math

from core.rulebook import BALL_CIRCUMFERENCE_MM

#: Nominal diameters (mm): mid-range rulebook circumference / pi.
NOMINAL_BALL_DIAMETER_MM = {
    name: 0.5 * (lo + hi) / math.pi for name, (lo, hi) in BALL_CIRCUMFERENCE_MM.items()
}

#: Extra ring (px) around the fitted circle excluded from correlation: rim glare, reflections
#: and the sub-pixel fit error.
DEFAULT_MASK_MARGIN_PX = 3.0
#: Share of the outline's rays with a lit rim (or a clear surface step) from which that cue
#: alone gives the outline.
MIN_RIM_SHARE = 0.2
#: Share of the outline's rays below which a surface step seen in the wide first band may be
#: a step against the ball's laser shadow alone (set beforehand at half the outline, not tuned).
PARTIAL_STEP_SHARE = 0.5
#: A surface step counts where it exceeds this many times the surface's noise.
STEP_SNR = 6.0
#: Lift of the air beside the outline (share of the surface's step) that marks a glaring arc.
GLARE_LIFT = 0.2
#: Share of the particle images around the outline that the particle-free disc may hold (false
#: detections: stitches, noise); the fit is corrected for the share's own outward offset.
HOLE_SHARE = 0.02
#: Air around the ball whose darkest 60 deg of directions hold under this share of the
#: particle images 60 deg hold elsewhere (median) is shadowed that way (the ball's laser
#: shadow, the picture's edge): the particle-free disc is fitted to the particle images of
#: the other half and, where a strip as wide as the ball behind it holds under this share of
#: the density beside it (a laser shadow), to those along the strip's edges; otherwise to the
#: other half only, from this angle (deg) into it (chosen on the first synthetic family among
#: 0, 5, 15 and 25 deg: dark balls without a rim beside their shadow, the second family not
#: consulted).
SHADOW_SHARE = 0.3
SHADOW_MARGIN_DEG = 5.0
#: Particle images (about) used to fit the particle-free disc; the band outside is widened on
#: sparse seeding to hold them.
HOLE_POINTS = 250
#: Refits on random halves of the particle images behind the particle-free disc's covariance.
HOLE_BOOTSTRAP = 10
#: Half-widths (px) of the fine search bands after the particle-free disc.
FINE_BANDS_PX = (5.0, 3.0)
#: Depth (px) of the lit rim inside the outline: it moves with the centre but does not turn.
RIM_DEPTH_PX = 5.0
#: How far (px) particle images centred outside the outline reach into it (the e^-2 radius
#: of a 4 px image, and the circle's error).
SPILL_PX = 2.5
#: Prior standard deviation of the ball's in-plane turn between the frames (rad).
TURN_PRIOR_RAD = math.radians(2.0)
#: Standard uncertainty (px) added to each axis of the image match's displacement: the
#: outline's own light (rim, spilling particle images) is not quite rigid. Without a lit rim
#: the match rests on the surface's pattern, whose motion mixes the ball's with its spin:
#: on the physically built synthetic family such matches erred by up to 0.3-0.5 px, hence
#: the larger floor (the circles then weigh about as much).
MATCH_FLOOR_PX = 0.04
PATTERN_FLOOR_PX = 0.25
#: Correlation of the ball's pixels between the frames below which they hold no pattern.
MIN_MATCH_NCC = 0.1
#: Scale (px) of the surface's shading, taken away before the image match.
SHADING_PX = 3.0
#: Ball pixels matched between the frames at most (those with the steepest gradients).
MATCH_PIXELS = 8000
#: Systematic standard uncertainty (px) of the centre (each axis) and the radius per cue.
OUTLINE_FLOOR_PX = {
    "lit rim": (0.1, 0.15), "surface edge": (0.1, 0.25), "particle images": (0.1, 0.35),
}
#: Fit-quality limits behind the "poor fit" warning.
POOR_ARC_SHARE = 0.35
POOR_CENTRE_SIGMA_PX = 0.5
