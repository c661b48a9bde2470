"""The service's HTTP API through FastAPI's test client: every route, status code and the
one error shape ``{"error": …, "hint": …}``. Jobs run in real worker processes."""

from __future__ import annotations

import json
import threading
import time
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from geonorm.batch.cache import Cache
from geonorm.batch.clean import clean_file
from geonorm.cli import app as cli
from geonorm.errors import GeonormError
from geonorm.service import create_app
from geonorm.service.store import Job

runner = CliRunner()
# Invented strings: places of several kinds, an ambiguous name, a region, junk.
TEXTS = ["austin tx", "Lyon", "georgia", "Europe", "asdf", "München", "Lisbon / Berlin", ""]
ROWS = ["austin tx", "Lyon", "georgia", "georgia", "Europe", "asdf", "München", "springfield"]


def _error(r, status: int) -> dict:
    assert r.status_code == status, r.text
    body = r.json()
    assert isinstance(body["error"], str) and body["error"]
    assert isinstance(body["hint"], str) and body["hint"]
    return body


def _auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


@pytest.fixture()
def served(tmp_path):
    app = create_app(tmp_path / "data", rate=1000)
    store = app.state.service.store
    tokens = {
        role: store.add_token(f"{role}-team", role) for role in ("resolve", "review", "admin")
    }
    with TestClient(app) as client:
        yield app, client, tokens


def _csv(path: Path, values: list[str], repeat: int = 3) -> Path:
    lines = ["member_id,location"] + [f"M{i:04d},{v}" for i, v in enumerate(values * repeat)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _wait(client: TestClient, job_id: str, token: str, timeout: float = 90) -> dict:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        status = client.get(f"/v1/jobs/{job_id}", headers=_auth(token)).json()
        if status["state"] not in ("queued", "running"):
            return status
        time.sleep(0.2)
    raise AssertionError(f"job {job_id} did not finish in {timeout} s")


# -- health, documents, unknown routes -------------------------------------------------
def test_health_needs_no_token_and_names_the_versions(served):
    app, client, _ = served
    body = client.get("/v1/health").json()
    resolver = app.state.service.resolver
    assert body == {
        "status": "ok",
        "index_version": str(resolver.index.meta["index_version"]),
        "resolver_version": resolver.version,
    }


def test_openapi_is_served_and_the_interactive_pages_are_off(served):
    _, client, _ = served
    schema = client.get("/openapi.json").json()
    for path in ("/v1/health", "/v1/resolve", "/v1/jobs", "/v1/jobs/{job_id}/output"):
        assert path in schema["paths"]
    assert "/v1/decisions" in schema["paths"] and "/metrics" in schema["paths"]
    for page in ("/docs", "/redoc"):
        _error(client.get(page), 404)


def test_unknown_route_and_method_have_the_error_shape(served):
    _, client, tokens = served
    assert _error(client.get("/v2/nothing"), 404)["error"] == "no such route"
    _error(client.get("/v1/resolve", headers=_auth(tokens["admin"])), 405)


# -- tokens and roles ----------------------------------------------------------------
def test_no_token_bad_token_and_revoked_token_get_401(served):
    app, client, tokens = served
    body = _error(client.post("/v1/resolve", json={"texts": ["Lyon"]}), 401)
    assert "geonorm serve token add" in body["hint"]
    r = client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth("gn_000000000000_x"))
    _error(r, 401)
    forged = tokens["resolve"][:-2] + ("AA" if not tokens["resolve"].endswith("AA") else "BB")
    _error(client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth(forged)), 401)
    assert client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth(tokens["resolve"]))
    app.state.service.store.revoke_token("resolve-team")
    _error(
        client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth(tokens["resolve"])),
        401,
    )


def test_roles_include_each_other_and_wrong_role_gets_403(served):
    _, client, tokens = served
    for role in ("resolve", "review", "admin"):
        r = client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth(tokens[role]))
        assert r.status_code == 200
    body = _error(client.post("/v1/decisions", json=[], headers=_auth(tokens["resolve"])), 403)
    assert "review" in body["error"]
    assert client.post("/v1/decisions", json=[], headers=_auth(tokens["review"])).json() == {
        "stored": 0
    }
    _error(client.get("/metrics", headers=_auth(tokens["review"])), 403)
    assert client.get("/metrics", headers=_auth(tokens["admin"])).status_code == 200


