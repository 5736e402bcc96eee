"""Our invented scenario: a regional service fleet, its depots, vehicle ids and VINs.

Every name here is made up for tracktrue's demo. VINs carry a valid ISO 3779 /
49 CFR 565 check digit (tracktrue.vin), with an invented manufacturer code.
"""

from __future__ import annotations

from dataclasses import dataclass

from tracktrue.vin import with_check_digit

FLEET_NAME = "Tarnwick Valley Field Services"


@dataclass(frozen=True)
class Depot:
    code: str
    name: str
    export_style: str  # which export tool the depot's workshop uses
    rough_trip_share: float  # share of trips on gravel / rough roads
    yard_grade: float  # the depot yard's slope (rise over run) where vehicles park overnight


DEPOTS: tuple[Depot, ...] = (
    Depot("HX", "Holloway Cross", "A", 0.03, 0.045),
    Depot("BM", "Brenmoor", "B", 0.05, 0.0),
    Depot("SR", "Sallow Reach", "A", 0.30, 0.02),
)

#: Invented manufacturer code and per-platform descriptor sections (no I, O, Q).
_WMI = "TV9"
_VDS = {"compact_van": "CVA2E", "lwb_van": "LWB4R", "pickup": "PKU3D"}
#: Model-year codes 2021..2026 (49 CFR 565.15: M N P R S T).
_YEAR_CODES = "MNPRST"


def vehicle_id(depot: Depot, number: int) -> str:
    """Fleet numbering: TVF-<depot code><three digits>, e.g. TVF-BM014."""
    return f"TVF-{depot.code}{number:03d}"


def synthetic_vin(platform_name: str, depot: Depot, serial: int, model_year_index: int) -> str:
    """A 17-character VIN with a valid check digit."""
    draft = f"{_WMI}{_VDS[platform_name]}0{_YEAR_CODES[model_year_index % 6]}{depot.code[0]}{serial % 1_000_000:06d}"
    return with_check_digit(draft)
