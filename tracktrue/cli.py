"""The ``tracktrue`` command line: parse, call one stage function, print a summary.

Exit codes (also in the README):
  0  success
  1  finished, but some input was rejected (see the summary / rejects table)
  2  usage error or unusable input (message says which file / row / problem)
  3  another run holds the store's lock
  4  a prerequisite is missing (e.g. no features yet: run the earlier stage)
  5  a stage of `tracktrue update` failed (the message names it; see tracktrue/update.py)
"""

from __future__ import annotations

import argparse
import datetime as dt
import logging
import os
import sys
from pathlib import Path

from tracktrue import __version__
from tracktrue.errors import UserError
from tracktrue.schema import SERVICE_EVENT_KINDS
from tracktrue.store import STORE_ENV, LockHeld, Store, TableMissing, resolve_store_root

EXIT_OK, EXIT_REJECTS, EXIT_USAGE, EXIT_LOCKED, EXIT_MISSING = 0, 1, 2, 3, 4


def _existing_store(args) -> Store:
    """The store a reading command works on. A path without one is a missing prerequisite (exit 4),
    never a new empty store: a mistyped --store would otherwise leave a folder behind."""
    root = resolve_store_root(args.store)
    if not root.is_dir():
        chosen = args.store or os.environ.get(STORE_ENV)
        default = "" if chosen else f" (the default; give --store DIR or set ${STORE_ENV})"
        raise UserError(f"no store at {root}{default}: ingest logs into it first "
                        f"(`tracktrue ingest LOGS --store {root}`), or run `tracktrue demo`", exit_code=EXIT_MISSING)
    return Store.open(root, create=False)


def _date(text: str) -> dt.date:
    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a date (YYYY-MM-DD): {text!r}") from None


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not an integer: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1: {value}")
    return value


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be positive: {value}")
    return value


