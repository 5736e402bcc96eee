"""The dashboard over a store the real chain built: simulator → ingest → features → models."""

import json

import pytest
from streamlit.testing.v1 import AppTest

from dashboard import planner, workshop
from test_dashboard_pages import APP, PAGES
from tracktrue.store import STORE_ENV, Store

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def real_store(tmp_path_factory):
    from features import run_features
    from ingest import run_ingest
    from models import run_scoring
    from synthetic_fleet import generate_fleet

    base = tmp_path_factory.mktemp("real")
    fleet = base / "fleet"  # outside the store: ingest does not read files inside it
    generate_fleet(fleet, n_vehicles=6, days=8, seed=11)
    store = Store.open(base / "store")
    run_ingest([fleet / "logs"], store, vehicles_csv=fleet / "vehicles.csv")
    run_features(store)
    run_scoring(store)
    return store


def test_every_page_renders_the_real_store_in_the_order_of_tracktrue_rank(real_store, monkeypatch):
    from models import ranking_table

    monkeypatch.setenv(STORE_ENV, str(real_store.root))
    at = AppTest.from_file(str(APP), default_timeout=120).run()
    assert not at.exception, [e.value for e in at.exception]
    ranked = ranking_table(real_store)["vehicle_id"].tolist()
    assert at.dataframe[0].value["Vehicle"].tolist() == ranked

    planner.add_vehicles(real_store, real_store.read_table("vehicle_status").head(2)[["vehicle_id", "depot", "rank"]],
                         planner.default_start())
    assert sorted(workshop.open_plan(real_store)["vehicle_id"]) == sorted(ranked[:2])
    for page in PAGES[1:]:
        at.switch_page(page).run()
        assert not at.exception, (page, [e.value for e in at.exception])
        assert not any("has not been published" in str(i.value) for i in at.info), page

    at.switch_page("views/vehicle.py").run()
    at.selectbox(key="vehicle_pick").set_value(ranked[0]).run()
    spec = json.dumps([json.loads(c.proto.spec) for c in at.get("vega_lite_chart")])
    for title in ("wheel speed (km/h)", "yaw rate (deg/s)", "acceleration (g)", "trip score"):
        assert title in spec, title