def test_role_of_is_the_page_s_login(served):
    app, _, tokens = served
    service = app.state.service
    assert [service.role_of(tokens[r]) for r in ("resolve", "review", "admin")] == [
        "resolve",
        "review",
        "admin",
    ]
    assert service.role_of(tokens["admin"]) == "admin"  # the remembered path
    assert service.role_of("") is None and service.role_of("nonsense") is None
    assert service.role_of(tokens["admin"] + "x") is None


def test_rate_limit_gives_429_with_retry_after(tmp_path):
    app = create_app(tmp_path / "data", rate=2)
    token = app.state.service.store.add_token("slow", "resolve")
    with TestClient(app) as client:
        codes = [
            client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=_auth(token))
            for _ in range(6)
        ]
    limited = [r for r in codes if r.status_code == 429]
    assert limited and codes[0].status_code == 200
    body = _error(limited[0], 429)
    assert "2 requests a second" in body["error"]
    assert int(limited[0].headers["Retry-After"]) >= 1


# -- /v1/resolve -----------------------------------------------------------------------
def test_resolve_equals_lookup_json_with_the_same_cache(served):
    app, client, tokens = served
    cache = str(app.state.service.cache_path)
    r = client.post("/v1/resolve", json={"texts": TEXTS}, headers=_auth(tokens["resolve"]))
    assert r.status_code == 200
    results = r.json()["results"]
    assert [x["text"] for x in results] == TEXTS
    cli_run = runner.invoke(cli, ["lookup", *TEXTS, "--json", "--cache", cache])
    assert cli_run.exit_code == 0, cli_run.output
    assert results == json.loads(cli_run.stdout)
    # Another threshold, as lookup --accept gives it.
    r = client.post(
        "/v1/resolve", json={"texts": TEXTS, "accept": 0.99}, headers=_auth(tokens["resolve"])
    )
    cli_run = runner.invoke(cli, ["lookup", *TEXTS, "--json", "--accept", "0.99", "--cache", cache])
    assert r.json()["results"] == json.loads(cli_run.stdout)


def test_answer_json_is_to_dict_less_the_internal_fields(resolver):
    from geonorm.batch.lookup import answer_json, lookup_texts

    pairs, _ = lookup_texts([*TEXTS, "Springfield", "Sydney"], resolver=resolver)
    for text, res in pairs:
        internal = ("evidence", "score")  # the file prior's input and the raw score
        slow = {"text": text, **{k: v for k, v in res.to_dict().items() if k not in internal}}
        assert json.dumps(answer_json(text, res)) == json.dumps(slow)


def test_resolve_limits_and_wrong_bodies(served):
    _, client, tokens = served
    auth = _auth(tokens["resolve"])
    body = _error(client.post("/v1/resolve", json={"texts": ["x"] * 10_001}, headers=auth), 413)
    assert "10,000" in body["error"]
    big = b'{"texts": ["' + b"a" * (8 * 1024 * 1024) + b'"]}'
    _error(
        client.post(
            "/v1/resolve", content=big, headers={**auth, "Content-Type": "application/json"}
        ),
        413,
    )
    bad_json = client.post(
        "/v1/resolve", content=b"{texts: [", headers={**auth, "Content-Type": "application/json"}
    )
    assert _error(bad_json, 422)["error"] == "the body is not valid JSON"
    body = _error(client.post("/v1/resolve", json={"texts": ["a", 3]}, headers=auth), 422)
    assert body["problems"][0]["where"] == "texts.1"
    _error(client.post("/v1/resolve", json={"texts": "Lyon"}, headers=auth), 422)
    _error(client.post("/v1/resolve", json={"texts": ["a"], "accept": 1.5}, headers=auth), 422)
    _error(client.post("/v1/resolve", json={}, headers=auth), 422)


