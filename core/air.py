"""Air properties and the Reynolds number of a shot.

Dynamic viscosity from Sutherland's law, ``mu = mu0 (T / T0)^1.5 (T0 + S) / (T + S)`` with
``mu0 = 1.716e-5 Pa s`` at ``T0 = 273.15 K`` and ``S = 110.4 K`` (White, *Viscous Fluid Flow*;
memory, see docs/references.md); density from the ideal gas law at the lab's pressure
(``R_air = 287.05 J/(kg K)``, 101.325 kPa by default). At 20 deg C this gives
``nu = 1.51e-5 m^2/s`` (derived).

The regime note follows the smooth sphere's drag curve (Achenbach 1972, memory): laminar
separation below about Re 2e5, the drag crisis between about 2e5 and 4e5 (separation moves from
about 80 deg to 110-120 deg from the front stagnation point as the layer turns turbulent first),
turbulent separation above. A seam or roughness moves the crisis to lower Re.
"""

from __future__ import annotations

import math

#: Sutherland's law constants for air (White, memory).
SUTHERLAND_MU0_PA_S = 1.716e-5
SUTHERLAND_T0_K = 273.15
SUTHERLAND_S_K = 110.4
#: Specific gas constant of dry air, J/(kg K).
GAS_CONSTANT_AIR = 287.05
STANDARD_PRESSURE_PA = 101_325.0
DEFAULT_AIR_TEMP_C = 20.0
#: Smooth-sphere drag-crisis band (Re): below it laminar separation (Achenbach 1972, memory).
CRISIS_RE = (2.0e5, 4.0e5)


#: Absolute zero (deg C): no air temperature lies at or below it.
ABSOLUTE_ZERO_C = -273.15
#: The air of a lab, a tunnel or an outdoor launcher range (deg C; common practice, a bound on
#: typing slips: 293 is a temperature in kelvin, not a lab's air).
LAB_AIR_C = (-40.0, 60.0)


def temperature_problem(temp_c: float) -> str:
    """What is wrong with an air temperature (deg C): "" when nothing, else the words that
    say so (for the option, the manifest row and the settings that refuse it)."""
    if not temp_c > ABSOLUTE_ZERO_C:
        return f"{temp_c:g} deg C is at or below absolute zero"
    low, high = LAB_AIR_C
    if not low <= temp_c <= high:
        kelvin = " (in kelvin? give deg C)" if temp_c > 200.0 else ""
        return (f"{temp_c:g} deg C is outside {low:g} to {high:g} deg C, the air of a lab or a "
                f"range{kelvin}")
    return ""


def air_viscosity_pa_s(temp_c: float = DEFAULT_AIR_TEMP_C) -> float:
    """Dynamic viscosity of air (Pa s) at ``temp_c`` by Sutherland's law."""
    problem = temperature_problem(temp_c)
    if problem:
        raise ValueError(f"air temperature {problem}")
    t = temp_c - ABSOLUTE_ZERO_C
    return (SUTHERLAND_MU0_PA_S * (t / SUTHERLAND_T0_K) ** 1.5
            * (SUTHERLAND_T0_K + SUTHERLAND_S_K) / (t + SUTHERLAND_S_K))


def air_density_kg_m3(temp_c: float = DEFAULT_AIR_TEMP_C,
                      pressure_pa: float = STANDARD_PRESSURE_PA) -> float:
    """Density of dry air (kg/m^3) by the ideal gas law."""
    return pressure_pa / (GAS_CONSTANT_AIR * (temp_c - ABSOLUTE_ZERO_C))


def kinematic_viscosity_m2_s(temp_c: float = DEFAULT_AIR_TEMP_C,
                             pressure_pa: float = STANDARD_PRESSURE_PA) -> float:
    """Kinematic viscosity of air (m^2/s): ``mu / rho``."""
    return air_viscosity_pa_s(temp_c) / air_density_kg_m3(temp_c, pressure_pa)


def reynolds_number(speed_m_s: float | None, diameter_mm: float | None,
                    temp_c: float | None = None) -> float | None:
    """``Re = U D / nu`` of the ball, or None without a speed or a diameter.

    Parameters
    ----------
    speed_m_s : float or None
        Air speed relative to the ball (m/s).
    diameter_mm : float or None
        Ball diameter (mm).
    temp_c : float, optional
        Air temperature (deg C); ``DEFAULT_AIR_TEMP_C`` when None.
    """
    if not speed_m_s or not diameter_mm or speed_m_s <= 0 or diameter_mm <= 0:
        return None
    nu = kinematic_viscosity_m2_s(DEFAULT_AIR_TEMP_C if temp_c is None else temp_c)
    return speed_m_s * diameter_mm * 1e-3 / nu


def regime_note(reynolds: float | None) -> str:
    """Plain note on where ``reynolds`` lies against the smooth sphere's drag crisis."""
    if reynolds is None or not math.isfinite(reynolds):
        return ""
    lo, hi = CRISIS_RE
    if reynolds < lo:
        return ("below the drag crisis: laminar separation, unless a seam or roughness trips "
                "the layer on its side")
    if reynolds <= hi:
        return "in the drag crisis: the layer may turn turbulent before separating"
    return "above the drag crisis: turbulent separation expected"
