"""The shot canvas on its own: arrows, layers, the constrained marks and the cursor readout."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import analytic_result, synthetic_frames

from app.qt.canvas import CanvasShot, ShotCanvas
from app.qt.canvas_controls import VECTOR_GAP_PX
from app.qt.canvas_items import PROPOSAL_RADIUS, arrow_segments, mark_circle
from app.qt.canvas_pictures import plain_reading, smooth_upsample, vorticity_image
from app.review.colours import symmetric_limit
from app.review.scales import shot_limit
from core.geometry import angle_of_point, flight_unit, point_at_angle
from core.shot_result import ShotSettings

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")


@pytest.fixture(scope="module")
def shot_data():
    frame_a, frame_b, truth = synthetic_frames(1)
    settings = ShotSettings(dt_s=truth.dt_s, scale_mm_per_px=truth.scale_mm_per_px,
                            ball_diameter_mm=truth.ball_diameter_mm)
    return frame_a, frame_b, analytic_result(truth, settings)


@pytest.fixture
def canvas(qtbot, shot_data):
    frame_a, frame_b, result = shot_data
    widget = ShotCanvas()
    qtbot.addWidget(widget)
    widget.resize(900, 650)
    widget.show_shot(CanvasShot("t1", frame_a, frame_b, result,
                                proposed_deg={"upper": 10.5, "lower": -3.0},
                                final_deg={"upper": None, "lower": None}))
    return widget


def _points(item) -> np.ndarray:
    x, y = item.getData()
    return np.zeros((0, 2)) if x is None else np.column_stack([x, y])


def test_arrow_segments_match_the_drawn_shape():
    # derived: shaft tail->tip; head strokes of 0.3 length turned +-25 deg back from the tip
    xs, ys = arrow_segments(np.array([2.0]), np.array([5.0]), np.array([10.0]), np.array([0.0]))
    pts = np.column_stack([xs, ys])
    assert pts.shape == (6, 2)
    assert pts[0] == pytest.approx([2, 5]) and pts[1] == pytest.approx([12, 5])
    back, side = 3 * math.cos(math.radians(25)), 3 * math.sin(math.radians(25))
    heads = sorted([tuple(pts[3]), tuple(pts[5])], key=lambda p: p[1])
    assert heads[0] == pytest.approx((12 - back, 5 - side))
    assert heads[1] == pytest.approx((12 - back, 5 + side))
    assert pts[2] == pytest.approx([12, 5]) and pts[4] == pytest.approx([12, 5])


def test_vectors_are_one_item_per_kind_with_a_stride(canvas, shot_data):
    vf = shot_data[2].field
    good = ~vf.masked & ~vf.replaced
    assert len(_points(canvas.vectors)) == 6 * good.sum()
    assert len(_points(canvas.replaced)) == 6 * (vf.replaced & ~vf.masked).sum()
    assert len(canvas.masked.data) == vf.masked.sum()
    canvas.stride_box.setValue(2)
    assert len(_points(canvas.vectors)) == 6 * good[::2, ::2].sum()
    canvas.vectors_box.setChecked(False)
    assert len(_points(canvas.vectors)) == 0 and len(_points(canvas.replaced)) == 0


def _arrow_gap_on_screen(canvas) -> float:
    """The smallest distance (screen px) between the tails of neighbouring arrows in a row."""
    tails = _points(canvas.vectors)[0::6]
    xs = np.unique(np.round(tails[:, 0], 3))
    return float(np.diff(xs).min()) / canvas.view.viewPixelSize()[0]


def test_vectors_are_thinned_to_fit_the_zoom_until_a_step_is_chosen(canvas, qtbot):
    """At open the step keeps arrows apart on screen; zooming in draws more; a chosen step stays."""
    canvas.resize(420, 330)
    with qtbot.waitExposed(canvas):
        canvas.show()
    canvas.view.autoRange(padding=0.02)
    qtbot.wait(20)
    assert canvas.stride_box.value() == 0 and canvas.stride_box.text() == "auto"
    assert _arrow_gap_on_screen(canvas) >= VECTOR_GAP_PX
    shown = len(_points(canvas.vectors))
    (x0, x1), (y0, y1) = canvas.view.viewRange()
    canvas.view.setRange(xRange=(x0, x0 + (x1 - x0) / 4), yRange=(y0, y0 + (y1 - y0) / 4),
                         padding=0)
    qtbot.wait(20)
    spacing = canvas.shot.result.field.spacing_px
    assert _arrow_gap_on_screen(canvas) == pytest.approx(spacing / canvas.view.viewPixelSize()[0])
    assert len(_points(canvas.vectors)) > shown  # every vector now, far enough apart
    canvas.stride_box.setValue(3)
    canvas.view.autoRange(padding=0.02)
    qtbot.wait(20)
    assert canvas.layer_state()["vector_stride"] == 3
    assert _arrow_gap_on_screen(canvas) == pytest.approx(
        3 * spacing / canvas.view.viewPixelSize()[0])


def test_marks_are_held_on_the_ball_outline(canvas, shot_data):
    result = shot_data[2]
    centre, radius = mark_circle(result)  # the ball at mid-exposure, where the angles are fitted
    flight = result.flight.direction_deg
    handle = canvas.handle("upper")
    x, y = handle.pos().x(), handle.pos().y()
    assert angle_of_point(centre, flight, "upper", (x, y)) == pytest.approx(10.5)
    far = point_at_angle(centre, 4 * radius, flight, "upper", 33.0)
    handle.setPos(*far)
    px, py = handle.pos().x(), handle.pos().y()
    assert math.hypot(px - centre[0], py - centre[1]) == pytest.approx(radius)
    assert angle_of_point(centre, flight, "upper", (px, py)) == pytest.approx(33.0)


def test_final_angle_wins_and_the_proposal_stays_visible(canvas, shot_data):
    result = shot_data[2]
    canvas.update_marks({"upper": 10.5, "lower": -3.0}, {"upper": 20.0, "lower": -3.0})
    assert canvas.mark_angle("upper") == 20.0
    proposals = canvas.overlay.proposals.data
    assert len(proposals) == 1  # only where the final angle differs from the proposal
    centre, radius = mark_circle(result)
    expected = point_at_angle(centre, PROPOSAL_RADIUS * radius, result.flight.direction_deg,
                              "upper", 10.5)
    assert (proposals[0]["x"], proposals[0]["y"]) == pytest.approx(expected)
    assert canvas.overlay.labels["upper"].textItem.toPlainText() == "U +20.0°"


def test_flight_arrow_and_plane_normal_through_the_centre(canvas, shot_data):
    result = shot_data[2]
    (cx, cy), fx_fy = mark_circle(result)[0], flight_unit(result.flight.direction_deg)
    shaft = _points(canvas.overlay.flight)[:2]
    direction = (shaft[1] - shaft[0]) / np.linalg.norm(shaft[1] - shaft[0])
    assert direction == pytest.approx(fx_fy, abs=1e-9)
    plane = _points(canvas.overlay.plane)
    assert plane.mean(axis=0) == pytest.approx([cx, cy])
    assert np.dot(plane[1] - plane[0], fx_fy) == pytest.approx(0.0, abs=1e-9)


def test_cursor_readout_gives_position_velocity_and_vorticity(canvas, shot_data):
    result = shot_data[2]
    vf = result.field
    row, col = 3, 25
    assert not vf.masked[row, col]
    text = canvas.describe_point(float(vf.x_px[row, col]) + 1.0, float(vf.y_px[row, col]) - 1.0)
    text = plain_reading(text)  # readings keep their own spaces from breaking
    u, v_up = result.u_m_s[row, col], -result.v_m_s[row, col]
    assert f"u {u:+8.3f}" in text and f"v {v_up:+8.3f}" in text
    assert f"|V| {math.hypot(u, v_up):7.3f}" in text
    assert f"ω {result.vorticity_1_s[row, col]:+9.4g} 1/s" in text
    x_mm = (float(vf.x_px[row, col]) + 1.0) * result.scale_mm_per_px
    assert f"{x_mm:6.2f}" in text
    centre = result.ball_a.center_px
    assert "masked" in canvas.describe_point(*centre)
    assert canvas.describe_point(-500.0, -500.0).startswith("x")


def test_vorticity_scale_is_symmetric_and_adjustable(canvas, shot_data):
    w = shot_data[2].vorticity_1_s
    low, high = canvas.colour_bar.levels()
    assert low == -high
    # the 98th percentile of |w| rounded up to two significant figures (as the sheet's panel)
    assert symmetric_limit(w) <= high <= 1.1 * symmetric_limit(w)
    assert high == shot_limit(w)
    assert high / 10 ** (math.floor(math.log10(high)) - 1) == pytest.approx(
        round(high / 10 ** (math.floor(math.log10(high)) - 1)))
    canvas.fixed_box.setChecked(True)
    canvas.limit_box.setValue(250.0)
    assert canvas.colour_bar.levels() == (-250.0, 250.0)
    # over the picture, still air is see-through and strong vorticity nearly opaque
    rgba = vorticity_image(np.array([[0.0, 250.0, -1000.0, np.nan]]), 250.0, see_through=True)
    assert rgba[0, 0, 3] == 0 and rgba[0, 1, 3] > 200 and rgba[0, 2, 3] > 200
    assert rgba[0, 3, 3] == 0
    solid = vorticity_image(np.array([[0.0, np.nan]]), 250.0, see_through=False)
    assert solid[0, 0, 3] == 255 and solid[0, 1, 3] == 0


def test_angle_labels_reach_outward_and_never_cover_the_ball(canvas, shot_data, qtbot):
    # a label is a fixed size on screen: zoomed far out (a side-by-side view of a small
    # window) one centred beside the outline covered the ball and its marks
    result = shot_data[2]
    (cx, cy), radius = mark_circle(result)
    with qtbot.waitExposed(canvas):
        canvas.show()
    for span in (12.0, 40.0):  # the view spans this many ball radii
        canvas.view.setRange(xRange=(cx - span * radius / 2, cx + span * radius / 2),
                             yRange=(cy - span * radius / 2, cy + span * radius / 2),
                             padding=0)
        qtbot.wait(10)
        for side in ("upper", "lower"):
            label = canvas.overlay.labels[side]
            box = label.mapRectToView(label.boundingRect())
            nearest_x = min(max(cx, box.left()), box.right())
            nearest_y = min(max(cy, box.top()), box.bottom())
            assert math.hypot(nearest_x - cx, nearest_y - cy) >= 1.2 * radius, (span, side)


def test_side_by_side_shows_the_fields_in_a_linked_view(canvas, qtbot):
    with qtbot.waitExposed(canvas):
        canvas.show()
    canvas.side_box.setChecked(True)
    qtbot.wait(20)
    main, second = canvas.main, canvas.second
    assert second.vorticity.isVisible() and len(_points(second.vectors)) > 0
    assert not second.picture.isVisible()
    assert main.picture.isVisible() and not main.vorticity.isVisible()
    assert len(_points(main.vectors)) == 0
    canvas.view.setRange(xRange=(40, 120), yRange=(50, 110), padding=0)
    assert canvas.field_view.viewRange()[0] == pytest.approx(canvas.view.viewRange()[0])
    assert canvas.field_view.viewRange()[1] == pytest.approx(canvas.view.viewRange()[1])
    canvas.side_box.setChecked(False)
    assert main.vorticity.isVisible() and canvas.field_view.scene() is None


def test_leaving_side_by_side_brings_the_single_view_back(canvas, qtbot):
    """Side by side fits the shot to each half (the single view's range would leave it small
    between wide margins); leaving it shows the shot as before."""
    with qtbot.waitExposed(canvas):
        canvas.show()
    qtbot.wait(20)
    single = canvas.view.viewRange()
    canvas.side_box.setChecked(True)
    qtbot.wait(20)
    halves = canvas.view.viewRange()
    width = canvas.shot.frame_a.shape[1]
    assert halves[0][1] - halves[0][0] <= 1.1 * width  # the frame across the half's width
    assert abs((halves[1][1] - halves[1][0]) - (single[1][1] - single[1][0])) > 1.0
    canvas.side_box.setChecked(False)
    qtbot.wait(20)
    for back, before in zip(canvas.view.viewRange(), single):
        assert back == pytest.approx(before, abs=1.0)
    # on and off at once: the halves' fit, still to come, does not take the range back
    canvas.side_box.setChecked(True)
    canvas.side_box.setChecked(False)
    qtbot.wait(20)
    for back, before in zip(canvas.view.viewRange(), single):
        assert back == pytest.approx(before, abs=1.0)


def test_flicker_alternates_the_frames(canvas, shot_data):
    frame_a, frame_b, _ = shot_data
    canvas.picture_box.setCurrentText("flicker A/B")
    assert canvas._flicker.isActive()
    shown = [canvas.picture.image.copy()]
    canvas._on_flicker()
    shown.append(canvas.picture.image.copy())
    canvas._on_flicker()
    shown.append(canvas.picture.image.copy())
    assert np.array_equal(shown[0], frame_a) and np.array_equal(shown[1], frame_b)
    assert np.array_equal(shown[2], frame_a)
    canvas.picture_box.setCurrentText("no picture")
    assert not canvas._flicker.isActive() and not canvas.picture.isVisible()


def test_layer_state_round_trips_and_ignores_stale_keys(qtbot):
    canvas = ShotCanvas()
    qtbot.addWidget(canvas)
    state = canvas.layer_state()
    state.update({"vectors": False, "vector_stride": 4, "picture": "frame B",
                  "side_by_side": True})
    other = ShotCanvas()
    qtbot.addWidget(other)
    other.restore_layers({**state, "an old key": 1, "marks": "false"})
    assert other.layer_state() == {**state, "marks": False}


def test_shot_without_ball_shows_no_marks(canvas, shot_data):
    frame_a, frame_b, result = shot_data
    from dataclasses import replace

    bare = replace(result, ball_a=None, ball_b=None, flight=None, separation=None)
    canvas.show_shot(CanvasShot("t2", frame_a, frame_b, bare))
    assert not canvas.handle("upper").isVisible()
    assert not canvas.overlay.circles["a"][1].isVisible()
    assert len(_points(canvas.vectors)) > 0


def test_display_upsampling_keeps_values_extent_and_holes():
    grid = np.array([[0.0, 4.0], [8.0, np.nan]])
    up = smooth_upsample(grid, 4)
    assert up.shape == (8, 8)
    assert up[0, 0] == pytest.approx(0.0) and up[0, 7] == pytest.approx(4.0)
    assert up[7, 0] == pytest.approx(8.0)
    assert np.isnan(up[7, 7])  # the hole stays a hole
    assert np.all(np.diff(up[0, :]) >= 0)  # bilinear ramp between nodes, no overshoot


def test_pointing_at_the_picture_fills_the_cursor_line(canvas, shot_data, qtbot):
    from PySide6.QtCore import QEvent, QPointF, Qt
    from PySide6.QtGui import QMouseEvent
    from PySide6.QtWidgets import QApplication

    with qtbot.waitExposed(canvas):
        canvas.show()
    qtbot.wait(20)
    vf = shot_data[2].field
    x, y = float(vf.x_px[3, 25]), float(vf.y_px[3, 25])
    point = canvas.graphics.mapFromScene(canvas.view.mapViewToScene(QPointF(x, y)))
    viewport = canvas.graphics.viewport()
    with qtbot.waitSignal(canvas.hover_text, timeout=30_000) as blocker:
        event = QMouseEvent(QEvent.Type.MouseMove, QPointF(point), viewport.mapToGlobal(point),
                            Qt.MouseButton.NoButton, Qt.MouseButton.NoButton,
                            Qt.KeyboardModifier.NoModifier)
        QApplication.sendEvent(viewport, event)
    assert blocker.args[0] == canvas.hover_label.text()
    assert blocker.args[0] == canvas.describe_point(*_view_xy(canvas, point))
    assert "ω" in blocker.args[0]


def _view_xy(canvas, point):
    view = canvas.view.mapSceneToView(canvas.graphics.mapToScene(point))
    return view.x(), view.y()


def test_small_vorticity_limits_keep_their_digits(canvas):
    canvas._set_limit(0.05)
    assert canvas.limit_box.value() == pytest.approx(0.05)
    assert canvas.limit_box.decimals() >= 3
    canvas._set_limit(2000.0)
    assert canvas.limit_box.value() == 2000.0 and canvas.limit_box.decimals() == 0


def test_the_legend_shows_the_vectors_in_the_colour_they_are_drawn(canvas):
    from app.qt.canvas_items import VECTOR_ON_FIELD, VECTOR_ON_PICTURE

    canvas.vorticity_box.setChecked(True)
    canvas.vectors_box.setChecked(True)
    canvas.picture_box.setCurrentText("frame A")  # the field drawn over the frame: light
    assert f"color:{VECTOR_ON_PICTURE}" in canvas.legend.text()
    canvas.picture_box.setCurrentText("no picture")  # on the vorticity map alone: dark
    assert f"color:{VECTOR_ON_FIELD}" in canvas.legend.text()
    assert f"color:{VECTOR_ON_FIELD}" in canvas.legend_text()
