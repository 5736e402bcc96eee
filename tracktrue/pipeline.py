"""The demo: the whole chain on the embedded default store, one stage after another.

Orchestration only; each step is one stage's public function, exactly what the
individual commands call, so the demo proves the commands a user runs.
"""

from __future__ import annotations

import hashlib
import json
import logging
import time
from pathlib import Path

from tracktrue.store import Store

log = logging.getLogger(__name__)

#: The demo's synthetic logs live beside the store, not inside it: they are
#: input like any fleet's exports, and ingest never reads the store's own files.
DEMO_FLEET_SUFFIX = "-demo-fleet"


def demo_fleet_dir(store: Store) -> Path:
    root = store.root.resolve()
    return root.with_name(root.name + DEMO_FLEET_SUFFIX)


def _simulator_fingerprint() -> str:
    """A digest of the simulator's source, so a fleet written by older simulator code is regenerated."""
    import synthetic_fleet

    digest = hashlib.sha1()
    for path in sorted(Path(synthetic_fleet.__file__).parent.glob("*.py")):
        digest.update(path.name.encode() + b"\0" + path.read_bytes())
    return digest.hexdigest()[:16]


def run_demo(store: Store, n_vehicles: int | None, days: int | None, seed: int, progress: bool) -> int:
    """synth → ingest (logs, registry, service history) → features → score → rank, printing each step."""
    from features import run_features
    from ingest import run_ingest
    from ingest.service_events import import_service_events
    from models import evaluate, format_ranking, ranking_table, run_scoring
    from synthetic_fleet import DEMO_DAYS, DEMO_VEHICLES, generate_fleet

    n_vehicles = n_vehicles or DEMO_VEHICLES
    days = days or DEMO_DAYS
    fleet_dir = demo_fleet_dir(store)
    t0 = time.perf_counter()

    _step(1, "generate the synthetic demo fleet")
    params = {"vehicles": n_vehicles, "days": days, "seed": seed, "simulator": _simulator_fingerprint()}
    marker = fleet_dir / "demo-params.json"
    if marker.exists() and json.loads(marker.read_text()) == params:
        print(f"  {fleet_dir} already holds this fleet (same size, seed and simulator); reusing it")
    else:
        summary = generate_fleet(fleet_dir, n_vehicles=n_vehicles, days=days, seed=seed, progress=progress)
        marker.write_text(json.dumps(params))  # written last: a killed run regenerates
        print(_indent(summary.describe()))

    _step(2, "ingest the CSV logs and the service history")
    ingest_summary = run_ingest([fleet_dir / "logs"], store, vehicles_csv=fleet_dir / "vehicles.csv", progress=progress)
    print(_indent(ingest_summary.describe()))
    print(_indent(import_service_events(fleet_dir / "service_history.csv", store).describe()))

    _step(3, "compute per-trip features")
    print(_indent(run_features(store, progress=progress).describe()))

    _step(4, "score trips and vehicles")
    print(_indent(run_scoring(store, progress=progress).describe()))

    _step(5, "the ranking (top 10)")
    print(format_ranking(ranking_table(store, top=10), "table"))

    _step(6, "how good is it? (against the simulator's ground truth)")
    print(_indent(evaluate(store, truth_csv=fleet_dir / "truth.csv", as_of=None).describe()))

    print(f"\nDone in {time.perf_counter() - t0:.0f} s. Store: {store.root.resolve()}")
    print("Open the dashboard with:  tracktrue dashboard" + _store_arg(store))
    print("One vehicle's history:    tracktrue vehicle <ID>" + _store_arg(store))
    return 0


def _store_arg(store: Store) -> str:
    return "" if store.root == Path("tracktrue-store") else f" --store {store.root}"


def _step(n: int, text: str) -> None:
    print(f"\n[{n}/6] {text}", flush=True)


def _indent(text: str) -> str:
    return "\n".join("  " + line for line in text.splitlines())
