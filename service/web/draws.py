"""Dashboard: frames and RFC 3797 draws of a facility (register a frame from a file, make a
draw, download a draw as CSV and a frame's canonical text). Same operations as the API."""
from __future__ import annotations

import csv
import io
from urllib.parse import quote

from fastapi import APIRouter, Depends, File, Form, Request, UploadFile
from fastapi.responses import PlainTextResponse, Response

from ..errors import ServiceError
from ..exports import file_safe
from ..operations import Monitor
from ..sampling import Sampling, frame_file_name
from ..sampling_schemas import FramePeriod
from ..selection import SelectionInputError, frame_from_text
from .routes import back, monitor
from .sessions import UiUser, check_csrf, current_user

router = APIRouter(prefix="/ui", include_in_schema=False)
MAX_UPLOAD = 8_000_000


def facility_url(facility_id: str) -> str:
    return f"/ui/facilities/{quote(facility_id, safe='')}"


def draws_context(m: Monitor, facility_id: str, cycle: int) -> dict:
    """What the facility page shows about frames and draws of a cycle."""
    s = Sampling(m)
    return {"frames": s.frames(facility_id)["items"],
            "draws": [s.draw(facility_id, d["draw_id"])
                      for d in s.draws(facility_id, cycle)["items"]]}


@router.post("/facilities/{facility_id}/frames")
async def upload_frame(request: Request, facility_id: str, label: str = Form(""),
                       period_start: str = Form(""), period_end: str = Form(""),
                       file: UploadFile = File(...), csrf: str = Form(""),
                       user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    target = facility_url(facility_id)
    from pydantic import ValidationError
    try:
        period = FramePeriod(label=label, period_start=period_start, period_end=period_end)
    except ValidationError as exc:
        err = exc.errors(include_url=False)[0]
        where = ".".join(str(p) for p in err["loc"]) or "period"
        return back(target, f"Frame not registered: {where}: {err['msg']}", "error")
    raw = await file.read(MAX_UPLOAD + 1)
    if len(raw) > MAX_UPLOAD:
        return back(target, f"Frame not registered: the file is larger than {MAX_UPLOAD} bytes.",
                    "error")
    try:
        frame = frame_from_text(raw.decode("utf-8"))
    except UnicodeDecodeError:
        return back(target, "Frame not registered: the file is not UTF-8 text.", "error")
    except SelectionInputError as exc:
        return back(target, f"Frame not registered: {exc}", "error")
    try:
        out = Sampling(m).register_frame(facility_id, period.label, period.period_start,
                                         period.period_end, frame, user.actor)
    except ServiceError as exc:
        return back(target, exc.detail, "error")
    dupes = (f" {len(frame.duplicates)} duplicate unit ref(s) were counted once: "
             + ", ".join(frame.duplicates[:5]) + (" ..." if len(frame.duplicates) > 5 else "")
             if frame.duplicates else "")
    return back(target, f"Frame {out['frame_id']} registered: {out['size']} units, SHA-256 "
                        f"{out['sha256'][:16]}....{dupes}")


@router.post("/facilities/{facility_id}/draws")
def make_draw(request: Request, facility_id: str, frame_id: str = Form(""),
              size: str = Form(""), seed: str = Form(""), csrf: str = Form(""),
              user: UiUser = Depends(current_user), m: Monitor = Depends(monitor)):
    check_csrf(user, csrf)
    target = facility_url(facility_id)
    try:
        frame_no, count = int(frame_id), int(size)
    except ValueError:
        return back(target, "Draw not made: choose a frame and give the number of units as a "
                            "whole number.", "error")
    try:
        out = Sampling(m).make_draw(facility_id, frame_no, count, seed, user.actor)
    except ServiceError as exc:
        field = exc.extra.get("field")
        return back(target, f"Draw not made: {field + ': ' if field else ''}{exc.detail}",
                    "error")
    return back(target, f"Draw {out['draw_id']} made: {out['size']} units to re-check, in "
                        "the order listed.")


@router.get("/facilities/{facility_id}/draws/{draw_id}.csv")
def draw_csv(facility_id: str, draw_id: int, user: UiUser = Depends(current_user),
             m: Monitor = Depends(monitor)):
    d = Sampling(m).draw(facility_id, draw_id)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["facility_id", "draw_id", "order", "frame_position", "unit_ref",
                "rechecked_by_record", "frame_sha256", "key"])
    for u in d["units"]:
        w.writerow([facility_id, draw_id, u["order"], u["frame_position"], u["unit_ref"],
                    u["record_id"] or "", d["frame_sha256"], d["key"]])
    safe = file_safe(facility_id)
    return Response(buf.getvalue(), media_type="text/csv; charset=utf-8", headers={
        "Content-Disposition": f'attachment; filename="draw-{safe}-{draw_id}.csv"'})


@router.get("/facilities/{facility_id}/frames/{frame_id}.txt")
def frame_text(facility_id: str, frame_id: int, user: UiUser = Depends(current_user),
               m: Monitor = Depends(monitor)):
    row = Sampling(m).frame(facility_id, frame_id, with_text=True)
    return PlainTextResponse(row["canonical"], media_type="text/plain; charset=utf-8", headers={
        "Content-Disposition": f'attachment; filename="{frame_file_name(frame_id)}"'})
