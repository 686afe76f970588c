"""A shot's settings and its result: the records the CLI, the batch workers, the store and the
window exchange (``core.shot`` measures them).

``ShotResult.summary()`` is the JSON ``pair --json`` writes, ``arrays()`` the fields the session
store keeps, and ``ShotResult.from_stored`` rebuilds a result from those two.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field, replace
from dataclasses import fields as dc_fields

import numpy as np

from core import WakelineError
from core.air import temperature_problem
from core.results import (
    BallFit,
    Flight,
    SeparationResult,
    SideProposal,
    VectorField,
    dataclass_dict,
    finite_or_none,
)
from core.settings import BACKGROUND_METHODS, PivPass, PivSettings, dt_problem, is_number, shown

#: Passes of the finer correlation around the ball (ball frame): it gives the stream beside the
#: layer and the wake; the layer itself is fitted to the particle images (core.separation).
FINE_PASSES = (
    PivPass(64, 0.5), PivPass(32, 0.5), PivPass(16, 0.5),
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
    # the analyst's circles (cx, cy, r) px in frames A and B: taken instead of finding the ball
    circle_a_px: tuple[float, float, float] | None = None
    circle_b_px: tuple[float, float, float] | None = None
    air_temp_c: float | None = None  # for the air's viscosity (Reynolds number); None: 20 deg C
    # the camera wrote the later exposure as frame A: the frames are taken the other way round
    frames_swapped: bool = False
    # image conditioning before correlation (core.conditioning)
    mask_glare: bool = True  # saturated regions larger than a particle image left out
    # min-max normalisation window in mean particle spacings (None: off; skipped on sparse
    # seeding, spacing above core.conditioning.SPARSE_SPACING_PX)
    normalise_spacings: float | None = 3.0
    # per-pixel "min" or "median" of the session's frames at the shot's camera position
    # subtracted before correlation (computed by core.batch), or None
    background: str | None = None
    piv: PivSettings = field(default_factory=PivSettings)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict, *, strict: bool = False) -> ShotSettings:
        """Settings from their JSON form.

        ``strict`` (settings coming in: ``--settings``, the session's processing settings being
        set) refuses a value of the wrong kind (``"false"`` for a switch, a number for the
        PIV's settings) rather than taking it at Python's word. Settings read back from a
        session are taken as they were stored, as the version that stored them took them: a
        result stays readable and its fingerprint stays the same.

        Raises
        ------
        WakelineError
            With ``strict``: "settings: <name> ..." naming the value and what it should be.
        """
        data = dict(data)
        piv = data.pop("piv", None)
        known = {f.name for f in dc_fields(cls)}
        values = {k: v for k, v in data.items() if k in known}
        if strict:
            for name, value in values.items():
                _check_setting(name, value)
            if piv is not None and not isinstance(piv, dict):
                raise WakelineError(f"settings: piv must be an object of PIV settings, not "
                                    f"{shown(piv)}")
        settings = cls(**values)
        if piv is not None:
            settings.piv = PivSettings.from_dict(piv, strict=strict)
        return settings

    def fingerprint(self) -> str:
        """Stable text of the settings: a shot is reprocessed when this changes.

        The PIV thread count is left out: it changes how fast, not what is measured; so are
        circles the analyst did not set and frames not swapped (shots processed before they
        could be set keep their fingerprint).
        """
        data = self.to_dict()
        data["piv"].pop("workers", None)
        if not data.get("frames_swapped"):  # shots measured before it could be set keep theirs
            data.pop("frames_swapped", None)
        for name in CIRCLE_SETTINGS:
            if data.get(name) is None:
                data.pop(name, None)
            else:
                data[name] = [float(v) for v in data[name]]
        return json.dumps(data, sort_keys=True)

    def measured_alike(self, other: ShotSettings) -> bool:
        """True when ``other`` differs from these settings at most in the ball's circles and
        the flight direction (what ``remeasure_ball`` redoes)."""
        def rest(settings: ShotSettings) -> str:
            return replace(settings, flight_deg=None, circle_a_px=None,
                           circle_b_px=None).fingerprint()

        return rest(self) == rest(other)


#: Settings that are the analyst's circles of the ball (``ShotSettings``).
CIRCLE_SETTINGS = ("circle_a_px", "circle_b_px")
#: The kinds of value each setting takes (besides None, which every one but the switches and
#: the PIV's takes): numbers, words, switches (true/false) and circles (three numbers).
_NUMBER_SETTINGS = ("dt_s", "scale_mm_per_px", "ball_diameter_mm", "flight_deg", "air_temp_c",
                    "normalise_spacings")
_WORD_SETTINGS = ("ball_type", "background")
_SWITCH_SETTINGS = ("find_ball", "mask_glare", "frames_swapped")


def _check_setting(name: str, value) -> None:
    """Refuse a setting's value of the wrong kind, or a temperature at or below absolute zero."""
    def refuse(kind: str):
        raise WakelineError(f"settings: {name} must be {kind}, not {shown(value)}")

    if name in _SWITCH_SETTINGS:
        if not isinstance(value, bool):
            refuse("true or false")
    elif value is None:
        return
    elif name in _NUMBER_SETTINGS:
        if not is_number(value):
            refuse("a finite number or null")
        if name == "air_temp_c" and (problem := temperature_problem(float(value))):
            raise WakelineError(f"settings: air_temp_c {problem}")
        if name == "dt_s" and float(value) > 0 and (problem := dt_problem(float(value))):
            raise WakelineError(f"settings: dt_s {problem}")
        if name == "normalise_spacings" and float(value) < 0:
            refuse("0 or more (0 or null: no normalisation)")
    elif name in _WORD_SETTINGS:
        if not isinstance(value, str):
            refuse("a word or null")
        if name == "background" and value not in BACKGROUND_METHODS:
            refuse(" or ".join(BACKGROUND_METHODS) + " or null")
    elif name in CIRCLE_SETTINGS and not (isinstance(value, (list, tuple)) and len(value) == 3
                                          and all(is_number(v) for v in value)):
        refuse("three numbers (centre x, y and radius, px) or null")


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
    valid_near_ball: int | None = None  # valid vectors within two grid spacings of the outline
    reynolds: float | None = None  # U D / nu with the air speed past the ball (core.air)
    fine_field: VectorField | None = None  # fine correlation near the ball, ball frame, image px
    ball_warnings: list[str] = field(default_factory=list)  # those of ``warnings`` on the ball
    # its vorticity (1/s, or per frame pair without dt): derived, not stored (fine_vorticity)
    fine_vorticity_1_s: np.ndarray | None = None
    stage_seconds: dict[str, float] = field(default_factory=dict)  # wall time per stage (not stored)

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
                "warnings": list(self.ball_warnings),
            },
            "flight": None if self.flight is None else dataclass_dict(self.flight),
            "separation": _separation_summary(sep),
            "scale_mm_per_px": finite_or_none(self.scale_mm_per_px),
            "reynolds": _reynolds_summary(self.reynolds, self.settings.air_temp_c),
            "dt_s": finite_or_none(self.settings.dt_s),
            "vectors": {**_vector_counts(self.field), "valid_near_ball": self.valid_near_ball,
                        "warnings": list(self.field.warnings)},
            "fine_vectors": None if self.fine_field is None else _vector_counts(self.fine_field),
            "settings": self.settings.to_dict(),
            "warnings": list(self.warnings + self.field.warnings),
        }

    def fine_vorticity(self) -> np.ndarray | None:
        """Vorticity of the fine field (as ``vorticity_1_s``), computed when first asked."""
        if self.fine_vorticity_1_s is None and self.fine_field is not None:
            self.fine_vorticity_1_s = fine_vorticity(self.fine_field, self.settings.dt_s)
        return self.fine_vorticity_1_s

    def arrays(self) -> dict[str, np.ndarray]:
        out = dict(self.field.arrays())
        for name in ("u_m_s", "v_m_s", "vorticity_1_s"):
            value = getattr(self, name)
            if value is not None:
                out[name] = value
        if self.fine_field is not None:
            out.update({FINE_PREFIX + k: v for k, v in self.fine_field.arrays().items()})
        return out

    @classmethod
    def from_stored(cls, summary: dict, arrays: dict[str, np.ndarray]) -> ShotResult:
        """The result from its stored summary (read by :class:`core.summary.ShotSummary`, the
        one reader of stored summaries) and arrays."""
        from core.summary import ShotSummary

        typed = ShotSummary.from_dict(summary)
        piv_warnings = list((summary.get("vectors") or {}).get("warnings") or [])
        vf = VectorField(
            **{name: np.asarray(arrays[name]) for name in VectorField.ARRAY_NAMES},
            window_px=typed.vectors.window_px,
            spacing_px=typed.vectors.spacing_px,
            warnings=piv_warnings,
        )
        return cls(
            field=vf,
            settings=ShotSettings.from_dict(typed.settings),
            ball_a=typed.ball_a,
            ball_b=typed.ball_b,
            flight=typed.flight,
            separation=None if summary.get("separation") is None else typed.separation,
            scale_mm_per_px=typed.scale_mm_per_px,
            u_m_s=arrays.get("u_m_s"),
            v_m_s=arrays.get("v_m_s"),
            vorticity_1_s=arrays.get("vorticity_1_s"),
            warnings=[w for w in typed.warnings if w not in piv_warnings],
            valid_near_ball=typed.vectors.valid_near_ball,
            reynolds=typed.reynolds,
            fine_field=_fine_from(summary, arrays),
            ball_warnings=list(typed.ball_warnings),
        )


