"""One shot from frame pair to proposal: ball, masks, PIV, fields, separation.

This is the function the CLI, the batch workers and the window all call. ``ShotResult`` is the
record they exchange: ``summary()`` is the JSON contract of DESIGN.md, ``arrays()`` the fields the
session store keeps, and ``ShotResult.from_stored`` rebuilds it from those two.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field, fields as dc_fields

import numpy as np

from core.piv import PivSettings
from core.results import (
    BallFit,
    Flight,
    SeparationResult,
    SideProposal,
    VectorField,
    dataclass_dict,
    finite_or_none,
)


@dataclass
class ShotSettings:
    """Everything besides the frames that decides a shot's result."""

    dt_s: float | None = None
    scale_mm_per_px: float | None = None  # None: derived from the fitted ball and its diameter
    ball_diameter_mm: float | None = None
    ball_type: str | None = None  # rulebook nominal diameter when ball_diameter_mm is None
    find_ball: bool = True
    flight_deg: float | None = None  # override of the flight direction
    piv: PivSettings = field(default_factory=PivSettings)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> "ShotSettings":
        data = dict(data)
        piv = data.pop("piv", None)
        known = {f.name for f in dc_fields(cls)}
        settings = cls(**{k: v for k, v in data.items() if k in known})
        if piv is not None:
            settings.piv = PivSettings.from_dict(piv)
        return settings

    def fingerprint(self) -> str:
        """Stable text of the settings: a shot is reprocessed when this changes."""
        return json.dumps(self.to_dict(), sort_keys=True)


@dataclass
class ShotResult:
    field: VectorField
    settings: ShotSettings
    ball_a: BallFit | None = None
    ball_b: BallFit | None = None
    flight: Flight | None = None
    separation: SeparationResult | None = None
    scale_mm_per_px: float | None = None  # as used (given or derived)
    u_m_s: np.ndarray | None = None  # (M, N) lab frame, x component (image x)
    v_m_s: np.ndarray | None = None  # (M, N) lab frame, y component (image y, downward)
    vorticity_1_s: np.ndarray | None = None  # (M, N), counter-clockwise positive as seen on screen
    warnings: list[str] = field(default_factory=list)

    def summary(self) -> dict:
        """JSON-ready record (the ``wakeline pair --json`` contract)."""
        sep = self.separation
        return {
            "ball": None
            if self.ball_a is None
            else {
                "center_px": [finite_or_none(c) for c in self.ball_a.center_px],
                "radius_px": finite_or_none(self.ball_a.radius_px),
                "frame_a": dataclass_dict(self.ball_a),
                "frame_b": None if self.ball_b is None else dataclass_dict(self.ball_b),
            },
            "flight": None if self.flight is None else dataclass_dict(self.flight),
            "separation": _separation_summary(sep),
            "scale_mm_per_px": finite_or_none(self.scale_mm_per_px),
            "dt_s": finite_or_none(self.settings.dt_s),
            "vectors": _vector_counts(self.field),
            "settings": self.settings.to_dict(),
            "warnings": list(self.warnings + self.field.warnings),
        }

    def arrays(self) -> dict[str, np.ndarray]:
        out = dict(self.field.arrays())
        for name in ("u_m_s", "v_m_s", "vorticity_1_s"):
            value = getattr(self, name)
            if value is not None:
                out[name] = value
        return out

    @classmethod
    def from_stored(cls, summary: dict, arrays: dict[str, np.ndarray]) -> "ShotResult":
        vf = VectorField(
            **{name: np.asarray(arrays[name]) for name in VectorField.ARRAY_NAMES},
            window_px=summary["vectors"]["window_px"],
            spacing_px=summary["vectors"]["spacing_px"],
        )
        ball = summary.get("ball")
        sep = summary.get("separation")
        return cls(
            field=vf,
            settings=ShotSettings.from_dict(summary["settings"]),
            ball_a=_ball_from(ball and ball.get("frame_a")),
            ball_b=_ball_from(ball and ball.get("frame_b")),
            flight=None if summary.get("flight") is None else _flight_from(summary["flight"]),
            separation=None if sep is None else _separation_from(sep),
            scale_mm_per_px=summary.get("scale_mm_per_px"),
            u_m_s=arrays.get("u_m_s"),
            v_m_s=arrays.get("v_m_s"),
            vorticity_1_s=arrays.get("vorticity_1_s"),
            warnings=list(summary.get("warnings", [])),
        )


def _vector_counts(vf: VectorField) -> dict:
    return {
        "count": int(vf.valid.size),
        "valid": int(np.count_nonzero(vf.valid)),
        "replaced": int(np.count_nonzero(vf.replaced)),
        "masked": int(np.count_nonzero(vf.masked)),
        "window_px": int(vf.window_px),
        "spacing_px": float(vf.spacing_px),
    }


def _separation_summary(sep: SeparationResult | None) -> dict:
    if sep is None:
        empty = dataclass_dict(SideProposal(None, reason="no ball"))
        return {
            "upper_deg": None, "lower_deg": None, "upper": empty, "lower": empty,
            "wake_deflection_deg": None, "wake_state": "undetermined",
        }
    return {
        "upper_deg": finite_or_none(sep.upper.angle_deg),
        "lower_deg": finite_or_none(sep.lower.angle_deg),
        "upper_uncertainty_deg": finite_or_none(sep.upper.uncertainty_deg),
        "lower_uncertainty_deg": finite_or_none(sep.lower.uncertainty_deg),
        "upper": dataclass_dict(sep.upper),
        "lower": dataclass_dict(sep.lower),
        "wake_deflection_deg": finite_or_none(sep.wake_deflection_deg),
        "wake_state": sep.wake_state,
    }


def _ball_from(d: dict | None) -> BallFit | None:
    if not d:
        return None
    return BallFit(
        center_px=tuple(d["center_px"]),
        radius_px=d["radius_px"],
        residual_px=d.get("residual_px") if d.get("residual_px") is not None else float("nan"),
        cut_by_edge=bool(d.get("cut_by_edge", False)),
    )


def _flight_from(d: dict) -> Flight:
    return Flight(
        direction_deg=d["direction_deg"],
        speed_m_s=d.get("speed_m_s"),
        displacement_px=tuple(d["displacement_px"]),
        source=d.get("source", "ball displacement"),
    )


def _side_from(d: dict) -> SideProposal:
    return SideProposal(
        angle_deg=d.get("angle_deg"),
        uncertainty_deg=d.get("uncertainty_deg"),
        quality=d.get("quality"),
        reason=d.get("reason", ""),
    )


def _separation_from(d: dict) -> SeparationResult:
    return SeparationResult(
        upper=_side_from(d["upper"]),
        lower=_side_from(d["lower"]),
        wake_deflection_deg=d.get("wake_deflection_deg"),
        wake_state=d.get("wake_state", "undetermined"),
    )


def measure_shot(frame_a: np.ndarray, frame_b: np.ndarray, settings: ShotSettings) -> ShotResult:
    """Measure one shot: ball (unless ``settings.find_ball`` is False), PIV, fields, separation.

    Parameters
    ----------
    frame_a, frame_b : (H, W) ndarray
        The frame pair, same shape.
    settings : ShotSettings

    Raises
    ------
    core.WakelineError
        When the shot cannot be measured (e.g. no ball found where one was asked for).
    """
    from core.piv import correlate_pair

    # The ball stages (core.ball, core.fields, core.separation) extend this pipeline.
    vf = correlate_pair(frame_a, frame_b, settings=settings.piv)
    return ShotResult(field=vf, settings=settings, scale_mm_per_px=settings.scale_mm_per_px)
