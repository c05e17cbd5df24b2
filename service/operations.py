"""Application functions shared by the API, the CLI and the dashboard.

They validate, call the store (which owns SQLite) and shape what callers see.
No HTTP here: errors are :mod:`service.errors` exceptions.
"""
from __future__ import annotations

import json
import threading
from dataclasses import dataclass
from datetime import timedelta
from typing import Any, Callable

import orjson
from pydantic import TypeAdapter, ValidationError

from .clock import format_time, normalize_utc_text, parse_rfc3339, utc_now
from .draw_rule import exclusion_text
from .errors import Conflict, Invalid, NotFound, TooLarge
from .plans import PlanSpec
from .record_checks import OLD as OLD_RECORD, WORDS as OBSERVATION_WORDS
from .schemas import DOT_IDS, ID_PATTERN, ID_RULE, NO_NUL, PRINTABLE, RFC3339_PATTERN, \
    FacilityCreate, RecordBatchCreate, RecordCreate
from .stats import Recheck, SprtPlan, design
from .watching import design_for
from .stats.calibrate import calibrate
from .store import RecordIn, Store

Actor = tuple[str, str]   # (key label, role)
_RECORDS = TypeAdapter(list[RecordCreate])
_BATCH = TypeAdapter(RecordBatchCreate)
_CODES = {"accepted": 201, "duplicate": 200, "conflict": 409, "invalid": 422}


def _prefix(index: int, batch: bool) -> str:
    """Where a record's fields are in the request body, for error reports."""
    return f"records[{index}]." if batch else ""


def field_path(parts) -> str:
    """A location as a person reads it: ``records[1].nonconforming``."""
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


#: What a pattern means, in words, for the patterns of service/schemas.py.
def _no_nul(text: str | None, field: str) -> None:
    """Free text from forms (the API's schemas check the same): NUL is refused."""
    if text is not None and "\x00" in text:
        raise Invalid(f"{field} must not contain the NUL character", field=field)


PATTERN_WORDS = {
    NO_NUL: "must not contain the NUL character",
    RFC3339_PATTERN: "must be an RFC 3339 time with offset, e.g. 2026-11-07T08:00:00Z",
    PRINTABLE: "must not contain control characters (tabs, line breaks and the like)",
    ID_PATTERN: ID_RULE,
}


def error_message(err: dict) -> str:
    """A pydantic error's message as a person reads it."""
    if err.get("type") == "extra_forbidden":
        return "unknown field"
    if err.get("type") == "string_pattern_mismatch":
        words = PATTERN_WORDS.get((err.get("ctx") or {}).get("pattern"))
        if words:
            return words
    msg = str(err.get("msg", "invalid"))
    return msg[len("Value error, "):] if msg.startswith("Value error, ") else msg


def validation_errors(exc: ValidationError, prefix: str = "") -> list[dict]:
    """pydantic errors as [{field, message}] with dotted field paths."""
    out = []
    for err in exc.errors(include_url=False):
        loc = field_path(p for p in err["loc"] if p != "__root__")
        msg = error_message(err)
        out.append({"field": (prefix + loc) if loc else prefix.rstrip(".") or "body",
                    "message": msg})
    return out


