"""Second, physically built family of synthetic shots (see ``docs/synthetic_family_physical.md``).

Independent of ``core.synth_shot``'s flow model: the boundary layer comes from Thwaites' method
on a published surface velocity, the free shear layers spread at the mixing-layer rate, the wake
recirculates and travels with the ball in the lab frame.
"""

from core.synth_physical.shot import (
    PhysicalShotTruth,
    air_kinematic_viscosity,
    physical_cases,
    physical_flow,
    physical_shot,
)

__all__ = [
    "PhysicalShotTruth",
    "air_kinematic_viscosity",
    "physical_cases",
    "physical_flow",
    "physical_shot",
]
