"""The evidence behind a pick on the canvas: the fine ball-frame field near the ball, the fitted
shear layers and their bands, the uncertainty wedges, the reference vector, the ball frame and
the cursor's reading about the ball."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from conftest import analytic_result, synthetic_frames

from app.qt.canvas import CanvasShot, ShotCanvas
from app.qt.canvas_evidence import WEDGE_RADII, fine_extent
from app.qt.canvas_items import mark_circle
from app.qt.canvas_pictures import plain_reading, speed_factor
from core.geometry import angle_of_point, point_at_angle
from core.results import SeparationResult, SideProposal, VectorField
from core.shot_result import ShotSettings

pytestmark = pytest.mark.qt_log_ignore("This plugin does not support propagateSizeHints")

#: A fitted layer record as core.separation keeps it (SideProposal.layer), upper side.
LAYER = {"phi_s": 12.0, "slope": 0.2, "relax": 1.0, "log_delta": 0.5, "spread": 0.2,
         "reverse": 0.1, "drop": 0.5, "thin": 0.3, "follow": 0.3, "k_t": 1.0, "k_r": 1.0,
         "final_deg": 5.0, "band_first_gap_px": 2.0, "band_last_gap_px": 16.0,
         "window_deg": [-13.0, 52.0]}


def _fine_field(result, truth, spacing: float = 4.0) -> VectorField:
    """The flow near the ball on a finer grid in the ball frame (the ball's displacement
    subtracted), as the fine correlation gives it."""
    from core.synth_shot import BallWakeFlow

    (cx, cy), r = mark_circle(result)
    flow = BallWakeFlow((cx, cy), r, truth.displacement_px, truth.flight_deg, truth.upper_deg,
                        truth.lower_deg)
    x, y = np.meshgrid(np.arange(cx - 2 * r, cx + 2 * r, spacing),
                       np.arange(cy - 1.8 * r, cy + 1.8 * r, spacing))
    dx, dy = flow(x, y)
    masked = np.hypot(x - cx, y - cy) < r + 1
    dx = np.where(masked, np.nan, dx - truth.displacement_px[0])
    dy = np.where(masked, np.nan, dy - truth.displacement_px[1])
    none = np.zeros_like(masked)
    return VectorField(x, y, dx, dy, ~masked, none, masked, np.full(x.shape, 3.0),
                       window_px=int(2 * spacing), spacing_px=spacing)


@pytest.fixture(scope="module")
def evidence_shot():
    frame_a, frame_b, truth = synthetic_frames(1)
    settings = ShotSettings(dt_s=truth.dt_s, scale_mm_per_px=truth.scale_mm_per_px,
                            ball_diameter_mm=truth.ball_diameter_mm)
    result = analytic_result(truth, settings)
    result.fine_field = _fine_field(result, truth)
    upper = replace(result.separation.upper, layer=dict(LAYER, phi_s=result.separation.upper
                                                        .angle_deg))
    result.separation = SeparationResult(upper, result.separation.lower, 0.0, "no clear difference")
    return frame_a, frame_b, result


@pytest.fixture
def canvas(qtbot, evidence_shot):
    frame_a, frame_b, result = evidence_shot
    widget = ShotCanvas()
    qtbot.addWidget(widget)
    widget.resize(900, 650)
    proposed = {s: getattr(result.separation, s).angle_deg for s in ("upper", "lower")}
    widget.show_shot(CanvasShot("t1", frame_a, frame_b, result, proposed_deg=proposed,
                                final_deg={"upper": None, "lower": None}))
    return widget


def _points(item) -> np.ndarray:
    if hasattr(item, "points"):  # the evidence's polylines
        return item.points
    x, y = item.getData()
    return np.zeros((0, 2)) if x is None else np.column_stack([x, y])


def test_the_fine_field_replaces_the_main_one_near_the_ball(canvas, evidence_shot):
    result = evidence_shot[2]
    fine, vf = result.fine_field, result.field
    pane = canvas.main
    x0, x1, y0, y1 = fine_extent(fine)
    outside = ~((vf.x_px >= x0) & (vf.x_px <= x1) & (vf.y_px >= y0) & (vf.y_px <= y1))
    good_main = outside & ~vf.masked & ~vf.replaced
    assert len(_points(pane.vectors)) == 6 * (good_main.sum() + (~fine.masked).sum())
    assert pane.evidence.fine_vorticity.isVisible()
    box = _points(pane.evidence.fine_box)
    assert (*box[0], *box[2]) == pytest.approx((x0, y0, x1, y1))

    def main_alpha_at(x, y):  # the main vorticity picture's opacity at an image point
        rect, image = pane.vorticity.mapRectToParent(pane.vorticity.boundingRect()), \
            pane.vorticity.image
        col = int((x - rect.left()) / rect.width() * image.shape[1])
        row = int((y - rect.top()) / rect.height() * image.shape[0])
        return int(image[row, col, 3])

    # one field at a time under the fine one's box: see-through both, they would add up
    inside = main_alpha_at(0.5 * (x0 + x1), y0 + 2.0)
    assert inside == 0
    canvas.fine_box.setChecked(False)
    assert len(_points(pane.vectors)) == 6 * (~vf.masked & ~vf.replaced).sum()
    assert not pane.evidence.fine_vorticity.isVisible()
    assert len(_points(pane.evidence.fine_box)) == 0


def test_the_ball_frame_subtracts_the_balls_displacement(canvas, evidence_shot):
    result = evidence_shot[2]
    canvas.fine_box.setChecked(False)
    lab = _points(canvas.vectors)[:2]  # the first arrow's shaft: tail, tip
    canvas.toggle_frame()
    assert canvas.ball_frame()
    ball = _points(canvas.vectors)[:2]
    vf = result.field
    good = ~vf.masked & ~vf.replaced
    first = np.argwhere(good)[0]
    dx, dy = vf.dx_px[tuple(first)], vf.dy_px[tuple(first)]
    mx, my = result.flight.displacement_px
    lab_dir, ball_dir = lab[1] - lab[0], ball[1] - ball[0]
    assert math.atan2(lab_dir[1], lab_dir[0]) == pytest.approx(math.atan2(dy, dx))
    assert math.atan2(ball_dir[1], ball_dir[0]) == pytest.approx(math.atan2(dy - my, dx - mx))


def test_the_fitted_layer_leaves_the_outline_at_the_separation_point(canvas, evidence_shot):
    result = evidence_shot[2]
    (cx, cy), r = mark_circle(result)
    flight = result.flight.direction_deg
    curves = canvas.main.evidence.curves["upper"]
    dividing = _points(curves["dividing"])
    assert len(dividing) > 10 and len(_points(curves["centre"])) == len(dividing)
    phi_s = result.separation.upper.angle_deg
    assert dividing[0] == pytest.approx(point_at_angle((cx, cy), r, flight, "upper", phi_s),
                                        abs=1e-6)
    # drawn as far rearward as the band the fit saw, no further
    last = angle_of_point((cx, cy), flight, "upper", tuple(dividing[-1]))
    assert last <= LAYER["window_deg"][1] + 0.5
    band = _points(curves["band"])
    assert band[0] == pytest.approx(band[-1])  # closed
    gaps = np.hypot(band[:, 0] - cx, band[:, 1] - cy) - r
    assert gaps.min() == pytest.approx(2.0) and gaps.max() == pytest.approx(16.0)
    assert len(_points(canvas.main.evidence.curves["lower"]["dividing"])) == 0  # none fitted
    canvas.layers_box.setChecked(False)
    assert len(_points(curves["dividing"])) == 0 and len(_points(curves["band"])) == 0


def test_the_wedge_spans_the_proposals_uncertainty(canvas, evidence_shot):
    result = evidence_shot[2]
    (cx, cy), r = mark_circle(result)
    flight = result.flight.direction_deg
    for side in ("upper", "lower"):
        proposal: SideProposal = getattr(result.separation, side)
        wedge = canvas.main.evidence.wedges[side]
        assert wedge.isVisible()
        polygon = wedge.path().toFillPolygon()
        points = [(polygon.at(i).x(), polygon.at(i).y()) for i in range(polygon.size())]
        angles = [angle_of_point((cx, cy), flight, side, p) for p in points]
        radii = [math.hypot(x - cx, y - cy) / r for x, y in points]
        assert min(angles) == pytest.approx(proposal.angle_deg - proposal.uncertainty_deg)
        assert max(angles) == pytest.approx(proposal.angle_deg + proposal.uncertainty_deg)
        assert (min(radii), max(radii)) == pytest.approx(WEDGE_RADII)
    canvas.marks_box.setChecked(False)
    assert not canvas.main.evidence.wedges["upper"].isVisible()


def test_the_reference_vector_has_the_vectors_scale(qtbot, canvas, evidence_shot):
    result = evidence_shot[2]
    canvas.fine_box.setChecked(False)
    reference = canvas.main.reference
    assert reference.isVisible()
    speed, unit = reference.text.textItem.toPlainText().split()
    assert unit == "m/s" and float(speed) == reference.speed > 0
    shaft = _points(canvas.vectors)[:2]
    vf = result.field
    first = tuple(np.argwhere(~vf.masked & ~vf.replaced)[0])
    drawn = float(np.hypot(*(shaft[1] - shaft[0])))
    real = math.hypot(vf.dx_px[first], vf.dy_px[first]) * speed_factor(result)
    # image px per m/s of a field arrow and of the reference arrow are the same
    assert reference.size / float(speed) == pytest.approx(drawn / real, rel=1e-6)
    # its speed is the round (1-2-5) one at or below the field's large vectors, so the arrow
    # looks like them
    usable = ~vf.masked
    large = np.percentile(np.hypot(vf.dx_px[usable], vf.dy_px[usable]), 95) * speed_factor(result)
    assert large / 2.5 < float(speed) <= large
    # zoomed in far, a shorter round speed keeps the arrow on screen; the scale stays
    canvas.show()
    qtbot.waitExposed(canvas)
    (x0, x1), (y0, y1) = canvas.view.viewRange()
    canvas.view.setRange(xRange=(x0, x0 + (x1 - x0) / 20), yRange=(y0, y0 + (y1 - y0) / 20),
                         padding=0)
    assert reference.speed < float(speed)
    assert reference.size / reference.speed == pytest.approx(drawn / real, rel=1e-6)
    canvas.vectors_box.setChecked(False)
    assert not reference.isVisible()


def test_the_cursor_reads_the_position_about_the_ball_and_the_fine_field(canvas, evidence_shot):
    result = evidence_shot[2]
    (cx, cy), r = mark_circle(result)
    flight = result.flight.direction_deg
    x, y = point_at_angle((cx, cy), 1.5 * r, flight, "upper", 20.0)
    text = canvas.describe_point(x, y)
    # derived: 1.5 r from the centre at 20 deg rearward of the normal plane, over D = 2 r
    down, across = 0.75 * math.sin(math.radians(20.0)), 0.75 * math.cos(math.radians(20.0))
    text = plain_reading(text)  # readings keep their own spaces from breaking
    assert f"x/D {down:+5.2f} y/D {across:+5.2f}  upper  +20.0°" in text
    fine = result.fine_field
    col = int(np.argmin(np.abs(fine.x_px[0] - x)))
    row = int(np.argmin(np.abs(fine.y_px[:, 0] - y)))
    w = result.fine_vorticity()[row, col]
    assert "(fine field)" in text and f"ω {w:+9.4g} 1/s" in text
    assert "(lab frame, v up)" in text
    canvas.toggle_frame()
    assert "(ball frame, v up)" in plain_reading(canvas.describe_point(x, y))
