"""APScheduler (3.x) in the app lifespan: it only decides *when*; the work is the plain
job functions in service/jobs/, each wrapped so it runs once per tick across processes."""
from __future__ import annotations

import logging
import time
from datetime import timezone

from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger

from .jobs.backup import scheduled_backup
from .jobs.calendar import raise_stale_alerts, remonitor_cleared
from .jobs.delivery import deliver_due
from .jobs.runner import holder_id, run_once_per_tick
from .operations import Monitor
from .settings import Settings

log = logging.getLogger("seqaudit.scheduler")


def job_table(settings: Settings, monitor: Monitor, http) -> list[tuple[str, object, float, object]]:
    """(name, trigger, tick period in s, function) for every scheduled job."""
    sch, store, clock = settings.schedule, monitor.store, monitor.clock
    jobs = [
        ("delivery", IntervalTrigger(seconds=sch.delivery_interval_s), sch.delivery_interval_s,
         lambda: deliver_due(store, http, settings.delivery, clock)),
        ("stale", IntervalTrigger(seconds=sch.stale_check_s), sch.stale_check_s,
         lambda: raise_stale_alerts(store, monitor.plans, clock, sch.stale_after_days)),
        ("remonitor", IntervalTrigger(seconds=sch.remonitor_check_s), sch.remonitor_check_s,
         lambda: remonitor_cleared(store, monitor.plans, clock)),
    ]
    if sch.backup_cron:
        jobs.append(("backup", CronTrigger.from_crontab(sch.backup_cron, timezone=timezone.utc),
                     60.0, lambda: scheduled_backup(settings.db_path, sch.backup_dir,
                                                    sch.backup_keep, clock())))
    return jobs


def start_scheduler(settings: Settings, monitor: Monitor, http) -> BackgroundScheduler:
    scheduler = BackgroundScheduler(timezone=timezone.utc,
                                    job_defaults={"coalesce": True, "max_instances": 1,
                                                  "misfire_grace_time": 30})
    holder = holder_id()
    for name, trigger, period, fn in job_table(settings, monitor, http):
        scheduler.add_job(run_once_per_tick, trigger, id=name, name=name,
                          kwargs={"store": monitor.store, "job": name, "period_s": period,
                                  "fn": fn, "clock": monitor.clock, "now_s": time.time,
                                  "lease_ttl_s": settings.schedule.lease_ttl_s,
                                  "holder": holder})
    scheduler.start()
    log.info("scheduler started in %s with jobs %s", holder,
             [j.id for j in scheduler.get_jobs()])
    return scheduler