def _add_store(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--store",
        metavar="DIR",
        help="store folder (default: $TRACKTRUE_STORE, else ./tracktrue-store)",
    )


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="tracktrue",
        description="Rank a fleet's vehicles by how much their ABS/ESC chassis sensors disagree, "
        "before a warning lamp takes them off the road.",
    )
    parser.add_argument("--version", action="version", version=f"tracktrue {__version__}")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more log output (-vv for debug)")
    parser.add_argument("--no-progress", action="store_true", help="no progress bars")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)

    p = sub.add_parser("synth", help="generate a synthetic fleet's CSV logs with ground truth",
                       description="Simulate a fleet with developing sensor faults and write ordinary CSV exports, "
                       "vehicles.csv, service_history.csv and the ground truth (truth.csv, loggers.csv, "
                       "lamp_episodes.csv).")
    p.add_argument("--out", required=True, type=Path, metavar="DIR", help="output folder")
    p.add_argument("--vehicles", type=_positive_int, default=24, metavar="N", help="fleet size (default 24)")
    p.add_argument("--days", type=_positive_int, default=60, metavar="D", help="simulated days (default 60)")
    p.add_argument("--seed", type=int, default=7, metavar="S", help="random seed (default 7)")
    p.add_argument("--rate", type=_positive_float, default=10.0, metavar="HZ", help="sample rate (default 10 Hz)")
    p.add_argument("--start", type=_date, default=dt.date(2026, 3, 2), metavar="DATE",
                   help="first simulated day (default 2026-03-02)")
    p.add_argument("--config", choices=("tuning", "held-out"), default="tuning",
                   help="simulator configuration: the tuning one (default) or the held-out one, never used for tuning")
    p.set_defaults(func=cmd_synth)

    p = sub.add_parser("ingest", help="read CSV data-log exports into the store",
                       description="Recognise, validate and store CSV trip logs; files and folders are read recursively.")
    p.add_argument("paths", nargs="+", type=Path, metavar="PATH", help="CSV files or folders")
    _add_store(p)
    p.add_argument("--profile", type=Path, metavar="FILE.toml", help="mapping profile for unrecognised exports")
    p.add_argument("--vehicles", type=Path, metavar="vehicles.csv", help="load or update the vehicle registry")
    p.add_argument("--trip-gap", type=_positive_float, default=300.0, metavar="SECONDS",
                   help="split a file into trips on time gaps longer than this (default 300 s)")
    p.add_argument("--service-events", type=Path, metavar="FILE.csv",
                   help="also import service events (see `tracktrue service-events --help`)")
    p.set_defaults(func=cmd_ingest)

    p = sub.add_parser("service-events", help="import repairs, tyre work and inspection outcomes",
                       description="Import a service-events CSV (vehicle_id, date YYYY-MM-DD, kind, component, "
                       "note) into the catalog and publish the service_events table; scoring restarts the baselines "
                       "each event touches (models/service.py). kind: " + ", ".join(SERVICE_EVENT_KINDS) + " (alignment = wheel_alignment). "
                       "component: a ranking component (e.g. wheel_sensor_fl, tyre_rr), front_axle, rear_axle, "
                       "tyres, or empty for the whole vehicle. Bad rows are reported with their line and not "
                       "stored (exit code 1); importing a file again adds nothing.")
    p.add_argument("file", type=Path, metavar="FILE.csv", help="service-events CSV")
    _add_store(p)
    p.set_defaults(func=cmd_service_events)

    p = sub.add_parser("update", help="nightly: ingest new logs, features for new trips, score, publish",
                       description="One command for a scheduler: ingest what is new (logs, registry, service "
                       "events, what was entered in the dashboard: service events, no-fault-found outcomes, "
                       "snoozes), compute features for new trips, score and publish. Records runs/last_success.json and appends to runs/update.log. Exit codes: "
                       "0 ok, 1 finished with rejected input, 2 bad arguments, 3 another run holds the lock, "
                       "4 a prerequisite is missing, 5 a stage failed (the message names it).")
    p.add_argument("paths", nargs="+", type=Path, metavar="PATH", help="CSV log files or folders")
    _add_store(p)
    p.add_argument("--vehicles", type=Path, metavar="vehicles.csv", help="load or update the vehicle registry")
    p.add_argument("--service-events", type=Path, metavar="FILE.csv", help="import service events")
    p.add_argument("--profile", type=Path, metavar="FILE.toml", help="mapping profile for unrecognised exports")
    p.add_argument("--trip-gap", type=_positive_float, default=300.0, metavar="SECONDS",
                   help="split a file into trips on time gaps longer than this (default 300 s)")
    p.set_defaults(func=cmd_update)

    p = sub.add_parser("features", help="compute per-trip sensor-disagreement features",
                       description="Compute features for trips that have none yet (incremental).")
    _add_store(p)
    p.add_argument("--rebuild", action="store_true", help="recompute every trip")
    p.add_argument("--engine", choices=("local", "dask"), default="local",
                   help="where to compute: this process (default) or a Dask cluster (needs the dask extra)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --engine dask: the Dask scheduler, e.g. tcp://host:8786 "
                   "(default: a local cluster sized to this machine)")
    p.set_defaults(func=cmd_features)

    p = sub.add_parser("score", help="score trips and vehicles against the fleet",
                       description="Peer-normalise features, score trips with an isolation forest, run the drift "
                       "detector and publish vehicle statuses.")
    _add_store(p)
    p.add_argument("--as-of", type=_date, metavar="DATE", help="use only trips that started before the end of DATE")
    p.set_defaults(func=cmd_score)

    p = sub.add_parser("rank", help="print the ranked fleet (or what changed since the previous run)",
                       description="Print the published ranking. With --changes: the vehicles whose published "
                       "status changed between the last scoring run and the one before it (new, escalated, "
                       "de-escalated, cleared alerts, another component, other status changes).")
    _add_store(p)
    p.add_argument("--top", type=_positive_int, metavar="N", help="only the first N rows")
    p.add_argument("--status", metavar="S", action="append", help="only this status (repeatable)")
    p.add_argument("--format", choices=("table", "csv", "json"), default="table", help="output format")
    p.add_argument("--changes", action="store_true", help="list what changed instead of the ranking")
    p.add_argument("--since", type=_date, metavar="DATE",
                   help="with --changes: compare with the last run as of a day before DATE")
    p.set_defaults(func=cmd_rank)

    p = sub.add_parser("snooze", help="put off a vehicle's alert until a date, with a reason",
                       description="Snooze a vehicle's current alert: it shows as snoozed (with reason and "
                       "expiry) and ranks below the active alerts until the ranking's as-of date passes DATE. A "
                       "lit lamp, a higher status or another suspected component cancels the snooze. Stored in "
                       "the dashboard's file beside the dashboard's own snoozes; takes effect at the next "
                       "`tracktrue update`. A vehicle with a lit lamp cannot be snoozed.")
    p.add_argument("vehicle_id", metavar="VEHICLE")
    _add_store(p)
    p.add_argument("--until", type=_date, metavar="DATE", help="last as-of date the snooze covers (YYYY-MM-DD)")
    p.add_argument("--reason", metavar="TEXT", help="why (shown with the snooze)")
    p.add_argument("--clear", action="store_true", help="remove the vehicle's snooze")
    p.set_defaults(func=cmd_snooze)

    p = sub.add_parser("vehicle", help="one vehicle's trip history and implicated features",
                       description="Print one vehicle's status, score trend and implicated features over its trips.")
    p.add_argument("vehicle_id", metavar="ID")
    _add_store(p)
    p.add_argument("--trips", type=_positive_int, default=20, metavar="N", help="recent trips to list (default 20)")
    p.set_defaults(func=cmd_vehicle)

    p = sub.add_parser("evaluate", help="measure the ranking against ground truth or lamp events",
                       description="Precision at k, lead time, false alarms and attribution accuracy beside baselines.")
    _add_store(p)
    p.add_argument("--truth", type=Path, metavar="truth.csv", help="ground truth; without it, lamp events are the truth")
    p.add_argument("--as-of", type=_date, metavar="DATE", help="evaluate as of this date")
    p.set_defaults(func=cmd_evaluate)

    p = sub.add_parser("demo", help="run the whole chain on the embedded default store",
                       description="Generate the demo fleet, ingest it, compute features, score and print the ranking.")
    _add_store(p)
    p.add_argument("--vehicles", type=_positive_int, default=None, metavar="N", help="demo fleet size")
    p.add_argument("--days", type=_positive_int, default=None, metavar="D", help="demo days")
    p.add_argument("--seed", type=int, default=7, metavar="S", help="random seed (default 7)")
    p.set_defaults(func=cmd_demo)

    p = sub.add_parser("dashboard", help="open the triage dashboard in a browser",
                       description="Serve the Streamlit dashboard (reads published tables only).")
    _add_store(p)
    p.add_argument("--port", type=_positive_int, default=8501, metavar="N", help="port (default 8501)")
    p.add_argument("--host", default="127.0.0.1", metavar="ADDR",
                   help="bind address (default 127.0.0.1; the app has no login)")
    p.set_defaults(func=cmd_dashboard)
    return parser


