"""observed_at whose UTC instant falls outside the years 1-9999: that record alone is refused."""
import pytest

from .conftest import new_facility, record

# Both are valid RFC 3339 text (RFC 3339 section 5.6 grammar) whose instant in UTC lies
# before 0001-01-01 or after 9999-12-31, which Python's datetime cannot hold.
IMPOSSIBLE = ["0001-01-01T00:30:00+01:00", "9999-12-31T23:30:00-01:00"]


@pytest.mark.parametrize("when", IMPOSSIBLE)
def test_one_impossible_date_gets_its_own_422_line(client, keys, when):
    fid = new_facility(client, keys)
    batch = [record(fid, f"good-{when}-{i}") for i in range(999)]
    batch.insert(500, {**record(fid, f"bad-{when}"), "observed_at": when})
    r = client.post("/v1/records", json={"records": batch}, headers=keys.header("field"))
    assert r.status_code == 200, r.text[:300]
    body = r.json()
    assert (body["accepted"], body["rejected"]) == (999, 1)
    bad = body["results"][500]
    assert bad["code"] == 422 and bad["errors"][0]["field"] == "records[500].observed_at"
    fac = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert fac["cycles"][0]["records"] == 999     # all stored (the cycle cleared early on)
    # the same connection keeps working, and the single-record route answers 422
    r = client.post("/v1/records", json={**record(fid, "bad-alone"), "observed_at": when},
                    headers=keys.header("field"))
    assert r.status_code == 422
    assert r.json()["errors"][0]["field"] == "observed_at"
    assert client.get("/healthz").status_code == 200
