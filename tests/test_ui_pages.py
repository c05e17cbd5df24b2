"""Dashboard pages in-process: sign-in, CSRF, cookies, headers, escaping, filters."""
import re

import pytest
from fastapi.testclient import TestClient

from .conftest import new_facility, record

CSRF = re.compile(r'name="csrf" value="([^"]+)"')


def signin(client, key):
    form = client.get("/ui/signin")
    token = CSRF.search(form.text).group(1)
    return client.post("/ui/signin", data={"key": key, "csrf": token}, follow_redirects=False)


@pytest.fixture
def ui(app, keys):
    with TestClient(app, base_url="http://127.0.0.1") as c:
        r = signin(c, keys.analyst)
        assert r.status_code == 303 and r.headers["location"] == "/ui/overview"
        c.csrf = CSRF.search(c.get("/ui/overview").text).group(1)
        yield c


@pytest.mark.parametrize("role, message", [("field", "Field keys can only post records"),
                                           ("revoked", "revoked"), (None, "not known")])
def test_refused_keys(app, keys, role, message):
    with TestClient(app) as c:
        r = signin(c, getattr(keys, role) if role else "sqa_wrong")
        assert r.status_code == 401 and message in r.text
        assert "seqaudit_session" not in r.cookies
        assert c.get("/ui/overview", follow_redirects=False).status_code == 303


def test_signin_without_its_token_is_refused(app, keys):
    with TestClient(app) as c:
        c.get("/ui/signin")
        r = c.post("/ui/signin", data={"key": keys.analyst, "csrf": "made-up"},
                   follow_redirects=False)
        assert r.status_code == 403


def test_session_cookie_flags(app, keys):
    with TestClient(app) as c:
        r = signin(c, keys.analyst)
        cookie = r.headers["set-cookie"]
        assert "HttpOnly" in cookie and "SameSite=strict" in cookie.replace("Strict", "strict")
        assert "Secure" not in cookie
    with TestClient(app, base_url="https://testserver") as c:
        r = signin(c, keys.analyst)
        assert "Secure" in r.headers["set-cookie"]


def test_every_page_has_caution_headers_and_no_outside_assets(ui, client, keys):
    fid = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"{fid}-{i}", 1), headers=keys.header("field"))
    for path in ("/ui/overview", f"/ui/facilities/{fid}", "/ui/alerts",
                 "/ui/workbench?p0=0.02&p1=0.08&alpha=0.05&beta=0.1", "/ui/signin"):
        r = ui.get(path)
        assert r.status_code == 200, path
        assert "not a verdict" in r.text, path
        assert "default-src 'self'" in r.headers["content-security-policy"]
        assert r.headers["x-frame-options"] == "DENY"
        assert r.headers["x-content-type-options"] == "nosniff"
        refs = re.findall(r'(?:src|href|action)="([^"]+)"', r.text)
        assert refs and all(ref.startswith(("/", "#", "?")) for ref in refs), (path, refs)
    css = ui.get("/ui/static/app.css")
    assert css.status_code == 200 and "url(" not in css.text and "@import" not in css.text


def test_post_routes_need_the_sessions_csrf_token(ui, client, keys):
    fid = new_facility(client, keys)
    for i in range(3):
        client.post("/v1/records", json=record(fid, f"{fid}-{i}", 1), headers=keys.header("field"))
    aid = client.get("/v1/alerts", params={"facility_id": fid},
                     headers=keys.header("analyst")).json()["items"][0]["alert_id"]
    posts = [(f"/ui/facilities/{fid}/records/{fid}-0/void", {"reason": "x", "cycle": "1"}),
             (f"/ui/facilities/{fid}/cycles", {}),
             (f"/ui/facilities/{fid}/close", {"reason": "x"}),
             (f"/ui/alerts/{aid}/ack", {"note": "x"}),
             ("/ui/signout", {})]
    for path, form in posts:
        altered = ui.csrf[:-1] + ("x" if ui.csrf[-1] != "x" else "y")   # one character off
        for token in (None, "forged", altered):
            data = dict(form) if token is None else {**form, "csrf": token}
            r = ui.post(path, data=data, follow_redirects=False)
            assert r.status_code == 403, (path, token)
            assert "security token" in r.text
    state = client.get(f"/v1/facilities/{fid}", headers=keys.header("analyst")).json()
    assert state["status"] == "flagged" and state["nonconforming"] == 3   # nothing happened
    # with the right token each works
    r = ui.post(f"/ui/alerts/{aid}/ack", data={"note": "seen", "csrf": ui.csrf},
                follow_redirects=False)
    assert r.status_code == 303
    r = ui.post(f"/ui/facilities/{fid}/records/{fid}-0/void",
                data={"reason": "", "cycle": "1", "csrf": ui.csrf})
    assert "A reason is required" in r.text
    r = ui.post(f"/ui/facilities/{fid}/records/{fid}-0/void",
                data={"reason": "wrong unit", "cycle": "1", "csrf": ui.csrf})
    assert "voided" in r.text
    assert ui.post("/ui/signout", data={"csrf": ui.csrf}, follow_redirects=False).status_code == 303
    assert ui.get("/ui/overview", follow_redirects=False).status_code == 303   # session ended


