"""The ceiling for scripts/bench_ingest.py: a bare FastAPI endpoint that validates the same
pydantic record body and returns, storing nothing."""
from fastapi import FastAPI

from service.schemas import RecordCreate

app = FastAPI()


@app.post("/v1/records", status_code=201)
def post_record(body: RecordCreate) -> dict:
    return {"index": 0, "record_id": body.record_id, "status": "accepted", "code": 201}