class PlanBook:
    """The configured plans, their boundaries (calibrated where asked) and exact figures."""

    def __init__(self, specs: dict[str, PlanSpec]):
        self.specs = dict(specs)
        self._lock = threading.Lock()
        self._plans: dict[str, SprtPlan] = {}
        self._designs: dict[str, Any] = {}
        self._watches: dict[str, Any] = {}

    def spec(self, name: str) -> PlanSpec:
        if name not in self.specs:
            raise NotFound(f"no plan {name!r}; configured plans: {', '.join(sorted(self.specs))}")
        return self.specs[name]

    def plan(self, name: str) -> SprtPlan:
        """The plan a new cycle runs: on the apparent rates when re-checks are imperfect."""
        spec = self.spec(name)
        with self._lock:
            if name not in self._plans:
                rc = Recheck(spec.sensitivity, spec.specificity)
                base = SprtPlan.wald(rc.apparent(spec.p0), rc.apparent(spec.p1), spec.alpha,
                                     spec.beta, max_units=spec.max_units, cut_llr=spec.cut_llr,
                                     visit_units=spec.visit_units)
                self._plans[name] = calibrate(base).plan if spec.calibrate else base
            return self._plans[name]

    def design(self, name: str):
        """The plan's full figures, computed once; never under the lock that plan() takes, so
        that registering a facility does not wait for a curve (the start-up warm-up computes
        these in a background thread)."""
        spec = self.spec(name)
        with self._lock:
            done = self._designs.get(name)
        if done is None:
            done = design(**spec.design_args())
            with self._lock:
                done = self._designs.setdefault(name, done)
        return done

    def watch(self, name: str):
        """The plan's watch chart (``WatchDesign``) or None when the plan has no watch."""
        spec = self.spec(name)
        if spec.watch is None:
            return None
        with self._lock:
            if name not in self._watches:
                self._watches[name] = design_for(spec.p0, spec.p1, spec.watch)
            return self._watches[name]

    def snapshot(self, name: str) -> dict:
        """What a new cycle stores about its plan, so editing the config never changes it."""
        spec, plan = self.spec(name), self.plan(name)
        return {"name": name, "p0": spec.p0, "p1": spec.p1, "alpha": plan.alpha,
                "beta": plan.beta, "max_units": plan.max_units, "cut_llr": plan.cut_llr,
                "calibrate": spec.calibrate, "upper_llr": plan.upper_llr,
                "lower_llr": plan.lower_llr, "require_draw": spec.require_draw,
                "visit_units": spec.visit_units,
                "sensitivity": spec.sensitivity, "specificity": spec.specificity,
                "apparent_p0": plan.p0, "apparent_p1": plan.p1,
                **self._watch_snapshot(name)}

    def _watch_snapshot(self, name: str) -> dict:
        w = self.watch(name)
        if w is None:
            return {}
        return {"watch": {"m": w.m, "t": w.t, "p1": w.p1, "arl0": w.arl0, "arl_p0": w.arl_p0,
                          "arl_p1": w.arl_p1}}

    def public(self, name: str, rates=()) -> dict:
        spec = self.spec(name)
        if rates:
            d = design(**spec.design_args(), rates=tuple(rates)).to_dict()
        else:
            d = self.design(name).to_dict()
        return {"name": name, "title": spec.title, "p0": spec.p0, "p1": spec.p1,
                "alpha": spec.alpha, "beta": spec.beta, "max_units": spec.max_units,
                "cut_llr": spec.cut_llr, "calibrate": spec.calibrate,
                "visit_units": spec.visit_units, "sensitivity": spec.sensitivity,
                "specificity": spec.specificity, "warnings": d["warnings"],
                "boundaries": d["boundaries"], "exact": d["exact"], "wald": d["wald"],
                "fixed_sample": d["fixed_sample"], "recheck": d["recheck"],
                "calibration": d["calibration"], "decision_numbers": d["decision_numbers"],
                "at_rates": d["at_rates"],
                "watch": None if spec.watch is None else self.watch(name).to_dict()}


def cycle_public(row: dict) -> dict:
    snap = json.loads(row["plan_json"])
    return {"cycle": row["cycle"], "plan": row["plan_name"], "status": row["status"],
            "units": row["units"], "nonconforming": row["nonconforming"], "llr": row["llr"],
            "upper_llr": snap["upper_llr"], "lower_llr": snap["lower_llr"],
            "opened_at": row["opened_at"], "decided_at": row["decided_at"],
            "decided_after_units": row["decided_after_units"],
            "decided_at_cap": bool(row["at_cap"]), "closed_at": row["closed_at"],
            "closed_reason": row["closed_reason"], "last_record_at": row["last_record_at"],
            "records": row["record_count"], "plan_snapshot": snap,
            "watch": watch_public(row, snap)}


def finding_public(row: dict) -> dict:
    return {"id": row["id"], "facility_id": row["facility_id"], "cycle": row["cycle"],
            "outcome": row["outcome"], "note": row["note"], "at": row["at"],
            "by": row["key_label"], "role": row["role"]}