def test_body_limit_holds_for_a_chunked_body(served):
    _, client, tokens = served

    def chunks():
        yield b'{"texts": ["'
        for _ in range(9):
            yield b"a" * (1024 * 1024)
        yield b'"]}'

    r = client.post(
        "/v1/resolve",
        content=chunks(),
        headers={**_auth(tokens["resolve"]), "Content-Type": "application/json"},
    )
    _error(r, 413)


# -- /v1/decisions ---------------------------------------------------------------------
def test_decisions_are_all_or_nothing_with_each_bad_item_listed(served):
    app, client, tokens = served
    auth = _auth(tokens["review"])
    items = [
        {"text": "georgia", "country": "US", "subdivision": "US-GA"},
        {"text": "atlantis", "country": "XX"},
        {"text": "springfield", "country": "FR", "subdivision": "US-IL"},
        {"text": "nowhere"},
    ]
    body = _error(client.post("/v1/decisions", json=items, headers=auth), 422)
    assert [p["index"] for p in body["problems"]] == [1, 2, 3]
    assert "'XX' is not an ISO 3166-1 country code" in body["problems"][0]["reason"]
    assert "US-IL" in body["problems"][1]["reason"]
    with Cache(app.state.service.cache_path) as cache:
        assert cache.overrides() == {}  # nothing stored
    wrong_type = client.post("/v1/decisions", json=[{"text": "x", "country": 3}], headers=auth)
    assert _error(wrong_type, 422)["problems"][0]["index"] == 0
    _error(client.post("/v1/decisions", json={"text": "x"}, headers=auth), 422)


def test_decisions_are_used_by_later_resolves(served):
    app, client, tokens = served
    auth = _auth(tokens["review"])
    before = client.post("/v1/resolve", json={"texts": ["georgia", "asdf"]}, headers=auth)
    assert before.json()["results"][0]["reason"] != "reviewed"
    items = [
        {"text": "Georgia", "country": "US", "subdivision": "US-GA", "note": "our members"},
        {"text": "asdf", "country": "not_a_place"},
    ]
    assert client.post("/v1/decisions", json=items, headers=auth).json() == {"stored": 2}
    after = client.post("/v1/resolve", json={"texts": ["georgia", "asdf"]}, headers=auth)
    first, second = after.json()["results"]
    assert (first["country"], first["subdivision"], first["reason"]) == ("US", "US-GA", "reviewed")
    assert (second["status"], second["reason"]) == ("not_a_place", "reviewed")
    cli_run = runner.invoke(
        cli,
        ["lookup", "georgia", "asdf", "--json", "--cache", str(app.state.service.cache_path)],
    )
    assert after.json()["results"] == json.loads(cli_run.stdout)


def test_review_items_rank_doubtful_strings_and_leave_out_decided_ones(served):
    app, client, tokens = served
    service = app.state.service
    auth = _auth(tokens["review"])
    texts = ["georgia"] * 5 + ["Europe"] * 2 + ["Lyon"] * 9 + ["springfield"]
    client.post("/v1/resolve", json={"texts": texts}, headers=auth)
    items = service.review_items()
    keys = [i["key"] for i in items]
    assert "lyon" not in keys  # matched: nothing to review
    georgia = items[keys.index("georgia")]
    assert georgia["rows"] == 5 and georgia["guess"]["status"] == "review"
    assert georgia["impact"] == round(5 * (1 - georgia["guess"]["confidence"]), 2)
    assert set(georgia["guess"]) == {"country", "subdivision", "city", "confidence", "status"}
    assert all(
        set(a) == {"country", "subdivision", "city", "score"} for a in georgia["alternatives"]
    )
    assert len(georgia["alternatives"]) <= 3
    assert [i["impact"] for i in items] == sorted((i["impact"] for i in items), reverse=True)
    assert service.review_items(limit=1) == items[:1]
    assert service.decide([{"text": "georgia", "country": "GE"}]) == 1
    assert "georgia" not in [i["key"] for i in service.review_items()]
    with pytest.raises(GeonormError):
        service.review_items("0" * 24)
    with pytest.raises(GeonormError):
        service.review_items("../etc")


