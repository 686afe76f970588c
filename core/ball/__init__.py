"""The ball in each frame: outline circle, masks, flight direction and speed, scale from its size.

In a PIV frame the ball is a round region without particle images: the light sheet lights the
seeding around it but nothing lies inside it. Its surface may be darker than the seeded air,
about as bright, or brighter (a white ball in scattered light), with or without a lit rim where
the sheet grazes it, with a glint; it shadows the sheet on its far side, and the sheet may be
brighter in one part of the picture than another. So the ball is found by texture, not by
brightness, and each frame is fitted on its own (the ball moves several pixels between them):

1. coarse: the local variance over blocks of a few pixels is high in the seeded air and low on
   the ball (and in its shadow); the boundary of the low-variance region votes along its normal
   for circle centres (a Hough transform), and the best-supported circle whose inside is
   particle-free is kept. A shadow strip's straight edges support no circle;
2. fine: along rays from the centre, on narrowing bands, the outline comes from the best cue
   the frame offers: where the surface stands clear of the background between the particles,
   the steepest point of that step (and the lit rim's sharp outer flank where the rim is lit);
   else the lit rim alone; else the particle-free disc (the circle holding 2 % of the detected
   particle images, a quantile regression), which needs no contrast at all; beside a laser
   shadow it is fitted to the lit half and to the shadow's two edges behind the ball (tangent
   to the outline: they hold the ball's width), beside the picture's edge to the lit half
   only. A rim or step counts only where it runs smoothly along the outline. Rays through
   glare and glaring arcs are left out; a robust circle fit (RANSAC with
   :class:`skimage.measure.CircleModel`, then a Cauchy-loss least squares) drops rays spoilt
   by particles, the seam or a shadow, and its residuals, with a floor per cue, give the
   circle's covariance.

The flight comes from the ball's displacement between the frames: the difference of the two
circles, combined with a match of the ball's visible image (rim, seam, grain; the ball may
spin) by Gauss-Newton, each with its covariance. A held ball (tunnel) takes its direction from
the free stream.

Conventions: image coordinates (x = column right, y = row down, origin at the top-left pixel
centre); flight direction 0 deg = toward +x, 90 deg = toward the top of the picture.
"""

from core.ball.constants import (
    BALL_CIRCUMFERENCE_MM,
    DEFAULT_MASK_MARGIN_PX,
    NOMINAL_BALL_DIAMETER_MM,
    POOR_ARC_SHARE,
    POOR_CENTRE_SIGMA_PX,
)
from core.ball.flight import (
    BallMatch,
    air_direction,
    ball_displacement,
    flight_from_balls,
    flight_from_stream,
    match_ball_image,
)
from core.ball.outline import find_ball, find_balls
from core.ball.sizes import ball_mask, nominal_diameter_mm, scale_from_ball

__all__ = [
    "BALL_CIRCUMFERENCE_MM",
    "DEFAULT_MASK_MARGIN_PX",
    "NOMINAL_BALL_DIAMETER_MM",
    "POOR_ARC_SHARE",
    "POOR_CENTRE_SIGMA_PX",
    "BallMatch",
    "air_direction",
    "ball_displacement",
    "ball_mask",
    "find_ball",
    "find_balls",
    "flight_from_balls",
    "flight_from_stream",
    "match_ball_image",
    "nominal_diameter_mm",
    "scale_from_ball",
]