def watch_public(row: dict, snap: dict) -> dict | None:
    """The watch chart of a cleared cycle (None when it has none)."""
    if row.get("watch_state") is None:
        return None
    w = snap["watch"]
    return {"state": row["watch_state"], "value": row["watch_value"], "m": w["m"], "t": w["t"],
            "h": w["t"] / w["m"], "p1": w["p1"], "arl_p0": w.get("arl_p0"),
            "arl_p1": w.get("arl_p1"),
            "units": row["watch_units"], "nonconforming": row["watch_nonconforming"],
            "peak": row["watch_peak"], "signal_at": row["watch_signal_at"]}


def shown_status(row: dict) -> str:
    """A cleared facility whose chart is running is shown as ``watching``."""
    if row["status"] == "cleared" and row.get("watch_state") == "watching":
        return "watching"
    return row["status"]


def facility_public(row: dict, cycles: list[dict] | None = None) -> dict:
    snap = json.loads(row["plan_json"])
    out = {"facility_id": row["facility_id"], "name": row["name"], "plan": row["plan"],
           "registered_at": row["created_at"], "status": shown_status(row),
           "decision": row["status"] if row["status"] in ("flagged", "cleared") else None,
           "cycle": row["cycle"],
           "units": row["units"], "nonconforming": row["nonconforming"], "llr": row["llr"],
           "upper_llr": snap["upper_llr"], "lower_llr": snap["lower_llr"],
           "decided_at": row["decided_at"], "decided_after_units": row["decided_after_units"],
           "last_record_at": row["last_record_at"], "region": row.get("region"),
           "watch": watch_public(row, snap)}
    if cycles is not None:
        out["cycles"] = [cycle_public(c) for c in cycles]
    return out


def record_public(row: dict) -> dict:
    return {"seq": row["seq"], "record_id": row["record_id"], "facility_id": row["facility_id"],
            "cycle": row["cycle"], "observed_at": row["observed_at"],
            "received_at": row["received_at"], "units": row["units"],
            "nonconforming": row["nonconforming"], "unit_ref": row["unit_ref"],
            "inspector": row["inspector"], "note": row["note"],
            "evidence": bool(row["counted"]) and not row["void"],
            "llr_after": row.get("llr_after"), "void": bool(row["void"]),
            "voided_at": row["voided_at"], "voided_by": row["voided_by"],
            "void_reason": row["void_reason"], "draw_id": row.get("draw_id"),
            "draw_order": row.get("draw_order"),
            "not_evidence_reason": exclusion_text(row.get("excluded"))}


@dataclass
class _Checked:
    """A request's records after the checks, before the store: the reports of the records
    that failed (by position), and the valid ones with their positions."""

    batch: bool
    now: str
    results: list[dict | None]
    valid: list[RecordIn]
    where: list[int]