def test_user_text_is_escaped(ui, client, keys):
    hostile = "<script>alert('x')</script>"
    r = client.post("/v1/facilities", json={"facility_id": "SA-<b>", "name": hostile,
                                            "plan": "scales"}, headers=keys.header("admin"))
    assert r.status_code == 201
    client.post("/v1/records", json=record("SA-<b>", "r<i>1", 0, note=hostile),
                headers=keys.header("field"))
    page = ui.get("/ui/facilities/SA-%3Cb%3E").text
    assert hostile not in page and "&lt;script&gt;" in page and "SA-&lt;b&gt;" in page
    overview = ui.get("/ui/overview", params={"q": "<b>"}).text
    assert hostile not in overview and "SA-&lt;b&gt;" in overview


def test_overview_filters_search_sort_and_pages(ui, client, keys):
    ids = [new_facility(client, keys, plan="scales", prefix="PG") for _ in range(55)]
    for i in range(3):
        client.post("/v1/records", json=record(ids[7], f"pg-{i}", 1), headers=keys.header("field"))
    first = ui.get("/ui/overview", params={"plan": "scales"}).text
    assert "Page 1 of 2" in first and ids[7] in first.split("<tbody>")[1].split("</tr>")[0]
    second = ui.get("/ui/overview", params={"plan": "scales", "page_no": 2}).text
    assert "Page 2 of 2" in second
    flagged = ui.get("/ui/overview", params={"status": "flagged"}).text
    assert flagged.count('data-status="flagged"') == 1
    found = ui.get("/ui/overview", params={"q": ids[3]}).text
    assert found.count("data-status=") == 1
    nonsense = ui.get("/ui/overview", params={"status": "bogus", "sort": "evil; DROP"})
    assert nonsense.status_code == 200


def test_unknown_facility_page_is_an_html_404(ui):
    r = ui.get("/ui/facilities/NOPE")
    assert r.status_code == 404 and "text/html" in r.headers["content-type"]
    assert "no facility" in r.text


def test_workbench_reports_bad_input(ui):
    r = ui.get("/ui/workbench", params={"p0": "0.2", "p1": "0.1", "alpha": "0.05",
                                        "beta": "0.1"})
    assert r.status_code == 200 and "p1 must be larger than p0" in r.text
    r = ui.get("/ui/workbench", params={"p0": "x", "p1": "0.1", "alpha": "0.05", "beta": "0.1"})
    assert "p0 must be a number such as 0.05, got &#39;x&#39;" in r.text
    # every wrong field is named at once, each beside its input
    r = ui.get("/ui/workbench", params={"p0": "x", "p1": "1.5", "alpha": "0.6", "beta": "0.5",
                                        "max_units": "ten"})
    for name in ("p0", "p1", "beta", "max_units"):
        assert f'id="err-{name}"' in r.text and f'aria-describedby="err-{name}"' in r.text
    assert 'id="err-alpha"' not in r.text
    assert "p1 must lie strictly between 0 and 1" in r.text
    assert "beta alpha + beta must be below 1" in r.text and "cap must be a whole number" in r.text
    r = ui.get("/ui/workbench", params={"p0": "0.01", "p1": "0.1", "alpha": "0.05",
                                        "beta": "0.1", "max_units": "100"})
    from service.stats import design   # the page shows the engine's own figure
    alpha = design(0.01, 0.1, 0.05, 0.1, max_units=100).to_dict()["exact"]["alpha"]
    assert f'id="exact-alpha">{alpha:.5f}<' in r.text


def test_bad_query_values_give_an_html_page(ui):
    r = ui.get("/ui/overview", params={"page_no": "abc"})
    assert r.status_code == 422 and "text/html" in r.headers["content-type"]
    assert "page_no" in r.text
    api = ui.get("/v1/facilities?limit=abc")          # the API keeps problem+json
    assert api.headers["content-type"].startswith("application/problem+json")
