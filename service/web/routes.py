"""Dashboard pages. Handlers only parse the form, call the same operations as the API, render."""
from __future__ import annotations

import math
import secrets
from pathlib import Path
from urllib.parse import quote, urlencode

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from ..cautions import ASSUMPTIONS, SIGNAL_NOT_VERDICT
from ..errors import ServiceError
from ..exports import file_safe
from ..operations import Monitor
from .sessions import (COOKIE, LOGIN_CSRF_COOKIE, BadCsrf, UiUser, check_csrf,
                       cookie_args, current_user, sign_in)
from .svg import COLOURS, curve_chart, llr_bar, path_chart

HERE = Path(__file__).resolve().parent
templates = Jinja2Templates(directory=str(HERE / "templates"))
templates.env.globals.update(caution=SIGNAL_NOT_VERDICT, assumptions=ASSUMPTIONS,
                             colours=COLOURS, llr_bar=llr_bar)
router = APIRouter(prefix="/ui", include_in_schema=False)

STATUS_TEXT = {"monitoring": "Monitoring", "flagged": "Flagged", "cleared": "Cleared",
               "watching": "Watching (cleared)", "closed": "Closed"}
templates.env.globals["status_text"] = STATUS_TEXT
KIND_TEXT = {"flagged": "Flagged", "watch_signal": "Watch signal",
             "decision_revised": "Decision revised", "stale": "Stale cycle",
             "delivery_failed": "Delivery failed", "cleared": "Cleared",
             "cap_reached": "Cap reached"}
templates.env.globals["kind_text"] = KIND_TEXT


def segment(value) -> str:
    """An id as one URL path segment: every reserved character percent-encoded, '/' too
    (Jinja's urlencode filter leaves '/' as it is)."""
    return quote(str(value), safe="")


templates.env.filters["segment"] = segment
PAGE = 50


async def monitor(request: Request) -> Monitor:
    return request.app.state.monitor


def page(request: Request, name: str, user: UiUser | None, status: int = 200, **ctx):
    return templates.TemplateResponse(request, name, {"user": user, **ctx}, status_code=status)


def back(url: str, message: str | None = None, kind: str = "ok") -> RedirectResponse:
    """Redirect (303) to ``url`` with a message; its kind goes in ``msg_kind`` so that a
    page's own ``kind`` filter in ``url`` survives the action."""
    if message:
        sep = "&" if "?" in url else "?"
        url = f"{url}{sep}{urlencode({'msg': message, 'msg_kind': kind})}"
    return RedirectResponse(url, status_code=303)


# -- sign-in --------------------------------------------------------------------------
@router.get("", response_class=HTMLResponse)
@router.get("/", response_class=HTMLResponse)
def root():
    return RedirectResponse("/ui/overview", status_code=303)


@router.get("/signin", response_class=HTMLResponse)
def signin_form(request: Request, msg: str | None = None):
    token = secrets.token_urlsafe(24)
    resp = page(request, "signin.html", None, csrf=token, msg=msg)
    resp.set_cookie(LOGIN_CSRF_COOKIE, token, max_age=3600, **cookie_args(request))
    return resp


@router.post("/signin", response_class=HTMLResponse)
def signin(request: Request, key: str = Form(""), csrf: str = Form(""),
           m: Monitor = Depends(monitor)):
    expected = request.cookies.get(LOGIN_CSRF_COOKIE)
    if not expected or not csrf or not secrets.compare_digest(expected, csrf):
        raise BadCsrf()
    token, message = sign_in(m.store, key, m.clock())
    if token is None:
        fresh = secrets.token_urlsafe(24)
        resp = page(request, "signin.html", None, status=401, csrf=fresh, error=message)
        resp.set_cookie(LOGIN_CSRF_COOKIE, fresh, max_age=3600, **cookie_args(request))
        return resp
    resp = back("/ui/overview")
    resp.set_cookie(COOKIE, token, max_age=8 * 3600, **cookie_args(request))
    resp.delete_cookie(LOGIN_CSRF_COOKIE, path="/ui")
    return resp


