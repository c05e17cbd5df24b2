"""Dashboard pages of the audit program: forecast, visits, CSV download, bad input."""
import csv
import io

from .test_api_program import _facility, _post
from .test_ui_pages import ui  # noqa: F401  (fixture)


def _register(client, keys):
    for fid, region, n, d in (("N-1", "north", 0, 0), ("N-2", "north", 40, 2),
                              ("S-1", "south", 10, 1)):
        _facility(client, keys, fid, region=region)
        _post(client, keys, fid, n, d, "a")


def test_forecast_page_totals_match_the_api(ui, client, keys):  # noqa: F811
    _register(client, keys)
    api = client.get("/v1/program/forecast", params={"region": "north"},
                     headers=keys.header("analyst")).json()
    r = ui.get("/ui/program", params={"region": "north", "budget": "30"})
    assert r.status_code == 200
    assert 'id="open-cycles">2<' in r.text
    assert f"{api['totals']['expected_false_flags']:.3f}" in r.text
    assert 'id="weeks"' in r.text and "N-2" in r.text and "S-1" not in r.text
    assert "not a verdict" in r.text


def test_visits_page_and_csv(ui, client, keys):  # noqa: F811
    _register(client, keys)
    r = ui.get("/ui/program/visits", params={"budget": "25"})
    assert r.status_code == 200 and "never audited" in r.text
    api = client.get("/v1/program/visits", params={"budget": 25},
                     headers=keys.header("analyst")).json()
    for v in api["visits"]:
        assert v["facility_id"] in r.text
    c = ui.get("/ui/program/visits.csv", params={"budget": "25"})
    assert c.status_code == 200 and c.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(c.text)))
    assert [x["facility_id"] for x in rows] == [v["facility_id"] for v in api["visits"]]


def test_program_pages_show_bad_input(ui, client, keys):  # noqa: F811
    _register(client, keys)
    for path, params, words in (("/ui/program/visits", {"budget": "0"}, "at least 1"),
                                ("/ui/program/visits", {"budget": "lots"}, "whole number"),
                                ("/ui/program/visits", {"budget": "5", "region": "atlantis"},
                                 "unknown region"),
                                ("/ui/program", {"budget": "-2"}, "at least 1")):
        r = ui.get(path, params=params)
        assert r.status_code == 422 and words in r.text, (path, params)


def test_workbench_register_fields(ui):  # noqa: F811
    r = ui.get("/ui/workbench", params={"p0": "0.02", "p1": "0.06", "alpha": "0.05",
                                        "beta": "0.05", "register_size": "500",
                                        "register_false_flags": "5"})
    assert r.status_code == 200
    assert 'id="alpha-per-facility">0.01<' in r.text          # F / K = 5 / 500
    assert "(F ≥ 1)" in r.text
    r = ui.get("/ui/workbench", params={"p0": "0.02", "p1": "0.06", "alpha": "0.05",
                                        "beta": "0.05", "register_size": "many",
                                        "register_false_flags": "5"})
    assert "register size must be a whole number" in r.text
