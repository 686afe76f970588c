"""Shared test set-up: headless Qt, private user settings, a main-window factory, small sessions."""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("PYQTGRAPH_QT_LIB", "PySide6")

import gc

import numpy as np
import pytest


@pytest.fixture(autouse=True)
def _private_user_files(tmp_path_factory, monkeypatch):
    """Point QSettings, the log folder and XDG paths at a temp dir: never a real user's files."""
    from PySide6.QtCore import QSettings

    root = tmp_path_factory.mktemp("user")
    monkeypatch.setenv("XDG_CONFIG_HOME", str(root / "config"))
    monkeypatch.setenv("XDG_DATA_HOME", str(root / "data"))
    monkeypatch.setenv("WAKELINE_HOME", str(root / "wakeline"))
    QSettings.setDefaultFormat(QSettings.Format.IniFormat)
    for scope in (QSettings.Scope.UserScope, QSettings.Scope.SystemScope):
        QSettings.setPath(QSettings.Format.IniFormat, scope, str(root / "settings"))
    yield root


def _top_level_keys():
    from PySide6.QtWidgets import QApplication
    from shiboken6 import Shiboken

    return {Shiboken.getCppPointer(w)[0]: w for w in QApplication.topLevelWidgets()}


@pytest.fixture
def main_window(qtbot):
    """Factory of review windows (hidden unless a test shows one); closes them all afterwards
    and fails when a test left a top-level widget behind."""
    import pyqtgraph as pg
    from PySide6.QtCore import QCoreApplication, QEvent

    from app.qt.window import MainWindow

    pg.setConfigOptions(imageAxisOrder="row-major")
    before = set(_top_level_keys())
    windows = []

    def make(**kwargs):
        window = MainWindow(**kwargs)
        windows.append(window)
        return window

    yield make
    while windows:
        closing = windows.pop()
        closing.close()
        closing.deleteLater()
        del closing  # the wrapper keeps pyqtgraph's parentless menus alive
    for _ in range(3):
        QCoreApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)
        QCoreApplication.processEvents()
        gc.collect()
    leaked = [w for key, w in _top_level_keys().items() if key not in before]
    assert not leaked, f"top-level widgets left open: {[type(w).__name__ for w in leaked]}"


# -- small sessions made by the tests themselves ------------------------------------------------

FRAME_SHAPE = (192, 256)
SEAMS_DEG = (-10.0, 0.0, 15.0, 30.0, 45.0)


def synthetic_frames(index: int, shape=FRAME_SHAPE):
    """A small synthetic ball shot (frames and truth); the separation varies with ``index``."""
    from core.synth_shot import ball_shot

    return ball_shot(shape, radius_px=30.0, flight_deg=180.0, shift_px=5.0,
                     upper_deg=6.0 + 3 * index, lower_deg=-4.0 + 2 * index, density_ppp=0.05,
                     seed=100 + index)