# -- /v1/jobs --------------------------------------------------------------------------
def test_job_output_equals_clean_and_its_files_are_served(served, tmp_path):
    app, client, tokens = served
    auth = _auth(tokens["resolve"])
    src = _csv(tmp_path / "members.csv", ROWS)
    with open(src, "rb") as fh:
        r = client.post(
            "/v1/jobs",
            files={"file": ("../../evil name.csv", fh)},
            data={"column": "location"},
            headers=auth,
        )
    assert r.status_code == 202
    job = r.json()
    assert job["state"] == "queued" and len(job["id"]) == 24
    status = _wait(client, job["id"], tokens["resolve"])
    assert status["state"] == "done", status
    assert status["rows"] == len(ROWS) * 3 and status["distinct"] == len(set(ROWS))
    assert status["progress"] == 1.0 and status["summary"]["rows"] == status["rows"]
    folder = app.state.service.jobs_dir / job["id"]
    assert sorted(p.name for p in folder.iterdir() if p.name.startswith("input")) == ["input.csv"]
    output = client.get(f"/v1/jobs/{job['id']}/output", headers=auth)
    assert output.status_code == 200 and output.headers["content-type"].startswith("text/csv")
    # The same file through the library with the same cache state gives the same bytes.
    with Cache(app.state.service.cache_path) as cache:
        clean_file(src, "location", tmp_path / "cli.csv", cache=cache)
    assert output.content == (tmp_path / "cli.csv").read_bytes()
    queue = client.get(f"/v1/jobs/{job['id']}/queue", headers=auth)
    assert queue.text.startswith('"text","rows","impact"') and "georgia" in queue.text
    tally = client.get(f"/v1/jobs/{job['id']}/tally", headers=auth)
    assert tally.text.startswith("country,") and "\nFR," in tally.text
    svg = client.get(f"/v1/jobs/{job['id']}/map.svg", headers=auth)
    assert svg.headers["content-type"] == "image/svg+xml" and b"<svg" in svg.content
    listed = client.get("/v1/jobs", headers=auth).json()["jobs"]
    assert [j["id"] for j in listed] == [job["id"]]
    items = app.state.service.review_items(job["id"])
    assert "georgia" in [i["key"] for i in items]
    # Deleting removes the files.
    deleted = client.delete(f"/v1/jobs/{job['id']}", headers=auth)
    assert deleted.status_code == 200 and not folder.exists()
    _error(client.get(f"/v1/jobs/{job['id']}/output", headers=auth), 404)


def test_job_with_a_format_and_accept(served, tmp_path):
    _, client, tokens = served
    auth = _auth(tokens["resolve"])
    src = _csv(tmp_path / "members.csv", ROWS, repeat=1)
    r = client.post(
        "/v1/jobs",
        files={"file": ("members.csv", src.read_bytes())},
        data={"column": "location", "format": "jsonl", "accept": "0.95"},
        headers=auth,
    )
    assert r.status_code == 202
    assert _wait(client, r.json()["id"], tokens["resolve"])["state"] == "done"
    out = client.get(f"/v1/jobs/{r.json()['id']}/output", headers=auth)
    assert out.headers["content-type"].startswith("application/x-ndjson")
    rows = [json.loads(line) for line in out.text.splitlines()]
    assert len(rows) == len(ROWS) and "geo_status" in rows[0]


def test_a_job_that_fails_says_why(served, tmp_path):
    _, client, tokens = served
    auth = _auth(tokens["resolve"])
    src = _csv(tmp_path / "members.csv", ROWS, repeat=1)
    r = client.post(
        "/v1/jobs",
        files={"file": ("m.csv", src.read_bytes())},
        data={"column": "place"},
        headers=auth,
    )
    status = _wait(client, r.json()["id"], tokens["resolve"])
    assert status["state"] == "failed"
    assert "'place' is not in" in status["error"]["error"] and status["error"]["hint"]
    _error(client.get(f"/v1/jobs/{r.json()['id']}/output", headers=auth), 409)


