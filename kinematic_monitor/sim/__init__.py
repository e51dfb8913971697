"""Demo vehicle simulator: dynamic single-track model, tyres, driver and scenarios.

Typical use::

    from kinematic_monitor.sim import SCENARIOS, simulate, truth_intervals
    trace = simulate(SCENARIOS["circle_ice_patch"](), duration=60.0, seed=1)
    truth = truth_intervals(trace)
"""

from kinematic_monitor.sim.dynamics import SimVehicle, VehicleDynamics
from kinematic_monitor.sim.scenarios import (
    SCENARIOS,
    SURFACE_MU,
    FrictionPatch,
    Scenario,
    simulate,
)
from kinematic_monitor.sim.trace import WHEEL_NAMES, TrueTrace
from kinematic_monitor.sim.truth import TRUTH_KINDS, TruthConfig, TruthInterval, truth_intervals

__all__ = [
    "SCENARIOS",
    "SURFACE_MU",
    "TRUTH_KINDS",
    "WHEEL_NAMES",
    "FrictionPatch",
    "Scenario",
    "SimVehicle",
    "TrueTrace",
    "TruthConfig",
    "TruthInterval",
    "VehicleDynamics",
    "simulate",
    "truth_intervals",
]
