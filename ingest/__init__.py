"""ingest stage: CSV data-log exports -> canonical samples and the catalog.

``tracktrue ingest PATH... [--store DIR] [--profile FILE.toml]
[--vehicles vehicles.csv] [--trip-gap SECONDS]`` reads files and folders
(recursively, ``*.csv``, ``*.txt`` and ``*.tsv`` in any case, gzipped or not), recognises headers and
units (ingest/grammar.py; a TOML mapping profile for the rest,
ingest/profile.py), converts every signal to SI, validates every row, splits
logs into trips on time gaps, and writes the store's raw layer
(ingest/samples.py) and catalog (ingest/catalog.py), then publishes the
tables ``trips``, ``trip_signals`` (per trip and signal: fresh-value rate,
step, stale share, read lag), ``vehicles``, ``ingested_files`` and ``rejects``.

Exit codes:
  0  every file was ingested (or was already), no row or column was rejected
  1  the run finished, but some input was rejected: a whole file (empty,
     binary, no time column, no wheel or vehicle speed, relative time without a start),
     a column (missing/unknown unit, voltage without calibration), a data row (not a number, outside the physical
     range, bad time, duplicate or backwards time, wrong field count, trip
     already stored from another file) or a registry row; see the summary and
     the published ``rejects`` and ``ingested_files`` tables
  2  unusable arguments: a path that does not exist, a bad profile, a
     registry file that cannot be read or lacks a required column
  3  another ingest run holds the store's lock

Unrecognised columns, a second column for a signal already read, and a VIN
that fails its check digit are warnings in the summary; they do not change
the exit code.

A column headed ``<signal header> @ms`` holds each cell's read lag behind
the row's time (polled loggers read the cells of a row one after another);
ingest moves those values to their read times (ingest/skew.py). Logs with a
vehicle speed but no wheel speed (telematics) are ingested; their missing
signals are null sample columns.

Vehicle identity, time bases, the profile format and the store layout are
documented in ingest/identity.py, ingest/timebase.py, ingest/profile.py and
ingest/samples.py / ingest/catalog.py.
"""

from ingest.run import IngestSummary, run_ingest

__all__ = ["IngestSummary", "run_ingest"]
