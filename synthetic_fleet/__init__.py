"""synthetic_fleet: a physically grounded simulator of an invented service fleet
with injected, developing sensor faults and ground truth (see DESIGN.md).

Only the command line and tests import it; the product's stages never do.
"""

from synthetic_fleet.config import CONFIGS, DEFAULT, HELD_OUT, SimConfig, WheelModule
from synthetic_fleet.drive import DRIVES
from synthetic_fleet.fleet import DEMO_DAYS, DEMO_VEHICLES, FleetSummary, generate_fleet, plan_fleet
from synthetic_fleet.faults import CONFOUNDERS, FAULTS, LAMP_SEVERITY
from synthetic_fleet.logger import LOGGER_KINDS
from synthetic_fleet.platforms import PLATFORMS
from synthetic_fleet.trip import trip_samples

__all__ = ["CONFIGS", "CONFOUNDERS", "DEFAULT", "DEMO_DAYS", "DEMO_VEHICLES", "DRIVES", "FAULTS", "FleetSummary",
           "HELD_OUT", "LAMP_SEVERITY", "LOGGER_KINDS", "PLATFORMS", "SimConfig", "WheelModule", "generate_fleet",
           "plan_fleet", "trip_samples"]