def test_a_job_that_locates_nobody_has_no_map(served, tmp_path):
    _, client, tokens = served
    auth = _auth(tokens["resolve"])
    src = _csv(tmp_path / "junk.csv", ["asdf", "n/a", "???"], repeat=2)
    r = client.post(
        "/v1/jobs",
        files={"file": ("junk.csv", src.read_bytes())},
        data={"column": "location"},
        headers=auth,
    )
    assert _wait(client, r.json()["id"], tokens["resolve"])["state"] == "done"
    assert client.get(f"/v1/jobs/{r.json()['id']}/tally", headers=auth).status_code == 200
    _error(client.get(f"/v1/jobs/{r.json()['id']}/map.svg", headers=auth), 404)


def test_job_form_mistakes(served, tmp_path):
    app, client, tokens = served
    auth = _auth(tokens["resolve"])
    data = b"member_id,location\nM1,Lyon\n"
    _error(client.post("/v1/jobs", files={"file": ("m.csv", data)}, headers=auth), 422)
    _error(client.post("/v1/jobs", data={"column": "location"}, headers=auth), 422)
    _error(client.post("/v1/jobs", json={"column": "location"}, headers=auth), 422)
    for extra in ({"accept": "high"}, {"accept": "2"}, {"format": "xlsx"}):
        r = client.post(
            "/v1/jobs",
            files={"file": ("m.csv", data)},
            data={"column": "location", **extra},
            headers=auth,
        )
        _error(r, 422)
    _error(client.post("/v1/jobs", files={"file": ("m.csv", data)}, data={"column": "x"}), 401)
    assert list(app.state.service.jobs_dir.iterdir()) == []  # nothing left behind


def test_upload_over_the_cap_gets_413(tmp_path):
    app = create_app(tmp_path / "data", max_upload_mb=1)
    token = app.state.service.store.add_token("t", "resolve")
    data = b"member_id,location\n" + b"M1,Lyon\n" * 200_000  # 1.6 MB
    with TestClient(app) as client:
        r = client.post(
            "/v1/jobs",
            files={"file": ("m.csv", data)},
            data={"column": "location"},
            headers=_auth(token),
        )
        body = _error(r, 413)
        assert "--max-upload-mb" in body["hint"]
        assert list(app.state.service.jobs_dir.iterdir()) == []


def test_unknown_jobs_and_unfinished_files(served):
    app, client, tokens = served
    auth = _auth(tokens["resolve"])
    for job_id in ("0" * 24, "..", "not-an-id"):
        _error(client.get(f"/v1/jobs/{job_id}", headers=auth), 404)
        _error(client.delete(f"/v1/jobs/{job_id}", headers=auth), 404)
        _error(client.get(f"/v1/jobs/{job_id}/output", headers=auth), 404)
    now = time.time()
    waiting = Job("a" * 24, "queued", "location", 0.7, None, "input.csv", "output.csv", "m.csv",
                  now, now, None, None, None, 0.0, None, None, None)  # fmt: skip
    app.state.service.store.add_job(waiting)
    for what in ("output", "queue", "tally", "map.svg"):
        body = _error(client.get(f"/v1/jobs/{'a' * 24}/{what}", headers=auth), 409)
        assert "queued" in body["error"]
    cancelled = client.delete(f"/v1/jobs/{'a' * 24}", headers=auth).json()
    assert cancelled["state"] == "cancelled"


def test_old_jobs_are_swept(served):
    app, _, _ = served
    service = app.state.service
    old = time.time() - 31 * 86400
    job = Job("b" * 24, "done", "location", 0.7, None, "input.csv", "output.csv", "m.csv",
              old, old, 1, 1, 1, 1.0, {}, None, None)  # fmt: skip
    service.store.add_job(job)
    (service.jobs_dir / job.id).mkdir()
    (service.jobs_dir / job.id / "output.csv").write_text("x\n")
    assert service.jobs.sweep() == 1
    assert service.store.job(job.id) is None and not (service.jobs_dir / job.id).exists()


