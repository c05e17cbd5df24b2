"""The demo lets one cleared agency drift upward so that its watch chart signals early."""
import numpy as np

from service.commands.demo import seed
from service.demo_scenario import DRIFTING, agencies
from service.operations import Monitor, PlanBook
from service.stats.watch import arl, signal_within
from service.store import Store

from .conftest import quiet_settings


def test_drifting_agency_is_watched_and_signals_within_its_first_units(tmp_path):
    settings = quiet_settings(tmp_path)
    seed(settings, tmp_path / "keys.json")
    m = Monitor(store=Store(settings.db_path), plans=PlanBook(settings.plans))
    a = agencies()[DRIFTING]
    fac = m.facility(a["facility_id"])
    assert a["plan"] == "dispensers" and fac["status"] == "watching"
    w = m.plans.watch("dispensers")
    # exact (Brook & Evans 1972 chain): at the drift rate the chart signals after ~9 units on
    # average and within 40 units with probability > 0.999, so the demo shows it in minutes
    assert arl(w.m, w.t, a["drift_rate"]) < 12
    assert signal_within(w.m, w.t, a["drift_rate"], 40) > 0.999
    rng = np.random.default_rng(5)
    for i in range(40):
        m.post_records({"record_id": f"drift-{i}", "facility_id": a["facility_id"],
                        "observed_at": "2026-12-01T09:00:00Z", "units": 1,
                        "nonconforming": int(rng.random() < a["drift_rate"])},
                       ("test", "field"), with_state=False)
        if m.facility(a["facility_id"])["cycle"] == 2:
            break
    assert m.facility(a["facility_id"])["cycle"] == 2
    kinds = [x["kind"] for x in m.alerts(facility_id=a["facility_id"])["items"]]
    assert "watch_signal" in kinds
