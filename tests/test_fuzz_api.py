"""Fuzzing the service through its own OpenAPI document (schemathesis) and record JSON
(hypothesis): no 5xx, every error problem+json, responses that match their schemas."""
import json

import pytest
import schemathesis
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

from service.api import create_app

from .conftest import make_keys, quiet_settings


@pytest.fixture(scope="module")
def fuzz_app(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    app = create_app(quiet_settings(folder).with_overrides(rate_per_s=0.0))
    keys = make_keys(app.state.monitor.store)
    with TestClient(app) as client:
        hdr = {"Authorization": f"Bearer {keys.admin}"}
        client.post("/v1/facilities", json={"facility_id": "SA-1", "name": "one",
                                            "plan": "dispensers"}, headers=hdr)
        for i in range(3):
            client.post("/v1/records", headers=hdr, json={
                "record_id": f"r{i}", "facility_id": "SA-1",
                "observed_at": "2026-11-30T10:00:00Z", "nonconforming": 1})
    app.state.fuzz_key = keys.admin
    return app


def test_openapi_fuzz(fuzz_app):
    """Every operation of the OpenAPI document, 25 generated requests each."""
    api = schemathesis.openapi.from_asgi("/openapi.json", fuzz_app)
    auth = {"Authorization": f"Bearer {fuzz_app.state.fuzz_key}"}
    operations = [result.ok() for result in api.get_all_operations()]
    assert len(operations) >= 20
    for operation in operations:
        @hsettings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck),
                   database=None)
        @given(case=operation.as_strategy())
        def run(case):
            case.headers = {**(case.headers or {}), **auth}
            response = case.call()
            assert response.status_code < 500, (operation.label, response.text)
            if response.status_code >= 400:
                assert response.headers["content-type"][0].startswith(
                    "application/problem+json"), operation.label
                assert response.json()["status"] == response.status_code
            case.validate_response(response,
                                   checks=[schemathesis.checks.response_schema_conformance])

        run()


json_value = st.recursive(
    st.none() | st.booleans() | st.integers(-10**12, 10**12) | st.floats(allow_nan=False)
    | st.text(max_size=80),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=12), inner,
                                                                 max_size=5),
    max_leaves=20)
fields = st.fixed_dictionaries({}, optional={
    "record_id": st.one_of(st.text(max_size=70), json_value),
    "facility_id": st.one_of(st.sampled_from(["SA-1", "SA-2", ""]), json_value),
    "observed_at": st.one_of(st.sampled_from(["2026-11-30T10:00:00Z", "2026-02-30T10:00:00Z",
                                              "2026-11-30T10:00:00+25:00", "now"]), json_value),
    "units": st.one_of(st.integers(-3, 200_000), json_value),
    "nonconforming": st.one_of(st.integers(-3, 10), json_value),
    "note": json_value, "unit_ref": json_value, "inspector": json_value, "extra": json_value})


@hsettings(max_examples=150, deadline=None, suppress_health_check=list(HealthCheck))
@given(body=st.one_of(fields, st.fixed_dictionaries({"records": st.lists(fields, max_size=5)}),
                      json_value))
def test_record_json_fuzz(fuzz_app, body):
    if not hasattr(fuzz_app.state, "record_key"):
        # a key of its own: the OpenAPI fuzz may have revoked any earlier key by its id
        fuzz_app.state.record_key = fuzz_app.state.monitor.store.add_key(
            "admin", "record fuzz", "2026-01-01T00:00:00Z")[1]
    with TestClient(fuzz_app, raise_server_exceptions=False) as client:
        r = client.post("/v1/records", content=json.dumps(body),
                        headers={"Authorization": f"Bearer {fuzz_app.state.record_key}",
                                 "content-type": "application/json"})
    assert r.status_code in (200, 201, 409, 413, 422), r.text
    if r.status_code >= 400:
        assert r.headers["content-type"].startswith("application/problem+json")
    else:
        out = r.json()
        results = out["results"] if "results" in out else [out]
        assert all(x["status"] in ("accepted", "duplicate", "conflict", "invalid") for x in results)
