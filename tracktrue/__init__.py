"""tracktrue: fleet-wide early warning for degrading ABS/ESC chassis sensors.

This package holds only the command line and the helpers every stage shares
(the store layout and the contract names); stage logic lives in the top-level
packages ``ingest``, ``features``, ``models`` and ``dashboard``.
"""

__version__ = "0.1.0"
