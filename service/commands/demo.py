"""seqaudit demo: seed the demo scenario, start the service, feed simulated tablet posts."""
from __future__ import annotations

import json
import sys
import threading
import time
from pathlib import Path

import numpy as np

from ..clock import utc_now
from ..demo_scenario import INSPECTORS, OFFICE, agencies
from ..operations import Monitor, PlanBook
from ..schemas import FacilityCreate
from ..settings import Settings
from ..store import Store


def seed(settings: Settings, keys_file: Path) -> dict:
    """Register the demo agencies and demo keys once; later runs reuse them."""
    store = Store(settings.db_path)
    store.migrate()
    if keys_file.exists():
        return json.loads(keys_file.read_text())
    monitor = Monitor(store=store, plans=PlanBook(settings.plans))
    actor = ("demo-seed", "admin")
    for a in agencies():
        if a["plan"] in settings.plans:
            monitor.register_facility(FacilityCreate(facility_id=a["facility_id"], name=a["name"],
                                                     plan=a["plan"]), actor)
    _seed_history(monitor, actor)
    keys = {}
    for role in ("field", "analyst", "admin"):
        _, key = store.add_key(role, f"demo {role}", utc_now())
        keys[role] = key
    keys_file.parent.mkdir(parents=True, exist_ok=True)
    keys_file.write_text(json.dumps(keys, indent=2))
    keys_file.chmod(0o600)
    return keys


def _seed_history(monitor: Monitor, actor, per_agency: int = 40, seed_value: int = 11) -> None:
    """Earlier re-checks, so that the demo opens with some decisions already made."""
    from datetime import datetime, timedelta, timezone

    from ..clock import format_time

    rng = np.random.default_rng(seed_value)
    start = datetime.now(timezone.utc) - timedelta(days=30)
    batch = []
    for i in range(per_agency):
        for a in agencies():
            when = start + timedelta(hours=int(rng.integers(0, 24 * 29)))
            batch.append({"record_id": f"hist-{a['facility_id']}-{i}",
                          "facility_id": a["facility_id"], "observed_at": format_time(when),
                          "units": 1, "nonconforming": int(rng.random() < a["true_rate"]),
                          "inspector": INSPECTORS[int(rng.integers(len(INSPECTORS)))]})
    for k in range(0, len(batch), 500):
        monitor.post_records({"records": batch[k:k + 500]}, actor, with_state=False)


def feed(base_url: str, key: str, seconds: float, rate: float, seed_value: int = 7,
         stop: threading.Event | None = None) -> int:
    """Post simulated tablet records (with the odd retried post) for ``seconds``."""
    import httpx2

    rng = np.random.default_rng(seed_value)
    people = agencies()
    headers = {"Authorization": f"Bearer {key}"}
    sent = 0
    deadline = time.monotonic() + seconds
    last = None
    with httpx2.Client(base_url=base_url, headers=headers, timeout=10.0) as client:
        for _ in range(200):  # wait for the server
            try:
                if client.get("/healthz").status_code == 200:
                    break
            except httpx2.TransportError:
                time.sleep(0.1)
        run = f"{int(time.time())}"
        while time.monotonic() < deadline and not (stop and stop.is_set()):
            a = people[int(rng.integers(len(people)))]
            body = {"record_id": f"demo-{run}-{sent}", "facility_id": a["facility_id"],
                    "observed_at": utc_now(), "units": 1,
                    "nonconforming": int(rng.random() < a["true_rate"]),
                    "unit_ref": f"{'FD' if a['plan'] == 'dispensers' else 'SC'}-"
                                f"{int(rng.integers(1000, 9999))}",
                    "inspector": INSPECTORS[int(rng.integers(len(INSPECTORS)))]}
            try:
                client.post("/v1/records", json=body)
                if last is not None and rng.random() < 0.05:
                    client.post("/v1/records", json=last)  # a tablet retrying: not counted twice
            except httpx2.TransportError:
                time.sleep(0.5)
                continue
            last = body
            sent += 1
            time.sleep(1.0 / rate)
    return sent


def _feed_then_say(base: str, key: str, minutes: float, rate: float,
                   stop: threading.Event) -> None:
    """Run the feed; when it ends on its own, say so (the service keeps serving)."""
    sent = feed(base, key, minutes * 60, rate, stop=stop)
    if not stop.is_set():
        print(f"seqaudit demo: the simulated feed has ended ({sent} posts in {minutes:g} min); "
              f"the service keeps serving at {base}/ui until Ctrl-C", flush=True)


def run_demo(settings: Settings, minutes: float, rate: float) -> int:
    from .serve import serve

    keys_file = settings.db_path.with_name(settings.db_path.stem + "-keys.json")
    keys = seed(settings, keys_file)
    base = f"http://{settings.host}:{settings.port}"
    print(f"{OFFICE} — seqaudit demo")
    print(f"  dashboard: {base}/ui   (sign in with the analyst key below)")
    print(f"  API docs:  {base}/docs")
    print(f"  database:  {settings.db_path}")
    print(f"  demo keys (also in {keys_file}):")
    for role, key in keys.items():
        print(f"    {role:<8} {key}")
    print("  the analyst key opens the dashboard; the admin key also manages keys and "
          "facilities; the field key only posts records")
    print(f"  feeding simulated tablet posts for {minutes:g} min at about {rate:g}/s; "
          "Ctrl-C stops the service")
    print("  A boundary crossing is a statistical signal for review under the agency's own "
          "procedures, not a verdict.")
    sys.stdout.flush()
    stop = threading.Event()
    feeder = threading.Thread(target=_feed_then_say,
                              args=(base, keys["field"], minutes, rate, stop), daemon=True)
    feeder.start()
    try:
        return serve(settings, log_level="warning")
    finally:
        stop.set()