@dataclass
class Monitor:
    """The monitoring service's operations over one store."""

    store: Store
    plans: PlanBook
    clock: Callable[[], str] = utc_now
    max_batch: int = 1000
    future_tolerance_s: float = 86_400.0
    max_record_units: int = 10_000

    # -- facilities ------------------------------------------------------------
    def register_facility(self, body: FacilityCreate, actor: Actor) -> dict:
        if body.plan not in self.plans.specs:
            raise Invalid(f"unknown plan {body.plan!r}; configured plans: "
                          f"{', '.join(sorted(self.plans.specs))}", field="plan")
        self.store.add_facility(body.facility_id, body.name, body.plan,
                                self.plans.snapshot(body.plan), self.clock(), actor,
                                region=body.region)
        return self.facility(body.facility_id)

    def facility(self, facility_id: str, with_cycles: bool = True) -> dict:
        row = self.store.facility(facility_id)
        out = facility_public(row, self.store.cycles(facility_id) if with_cycles else None)
        if with_cycles:
            by_cycle: dict[int, list] = {}
            for f in self.store.findings(facility_id):
                by_cycle.setdefault(f["cycle"], []).append(finding_public(f))
            for c in out["cycles"]:
                c["findings"] = by_cycle.get(c["cycle"], [])
                if c["decided_after_units"] is not None:
                    c["after_decision"] = self.store.post_decision_summary(facility_id,
                                                                           c["cycle"])
        return out

    def add_finding(self, facility_id: str, cycle: int, outcome: str, note: str | None,
                    actor: Actor) -> dict:
        return finding_public(self.store.add_finding(facility_id, cycle, outcome, note,
                                                     self.clock(), actor))

    def facilities(self, **filters) -> dict:
        if filters.get("region") is not None:
            from .program_ops import check_region
            check_region(self.store, filters["region"])
        rows, total = self.store.facilities(**filters)
        return {"items": [facility_public(r) for r in rows], "total": total,
                "limit": filters.get("limit", 100), "offset": filters.get("offset", 0)}

    def open_cycle(self, facility_id: str, actor: Actor) -> dict:
        plan_name = self.store.facility(facility_id)["plan"]
        self.store.open_cycle(facility_id, self.plans.snapshot(plan_name), self.clock(), actor)
        return self.facility(facility_id)

    def close_cycle(self, facility_id: str, reason: str, actor: Actor) -> dict:
        _no_nul(reason, "reason")
        self.store.close_cycle(facility_id, reason, self.clock(), actor)
        return self.facility(facility_id)

    # -- records -----------------------------------------------------------------
    def _record_in(self, rec: RecordCreate, latest: str) -> RecordIn:
        """``latest``: the newest acceptable observed_at, as normalised UTC text."""
        if rec.units > self.max_record_units:
            raise Invalid(f"units must be at most {self.max_record_units} in one record "
                          f"(the service's max_record_units), got {rec.units}; split it into "
                          "several records", field="units")
        if rec.record_id in DOT_IDS or rec.facility_id in DOT_IDS:   # (one test per record)
            name = "record_id" if rec.record_id in DOT_IDS else "facility_id"
            raise Invalid(f"{name} {ID_RULE}", field=name)
        try:
            utc_text = normalize_utc_text(rec.observed_at)
        except ValueError as exc:
            raise Invalid(f"observed_at {exc}", field="observed_at") from None
        except OverflowError:   # valid text whose UTC instant lies outside years 1-9999
            raise Invalid(f"observed_at {rec.observed_at} lies outside the years 1 to 9999 "
                          "once converted to UTC", field="observed_at") from None
        if utc_text > latest:
            raise Invalid(f"observed_at {rec.observed_at} lies in the future", field="observed_at")
        return RecordIn(rec.record_id, rec.facility_id, rec.observed_at, utc_text, rec.units,
                        rec.nonconforming, rec.unit_ref, rec.inspector, rec.note)

    def post_records(self, payload: Any, actor: Actor, with_state: bool) -> tuple[int, dict]:
        """Ingest one record or ``{"records": [...]}``; returns (HTTP status, body)."""
        checked = self._check_payload(payload)
        return self._report(checked, self.store.ingest(*self._ingest_args(checked, actor)),
                            with_state)

    async def post_records_json_async(self, body: bytes, actor: Actor,
                                      with_state: bool) -> tuple[int, dict]:
        """:meth:`post_records` from the request body as sent, on an event loop: checks
        there, then awaits the group commit on the store's writer thread (no worker thread
        per request)."""
        checked = self._check_json(body)
        outcomes = await self.store.ingest_async(*self._ingest_args(checked, actor))
        return self._report(checked, outcomes, with_state)

    def _check_json(self, body: bytes) -> "_Checked":
        """A well-formed batch is validated straight from its JSON in one pass through
        pydantic-core; any other body is parsed and checked piece by piece, which names
        each fault."""
        try:
            records = _BATCH.validate_json(body).records
        except ValidationError:
            records = None
        if records is None or len(records) > self.max_batch:
            try:
                payload = orjson.loads(body)
            except orjson.JSONDecodeError as exc:
                raise Invalid(f"the body is not valid JSON: {exc}", field="body") from None
            return self._check_payload(payload)
        return self._check(records, records, True)

    def _check_payload(self, payload: Any) -> "_Checked":
        batch = isinstance(payload, dict) and "records" in payload
        if batch:
            extra = set(payload) - {"records"}
            if extra:
                raise Invalid(f"unknown field(s) beside 'records': {', '.join(sorted(extra))}",
                              field=sorted(extra)[0])
            items = payload["records"]
            if not isinstance(items, list):
                raise Invalid("records must be a list of records", field="records")
            if not items:
                raise Invalid("records must hold at least one record", field="records")
            if len(items) > self.max_batch:
                raise TooLarge(f"a batch holds at most {self.max_batch} records, got {len(items)}; "
                               "split it into several requests")
        else:
            if not isinstance(payload, dict):
                raise Invalid("the body must be a record object or {\"records\": [...]}",
                              field="body")
            items = [payload]
        # One validation call for the whole batch; only if it fails is each record checked
        # alone, so that every bad record is reported by itself.
        try:
            validated = _RECORDS.validate_python(items)
        except ValidationError:
            validated = None
        return self._check(items, validated, batch)

    def _check(self, items: list, validated: list[RecordCreate] | None,
               batch: bool) -> "_Checked":
        """Each record checked; ``validated``: all of ``items`` already validated, or None."""
        now = self.clock()
        latest = format_time(parse_rfc3339(now) + timedelta(seconds=self.future_tolerance_s))
        out = _Checked(batch=batch, now=now, results=[None] * len(items), valid=[], where=[])
        for i, raw in enumerate(items):
            try:
                if validated is None:
                    if not isinstance(raw, dict):
                        raise Invalid("a record must be a JSON object", field="")
                    rec = RecordCreate.model_validate(raw)
                else:
                    rec = validated[i]
                out.valid.append(self._record_in(rec, latest))
                out.where.append(i)
            except ValidationError as exc:
                out.results[i] = self._invalid(i, raw, validation_errors(exc, _prefix(i, batch)))
            except Invalid as exc:
                prefix, field = _prefix(i, batch), exc.extra.get("field", "body")
                if not field.startswith(prefix) or not field:
                    field = (prefix + field).rstrip(".") or "body"
                out.results[i] = self._invalid(i, raw, [{"field": field, "message": exc.detail}])
        return out

    @staticmethod
    def _ingest_args(checked: "_Checked", actor: Actor) -> tuple:
        return (checked.valid, actor[0], checked.now,
                len(checked.results) - len(checked.valid))

    def _report(self, checked: "_Checked", outcomes: list, with_state: bool) -> tuple[int, dict]:
        """(HTTP status, body) from the checks and the store's outcomes."""
        batch, results = checked.batch, checked.results
        states: dict[str, dict] = {}
        counts = {"accepted": 0, "duplicate": 0, "conflict": 0, "invalid": 0}
        for pos, out in zip(checked.where, outcomes):
            status = out.status
            counts[status] += 1
            result = {"index": pos, "record_id": out.record_id, "status": status,
                      "code": _CODES[status], "seq": out.seq}
            if out.note is None and out.detail is None and not with_state:
                results[pos] = result           # the common answer: nothing to add
                continue
            if out.detail:
                result["errors"] = [{"field": _prefix(pos, batch) + (out.field or "body"),
                                     "message": out.detail}]
            elif out.note == OLD_RECORD or (out.note and with_state):
                # (when the cycle opened is standing: field keys hear only of old dates)
                result["warnings"] = [{"field": _prefix(pos, batch) + "observed_at",
                                       "message": OBSERVATION_WORDS[out.note]}]
            if with_state and out.status in ("accepted", "duplicate") and out.facility_id:
                if out.facility_id not in states:
                    states[out.facility_id] = self.facility(out.facility_id, with_cycles=False)
                result["facility"] = states[out.facility_id]
            results[pos] = result
        if not batch:
            only = results[0]
            if only["status"] in ("invalid", "conflict"):
                cls = Invalid if only["status"] == "invalid" else Conflict
                raise cls(only["errors"][0]["message"], errors=only["errors"],
                          record_id=only["record_id"])
            return only["code"], only
        return 200, {"accepted": counts["accepted"], "duplicate": counts["duplicate"],
                     "rejected": len(results) - counts["accepted"] - counts["duplicate"],
                     "results": results}

    @staticmethod
    def _invalid(index: int, raw: Any, errors: list[dict]) -> dict:
        rid = raw.get("record_id") if isinstance(raw, dict) else getattr(raw, "record_id", None)
        return {"index": index, "record_id": rid if isinstance(rid, str) else None,
                "status": "invalid", "code": 422, "seq": None, "errors": errors}

    def records(self, facility_id: str, cycle: int | None, limit: int | None = None,
                offset: int = 0) -> dict:
        """One page of a cycle's records (receipt order) with the LLR after each; all of
        them when ``limit`` is None (exports)."""
        number = cycle if cycle is not None else self.store.facility(facility_id)["current_cycle"]
        rows, total = self.store.records_page(facility_id, number, limit, offset)
        return {"facility_id": facility_id, "cycle": number,
                "items": [record_public(r) for r in rows], "total": total, "limit": limit,
                "offset": offset}

    def void_record(self, record_id: str, reason: str, actor: Actor,
                    facility_id: str | None = None) -> dict:
        """Void a record; with ``facility_id`` (the facility a page or URL names) only a
        record of that facility (a record's facility never changes after it is stored)."""
        _no_nul(reason, "reason")
        if facility_id is not None and self.store.record(record_id)["facility_id"] != facility_id:
            raise NotFound(f"{record_id!r} is not a record of facility {facility_id!r}",
                           facility_id=facility_id)
        out = self.store.void_record(record_id, reason, self.clock(), actor)
        rec = out["record"]
        listed = {r["seq"]: r for r in self.store.records(rec["facility_id"], rec["cycle"])}
        return {"record": record_public(listed[rec["seq"]]), "decision_revised": out["revised"],
                "facility": self.facility(rec["facility_id"], with_cycles=False),
                "alert_ids": out["alert_ids"]}

    # -- alerts, actions, metrics ------------------------------------------------------
    def alerts(self, **filters) -> dict:
        rows, total = self.store.alerts(**filters)
        return {"items": rows, "total": total, "limit": filters.get("limit", 100),
                "offset": filters.get("offset", 0)}

    def ack_alerts(self, alert_ids: list[int], note: str | None,
                   actor: Actor) -> tuple[list[int], list[int]]:
        """Acknowledge several alerts with one note: (acknowledged, skipped) ids."""
        return self.store.ack_alerts(alert_ids, note, self.clock(), actor)

    def ack_alert(self, alert_id: int, note: str | None, actor: Actor) -> dict:
        _no_nul(note, "note")
        return self.store.ack_alert(alert_id, note, self.clock(), actor)

    def actions(self, **filters) -> dict:
        rows, total = self.store.actions(**filters)
        return {"items": rows, "total": total, "limit": filters.get("limit", 100),
                "offset": filters.get("offset", 0)}

    def metrics_text(self) -> str:
        """Prometheus text exposition format 0.0.4."""
        counters = self.store.counters()
        lines = ["# HELP seqaudit_records_total Inspection records received, by outcome.",
                 "# TYPE seqaudit_records_total counter"]
        for outcome in ("accepted", "duplicate", "rejected"):
            lines.append(f'seqaudit_records_total{{outcome="{outcome}"}} '
                         f'{counters.get("records_" + outcome, 0)}')
        by_status = self.store.status_counts()
        lines += ["# HELP seqaudit_facilities Facilities by the status of their current cycle.",
                  "# TYPE seqaudit_facilities gauge"]
        for status in ("monitoring", "flagged", "cleared", "closed"):
            lines.append(f'seqaudit_facilities{{status="{status}"}} {by_status.get(status, 0)}')
        lines += ["# HELP seqaudit_alerts_open Alerts not yet acknowledged.",
                  "# TYPE seqaudit_alerts_open gauge",
                  f"seqaudit_alerts_open {self.store.open_alert_count()}"]
        return "\n".join(lines) + "\n"
