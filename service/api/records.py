import orjson
from fastapi import APIRouter, Depends, Request
from fastapi.responses import Response

from ..operations import Monitor
from ..schemas import IngestReport, IngestResult, ReasonCreate, RecordBatchCreate, RecordCreate, \
    VoidResult
from .deps import RANK, analyst, field_or_above, monitor

router = APIRouter(prefix="/v1/records", tags=["records"])

_BODY = {"requestBody": {"required": True, "content": {"application/json": {"schema": {
    "oneOf": [{"$ref": "#/components/schemas/RecordCreate"},
              {"$ref": "#/components/schemas/RecordBatchCreate"}]}}}}}


@router.post("", openapi_extra=_BODY, summary="Post one record or a batch of up to 1000 (field+)",
             responses={201: {"model": IngestResult, "description": "one record accepted"},
                        200: {"model": IngestReport | IngestResult,
                              "description": "a duplicate of a stored record, or a batch report"}})
async def post_records(request: Request, actor=Depends(field_or_above)):
    m: Monitor = request.app.state.monitor   # (not a dependency: each costs this hot route)
    raw = await request.body()   # the BodyLimit middleware has capped its size
    # checked on the loop, committed by the store's writer thread (no worker thread here)
    status, body = await m.post_records_json_async(raw, actor,
                                                   RANK[actor[1]] >= RANK["analyst"])
    return Response(orjson.dumps(body), status_code=status, media_type="application/json")


@router.post("/{record_id:path}/void", response_model=VoidResult,
             summary="Void a record with a reason and replay its cycle (analyst)")
def void(record_id: str, body: ReasonCreate, actor=Depends(analyst),
         m: Monitor = Depends(monitor)):
    return m.void_record(record_id, body.reason, actor)


def define_body_schemas(app) -> None:
    """Put RecordCreate and RecordBatchCreate into the OpenAPI document's components: the
    record route reads its body itself (one record or a batch), so FastAPI does not see
    them, and the route's requestBody refers to both."""
    from pydantic.json_schema import models_json_schema

    made = app.openapi

    def openapi() -> dict:
        if app.openapi_schema is None:
            schema = made()
            _, top = models_json_schema([(RecordCreate, "validation"),
                                         (RecordBatchCreate, "validation")],
                                        ref_template="#/components/schemas/{model}")
            schema.setdefault("components", {}).setdefault("schemas", {}).update(top["$defs"])
            app.openapi_schema = schema
        return app.openapi_schema

    app.openapi = openapi
