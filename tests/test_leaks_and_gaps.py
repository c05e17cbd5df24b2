"""Leaks and gaps: documentation pages behind a setting, every schema the OpenAPI document
refers to defined, NUL refused in free text, unknown keys rate-limited, and slow requests cut
off by a read deadline (against a real uvicorn)."""
import socket
import time

import httpx2
import pytest
from fastapi.testclient import TestClient

from service.api import create_app
from service.settings import load_settings

from .conftest import make_keys, new_facility, quiet_settings, record
from .live_server import LiveServer, quiet_config


def test_docs_are_a_setting(tmp_path):
    on = create_app(quiet_settings(tmp_path / "a"))
    off = create_app(quiet_settings(tmp_path / "b").with_overrides(docs_public=False))
    with TestClient(on) as c:
        for path in ("/docs", "/redoc", "/openapi.json"):
            assert c.get(path).status_code == 200, path
    with TestClient(off) as c:
        for path in ("/docs", "/redoc", "/openapi.json"):
            assert c.get(path).status_code == 404, path
        assert c.get("/healthz").status_code == 200
    assert load_settings(environ={"SEQAUDIT_DOCS_PUBLIC": "false"}).docs_public is False
    assert load_settings(environ={"SEQAUDIT_DOCS_PUBLIC": "true"}).docs_public is True


def refs(node):
    if isinstance(node, dict):
        for k, v in node.items():
            if k == "$ref":
                yield v
            else:
                yield from refs(v)
    elif isinstance(node, list):
        for v in node:
            yield from refs(v)


def test_every_schema_the_openapi_document_refers_to_is_defined(client):
    doc = client.get("/openapi.json").json()
    defined = set(doc["components"]["schemas"])
    wanted = {r.rsplit("/", 1)[1] for r in refs(doc) if r.startswith("#/components/schemas/")}
    assert {"RecordCreate", "RecordBatchCreate"} <= wanted
    assert wanted <= defined, wanted - defined


def test_nul_is_refused_in_notes_reasons_labels_and_urls(client, keys):
    fid = new_facility(client, keys)
    r = client.post("/v1/records", json=record(fid, "nul-1", note="a\x00b"),
                    headers=keys.header("field"))
    assert r.status_code == 422 and r.json()["errors"][0]["field"] == "note"
    assert "NUL" in r.json()["errors"][0]["message"]
    client.post("/v1/records", json=record(fid, "ok-1", note="two\nlines"),
                headers=keys.header("field"))
    for path, body in ((f"/v1/records/ok-1/void", {"reason": "x\x00"}),
                       (f"/v1/facilities/{fid}/close", {"reason": "\x00"}),
                       ("/v1/keys", {"role": "field", "label": "tab\x00let"}),
                       ("/v1/webhooks", {"url": "http://127.0.0.1:9/h\x00", "kinds": ["flagged"]})):
        r = client.post(path, json=body, headers=keys.header("admin"))
        assert r.status_code == 422, (path, r.text)
    # the same through the operations the dashboard's forms call
    from service.errors import Invalid
    m = client.app.state.monitor
    with pytest.raises(Invalid, match="NUL"):
        m.void_record("ok-1", "x\x00", ("t", "analyst"))


def test_unknown_keys_are_rate_limited(tmp_path):
    app = create_app(quiet_settings(tmp_path).with_overrides(rate_per_s=1.0, rate_burst=3.0))
    with TestClient(app) as c:
        codes = [c.get("/v1/facilities", headers={"Authorization": f"Bearer sqa_guess{i}"}
                       ).status_code for i in range(6)]
        assert codes[:3] == [401, 401, 401] and codes[3:] == [429, 429, 429]
        r = c.get("/v1/facilities")                       # no key at all: same bucket
        assert r.status_code == 429 and int(r.headers["retry-after"]) >= 1


def until_closed(s: socket.socket) -> bytes:
    """Everything the server sends on ``s`` until it closes the connection."""
    data = b""
    while True:
        part = s.recv(4096)
        if not part:
            return data
        data += part


def test_slow_headers_and_bodies_are_cut_at_the_read_deadline(tmp_path):
    config = quiet_config(tmp_path)
    text = config.read_text().replace("[service]", "[service]\nrequest_read_timeout_s = 2")
    config.write_text(text)
    db = tmp_path / "slow.db"
    with LiveServer(db, config=config) as server:
        # a request line and one header, then nothing more
        started = time.monotonic()
        with socket.create_connection(("127.0.0.1", server.port), timeout=30) as s:
            s.sendall(b"POST /v1/records HTTP/1.1\r\nhost: x\r\n")
            answer = s.recv(4096)
            assert answer.startswith(b"HTTP/1.1 408")
            assert s.recv(4096) == b""                    # and closed
        # headers complete, body promised but trickled
        with socket.create_connection(("127.0.0.1", server.port), timeout=30) as s:
            s.sendall(b"POST /v1/records HTTP/1.1\r\nhost: x\r\ncontent-type: application/json"
                      b"\r\nauthorization: Bearer x\r\ncontent-length: 1000\r\n\r\n{")
            until_closed(s)
        # cut off near the 2 s deadline, far below the 30 s socket timeout
        assert time.monotonic() - started < 25
        # the server still answers others
        assert httpx2.get(server.url + "/healthz", timeout=10).status_code == 200
        # a whole request is answered; the idle keep-alive connection is then closed at the
        # deadline without another answer (uvicorn's own keep-alive limit is 5 s)
        with socket.create_connection(("127.0.0.1", server.port), timeout=30) as s:
            s.sendall(b"GET /healthz HTTP/1.1\r\nhost: x\r\n\r\n")
            first = b""
            while b'{"status":"ok"}' not in first:       # the whole answer, head and body
                part = s.recv(4096)
                assert part, first
                first += part
            assert first.startswith(b"HTTP/1.1 200") and first.endswith(b'{"status":"ok"}')
            idle_from = time.monotonic()
            assert until_closed(s) == b"" and time.monotonic() - idle_from < 4.5
