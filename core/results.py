"""Result records shared by the measurement, the session store, the CLI and the window.

Conventions (also in README.md):
- image coordinates: x = column to the right, y = row downward, origin at the top-left pixel centre;
- flight direction: 0 deg = toward +x, 90 deg = toward the top of the picture (i.e. toward -y);
- separation angle: from the plane through the ball centre normal to the flight, in the image
  plane; 0 on that plane, positive rearward (downstream), negative ahead. Angle from the front
  stagnation point = separation angle + 90 deg.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np


@dataclass
class VectorField:
    """Displacement field of one frame pair on a regular grid of interrogation windows.

    All arrays are ``(M, N)``; ``x_px``/``y_px`` are window centres in image coordinates and
    ``dx_px``/``dy_px`` the displacement A->B at that position.
    """

    x_px: np.ndarray
    y_px: np.ndarray
    dx_px: np.ndarray
    dy_px: np.ndarray
    valid: np.ndarray  # bool: measured and passed validation
    replaced: np.ndarray  # bool: rejected by validation and replaced by interpolation
    masked: np.ndarray  # bool: window mostly masked; no vector (dx, dy are NaN)
    peak_ratio: np.ndarray  # primary over secondary correlation peak (NaN where masked)
    window_px: int = 32
    spacing_px: float = 16.0
    warnings: list[str] = field(default_factory=list)

    ARRAY_NAMES = ("x_px", "y_px", "dx_px", "dy_px", "valid", "replaced", "masked", "peak_ratio")

    def arrays(self) -> dict[str, np.ndarray]:
        return {name: getattr(self, name) for name in self.ARRAY_NAMES}


#: The one "not known" number of the records: read-back JSON (None) becomes this very object,
#: so a record compares equal to itself after a round trip (NaN is not equal to another NaN).
_NAN = float("nan")


def _number(value) -> float:
    return _NAN if value is None or math.isnan(value) else float(value)


#: ``BallFit.outline`` of a circle the analyst placed.
BY_ANALYST = "set by the analyst"
#: ``Flight.source`` of a direction given (the analyst's, or the manifest's ``flight_deg``).
GIVEN_FLIGHT = "override"


@dataclass
class BallFit:
    """Circle fitted to the ball in one frame (image coordinates, px).

    Built from stored JSON too: None (NaN written as JSON) and lists are taken back to the
    record's own values, so older sessions without the uncertainties still load.
    """

    center_px: tuple[float, float]
    radius_px: float
    residual_px: float = _NAN  # RMS distance of edge points from the circle
    cut_by_edge: bool = False
    # standard uncertainties (px) of the centre's x and y and of the radius, and the covariance
    # of (x, y, r) in px^2 (None: not known, e.g. a session stored before they were kept)
    center_sigma_px: tuple[float, float] = (_NAN, _NAN)
    radius_sigma_px: float = _NAN
    covariance_px2: tuple[tuple[float, float, float], ...] | None = None
    arc_share: float = _NAN  # share of the whole outline that carried the fit (0..1)
    outline: str = ""  # what gave the outline: "lit rim", "surface edge" or "particle images"

    def __post_init__(self):
        self.center_px = tuple(self.center_px)
        self.residual_px = _number(self.residual_px)
        self.center_sigma_px = tuple(_number(v) for v in (self.center_sigma_px or (None, None)))
        self.radius_sigma_px = _number(self.radius_sigma_px)
        self.arc_share = _number(self.arc_share)
        if self.covariance_px2 is not None:
            self.covariance_px2 = tuple(tuple(_number(v) for v in row)
                                        for row in self.covariance_px2)
        self.outline = self.outline or ""


@dataclass
class Flight:
    """Ball flight from its displacement between frames (or the free stream, or an override)."""

    direction_deg: float  # 0 = +x, 90 = toward the top of the picture
    speed_m_s: float | None  # None when dt or scale is unknown
    displacement_px: tuple[float, float]  # ball centre B - A, image coordinates
    source: str = "ball displacement"  # or "override", or "free stream (held ball)"
    # standard uncertainties (None: not known, e.g. a session stored before they were kept)
    direction_sigma_deg: float | None = None
    speed_sigma_m_s: float | None = None
    displacement_cov_px2: tuple[tuple[float, float], tuple[float, float]] | None = None
    # cross-check: the direction of the air moving with the ball (lab frame) or opposite to
    # the free stream (held ball), and its uncertainty including the wake's possible deflection
    air_direction_deg: float | None = None
    air_direction_sigma_deg: float | None = None

    def __post_init__(self):
        self.displacement_px = tuple(self.displacement_px)
        if self.displacement_cov_px2 is not None:
            self.displacement_cov_px2 = tuple(tuple(row) for row in self.displacement_cov_px2)


#: The version since which separation uncertainties are made as now (0.3: the budget's refits,
#: the extrapolation arc, ``core.separation.COVERAGE_K``; 0.3.5: the "layer form" entry, whose
#: absence left a fifth of the picks uncovered in one run set apart; 0.3.16: free layers that
#: spread slowly, still laminar behind separation, within the prior, whose picks were late
#: beyond their uncertainty on a third of such sides; 0.3.18: the angle's profile refitted to
#: convergence, whose truncated refits made the fit's entry jump with inputs that hardly
#: differ); results made before keep theirs until processed again, and count as not up to date
#: (``Session.needs_processing``).
UNCERTAINTY_SINCE = (0, 3, 18)


def uncertainty_outdated(software_version: str) -> bool:
    """Whether a result made by ``software_version`` ("0.2.0") has its uncertainty from an
    earlier method than this version's (``UNCERTAINTY_SINCE``; a missing part counts as 0);
    False when not known."""
    parts = software_version.split(".")[:3]
    try:
        made = tuple(int(part) for part in parts)
    except ValueError:
        return False
    if len(made) < 2:
        return False
    return made + (0,) * (3 - len(made)) < UNCERTAINTY_SINCE


@dataclass
class SideProposal:
    """Proposed separation on one side of the ball."""

    angle_deg: float | None  # None: no proposal (see reason)
    uncertainty_deg: float | None = None  # expanded uncertainty: see core.separation.COVERAGE
    quality: float | None = None  # 0..1, higher is better
    reason: str = ""  # why there is no proposal, or a remark on a weak one
    departure_deg: float | None = None  # fitted angle of the layer from the wall's tangent
    layer_px: float | None = None  # fitted vorticity thickness of the layer at separation
    budget: dict[str, float] | None = None  # standard uncertainties (deg) by source
    layer: dict[str, float] | None = None  # the fitted layer model (core.separation.layer_curves)


@dataclass
class SeparationResult:
    upper: SideProposal
    lower: SideProposal
    wake_deflection_deg: float | None = None  # wake centreline relative to the flight axis
    wake_state: str = "undetermined"
    # the deflection's expanded uncertainty (deg; core.wake.WAKE_COVERAGE_K standard ones)
    wake_deflection_uncertainty_deg: float | None = None


def finite_or_none(value):
    """Numbers for JSON: NaN and inf become None."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def json_ready(value):
    """Non-finite floats as None, tuples as lists, numpy scalars as Python ones: what a strict
    ``json.dumps`` takes (the one such cleaner: the results and the session store use it)."""
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return finite_or_none(value)
    return value


def dataclass_dict(obj) -> dict:
    """asdict, JSON ready (:func:`json_ready`)."""
    return json_ready(asdict(obj))
