"""Small shots and results for the session tests (imported as ``data.session_helpers``)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import tifffile

from core.results import Flight, SeparationResult, SideProposal, VectorField
from core.settings import PivPass, PivSettings
from core.shot_result import ShotResult, ShotSettings
from core.synth import particle_pair

FAST_PIV = PivSettings(passes=(PivPass(32, 0.5),), workers=1)
FRAME_SHAPE = (192, 256)  # (H, W) px
HEADER = "shot,dt_s,scale_mm_per_px,ball_diameter_mm,seam_deg,notes"


def shift_of(index: int) -> tuple[float, float]:
    """Uniform displacement (dx, dy) in px of the ``index``-th test shot."""
    return 1.5 + 0.5 * index, -1.0


def write_shot_folder(folder: Path, count: int = 3, extra_rows: tuple[str, ...] = ()) -> Path:
    """A folder of ``count`` frame pairs S0, S1, ... with uniform shifts and a shots.csv."""
    folder.mkdir(parents=True, exist_ok=True)
    rows = [HEADER]
    for i in range(count):
        write_pair(folder, f"S{i}", shift_of(i), seed=i)
        rows.append(f"S{i},2e-05,0.08,71.6,{10 * i},shot {i}")
    rows.extend(extra_rows)
    (folder / "shots.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    return folder


def write_pair(folder: Path, shot_id: str, shift_px: tuple[float, float], seed: int = 0) -> None:
    dx, dy = shift_px
    a, b = particle_pair(FRAME_SHAPE, lambda x, y: (np.full_like(x, dx), np.full_like(y, dy)),
                         seed=seed)
    tifffile.imwrite(folder / f"{shot_id}_a.tif", a.astype(np.uint16))
    tifffile.imwrite(folder / f"{shot_id}_b.tif", b.astype(np.uint16))


def fast_settings() -> dict:
    """Session processing settings for quick tests: one 32 px pass, no ball search."""
    return {"piv": FAST_PIV.to_dict(), "find_ball": False}


def fake_result(settings: ShotSettings, upper_deg: float | None = 5.0,
                lower_deg: float | None = -3.0, shape: tuple[int, int] = (6, 8)) -> ShotResult:
    """A result with known proposals and small arrays, made without measuring anything."""
    rows, cols = shape
    y_px, x_px = np.mgrid[0:rows, 0:cols] * 16.0 + 16.0
    flags = np.zeros(shape, bool)
    field = VectorField(
        x_px=x_px, y_px=y_px, dx_px=np.full(shape, 2.0), dy_px=np.linspace(-1, 1, rows * cols)
        .reshape(shape), valid=~flags, replaced=flags.copy(), masked=flags.copy(),
        peak_ratio=np.full(shape, 3.0), window_px=32, spacing_px=16.0,
    )
    separation = SeparationResult(
        upper=SideProposal(upper_deg, 1.5, 0.8, "" if upper_deg is not None else "no layer"),
        lower=SideProposal(lower_deg, 2.0, 0.7, "" if lower_deg is not None else "no layer"),
        wake_deflection_deg=4.0, wake_state="deflected down", wake_deflection_uncertainty_deg=1.2,
    )
    u_m_s = np.full(shape, 8.0)
    return ShotResult(
        field=field, settings=settings, flight=Flight(180.0, 30.0, (-8.0, 0.0)),
        separation=separation, scale_mm_per_px=0.08, u_m_s=u_m_s, v_m_s=u_m_s * 0.0,
        vorticity_1_s=np.arange(rows * cols, dtype=float).reshape(shape),
    )
