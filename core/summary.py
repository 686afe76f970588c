"""The typed summary of one measured shot: what ``ShotResult.summary()`` writes as JSON, read
back into the records of ``core.results``.

The JSON (``wakeline pair --json``, the session's journal and snapshot) stays the contract;
``ShotSummary`` is how code reads it: ``summary.flight.speed_m_s`` instead of
``summary.get("flight", {}).get("speed_m_s")``. Every stored summary carries its version (beside
the JSON, see ``core.store``); ``from_dict`` reads each version it knows, so an older one is
migrated on reading. Keys a version does not know (added by a newer measurement) are kept in
``to_dict()`` and otherwise ignored.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace

from core import WakelineError
from core.geometry import SIDES
from core.results import BallFit, Flight, SeparationResult, SideProposal
from core.wake import NO_CLEAR_DIFFERENCE

#: Version of the summary layout written now; ``from_dict`` reads this and every older one.
SUMMARY_VERSION = 1
#: The wake state of a shot without both proposals.
UNDETERMINED = "undetermined"


@dataclass(frozen=True)
class VectorCounts:
    """How many vectors the last pass gave, and on which grid."""

    count: int = 0
    valid: int = 0
    replaced: int = 0
    masked: int = 0
    window_px: int | None = None
    spacing_px: float | None = None
    valid_near_ball: int | None = None  # valid vectors within two grid spacings of the outline


@dataclass(frozen=True)
class ShotSummary:
    """One shot's scalars, typed. ``separation`` is always there (sides without a proposal
    have ``angle_deg`` None and a reason)."""

    separation: SeparationResult
    ball_a: BallFit | None = None  # circle in frame A
    ball_b: BallFit | None = None
    flight: Flight | None = None
    scale_mm_per_px: float | None = None  # as used (given, or derived from the ball)
    dt_s: float | None = None
    vectors: VectorCounts = field(default_factory=VectorCounts)
    warnings: tuple[str, ...] = ()
    settings: dict = field(default_factory=dict)  # ShotSettings.to_dict() of the run
    reynolds: float | None = None  # U D / nu of the air past the ball (core.air)
    regime: str = ""  # where that lies against the smooth sphere's drag crisis
    ball_warnings: tuple[str, ...] = ()  # those of ``warnings`` the ball and flight stages gave
    data: dict = field(default_factory=dict, repr=False, compare=False)  # the JSON as read
    version: int = field(default=SUMMARY_VERSION, compare=False)  # layout of ``data``

    @classmethod
    def from_dict(cls, data: dict, version: int = SUMMARY_VERSION) -> ShotSummary:
        """Read a stored or fresh summary of layout ``version``.

        Raises
        ------
        core.WakelineError
            When ``version`` is newer than this wakeline reads.
        """
        loader = _LOADERS.get(int(version))
        if loader is None:
            raise WakelineError(f"shot summary version {version} is newer than this wakeline "
                                f"reads (up to {SUMMARY_VERSION}); update wakeline")
        return replace(loader(dict(data)), version=int(version))

    def to_dict(self) -> dict:
        """The JSON-ready summary, every key as read (including keys unknown here)."""
        return dict(self.data)

    def side(self, side: str) -> SideProposal:
        """The proposal on ``side`` ("upper" or "lower")."""
        if side not in SIDES:
            raise ValueError(f"side must be 'upper' or 'lower', not {side!r}")
        return getattr(self.separation, side)

    def proposed_deg(self, side: str) -> float | None:
        """Proposed separation angle on ``side``, deg, or None."""
        return self.side(side).angle_deg

    def uncertainty_deg(self, side: str) -> float | None:
        """Uncertainty of the proposal on ``side``, deg, or None."""
        return self.side(side).uncertainty_deg


def _known(cls, data: dict | None) -> dict:
    """The entries of ``data`` that are fields of the record ``cls`` (others are ignored)."""
    names = {f.name for f in fields(cls)}
    return {k: v for k, v in (data or {}).items() if k in names}


def _ball(data: dict | None) -> BallFit | None:
    if not data:
        return None
    values = _known(BallFit, data)
    values["center_px"] = tuple(values["center_px"])
    if values.get("residual_px") is None:
        values.pop("residual_px", None)  # stored None for NaN: the record's default
    return BallFit(**values)


def _flight(data: dict | None) -> Flight | None:
    if not data:
        return None
    values = _known(Flight, data)
    values["displacement_px"] = tuple(values["displacement_px"])
    return Flight(**values)


def _side(separation: dict, side: str) -> SideProposal:
    """One side's proposal; the flat ``<side>_deg`` and ``<side>_uncertainty_deg`` keys stand
    in for a missing side record."""
    flat = {"angle_deg": separation.get(f"{side}_deg"),
            "uncertainty_deg": separation.get(f"{side}_uncertainty_deg")}
    values = {**flat, **_known(SideProposal, separation.get(side))}
    values["reason"] = values.get("reason") or ""
    return SideProposal(**values)


def _separation(data: dict | None) -> SeparationResult:
    data = data or {}
    return SeparationResult(
        upper=_side(data, "upper"),
        lower=_side(data, "lower"),
        wake_deflection_deg=data.get("wake_deflection_deg"),
        wake_state=_wake_state(data.get("wake_state")),
        wake_deflection_uncertainty_deg=data.get("wake_deflection_uncertainty_deg"),
    )


def _wake_state(stored: str | None) -> str:
    """The stored wake state in today's words (older sessions wrote "symmetric" for
    ``NO_CLEAR_DIFFERENCE``)."""
    if stored == "symmetric":
        return NO_CLEAR_DIFFERENCE
    return stored or UNDETERMINED


def _reynolds(data: dict) -> dict:
    """The ``reynolds`` record (``value``, ``air_temp_c``, ``nu_m2_s``, ``regime``), or {}."""
    value = data.get("reynolds")
    return value if isinstance(value, dict) else {}


def _load_v1(data: dict) -> ShotSummary:
    ball = data.get("ball") or {}
    return ShotSummary(
        separation=_separation(data.get("separation")),
        ball_a=_ball(ball.get("frame_a")),
        ball_b=_ball(ball.get("frame_b")),
        flight=_flight(data.get("flight")),
        scale_mm_per_px=data.get("scale_mm_per_px"),
        dt_s=data.get("dt_s"),
        vectors=VectorCounts(**_known(VectorCounts, data.get("vectors"))),
        warnings=tuple(data.get("warnings") or ()),
        ball_warnings=tuple(ball.get("warnings") or ()),
        settings=dict(data.get("settings") or {}),
        reynolds=_reynolds(data).get("value"),
        regime=_reynolds(data).get("regime") or "",
        data=data,
    )


# A new layout adds its loader here; each returns the current record, which is the migration.
_LOADERS = {1: _load_v1}
