"""seqaudit demo: seed the demo scenario, start the service, feed simulated tablet posts."""
from __future__ import annotations

import json
import sys
import threading
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path
from urllib.parse import quote

import numpy as np

from ..clock import utc_now
from ..demo_scenario import DRIFTING, INSPECTORS, OFFICE, agencies
from ..operations import Monitor, PlanBook
from ..sampling import Sampling
from ..schemas import FacilityCreate
from ..selection import canonical_frame
from ..settings import Settings, draws_required
from ..store import Store


def demo_settings(settings: Settings) -> Settings:
    """The demo runs every configured plan with ``require_draw``: only re-checks of units
    drawn by RFC 3797 are evidence. (As the service-wide setting, so that the server's
    worker processes, which rebuild their settings, do the same.)"""
    return settings.with_overrides(require_draw=True, plans=draws_required(settings.plans))


def seed(settings: Settings, keys_file: Path) -> dict:
    """Register the demo agencies and demo keys once; later runs reuse them."""
    settings = demo_settings(settings)
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


def _seed_history(monitor: Monitor, actor, weeks: int = 4, per_week: int = 10,
                  seed_value: int = 11) -> None:
    """Earlier weeks, so that the demo opens with some decisions already made: each week
    every agency registers the certificates it issued (a frame), the office draws
    ``per_week`` of them with that week's public seed, and inspectors re-check the drawn
    units in draw order; now and then a unit that was not drawn is re-checked too (kept, not
    evidence). Then this week's frames and draws give the tablets their assignments."""
    from ..clock import format_time

    rng = np.random.default_rng(seed_value)
    sampling = Sampling(monitor)
    today = datetime.now(timezone.utc).date()
    this_monday = today - timedelta(days=today.weekday())
    for back in range(weeks, -1, -1):
        monday = this_monday - timedelta(weeks=back)
        seed_text = demo_seed(monday)
        batch = []
        for a in agencies():
            fid = a["facility_id"]
            if a["plan"] not in monitor.plans.specs:
                continue
            frame = weekly_frame(a, monday, rng)
            out = sampling.register_frame(fid, f"certificates of week {monday.isoformat()}",
                                          monday.isoformat(),
                                          (monday + timedelta(days=6)).isoformat(), frame, actor)
            if monitor.store.facility(fid)["status"] != "monitoring":
                continue
            drawn = sampling.make_draw(fid, out["frame_id"], min(per_week, frame.size),
                                       seed_text, actor)
            if back == 0:
                continue                     # this week's units are the tablets' work
            for u in drawn["units"]:
                when = datetime(monday.year, monday.month, monday.day, tzinfo=timezone.utc) + \
                    timedelta(hours=int(rng.integers(8, 24 * 6)))
                batch.append({"record_id": f"hist-{fid}-{drawn['draw_id']}-{u['order']}",
                              "facility_id": fid, "observed_at": format_time(when),
                              "units": 1,
                              "nonconforming": int(rng.random() < a.get("history_rate",
                                                                        a["true_rate"])),
                              "unit_ref": u["unit_ref"],
                              "inspector": INSPECTORS[int(rng.integers(len(INSPECTORS)))]})
            if rng.random() < 0.2:           # a walk-in re-check of a unit not drawn
                batch.append({"record_id": f"hist-{fid}-walkin-{back}", "facility_id": fid,
                              "observed_at": format_time(datetime.now(timezone.utc)
                                                         - timedelta(weeks=back)),
                              "units": 1, "nonconforming": 0,
                              "unit_ref": f"{unit_prefix(a)}-WALKIN-{back}",
                              "inspector": INSPECTORS[0],
                              "note": "re-checked on a complaint, not from the draw"})
        for k in range(0, len(batch), 500):
            monitor.post_records({"records": batch[k:k + 500]}, actor, with_state=False)


def unit_prefix(agency: dict) -> str:
    return "FD" if agency["plan"] == "dispensers" else "SC"


def weekly_frame(agency: dict, monday, rng, batch: str = ""):
    """The certificates an agency issued in a week: invented numbers, 40 to 120 of them
    (``batch`` tells apart the certificates of a later registration in the same week)."""
    count = int(rng.integers(40, 121))
    week = monday.isocalendar()
    refs = [f"{unit_prefix(agency)}-{agency['facility_id'][3:]}-{week.year}W{week.week:02d}-"
            f"{batch}{n:03d}" for n in range(1, count + 1)]
    return canonical_frame(refs)


def demo_seed(monday) -> str:
    """A stand-in for a public lottery result of the week (three draws of six numbers from
    1 to 49): invented, but fixed by the date so that every run of the demo agrees."""
    rng = np.random.default_rng(int(monday.strftime("%Y%m%d")))
    return " / ".join(" ".join(str(int(x)) for x in sorted(rng.choice(49, 6, replace=False) + 1))
                      for _ in range(3))


