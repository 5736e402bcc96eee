"""Exact unit factors shared by the simulator (writing exports) and ingest (reading them).

Sources: NIST SP 811 (2008), appendix B: 1 mile = 1609.344 m, 1 ft = 0.3048 m,
both exact; standard gravity g0 = 9.80665 m/s^2, exact (3rd CGPM 1901,
ISO 80000-3).
"""

from __future__ import annotations

import math

G0_MPS2 = 9.80665
MILE_M = 1609.344
FOOT_M = 0.3048
MPH_MPS = MILE_M / 3600.0  # 0.44704 exactly
KPH_MPS = 1000.0 / 3600.0
DEG_RAD = math.pi / 180.0
