"""The ceilings for scripts/bench_ingest.py: bare FastAPI endpoints that validate the same
pydantic record body and return, storing nothing: a plain ``def`` one (run in a worker
thread) and an ``async def`` one (run on the event loop, as our record route is)."""
from fastapi import FastAPI

from service.schemas import RecordCreate

app = FastAPI()


@app.post("/v1/records", status_code=201)
def post_record(body: RecordCreate) -> dict:
    return {"index": 0, "record_id": body.record_id, "status": "accepted", "code": 201}


@app.post("/async/v1/records", status_code=201)
async def post_record_async(body: RecordCreate) -> dict:
    return {"index": 0, "record_id": body.record_id, "status": "accepted", "code": 201}