@router.post("/signout")
def signout(request: Request, csrf: str = Form(""), user: UiUser = Depends(current_user),
            m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    m.store.end_session(user.token_hash)
    resp = back("/ui/signin", "Signed out.")
    resp.delete_cookie(COOKIE, path="/ui")
    return resp


# -- overview ------------------------------------------------------------------------------
SORTS = {"llr_position": "position between the boundaries", "units": "units audited",
         "last_record_at": "last record", "facility_id": "facility id", "name": "name"}


@router.get("/overview", response_class=HTMLResponse)
def overview(request: Request, q: str = "", status: str = "", plan: str = "",
             sort: str = "llr_position", dir: str = "desc", page_no: int = 1,
             msg: str | None = None, user: UiUser = Depends(current_user),
             m: Monitor = Depends(monitor)):
    status = status if status in STATUS_TEXT else ""
    plan = plan if plan in m.plans.specs else ""
    sort = sort if sort in SORTS else "llr_position"
    page_no = max(page_no, 1)
    listing = m.facilities(status=status or None, plan=plan or None, search=q.strip() or None,
                           sort=sort, descending=dir != "asc", limit=PAGE,
                           offset=(page_no - 1) * PAGE)
    counts = m.store.status_counts()
    pages = max(1, math.ceil(listing["total"] / PAGE))
    query = {"q": q, "status": status, "plan": plan, "sort": sort, "dir": dir}
    return page(request, "overview.html", user, listing=listing, counts=counts,
                open_alerts=m.store.open_alert_count(needs_review=True), plans=sorted(m.plans.specs),
                sorts=SORTS, query=query, page_no=page_no, pages=pages, msg=msg,
                qs=lambda **kw: urlencode({**query, **kw}))


# -- one facility -------------------------------------------------------------------------
@router.get("/facilities/{facility_id}", response_class=HTMLResponse)
def facility(request: Request, facility_id: str, cycle: int | None = None,
             msg: str | None = None, msg_kind: str = "ok", after: int = 0, page_no: int = 1,
             user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    fac = m.facility(facility_id)
    number = cycle or fac["cycle"]
    records = m.records(facility_id, number)["items"]
    cyc = next((c for c in fac["cycles"] if c["cycle"] == number), None)
    if cyc is None:
        raise ServiceError(f"facility {facility_id!r} has no cycle {number}")
    points, units, voids = [(0, 0.0)], 0, []
    for r in records:
        if r["void"]:
            voids.append(units)
        elif r["evidence"]:
            units += r["units"]
            points.append((units, r["llr_after"]))
    decided = ((cyc["decided_after_units"], cyc["llr"], cyc["status"])
               if cyc["decided_after_units"] is not None else None)
    chart = path_chart(points, cyc["lower_llr"], cyc["upper_llr"], decided, voids,
                       cyc["plan_snapshot"].get("max_units"))
    alerts = m.alerts(facility_id=facility_id, limit=20)["items"]
    from ..record_checks import observation_notes
    from .after_decision import after_decision_context
    from .draws import draws_context
    looks = _looks(cyc, records)
    extra = after_decision_context(m, facility_id, cyc, records, bool(after), page_no, PAGE)
    records = extra.pop("records")
    return page(request, "facility.html", user, fac=fac, cyc=cyc, records=records, chart=chart,
                alerts=alerts, msg=msg, kind=msg_kind, is_current=number == fac["cycle"],
                draws_ctx=draws_context(m, facility_id, number), looks=looks,
                late=observation_notes(records, cyc["opened_at"]), **extra)


def _looks(cyc: dict, records: list[dict]) -> dict | None:
    """The note and exact risks when the cycle's records differ from the plan's visit size."""
    import json as _json
    from ..casefile.build import looks_report_for
    sizes = tuple(r["units"] for r in records if r["evidence"])
    k = cyc["plan_snapshot"].get("visit_units", 1)
    if not sizes or all(m == k for m in sizes):
        return None
    return looks_report_for(_json.dumps(cyc["plan_snapshot"], sort_keys=True), sizes)


@router.post("/facilities/{facility_id}/void")
def void(request: Request, facility_id: str, record_id: str = Form(""), reason: str = Form(""),
         csrf: str = Form(""), cycle: int = Form(1), user: UiUser = Depends(current_user),
         m: Monitor = Depends(monitor)):
    """The void form: the record id travels in the form, never in the path, so no id can
    change which URL the browser posts to ('..' included)."""
    check_csrf(user, csrf)
    return _void(facility_id, record_id, reason, cycle, user, m)


@router.post("/facilities/{facility_id}/records/{record_id:path}/void")
def void_by_path(request: Request, facility_id: str, record_id: str, reason: str = Form(""),
                 csrf: str = Form(""), cycle: int = Form(1),
                 user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    return _void(facility_id, record_id, reason, cycle, user, m)


def _void(facility_id: str, record_id: str, reason: str, cycle: int, user: UiUser,
          m: Monitor) -> RedirectResponse:
    target = f"/ui/facilities/{segment(facility_id)}?cycle={cycle}"
    if not reason.strip():
        return back(target, "A reason is required to void a record.", "error")
    try:
        out = m.void_record(record_id, reason.strip(), user.actor, facility_id=facility_id)
    except ServiceError as exc:
        return back(target, exc.detail, "error")
    note = " The decision was revised." if out["decision_revised"] else ""
    return back(target, f"Record {record_id} voided; the cycle was replayed.{note}")


@router.post("/facilities/{facility_id}/cycles/{cycle}/findings")
def add_finding(request: Request, facility_id: str, cycle: int, outcome: str = Form(""),
                note: str = Form(""), csrf: str = Form(""), user: UiUser = Depends(current_user),
                m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    from urllib.parse import quote
    target = f"/ui/facilities/{quote(facility_id, safe='')}?cycle={cycle}"
    from ..schemas import FindingCreate
    try:
        body = FindingCreate(outcome=outcome, note=note.strip() or None)
    except ValueError:
        return back(target, "Choose what the review found.", "error")
    try:
        m.add_finding(facility_id, cycle, body.outcome, body.note, user.actor)
    except ServiceError as exc:
        return back(target, exc.detail, "error")
    return back(target, f"Finding recorded on cycle {cycle}.")


@router.post("/facilities/{facility_id}/cycles")
def new_cycle(request: Request, facility_id: str, csrf: str = Form(""),
              user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    try:
        fac = m.open_cycle(facility_id, user.actor)
    except ServiceError as exc:
        return back(f"/ui/facilities/{segment(facility_id)}", exc.detail, "error")
    return back(f"/ui/facilities/{segment(facility_id)}", f"Cycle {fac['cycle']} opened.")


@router.post("/facilities/{facility_id}/close")
def close(request: Request, facility_id: str, reason: str = Form(""), csrf: str = Form(""),
          user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    target = f"/ui/facilities/{segment(facility_id)}"
    if not reason.strip():
        return back(target, "A reason is required to close a cycle.", "error")
    try:
        m.close_cycle(facility_id, reason.strip(), user.actor)
    except ServiceError as exc:
        return back(target, exc.detail, "error")
    return back(target, "Cycle closed without a decision.")


@router.get("/facilities/{facility_id}/cycles/{cycle}/casefile.pdf")
async def casefile(request: Request, facility_id: str, cycle: int,
                   user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    from ..api.casefiles import attachment, casefile as heavy_casefile
    pdf = await heavy_casefile(request, m, "pdf", facility_id, cycle, 0.95)
    return Response(pdf, media_type="application/pdf", headers=attachment(facility_id, cycle))


# -- alerts ------------------------------------------------------------------------------------
KINDS = ("flagged", "watch_signal", "decision_revised", "stale", "delivery_failed", "cleared",
         "cap_reached")
REVIEW = {"needed": True, "info": False, "all": None}


@router.get("/alerts", response_class=HTMLResponse)
def alerts(request: Request, state: str = "open", kind: str = "", facility_id: str = "",
           review: str = "needed", page_no: int = 1, msg: str | None = None,
           msg_kind: str = "ok", user: UiUser = Depends(current_user),
           m: Monitor = Depends(monitor)):
    state = state if state in ("open", "acknowledged", "all") else "open"
    kind = kind if kind in KINDS else ""
    review = review if review in REVIEW else "needed"
    page_no = max(page_no, 1)
    listing = m.alerts(state=None if state == "all" else state, kind=kind or None,
                       facility_id=facility_id.strip() or None, needs_review=REVIEW[review],
                       limit=PAGE, offset=(page_no - 1) * PAGE)
    delivery = m.store.outbox_status([a["alert_id"] for a in listing["items"]])
    query = {"state": state, "review": review, "kind": kind, "facility_id": facility_id}
    informational = (m.store.open_alert_count(needs_review=False)
                     if review == "needed" and state == "open" else None)
    return page(request, "alerts.html", user, listing=listing, delivery=delivery, kinds=KINDS,
                query=query, page_no=page_no, informational=informational,
                pages=max(1, math.ceil(listing["total"] / PAGE)), msg=msg, kind=msg_kind,
                qs=lambda **kw: urlencode({**query, **kw}))


def _back_to(back_to: str) -> str:
    return back_to if back_to.startswith("/ui/") else "/ui/alerts"


@router.post("/alerts/ack")
def ack_selected(request: Request, alert_id: list[int] = Form([]), note: str = Form(""),
                 csrf: str = Form(""), back_to: str = Form("/ui/alerts"),
                 user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    target = _back_to(back_to)
    if not alert_id:
        return back(target, "Select the alerts to acknowledge first.", "error")
    done, skipped = m.ack_alerts(alert_id, note.strip() or None, user.actor)
    text = f"{len(done)} alert{'' if len(done) == 1 else 's'} acknowledged"
    if skipped:
        text += f"; {len(skipped)} skipped (already acknowledged or unknown)"
    return back(target, text + ".")


@router.post("/alerts/{alert_id}/ack")
def ack(request: Request, alert_id: int, note: str = Form(""), csrf: str = Form(""),
        back_to: str = Form("/ui/alerts"), user: UiUser = Depends(current_user),
        m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    target = _back_to(back_to)
    try:
        m.ack_alert(alert_id, note.strip() or None, user.actor)
    except ServiceError as exc:
        return back(target, exc.detail, "error")
    return back(target, f"Alert {alert_id} acknowledged.")


# -- plan workbench ---------------------------------------------------------------------------
@router.get("/workbench", response_class=HTMLResponse)
async def workbench(request: Request, p0: str = "0.02", p1: str = "0.08",
                    alpha: str = "0.05", beta: str = "0.10", max_units: str = "", calibrate: str = "",
                    register_size: str = "", register_false_flags: str = "",
                    watch_arl0: str = "", watch_p1: str = "",
                    visit_units: str = "1", sensitivity: str = "1", specificity: str = "1",
                    rate: str = "", cut_llr: str = "0",
                    user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    form = {"p0": p0, "p1": p1, "alpha": alpha, "beta": beta, "max_units": max_units,
            "calibrate": bool(calibrate), "register_size": register_size,
            "register_false_flags": register_false_flags, "watch_arl0": watch_arl0,
            "watch_p1": watch_p1, "visit_units": visit_units,
            "sensitivity": sensitivity, "specificity": specificity, "rate": rate,
            "cut_llr": cut_llr}
    result, error, charts, register, field_errors = None, None, None, None, {}
    if "p0" in request.query_params:
        from .plan_form import read_plan_form, summary
        _, field_errors = read_plan_form(form)      # every wrong base field named at once
        if field_errors:
            error = summary(field_errors)
        else:
            # in the heavy pool (a calibration can take a while), cached by the form's text
            from ..heavy import run_heavy
            from ..heavy_jobs import plan_form_job
            result, error, register = await run_heavy(
                request.app.state, plan_form_job, form,
                key=("plan_form", *sorted((k, str(v)) for k, v in form.items())))
        if result is not None:
            from .watch_form import watch_figures
            result["watch"], error = watch_figures({"p0": float(p0), "p1": float(p1)},
                                                   watch_arl0, watch_p1)
        if result is not None:
            p = result["plan"]
            charts = {
                "oc": curve_chart(result["curve"], "p_flag", "wald_p_flag",
                                  "probability the facility is flagged", p["p0"], p["p1"],
                                  "Operating characteristic: chance of a flag by true rate"),
                "asn": curve_chart(result["curve"], "asn", "wald_asn",
                                   "expected units to a decision", p["p0"], p["p1"],
                                   "Average sample number by true rate")}
    return page(request, "workbench.html", user, form=form, result=result, error=error,
                charts=charts, register=register, field_errors=field_errors)
