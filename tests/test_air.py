"""Air properties and the Reynolds number (docs/references.md)."""

import pytest

from core.air import (
    air_density_kg_m3,
    air_viscosity_pa_s,
    kinematic_viscosity_m2_s,
    regime_note,
    reynolds_number,
)


def test_sutherland_law_at_the_reference_and_room_temperature():
    # Sutherland's law returns mu0 at T0 (derived) and about 1.81e-5 Pa s at 20 deg C (White,
    # Viscous Fluid Flow, memory); with the ideal gas, nu is about 1.51e-5 m^2/s (derived)
    assert air_viscosity_pa_s(0.0) == pytest.approx(1.716e-5, rel=1e-12)
    assert air_viscosity_pa_s(20.0) == pytest.approx(1.81e-5, rel=0.01)
    assert air_density_kg_m3(20.0) == pytest.approx(1.204, rel=0.002)
    assert kinematic_viscosity_m2_s(20.0) == pytest.approx(1.51e-5, rel=0.01)
    assert kinematic_viscosity_m2_s(35.0) > kinematic_viscosity_m2_s(5.0)


def test_reynolds_number_of_a_cricket_ball():
    # a 71.6 mm cricket ball at 35 m/s: about 1.7e5 with nu = 1.5e-5 m^2/s (derived)
    assert reynolds_number(35.0, 71.6) == pytest.approx(35.0 * 0.0716 / 1.51e-5, rel=0.01)
    assert reynolds_number(None, 71.6) is None and reynolds_number(30.0, None) is None


def test_regime_notes_follow_the_drag_crisis():
    # smooth sphere: laminar separation below about 2e5, the crisis up to about 4e5
    # (Achenbach 1972, memory)
    assert "below" in regime_note(1.0e5)
    assert "in the drag crisis" in regime_note(3.0e5)
    assert "above" in regime_note(6.0e5)
    assert regime_note(None) == ""
