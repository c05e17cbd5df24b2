"""The record route's one-pass batch check (service/batch_schema.py: RecordCreate without its
Python counts validator, the check made afterwards) against the reference, RecordCreate
itself through the record-by-record path: the same schema, and the same answer for seeded
batches of good and bad records."""
import json

import numpy as np
import orjson
import pytest
from pydantic import ValidationError

from service.batch_schema import BATCH_UNCHECKED, BatchUnchecked, RecordUnchecked
from service.operations import Monitor, PlanBook
from service.schemas import RecordBatchCreate, RecordCreate

NOW = "2026-12-01T12:00:00.000000Z"


def _without_names(schema: dict) -> str:
    """A JSON schema with the model names and docstrings left out."""
    text = json.dumps(schema, sort_keys=True)
    for name in ("RecordUnchecked", "BatchUnchecked", "RecordBatchCreate"):
        text = text.replace(name, "RecordCreate")
    out = json.loads(text)

    def strip(node):
        if isinstance(node, dict):
            return {k: strip(v) for k, v in node.items() if k not in ("title", "description")
                    or not isinstance(v, str)}
        if isinstance(node, list):
            return [strip(v) for v in node]
        return node
    return json.dumps(strip(out), sort_keys=True)


def test_the_unchecked_models_have_every_field_and_constraint():
    # nothing the unchecked models accept may be refused by a field of RecordCreate
    assert _without_names(RecordUnchecked.model_json_schema()) == \
        _without_names(RecordCreate.model_json_schema())
    assert _without_names(BatchUnchecked.model_json_schema()) == \
        _without_names(RecordBatchCreate.model_json_schema())
    # ... and the one difference is the counts check, made by counts_hold afterwards
    one = {"record_id": "r", "facility_id": "F", "observed_at": "2026-11-30T10:00:00Z",
           "units": 1, "nonconforming": 2}
    with pytest.raises(ValidationError, match="cannot exceed"):
        RecordCreate.model_validate(one)
    assert RecordUnchecked.model_validate(one).nonconforming == 2


def _random_record(rng, k: int) -> dict:
    rec = {"record_id": f"r-{k}", "facility_id": f"F{rng.integers(3)}",
           "observed_at": f"2026-11-{rng.integers(1, 31):02d}T{rng.integers(24):02d}:00:00Z",
           "units": int(rng.integers(1, 4)), "nonconforming": int(rng.integers(0, 3))}
    fault = rng.integers(12)
    if fault == 0:
        rec["nonconforming"] = rec["units"] + 1          # the counts check
    elif fault == 1:
        rec["observed_at"] = "2026-02-30T10:00:00Z"      # not a calendar date
    elif fault == 2:
        rec["record_id"] = ".."                          # a dot id
    elif fault == 3:
        rec["units"] = 0                                 # below the field's minimum
    elif fault == 4:
        rec["extra"] = 1                                 # an unknown field
    elif fault == 5:
        rec["inspector"] = "tablet 7"
    return rec


def test_seeded_batches_are_answered_as_record_by_record_checks_answer_them(tmp_path):
    # reference: _check_payload validates through RecordCreate (its validator included) and,
    # when the batch fails, each record alone; the JSON route must give the same outcome
    from service.store import Store
    store = Store(tmp_path / "s.db")
    store.migrate()
    m = Monitor(store=store, plans=PlanBook({}), clock=lambda: NOW)
    rng = np.random.default_rng(20261202)
    faulty = 0
    for trial in range(300):
        n = int(rng.integers(1, 8))
        recs = [_random_record(rng, k) for k in range(n)]
        if rng.integers(2):
            recs = [r for r in recs if "extra" not in r and r["units"] >= 1
                    and r["record_id"] != ".." and "02-30" not in r["observed_at"]]
            if not recs:
                continue
        body = orjson.dumps({"records": recs})
        got, want = m._check_json(body), m._check_payload(orjson.loads(body))
        assert (got.valid, got.where, got.results, got.batch) == \
            (want.valid, want.where, want.results, want.batch), trial
        faulty += any(r["nonconforming"] > r["units"] for r in recs)
    assert faulty >= 100     # the counts check was met often (this seed: 180 of 300 batches)
    store.close()