# -- /metrics and concurrency --------------------------------------------------------------
def test_metrics_in_the_prometheus_text_format(served):
    _, client, tokens = served
    auth = _auth(tokens["admin"])
    client.post("/v1/resolve", json={"texts": ["Lyon", "Lyon", "Paris"]}, headers=auth)
    client.post("/v1/resolve", json={"texts": ["Lyon"]}, headers=auth)
    client.post("/v1/resolve", json={"texts": ["Lyon"]})
    text = client.get("/metrics", headers=auth).text
    assert 'geonorm_requests_total{code="200",route="/v1/resolve"} 2.0' in text
    assert 'geonorm_requests_total{code="401",route="/v1/resolve"} 1.0' in text
    assert 'geonorm_request_seconds_bucket{le="0.005",route="/v1/resolve"}' in text
    assert 'geonorm_jobs{state="queued"} 0.0' in text
    assert "geonorm_cache_hit_ratio 0.3333" in text  # 1 of 3 distinct strings was cached


def test_concurrent_resolves_decisions_and_a_job_never_fail(served, tmp_path):
    _, client, tokens = served
    auth = _auth(tokens["admin"])
    failures: list[str] = []
    # A job writing the cache at the same time (invented strings: a place and a number).
    towns = ["Lyon", "Austin", "Lagos", "Sydney", "Porto", "Lima", "Oslo", "Hanoi"]
    values = [f"{towns[i % len(towns)]} {i}" for i in range(3000)]
    src = _csv(tmp_path / "busy.csv", values, repeat=1)
    job = client.post(
        "/v1/jobs",
        files={"file": ("busy.csv", src.read_bytes())},
        data={"column": "location"},
        headers=auth,
    ).json()["id"]

    def resolver(n: int) -> None:
        for i in range(8):
            texts = [f"Lyon {n} {i}", "georgia", f"berlin {i}", "austin tx"]
            r = client.post("/v1/resolve", json={"texts": texts}, headers=auth)
            if r.status_code != 200:
                failures.append(r.text)

    def decider() -> None:
        for i in range(8):
            r = client.post(
                "/v1/decisions", json=[{"text": f"place {i}", "country": "FR"}], headers=auth
            )
            if r.status_code != 200:
                failures.append(r.text)

    threads = [threading.Thread(target=resolver, args=(n,)) for n in range(4)]
    threads.append(threading.Thread(target=decider))
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert failures == []
    assert _wait(client, job, tokens["admin"])["state"] == "done"


# -- the command line -------------------------------------------------------------------
def test_token_commands(tmp_path):
    data = str(tmp_path / "data")
    made = runner.invoke(
        cli, ["serve", "token", "add", "etl", "--role", "resolve", "--data-dir", data]
    )
    assert made.exit_code == 0, made.output
    token = made.stdout.strip()
    assert made.stdout == token + "\n" and token.startswith("gn_")
    stored = (tmp_path / "data" / "service.sqlite").read_bytes()
    assert token.encode() not in stored and token.split("_", 2)[2].encode() not in stored
    listed = runner.invoke(cli, ["serve", "token", "list", "--data-dir", data])
    assert "etl" in listed.stdout and "resolve" in listed.stdout and token not in listed.stdout
    again = runner.invoke(
        cli, ["serve", "token", "add", "etl", "--role", "admin", "--data-dir", data]
    )
    assert again.exit_code == 1 and "exists already" in again.stderr
    wrong = runner.invoke(cli, ["serve", "token", "add", "x", "--role", "boss", "--data-dir", data])
    assert wrong.exit_code == 1 and "unknown role 'boss'" in wrong.stderr
    assert (
        runner.invoke(cli, ["serve", "token", "revoke", "etl", "--data-dir", data]).exit_code == 0
    )
    gone = runner.invoke(cli, ["serve", "token", "revoke", "etl", "--data-dir", data])
    assert gone.exit_code == 1 and gone.stderr.startswith("Error: no token is called 'etl'")


def test_serve_refuses_another_host_without_a_token_and_needs_a_data_dir(tmp_path):
    data = str(tmp_path / "data")
    r = runner.invoke(cli, ["serve", "--data-dir", data, "--host", "0.0.0.0"])
    assert r.exit_code == 1
    assert r.stderr.startswith(
        "Error: refusing to listen on 0.0.0.0 while the service has no token"
    )
    assert "geonorm serve token add NAME --role admin" in r.stderr
    r = runner.invoke(cli, ["serve"])
    assert r.exit_code == 1 and r.stderr.startswith("Error: geonorm serve needs --data-dir")
