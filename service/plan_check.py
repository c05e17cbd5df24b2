"""The start-up check of the configured plans: a plan is a promise.

A plan whose own figures (alpha', beta', expected units at p0 and p1) are incomplete (the
exact computation stopped with probability still open) stops the service from starting;
other warnings are logged. Only p0 and p1 are evaluated here (no curve), and the outcome is
kept in a small JSON file beside the database, keyed by the plan's parameters, so a restart
with unchanged plans answers at once. The full figures (curve, worst-case ASN) are computed
in a background thread once the service is up (:func:`warm_up`), so `/healthz` answers
without waiting for them.
"""
from __future__ import annotations

import json
import logging
import threading
from pathlib import Path

from .plans import ConfigError, PlanSpec

log = logging.getLogger("seqaudit.plans")
#: Changes whenever the exact engine's results could change; old cache entries are ignored.
ENGINE = "exact-2"


def _key(spec: PlanSpec) -> str:
    return json.dumps({"engine": ENGINE, **spec.design_args()}, sort_keys=True)


def own_warnings(spec: PlanSpec, max_steps: int | None = None) -> list[dict]:
    """Warnings of a plan from its exact figures at p0 and p1 only."""
    from .stats import Recheck, SprtPlan, plan_warnings
    from .stats.calibrate import calibrate
    from .stats.exact import MAX_STEPS, PathCounts

    steps = MAX_STEPS if max_steps is None else max_steps
    rc = Recheck(spec.sensitivity, spec.specificity)
    plan = SprtPlan.wald(rc.apparent(spec.p0), rc.apparent(spec.p1), spec.alpha, spec.beta,
                         max_units=spec.max_units, cut_llr=spec.cut_llr,
                         visit_units=spec.visit_units)
    if spec.calibrate:
        plan = calibrate(plan, max_steps=steps).plan
    res = PathCounts(plan, max_steps=steps).summary([plan.p0, plan.p1])
    return plan_warnings(plan, float(res.p_flag[0]), float(res.p_clear[1]),
                         float(res.residual.max()))


def check_plans(specs: dict[str, PlanSpec], cache_path: Path | None = None,
                max_steps: int | None = None) -> dict[str, list[dict]]:
    """Warnings of every plan; raises ConfigError naming any plan that is incomplete."""
    cache: dict = {}
    if cache_path is not None and cache_path.exists():
        try:
            cache = json.loads(cache_path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            cache = {}
    out, changed = {}, False
    for name, spec in specs.items():
        key = _key(spec) + ("" if max_steps is None else f"|{max_steps}")
        if key not in cache:
            cache[key] = own_warnings(spec, max_steps)
            changed = True
        out[name] = cache[key]
    if changed and cache_path is not None:
        try:
            cache_path.write_text(json.dumps(cache, indent=1, sort_keys=True), encoding="utf-8")
        except OSError as exc:
            log.warning("could not keep the plan check in %s: %s", cache_path, exc)
    bad = [name for name, warns in out.items() if any(w["code"] == "incomplete" for w in warns)]
    for name, warns in out.items():
        for w in warns:
            if w["code"] != "incomplete":
                log.warning("plan %r: [%s] %s", name, w["code"], w["message"])
    if bad:
        detail = "; ".join(f"{name}: " + next(w["message"] for w in out[name]
                                              if w["code"] == "incomplete") for name in bad)
        raise ConfigError(f"plan(s) {', '.join(repr(b) for b in bad)} cannot be used: their "
                          f"own figures are incomplete ({detail})")
    return out


def cache_file(db_path: Path) -> Path:
    return Path(db_path).with_name(Path(db_path).name + ".plan-check.json")


def warm_up(plans) -> threading.Thread:
    """Compute every plan's full figures in a daemon thread (the PlanBook keeps them)."""
    def run():
        for name in sorted(plans.specs):
            try:
                plans.design(name)
            except Exception:  # noqa: BLE001 - logged; the route reports it when asked
                log.exception("plan %r: figures could not be computed", name)

    thread = threading.Thread(target=run, name="plan-figures", daemon=True)
    thread.start()
    return thread
