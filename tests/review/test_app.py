"""Every endpoint of the review application through Starlette's TestClient, hostile inputs included,
on a demo archive built with ``nightly_run(ctx, InProcess())`` (tests/review/conftest.py).

What is expected comes from the archive itself (catalog rows, the datasets read with xarray here),
from the annotations file parsed with tomllib, and from the issue's safety rules (issue 17 section 2).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import time
import tomllib

import numpy as np
import pytest
from starlette.testclient import TestClient

from qcpipe import pipeline
from qcpipe.archive.ncio import read_dataset
from qcpipe.review import create_app
from tests.review.conftest import build_demo

TOKEN = "k" * 40
DEP = "kc-low-ph-2026-09"
GOOD = {"station": "kc-low", "variables": ["ph"], "start": "2026-09-25T06:00:00Z", "end": "2026-09-25T09:00:00Z",
        "flag": 4, "reason": "sonde pulled into a rock pool", "reviewer": "R. Tester"}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return build_demo(tmp_path_factory.mktemp("review-api"))


@pytest.fixture
def client(demo):
    ann = demo.workspace.parent / "annotations.toml"
    ann.unlink(missing_ok=True)
    with TestClient(create_app(demo.workspace, token=TOKEN), base_url="http://127.0.0.1") as c:
        yield c
    ann.unlink(missing_ok=True)


def write(c, method, url, body=None, token=TOKEN, **headers):
    h = {"X-Qcpipe-Token": token} if token else {}
    h.update(headers)
    return c.request(method, url, json=body, headers=h)


def archive_listing(archive):
    return {str(p.relative_to(archive)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(archive.rglob("*")) if p.is_file() and not p.name.startswith("catalog.sqlite")
            and p.name != ".lock"}


# --- reading ---------------------------------------------------------------------------------

def test_stations_page_and_api_list_every_deployment_with_the_catalog_flag_counts(client, demo):
    ctx = pipeline.load_context(demo.workspace)
    rows = {r["deployment"]: r for r in ctx.catalog.datasets()}
    data = client.get("/api/stations").json()
    listed = {d["id"]: d for s in data["stations"] for d in s["deployments"]}
    assert set(listed) == set(rows)
    for dep, d in listed.items():
        want = {}
        for per in rows[dep]["flag_counts"].values():
            for f, n in per.items():
                want[f] = want.get(f, 0) + n
        assert {f: n for f, n in d["flag_counts"].items() if n} == want
        assert sum(d["flag_counts"].values()) == rows[dep]["samples"] * len(rows[dep]["flag_counts"])
    page = client.get("/")
    assert page.status_code == 200 and all(f'href="/deployment/{dep}"' in page.text for dep in rows)
    assert page.headers["content-security-policy"].startswith("default-src 'self'")


def test_quarantined_files_are_notices(client, demo):
    ctx = pipeline.load_context(demo.workspace)
    names = {f["original_name"] for f in ctx.catalog.raw_files(status="quarantined")}
    assert names
    data = client.get("/api/stations").json()
    shown = [n["text"] for n in data["notices"]] + [n["text"] for s in data["stations"] for d in s["deployments"]
                                                     for n in d["notices"] if n["kind"] == "quarantine"]
    assert all(any(t.startswith(name) for t in shown) for name in names)


def test_series_whole_record_is_thinned_and_keeps_every_flag_class_and_extreme(client, demo):
    ctx = pipeline.load_context(demo.workspace)
    ds = read_dataset(ctx.catalog.latest_dataset(DEP)["path"])
    data = client.get(f"/api/deployment/{DEP}/series?columns=200").json()
    assert data["full"] is False and data["samples"] == ds.sizes["time"]
    ph = next(v for v in data["variables"] if v["name"] == "ph")
    assert len(ph["t"]) < ds.sizes["time"]
    assert set(ph["flag"]) == set(np.unique(ds["ph_qc"].values).tolist())
    values = ds["ph"].values
    assert np.nanmax(ph["v"]) == pytest.approx(np.nanmax(values)) and np.nanmin(ph["v"]) == pytest.approx(np.nanmin(values))
    assert data["reference"]["station"] == "kc-pier"
    assert data["emersed"] and all(a <= b for a, b in data["emersed"])


def test_series_zoomed_in_is_every_sample_of_the_window(client, demo):
    ctx = pipeline.load_context(demo.workspace)
    ds = read_dataset(ctx.catalog.latest_dataset(DEP)["path"])
    t = ds["time"].values
    a, b = t[1000], t[1400]
    iso = lambda x: np.datetime_as_string(x, unit="s") + "Z"   # noqa: E731
    data = client.get(f"/api/deployment/{DEP}/series", params={"start": iso(a), "end": iso(b),
                                                                "columns": 1000}).json()
    ph = next(v for v in data["variables"] if v["name"] == "ph")
    sel = (t >= a.astype("datetime64[s]")) & (t <= b.astype("datetime64[s]"))
    assert data["full"] is True and len(ph["t"]) == int(sel.sum())
    assert ph["flag"] == ds["ph_qc"].values[sel].astype(int).tolist()
    assert ph["checks"]["spike"] == ds["ph_qc_spike"].values[sel].astype(int).tolist()


def test_deployment_api_and_page(client):
    meta = client.get(f"/api/deployment/{DEP}").json()
    assert meta["station"] == "kc-low" and {v["name"] for v in meta["variables"]} == {"ph", "temperature"}
    page = client.get(f"/deployment/{DEP}")
    assert page.status_code == 200 and 'name="qcpipe-token"' in page.text and TOKEN in page.text


def test_static_files_are_served_from_the_installed_packages_and_nothing_else(client):
    js = client.get("/static/plotly.min.js")
    assert js.status_code == 200 and len(js.content) > 1_000_000 and b"plotly" in js.content[:2000].lower()
    assert client.get("/static/review.js").status_code == 200
    for name in ("../app.py", "..%2Fapp.py", "%2e%2e%2fapp.py", "app.py", "/etc/passwd"):
        r = client.get(f"/static/{name}")
        assert r.status_code == 404, name
        assert b"import" not in r.content and b"root:" not in r.content


@pytest.mark.parametrize("dep", ["../../etc/passwd", "..%2F..%2Fetc%2Fpasswd", "%2e%2e", "no-such-deployment",
                                 "a" * 300, "kc-low;rm -rf"], ids=["dotdot", "encoded", "dots", "unknown", "long",
                                                                   "shell"])
def test_unknown_or_hostile_deployment_ids_are_404(client, dep):
    for url in (f"/api/deployment/{dep}", f"/api/deployment/{dep}/series", f"/deployment/{dep}",
                f"/api/deployment/{dep}/diff"):
        r = client.get(url)
        assert r.status_code == 404, url
        assert b"root:" not in r.content


@pytest.mark.parametrize("params, words", [
    ({"start": "yesterday"}, "not a time"),
    ({"start": "0001-01-01T00:00:00Z"}, "outside the years"),
    ({"end": "9999-12-31T00:00:00Z"}, "outside the years"),
    ({"start": "2026-09-25T06:00:00"}, "not a time"),              # no zone
    ({"columns": "lots"}, "whole number"),
], ids=["words", "year-1", "year-9999", "no-zone", "columns"])
def test_absurd_series_queries_are_refused_with_a_sentence(client, params, words):
    r = client.get(f"/api/deployment/{DEP}/series", params=params)
    assert r.status_code == 400 and words in r.json()["error"]


def test_huge_column_counts_are_capped(client):
    data = client.get(f"/api/deployment/{DEP}/series", params={"columns": 10**9}).json()
    assert all(len(v["t"]) <= data["samples"] for v in data["variables"])


def test_diff_of_a_single_version_is_a_clear_404(client):
    r = client.get(f"/api/deployment/{DEP}/diff")
    assert r.status_code == 404 and "versions [1]" in r.json()["error"]
    assert client.get(f"/api/deployment/{DEP}/diff", params={"from": "x"}).status_code == 400


# --- writing ---------------------------------------------------------------------------------

def test_annotation_add_edit_remove_keeps_the_file_valid_and_the_archive_untouched(client, demo):
    ann = demo.workspace.parent / "annotations.toml"
    before = archive_listing(demo.archive)
    r = write(client, "POST", "/api/annotations", GOOD)
    assert r.status_code == 201, r.text
    key = r.json()["key"]
    doc = tomllib.loads(ann.read_text())
    assert doc["annotation"] == [{"station": "kc-low", "variables": ["ph"], "flag": 4,
                                  "start": dt.datetime(2026, 9, 25, 6, tzinfo=dt.timezone.utc),
                                  "end": dt.datetime(2026, 9, 25, 9, tzinfo=dt.timezone.utc),
                                  "reason": "sonde pulled into a rock pool", "reviewer": "R. Tester",
                                  "date": dt.datetime.now(dt.timezone.utc).date()}]
    listed = client.get("/api/annotations", params={"station": "kc-low"}).json()["annotations"]
    assert [a["key"] for a in listed] == [key]
    r = write(client, "PUT", f"/api/annotations/{key}", dict(GOOD, flag=3))
    assert r.status_code == 200 and tomllib.loads(ann.read_text())["annotation"][0]["flag"] == 3
    assert write(client, "PUT", f"/api/annotations/{key}", GOOD).status_code == 404       # old key is gone
    new_key = r.json()["key"]
    assert write(client, "DELETE", f"/api/annotations/{new_key}").status_code == 200
    assert tomllib.loads(ann.read_text()).get("annotation", []) == []
    assert archive_listing(demo.archive) == before


def test_annotations_keep_the_files_comments(client, demo):
    ann = demo.workspace.parent / "annotations.toml"
    ann.write_text("# kept: our review notes\n")
    assert write(client, "POST", "/api/annotations", GOOD).status_code == 201
    assert ann.read_text().startswith("# kept: our review notes\n")


@pytest.mark.parametrize("token, headers, status", [
    (None, {}, 403),
    ("wrong" * 8, {}, 403),
    (TOKEN, {"Origin": "http://evil.example"}, 403),
    (TOKEN, {"Sec-Fetch-Site": "cross-site"}, 403),
], ids=["no-token", "wrong-token", "foreign-origin", "cross-site"])
def test_writes_without_the_session_token_or_from_another_site_are_refused(client, demo, token, headers, status):
    ann = demo.workspace.parent / "annotations.toml"
    for method, url in (("POST", "/api/annotations"), ("PUT", "/api/annotations/0123456789abcdef"),
                        ("DELETE", "/api/annotations/0123456789abcdef"), ("POST", "/api/rerun")):
        r = write(client, method, url, GOOD, token=token, **headers)
        assert r.status_code == status, (method, url)
    assert not ann.exists()


def test_a_form_post_is_refused(client, demo):
    r = client.post("/api/annotations", data={"reason": "x"}, headers={"X-Qcpipe-Token": TOKEN})
    assert r.status_code == 415
    r = client.post("/api/annotations", content=b"x" * 20000,
                    headers={"X-Qcpipe-Token": TOKEN, "Content-Type": "application/json"})
    assert r.status_code == 413


def test_another_host_name_is_refused(demo):
    with TestClient(create_app(demo.workspace, token=TOKEN), base_url="http://attacker.example") as c:
        assert c.get("/api/stations").status_code == 400


@pytest.mark.parametrize("change, words", [
    ({"station": "../etc"}, "no station"),
    ({"station": "kc-nowhere"}, "no station"),
    ({"variables": ["salinity"]}, "not recorded at kc-low"),
    ({"variables": "ph"}, "list of variable names"),
    ({"start": "2026-09-25T06:00:00Z", "end": "2026-09-24T06:00:00Z"}, "end is before start"),
    ({"start": "1066-10-14T09:00:00Z"}, "outside the years"),
    ({"start": "2025-01-01T00:00:00Z", "end": "2026-09-25T00:00:00Z"}, "at most 400"),
    ({"flag": 2}, "1 (pass), 3 (suspect) or 4 (fail)"),
    ({"flag": True}, "1 (pass), 3 (suspect) or 4 (fail)"),
    ({"reason": "ok"}, "3 to 500 characters"),
    ({"reason": "x" * 501}, "3 to 500 characters"),
    ({"reason": "line one\nline two"}, "control characters"),
    ({"reviewer": ""}, "1 to 80 characters"),
    ({"reviewer": 7}, "as text"),
], ids=["traversal", "unknown-station", "unknown-variable", "variables-not-list", "reversed", "absurd-date",
        "huge-range", "flag-2", "flag-bool", "reason-short", "reason-long", "reason-newline", "no-reviewer",
        "reviewer-number"])
def test_bad_annotations_are_refused_with_a_sentence_and_nothing_written(client, demo, change, words):
    r = write(client, "POST", "/api/annotations", dict(GOOD, **change))
    assert r.status_code in (400, 404) and words in r.json()["error"], r.text
    assert not (demo.workspace.parent / "annotations.toml").exists()


def test_script_in_a_reason_is_stored_as_text_and_never_served_as_markup(client, demo):
    reason = '<script>alert("x")</script> weed & "quotes"'
    assert write(client, "POST", "/api/annotations", dict(GOOD, reason=reason)).status_code == 201
    assert tomllib.loads((demo.workspace.parent / "annotations.toml").read_text())["annotation"][0]["reason"] == reason
    page = client.get(f"/deployment/{DEP}").text
    assert "<script>alert" not in page
    api = client.get(f"/api/deployment/{DEP}")
    assert api.headers["content-type"] == "application/json" and api.json()["annotations"][0]["reason"] == reason


def test_workspace_without_an_annotations_file_says_how_to_name_one(tmp_path, demo):
    ws = tmp_path / "workspace.toml"
    text = demo.workspace.read_text().replace('annotations = "annotations.toml"', "")
    base = demo.workspace.parent
    for key in ("register", "layouts", "rules", "inbox", "archive"):        # paths relative to the copy's folder
        text = text.replace(f'{key} = "', f'{key} = "{base}/', 1)
    ws.write_text(text)
    with TestClient(create_app(ws, token=TOKEN), base_url="http://127.0.0.1") as c:
        r = write(c, "POST", "/api/annotations", GOOD)
    assert r.status_code == 409 and 'annotations = "annotations.toml"' in r.json()["error"]


# --- re-run ------------------------------------------------------------------------------------

def test_rerun_one_at_a_time_then_the_new_versions_diff(tmp_path_factory):
    d = build_demo(tmp_path_factory.mktemp("review-rerun"))
    with TestClient(create_app(d.workspace, token=TOKEN), base_url="http://127.0.0.1") as c:
        assert write(c, "POST", "/api/annotations", GOOD).status_code == 201
        assert write(c, "POST", "/api/rerun", {"deployment": "../x"}).status_code == 404
        first = write(c, "POST", "/api/rerun", {"deployment": DEP})
        assert first.status_code == 202 and first.json()["state"] == "running"
        second = write(c, "POST", "/api/rerun", {"deployment": DEP})
        assert second.status_code == 409 and "already going on" in second.json()["error"]
        blocked = write(c, "POST", "/api/annotations", GOOD)
        assert blocked.status_code == 409 and "re-run is going on" in blocked.json()["error"]
        deadline = time.monotonic() + 300
        while c.get("/api/rerun").json()["state"] == "running" and time.monotonic() < deadline:
            time.sleep(0.5)
        status = c.get("/api/rerun").json()
        assert status["state"] == "done", status
        assert status["progress"]["qc"]["done"] == status["progress"]["qc"]["total"] >= 1
        diff = next(x for x in status["diffs"] if x["deployment"] == DEP)
        assert (diff["from"], diff["to"]) == (1, 2)
        # the manual check moved exactly the samples in the annotated period to fail (counted here from the file)
        ctx = pipeline.load_context(d.workspace)
        ds = read_dataset(ctx.catalog.latest_dataset(DEP)["path"])
        t = ds["time"].values
        inside = (t >= np.datetime64("2026-09-25T06:00:00")) & (t <= np.datetime64("2026-09-25T09:00:00"))
        manual = [m for m in diff["moves"] if m["variable"] == "ph" and m["check"] == "manual" and m["to"] == 4]
        assert sum(m["count"] for m in manual) == int(inside.sum()) > 0
        assert c.get(f"/api/deployment/{DEP}/diff").json()["lines"] == diff["lines"]
