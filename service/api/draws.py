"""Frames, RFC 3797 draws and the tablets' assignments."""
from urllib.parse import quote

from fastapi import APIRouter, Depends, Query, Request, Response
from fastapi.responses import PlainTextResponse

from ..errors import Invalid
from ..operations import Monitor
from ..sampling import Sampling, frame_file_name
from ..sampling_schemas import AssignmentList, DrawCreate, DrawList, DrawPublic, FrameCreate, \
    FrameList, FramePeriod, FramePublic
from ..selection import SelectionInputError, frame_from_text
from .deps import CycleNo, Id, analyst, field_or_above, monitor

router = APIRouter(tags=["frames and draws"])
_BASE = "/v1/facilities/{facility_id}"

_CSV_BODY = {"requestBody": {"required": True, "content": {
    "text/csv": {"schema": {"type": "string"}},
    "text/plain": {"schema": {"type": "string"}}}}}


def _location(facility_id: str, kind: str, item_id: int) -> str:
    return f"/v1/facilities/{quote(facility_id, safe='')}/{kind}/{item_id}"


@router.post(_BASE + "/frames", status_code=201, response_model=FramePublic,
             summary="Register a frame: the units the facility passed in a period (analyst)")
def register_frame(facility_id: str, body: FrameCreate, response: Response,
                   actor=Depends(analyst), m: Monitor = Depends(monitor)):
    s = Sampling(m)
    frame = s.frame_from_units(body.units)
    out = s.register_frame(facility_id, body.label, body.period_start, body.period_end, frame,
                           actor)
    response.headers["Location"] = _location(facility_id, "frames", out["frame_id"])
    return out


@router.post(_BASE + "/frames/upload", status_code=201, response_model=FramePublic,
             openapi_extra=_CSV_BODY,
             summary="Register a frame from a file: one unit ref per line, or CSV with a "
                     "unit_ref column (analyst)")
async def upload_frame(facility_id: str, request: Request, response: Response,
                       label: str = Query(..., min_length=1, max_length=200),
                       period_start: str = Query(...), period_end: str = Query(...),
                       actor=Depends(analyst), m: Monitor = Depends(monitor)):
    from pydantic import ValidationError

    from ..operations import validation_errors
    try:
        period = FramePeriod(label=label, period_start=period_start, period_end=period_end)
    except ValidationError as exc:
        errors = validation_errors(exc)
        raise Invalid(f"{errors[0]['field']}: {errors[0]['message']}", field=errors[0]["field"],
                      errors=errors) from None
    raw = await request.body()   # capped by the BodyLimit middleware
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise Invalid("the file is not UTF-8 text", field="file") from None
    try:
        frame = frame_from_text(text)
    except SelectionInputError as exc:
        raise Invalid(str(exc), field="file") from None
    s = Sampling(m)
    out = s.register_frame(facility_id, period.label, period.period_start, period.period_end,
                           frame, actor)
    response.headers["Location"] = _location(facility_id, "frames", out["frame_id"])
    return out


@router.get(_BASE + "/frames", response_model=FrameList,
            summary="A facility's frames (analyst)")
def list_frames(facility_id: str, actor=Depends(analyst), m: Monitor = Depends(monitor)):
    return Sampling(m).frames(facility_id)


@router.get(_BASE + "/frames/{frame_id}", response_model=FramePublic, summary="A frame (analyst)")
def get_frame(facility_id: str, frame_id: Id, actor=Depends(analyst),
              m: Monitor = Depends(monitor)):
    return Sampling(m).frame(facility_id, frame_id)


@router.get(_BASE + "/frames/{frame_id}/canonical", response_class=PlainTextResponse,
            responses={200: {"content": {"text/plain": {}}}},
            summary="A frame's canonical text, whose SHA-256 the frame shows (analyst)")
def frame_text(facility_id: str, frame_id: Id, actor=Depends(analyst),
               m: Monitor = Depends(monitor)):
    row = Sampling(m).frame(facility_id, frame_id, with_text=True)
    return PlainTextResponse(row["canonical"], media_type="text/plain; charset=utf-8", headers={
        "Content-Disposition": f'attachment; filename="{frame_file_name(frame_id)}"'})


@router.post(_BASE + "/draws", status_code=201, response_model=DrawPublic,
             summary="Draw units of a frame to re-check, by RFC 3797 with a public seed "
                     "(analyst)")
def make_draw(facility_id: str, body: DrawCreate, response: Response, actor=Depends(analyst),
              m: Monitor = Depends(monitor)):
    out = Sampling(m).make_draw(facility_id, body.frame_id, body.size, body.seed, actor)
    response.headers["Location"] = _location(facility_id, "draws", out["draw_id"])
    return out


@router.get(_BASE + "/draws", response_model=DrawList, response_model_exclude_none=False,
            summary="A facility's draws, newest first (analyst)")
def list_draws(facility_id: str, cycle: CycleNo = None, actor=Depends(analyst),
               m: Monitor = Depends(monitor)):
    return Sampling(m).draws(facility_id, cycle)


@router.get(_BASE + "/draws/{draw_id}", response_model=DrawPublic,
            summary="A draw: the ordered units, the key string, the frame hash (analyst)")
def get_draw(facility_id: str, draw_id: Id, actor=Depends(analyst),
             m: Monitor = Depends(monitor)):
    return Sampling(m).draw(facility_id, draw_id)


@router.get("/v1/assignments", response_model=AssignmentList,
            summary="Drawn units still to re-check, per facility with an open cycle (field+)")
def assignments(actor=Depends(field_or_above), m: Monitor = Depends(monitor)):
    return Sampling(m).assignments()