def feed(base_url: str, key: str, seconds: float, rate: float, seed_value: int = 7,
         stop: threading.Event | None = None) -> int:
    """Simulated tablets: each post re-checks the next unit of a facility's assignments
    (``GET /v1/assignments``, in draw order), with the odd retried post and, rarely, a
    unit that was not drawn (kept by the service, but not evidence)."""
    import httpx2

    rng = np.random.default_rng(seed_value)
    by_id = {a["facility_id"]: a for a in agencies()}
    drifting, drift_left = agencies()[DRIFTING], 40
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
            try:
                work = [f for f in client.get("/v1/assignments").json()["items"]
                        if f["facility_id"] in by_id and f["units"]]
            except (httpx2.TransportError, ValueError, KeyError):
                time.sleep(0.5)
                continue
            if drift_left and rng.random() < 0.2:
                # the drifting agency, watched since its clear, keeps being re-checked on
                # complaints (not from a draw): its chart signals within a few minutes
                drift_left -= 1
                a, unit = drifting, f"{unit_prefix(drifting)}-AFTER-{40 - drift_left:03d}"
            elif not work:
                time.sleep(1.0)              # nothing drawn to re-check: wait for the office
                continue
            else:
                job = work[int(rng.integers(len(work)))]
                a = by_id[job["facility_id"]]
                unit = job["units"][0]["unit_ref"]
                if rng.random() < 0.03:
                    unit = f"{unit_prefix(a)}-WALKIN-{int(rng.integers(1000, 9999))}"
            body = {"record_id": f"demo-{run}-{sent}", "facility_id": a["facility_id"],
                    "observed_at": utc_now(), "units": 1,
                    "nonconforming": int(rng.random() < a.get("drift_rate", a["true_rate"])),
                    "unit_ref": unit,
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


def office(base_url: str, key: str, seconds: float, every_s: float = 15.0,
           stop: threading.Event | None = None, per_draw: int = 12) -> int:
    """The office, with an analyst key: when a facility with an open cycle has no unit left
    to re-check, it registers that facility's certificates of the week as a new frame and
    draws from it with the week's public seed. Returns the number of draws made."""
    import httpx2

    rng = np.random.default_rng(99)
    by_id = {a["facility_id"]: a for a in agencies()}
    made = 0
    deadline = time.monotonic() + seconds
    with httpx2.Client(base_url=base_url, headers={"Authorization": f"Bearer {key}"},
                       timeout=30.0) as client:
        while time.monotonic() < deadline and not (stop and stop.is_set()):
            try:
                pending = {f["facility_id"] for f in
                           client.get("/v1/assignments").json()["items"] if f["units"]}
                open_ids = [f["facility_id"] for f in client.get(
                    "/v1/facilities", params={"status": "monitoring", "limit": 1000}
                ).json()["items"]]
            except (httpx2.TransportError, ValueError, KeyError):
                open_ids, pending = [], set()
            today = datetime.now(timezone.utc).date()
            for fid in open_ids:
                if fid in pending or fid not in by_id or (stop and stop.is_set()):
                    continue
                seg = quote(fid, safe="")
                frame = weekly_frame(by_id[fid], today, rng, batch=f"T{int(time.time())}-")
                r = client.post(f"/v1/facilities/{seg}/frames", json={
                    "label": f"certificates to {today.isoformat()} (top-up {made + 1})",
                    "period_start": (today - timedelta(days=today.weekday())).isoformat(),
                    "period_end": today.isoformat(), "units": list(frame.units)})
                if r.status_code != 201:
                    continue
                d = client.post(f"/v1/facilities/{seg}/draws", json={
                    "frame_id": r.json()["frame_id"], "size": min(per_draw, frame.size),
                    "seed": demo_seed(today) + f" / {made + 1}"})
                made += d.status_code == 201
            end = time.monotonic() + every_s
            while time.monotonic() < min(end, deadline) and not (stop and stop.is_set()):
                time.sleep(0.2)
    return made


def run_demo(settings: Settings, minutes: float, rate: float) -> int:
    from .serve import serve

    keys_file = settings.db_path.with_name(settings.db_path.stem + "-keys.json")
    settings = demo_settings(settings)
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
    drifting = agencies()[DRIFTING]
    print(f"  {drifting['facility_id']} ({drifting['name']}) was cleared before the demo and "
          "drifts upward now: its watch chart signals within a few minutes")
    print("  A boundary crossing is a statistical signal for review under the agency's own "
          "procedures, not a verdict.")
    sys.stdout.flush()
    stop = threading.Event()
    feeder = threading.Thread(target=_feed_then_say,
                              args=(base, keys["field"], minutes, rate, stop), daemon=True)
    feeder.start()
    desk = threading.Thread(target=office, args=(base, keys["analyst"], minutes * 60),
                            kwargs={"stop": stop}, daemon=True)
    desk.start()
    try:
        return serve(settings, log_level="warning")
    finally:
        stop.set()