def analytic_result(truth, settings, spacing_px: int = 8):
    """A ShotResult built from the synthetic shot's own flow (no PIV): known numbers to draw.

    Vectors are the exact displacement of the flow at each grid node; nodes inside the ball
    are masked; a few nodes are flagged "replaced" so that layer has something to draw.
    Vorticity is screen counter-clockwise positive (derived: w = du/dy_img - dv/dx_img).
    """
    from core.results import BallFit, Flight, SeparationResult, SideProposal, VectorField
    from core.shot import ShotResult
    from core.synth_shot import BallWakeFlow

    height, width = FRAME_SHAPE
    centre = tuple((a + b) / 2 for a, b in zip(truth.center_a_px, truth.center_b_px))
    flow = BallWakeFlow(centre, truth.radius_px, truth.displacement_px, truth.flight_deg,
                        truth.upper_deg, truth.lower_deg)
    xs = np.arange(spacing_px / 2 - 0.5, width, spacing_px)
    ys = np.arange(spacing_px / 2 - 0.5, height, spacing_px)
    x, y = np.meshgrid(xs, ys)
    dx, dy = flow(x, y)
    masked = np.hypot(x - centre[0], y - centre[1]) < truth.radius_px + 2
    dx, dy = np.where(masked, np.nan, dx), np.where(masked, np.nan, dy)
    replaced = np.zeros_like(masked)
    replaced[2, 3:6] = True
    to_m_s = truth.scale_mm_per_px * 1e-3 / truth.dt_s
    u, v = dx * to_m_s, dy * to_m_s
    h_m = spacing_px * truth.scale_mm_per_px * 1e-3
    du_dy = np.gradient(u, h_m, axis=0)
    dv_dx = np.gradient(v, h_m, axis=1)
    field = VectorField(x_px=x, y_px=y, dx_px=dx, dy_px=dy, valid=~masked & ~replaced,
                        replaced=replaced, masked=masked,
                        peak_ratio=np.where(masked, np.nan, 3.0), window_px=2 * spacing_px,
                        spacing_px=float(spacing_px))
    sep = SeparationResult(
        upper=SideProposal(truth.upper_deg + 1.5, 2.0, 0.8),
        lower=SideProposal(truth.lower_deg - 1.0, 2.5, 0.7),
        wake_deflection_deg=0.0, wake_state="both sides separated",
    )
    return ShotResult(
        field=field, settings=settings,
        ball_a=BallFit(truth.center_a_px, truth.radius_px, 0.3),
        ball_b=BallFit(truth.center_b_px, truth.radius_px, 0.3),
        flight=Flight(truth.flight_deg, truth.speed_m_s, truth.displacement_px),
        separation=sep, scale_mm_per_px=truth.scale_mm_per_px,
        u_m_s=u, v_m_s=v, vorticity_1_s=du_dy - dv_dx,
    )


@pytest.fixture
def make_session(tmp_path):
    """Factory: a session file of ``n`` shots, processed (analytic results) or not.

    Returns the session path; the session is closed (the window opens it itself).
    """
    from core.images import write_frame
    from core.store import Session

    def make(n: int = 4, processed: bool = True, name: str = "review", prefix: str = "s") -> str:
        folder = tmp_path / f"{name}_frames"
        folder.mkdir()
        path = tmp_path / f"{name}.h5"
        session = Session.create(path, name=name)
        session.set_processing_settings(
            {"piv": {"passes": [{"window_px": 32, "overlap": 0.5}], "workers": 1}}
        )
        for index in range(n):
            frame_a, frame_b, truth = synthetic_frames(index)
            shot_id = f"{prefix}{index + 1:02d}"
            path_a, path_b = folder / f"{shot_id}_a.tif", folder / f"{shot_id}_b.tif"
            write_frame(path_a, frame_a)
            write_frame(path_b, frame_b)
            metadata = {"dt_s": truth.dt_s, "scale_mm_per_px": truth.scale_mm_per_px,
                        "ball_diameter_mm": truth.ball_diameter_mm,
                        "seam_deg": SEAMS_DEG[index % len(SEAMS_DEG)]}
            session.add_shot(shot_id, path_a, path_b, metadata)
            if processed:
                settings = session.settings_for(shot_id)
                session.save_result(shot_id, analytic_result(truth, settings))
        session.close()
        return str(path)

    return make


def answer_dialog(fill) -> None:
    """Answer the next modal dialog a test opens: ``fill(dialog)`` sets it and accepts or clicks
    (a blocking ``exec()`` returns then, as when the analyst answers)."""
    from PySide6.QtCore import QTimer
    from PySide6.QtWidgets import QApplication

    def act():
        dialog = QApplication.activeModalWidget()
        if dialog is None or not dialog.isVisible():  # not yet, or one being closed
            QTimer.singleShot(10, act)
            return
        fill(dialog)

    QTimer.singleShot(0, act)


def click_button(text: str):
    """A ``fill`` for ``answer_dialog`` that clicks the message box button showing ``text``."""
    def fill(box):
        [button] = [b for b in box.buttons() if b.text() == text]
        button.click()

    return fill
