"""First run: the home address, the offline API docs with roles, the demo's messages, and
command-line answers a new user can act on (checked as a user meets them)."""
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx2
import pytest

from service.web.install import UI_HEADERS

from .conftest import new_facility, record
from .live_server import free_port, quiet_config
from .test_api_auth import routes as role_matrix

ROOT = Path(__file__).resolve().parent.parent


def run(*args, env=None, cwd=None):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120, env=env, cwd=cwd)


def test_home_address_leads_to_the_dashboard(client):
    r = client.get("/", follow_redirects=False)
    assert r.status_code == 307 and r.headers["location"] == "/ui"


def test_docs_page_loads_everything_from_the_host_under_the_dashboard_policy(client):
    from service.api.docs import asset_dir
    page = client.get("/docs")
    assert page.status_code == 200
    assert page.headers["content-security-policy"] == UI_HEADERS["Content-Security-Policy"]
    refs = re.findall(r'(?:src|href)="([^"]+)"', page.text)
    assert refs and all(ref.startswith("/") and not ref.startswith("//") for ref in refs)
    assert "<script>" not in page.text                       # no inline script for the CSP
    for ref in refs:
        assert client.get(ref).status_code == 200, ref
    # the bundle is the one the installed package ships, byte for byte (not a copy of ours)
    served = client.get("/docs-assets/swagger-ui-bundle.js").content
    assert served == (asset_dir() / "swagger-ui-bundle.js").read_bytes()
    redoc = client.get("/redoc")
    assert redoc.status_code == 200 and "/docs-assets/redoc.standalone.js" in redoc.text


def _template(path: str, documented: set[str]) -> str | None:
    """The OpenAPI path template that a concrete path of the role matrix fills in (the most
    literal one when several match, e.g. .../frames/upload before .../frames/{frame_id})."""
    for tmpl in sorted(documented, key=lambda t: (t.count("{"), t)):
        if re.fullmatch(re.sub(r"\\{[^}]+\\}", "[^/]+", re.escape(tmpl)), path):
            return tmpl
    return None


def test_openapi_declares_the_key_scheme_and_the_role_the_service_enforces(client):
    doc = client.get("/openapi.json").json()
    assert doc["components"]["securitySchemes"]["bearerKey"] == {
        "type": "http", "scheme": "bearer",
        "description": doc["components"]["securitySchemes"]["bearerKey"]["description"]}
    # the roles in the document are the ones tests/test_api_auth.py's matrix enforces
    matrix = role_matrix("F-1", "r-1", 1, 1, 1)
    checked = 0
    for method, path, _body, minimum, _ok in matrix:
        path = path.replace("NEWHOOK", "1")
        tmpl = _template(path, set(doc["paths"]))
        assert tmpl is not None, f"{method} {path} is not in the OpenAPI document"
        op = doc["paths"][tmpl][method.lower()]
        assert op["x-role"] == minimum, (method, tmpl)
        assert op["security"] == [{"bearerKey": []}]
        assert f"Role: needs" in op["description"]
        checked += 1
    assert checked == len(matrix)
    health = doc["paths"]["/healthz"]["get"]
    assert health["security"] == [] and health["x-role"] == "none"
    # every operation says what it needs
    for ops in doc["paths"].values():
        for op in ops.values():
            assert "x-role" in op and "security" in op


def test_bad_observed_at_is_explained_in_words_and_batch_fields_are_indexed(client, keys):
    fid = new_facility(client, keys)
    r = client.post("/v1/records", json=record(fid, "t-1", observed_at="07/11/2026 08:00"),
                    headers=keys.header("field"))
    assert r.status_code == 422
    err = r.json()["errors"][0]
    assert err == {"field": "observed_at", "message": "must be an RFC 3339 time with offset, "
                                                      "e.g. 2026-11-07T08:00:00Z"}
    assert "pattern" not in r.json()["detail"] and "\\d" not in r.text
    r = client.post("/v1/records", json={"records": [record(fid, "t-2"),
                                                     record(fid, "t-3", nonconforming="two")]},
                    headers=keys.header("field"))
    fields = [e["field"] for e in r.json()["results"][1]["errors"]]
    assert fields == ["records[1].nonconforming"]
    # more nonconforming than units: the same field named, in a batch as alone
    r = client.post("/v1/records", json={"records": [record(fid, "t-4"), dict(
        record(fid, "t-5"), units=2, nonconforming=3)]}, headers=keys.header("field"))
    assert r.json()["results"][1]["errors"] == [
        {"field": "records[1].nonconforming", "message": "nonconforming (3) cannot exceed units (2)"}]