def _progress(args) -> bool:
    return not args.no_progress and sys.stderr.isatty()


def cmd_synth(args) -> int:
    from synthetic_fleet import generate_fleet

    summary = generate_fleet(args.out, n_vehicles=args.vehicles, days=args.days, seed=args.seed,
                             rate_hz=args.rate, start=args.start, progress=_progress(args), config=args.config)
    print(summary.describe())
    return EXIT_OK


def cmd_ingest(args) -> int:
    from ingest import run_ingest

    store = Store.open(args.store)
    summary = run_ingest(args.paths, store, profile=args.profile, vehicles_csv=args.vehicles,
                         trip_gap_s=args.trip_gap, progress=_progress(args))
    print(summary.describe())
    if args.service_events is None:
        return summary.exit_code
    return max(summary.exit_code, _import_service_events(args.service_events, store))


def cmd_service_events(args) -> int:
    return _import_service_events(args.file, Store.open(args.store))


def _import_service_events(path: Path, store: Store) -> int:
    from ingest.service_events import import_service_events

    summary = import_service_events(path, store)
    print(summary.describe())
    return summary.exit_code


def cmd_update(args) -> int:
    from tracktrue.update import run_update

    summary = run_update(args.paths, Store.open(args.store), vehicles_csv=args.vehicles,
                         service_events_csv=args.service_events, profile=args.profile, trip_gap_s=args.trip_gap,
                         progress=_progress(args))
    print(summary.describe())
    return summary.exit_code