def _reynolds_summary(reynolds: float | None, air_temp_c: float | None) -> dict:
    from core.air import DEFAULT_AIR_TEMP_C, kinematic_viscosity_m2_s, regime_note

    temp = DEFAULT_AIR_TEMP_C if air_temp_c is None else float(air_temp_c)
    return {
        "value": finite_or_none(reynolds),
        "air_temp_c": temp,
        "nu_m2_s": kinematic_viscosity_m2_s(temp),
        "regime": regime_note(reynolds),
    }


#: Stored arrays of the fine ball-frame field carry this prefix (``fine_dx_px``, ...).
FINE_PREFIX = "fine_"


def _fine_from(summary: dict, arrays: dict) -> VectorField | None:
    """The stored fine field, or None (shots processed before it was kept)."""
    if FINE_PREFIX + "x_px" not in arrays:
        return None
    fine = summary.get("fine_vectors") or {}
    return VectorField(
        **{name: np.asarray(arrays[FINE_PREFIX + name]) for name in VectorField.ARRAY_NAMES},
        window_px=fine.get("window_px", FINE_PASSES[-1].window_px),
        spacing_px=fine.get("spacing_px", FINE_PASSES[-1].window_px * 0.5),
    )


def fine_vorticity(fine: VectorField | None, dt_s: float | None) -> np.ndarray | None:
    """Vorticity of the fine field (the ball frame's uniform shift does not change it)."""
    from core.fields import vorticity_1_s

    if fine is None:
        return None
    return vorticity_1_s(fine, dt_s, usable=fine.valid | fine.replaced)


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
            "wake_deflection_deg": None, "wake_deflection_uncertainty_deg": None,
            "wake_state": "undetermined",
        }
    return {
        "upper_deg": finite_or_none(sep.upper.angle_deg),
        "lower_deg": finite_or_none(sep.lower.angle_deg),
        "upper_uncertainty_deg": finite_or_none(sep.upper.uncertainty_deg),
        "lower_uncertainty_deg": finite_or_none(sep.lower.uncertainty_deg),
        "upper": dataclass_dict(sep.upper),
        "lower": dataclass_dict(sep.lower),
        "wake_deflection_deg": finite_or_none(sep.wake_deflection_deg),
        "wake_deflection_uncertainty_deg": finite_or_none(sep.wake_deflection_uncertainty_deg),
        "wake_state": sep.wake_state,
    }