def test_numpy_is_not_imported_for_help_or_bad_arguments():
    probe = ("import sys\nfrom service.cli import main\n"
             "try:\n    main(sys.argv[1:])\nexcept SystemExit as e:\n    code = e.code\n"
             "heavy = sorted(m for m in ('numpy', 'scipy', 'matplotlib', 'fastapi', 'pydantic')"
             " if m in sys.modules)\nprint('CODE', code, 'HEAVY', heavy)\n")
    for args in (["--help"], ["plan", "--help"], ["plan", "--p0", "x"], ["nonsense"],
                 ["verify", "--bogus"], ["keys", "add", "--role", "root"],
                 ["export", "--help"], ["records", "import"]):
        out = subprocess.run([sys.executable, "-c", probe, *args], capture_output=True,
                             text=True, timeout=60, cwd=ROOT)
        assert "HEAVY []" in out.stdout, (args, out.stdout, out.stderr)
        assert ("CODE 0" if "--help" in args else "CODE 2") in out.stdout, (args, out.stdout)


def test_plot_to_a_missing_folder_is_one_line_and_status_2(tmp_path):
    out = run("plan", "--p0", "0.01", "--p1", "0.10", "--alpha", "0.05", "--beta", "0.10",
              "--plot", str(tmp_path / "no-such-folder" / "oc.png"))
    assert out.returncode == 2
    assert out.stderr.count("\n") == 1 and "Traceback" not in out.stderr
    assert "no-such-folder" in out.stderr and "does not exist" in out.stderr


@pytest.mark.parametrize("args", [["verify"], ["keys", "list"], ["backup", "--out", "b.db"],
                                  ["casefile", "F-1", "--out", "c.pdf"],
                                  ["export", "facilities"]])
def test_commands_without_a_database_say_where_they_looked(tmp_path, args):
    missing = tmp_path / "nowhere.db"
    env = {**{k: v for k, v in os.environ.items() if not k.startswith("SEQAUDIT_")},
           "SEQAUDIT_DB": str(missing)}
    out = run(*args, env=env, cwd=tmp_path)
    assert out.returncode == 2, out.stderr
    assert str(missing) in out.stderr and "SEQAUDIT_DB" in out.stderr
    assert "demo.db" in out.stderr and "--db" in out.stderr
    assert out.stderr.count("\n") == 1
    assert not missing.exists()                       # nothing was made on the way


def test_demo_prints_where_to_go_and_says_when_its_feed_ends(tmp_path):
    port = free_port()
    exe = shutil.which("seqaudit")
    cmd = [exe] if exe else [sys.executable, "-m", "service.cli"]
    cmd += ["demo", "--db", str(tmp_path / "demo.db"), "--config", str(quiet_config(tmp_path)),
            "--port", str(port), "--minutes", "0.02", "--rate", "20"]
    env = {k: v for k, v in os.environ.items() if not k.startswith("SEQAUDIT_")}
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                            env=env, start_new_session=True)
    lines = []
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line)
            if "feed has ended" in line:
                break
        text = "".join(lines)
        assert f"dashboard: http://127.0.0.1:{port}/ui" in text
        assert "sign in with the analyst key" in text
        analyst = re.search(r"^\s+analyst\s+(\S+)$", text, re.M).group(1)
        assert "feed has ended" in text and "keeps serving" in text, text
        time.sleep(0.5)
        base = f"http://127.0.0.1:{port}"
        assert proc.poll() is None                            # still serving after the feed
        assert httpx2.get(base + "/healthz", timeout=5).status_code == 200
        r = httpx2.get(base + "/v1/facilities", timeout=5,
                       headers={"Authorization": f"Bearer {analyst}"})
        assert r.status_code == 200 and r.json()["total"] == 30
    finally:
        os.killpg(proc.pid, signal.SIGINT)
        try:
            proc.wait(30)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(30)
        proc.stdout.close()