def cmd_features(args) -> int:
    from features import run_features

    summary = run_features(_existing_store(args), rebuild=args.rebuild, progress=_progress(args),
                           engine=args.engine, scheduler=args.scheduler)
    print(summary.describe())
    return EXIT_OK


def cmd_score(args) -> int:
    from models import run_scoring

    summary = run_scoring(_existing_store(args), as_of=args.as_of, progress=_progress(args))
    print(summary.describe())
    return EXIT_OK


def cmd_rank(args) -> int:
    from models import format_ranking, ranking_table

    if args.changes and (args.status or args.top):
        raise UserError("--changes lists every change; it takes no --status or --top")
    if not args.changes and args.since is not None:
        raise UserError("--since goes with --changes")
    store = _existing_store(args)
    if args.changes:
        return _print_changes(store, args)
    print(format_ranking(ranking_table(store, statuses=args.status, top=args.top), args.format))
    return EXIT_OK


def _print_changes(store: Store, args) -> int:
    from models.changes import run_changes
    from models.ranking import format_changes

    history = store.read_table("status_history") if store.has_table("status_history") else None
    print(format_changes(run_changes(history, since=args.since), args.format))
    return EXIT_OK


def cmd_snooze(args) -> int:
    from dashboard.snoozes import clear_snooze, snooze_vehicle

    if args.clear and (args.until or args.reason):
        raise UserError("--clear takes no --until or --reason")
    if not args.clear and (args.until is None or args.reason is None):
        raise UserError("a snooze needs --until DATE and --reason TEXT (or --clear)")
    store = _existing_store(args)
    if args.clear:
        found = clear_snooze(store, args.vehicle_id)
        print(f"{args.vehicle_id}: snooze removed" if found else f"{args.vehicle_id} had no snooze")
        return EXIT_OK
    row = snooze_vehicle(store, args.vehicle_id, args.until, args.reason)
    print(f"{args.vehicle_id}: {row['snoozed_status']} snoozed until {row['until']} ({row['reason']}); "
          "takes effect at the next `tracktrue update`")
    return EXIT_OK


def cmd_vehicle(args) -> int:
    from models import vehicle_report

    print(vehicle_report(_existing_store(args), args.vehicle_id, n_trips=args.trips))
    return EXIT_OK


def cmd_evaluate(args) -> int:
    from dashboard.outcomes import read_outcomes
    from models import evaluate

    store = _existing_store(args)
    report = evaluate(store, truth_csv=args.truth, as_of=args.as_of, outcomes=read_outcomes(store))
    print(report.describe())
    return EXIT_OK


def cmd_demo(args) -> int:
    from tracktrue.pipeline import run_demo

    return run_demo(Store.open(args.store), n_vehicles=args.vehicles, days=args.days, seed=args.seed,
                    progress=_progress(args))


def cmd_dashboard(args) -> int:
    from dashboard import launch

    return launch(_existing_store(args), port=args.port, host=args.host)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    level = logging.WARNING - 10 * min(args.verbose, 2)
    logging.basicConfig(level=level, format="%(levelname)s %(name)s: %(message)s")
    try:
        return args.func(args)
    except UserError as exc:
        print(f"tracktrue {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except TableMissing as exc:
        print(f"tracktrue {args.command}: {exc} — run the earlier stage first "
              "(ingest → features → score), or `tracktrue demo`.", file=sys.stderr)
        return EXIT_MISSING
    except LockHeld as exc:
        print(f"tracktrue {args.command}: {exc}; try again when it has finished.", file=sys.stderr)
        return EXIT_LOCKED
    except KeyboardInterrupt:
        print(f"tracktrue {args.command}: interrupted; the store is consistent, rerun to finish.", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
