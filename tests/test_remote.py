"""The remote geocoder stage, against a real HTTP server on 127.0.0.1 (tests/fixture_server.py)."""

from __future__ import annotations

import csv
import email.utils
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from datetime import datetime, timedelta, timezone

import httpx
import pytest
from conftest import wait_for_rows
from fixture_server import Behaviour, FixtureServer, adapter_file, hit
from typer.testing import CliRunner

from geonorm.batch.cache import Cache
from geonorm.batch.remote import (
    MAX_RETRY_AFTER,
    RemoteAnswer,
    RemoteError,
    RemoteHit,
    TomlAdapter,
    _retry_after,
    merge,
    run_remote,
)
from geonorm.cli import app
from geonorm.resolve.resolution import Candidate, Reason, Resolution, Status, settle

runner = CliRunner()
# Invented place names the offline index cannot know; the fixture service knows some of them.
UNKNOWN = {"zorbaville": 40, "quellmoor": 30, "brindleford": 20, "xantheport": 10, "quarnbeck": 5}


def _table(path, counts: dict[str, int], extra: dict[str, int] | None = None):
    rows = [["id", "location", "email"]]
    for text, n in {**counts, **(extra or {})}.items():
        rows += [[f"{text}-{i}", text.title(), f"{text}{i}@example.invalid"] for i in range(n)]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)
    return path


def _clean(tmp_path, src, adapter, *extra, env=None):
    return runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "location",
            "--out",
            str(tmp_path / "out.csv"),
            "--cache",
            str(tmp_path / "cache.sqlite"),
            "--workers",
            "1",
            "--remote",
            str(adapter),
            *map(str, extra),
        ],
        env=env,
    )


def _rows(tmp_path):
    with open(tmp_path / "out.csv", encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def test_adapter_file_errors_name_the_line(tmp_path):
    good = adapter_file(tmp_path / "a.toml", "https://geo.example.invalid/locate")
    text = good.read_text()
    cases = {
        "unknown": (
            text.replace('query_param = "text"', 'query_param = "text"\nquery_parm = "x"'),
            "line 6: unknown key 'query_parm' in [remote]",
        ),
        "type": (
            text.replace("concurrency = 4", 'concurrency = "four"'),
            "line 19: concurrency must be a whole number",
        ),
        "missing": (text.replace('lat = "lat"\n', ""), "line 8: [remote.response] lacks 'lat'"),
        "url": (
            text.replace("https://geo.example.invalid/locate", "geo.example.invalid"),
            "line 3: url 'geo.example.invalid' is not an http(s) URL",
        ),
        "syntax": (text.replace("per_second = 200", "per_second = = 200"), "is not valid TOML"),
    }
    for name, (body, message) in cases.items():
        path = tmp_path / f"{name}.toml"
        path.write_text(body)
        with pytest.raises(RemoteError) as err:
            TomlAdapter(path)
        assert message in str(err.value), (name, str(err.value))
    keyed = adapter_file(tmp_path / "k.toml", "https://geo.example.invalid/locate", key=True)
    with pytest.raises(
        RemoteError, match="line 7: the environment variable TEAM_GEO_KEY is not set"
    ):
        TomlAdapter(keyed, environ={})


def test_budget_is_spent_in_impact_order_and_never_twice(tmp_path):
    behaviour = Behaviour(
        answers={
            "zorbaville": [hit("FR", 45.1, 4.8, "Zorbaville")],
            "quellmoor": [hit("DE", 52.0, 9.0)],
        }
    )
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(
            tmp_path / "a.toml", server.url, concurrency=1
        )  # one at a time: order is visible
        src = _table(tmp_path / "in.csv", UNKNOWN)
        dry = _clean(tmp_path, src, adapter, "--budget", 2, "--dry-run")
        assert dry.exit_code == 0, dry.output
        assert "would send 2 request(s) to team-geocoder" in dry.stderr
        assert "       40  zorbaville\n       30  quellmoor\n" in dry.stderr
        assert server.counts() == {} and not (tmp_path / "out.csv").exists()
        r = _clean(tmp_path, src, adapter, "--budget", 2)
        assert r.exit_code == 0, r.output
        assert list(server.counts()) == [
            "zorbaville",
            "quellmoor",
        ]  # most rows first, and only those
        rows = {row["location"]: row for row in _rows(tmp_path)}
        assert rows["Zorbaville"]["geo_country"] == "FR"
        assert rows["Zorbaville"]["geo_reason"] == "remote_found:team-geocoder"
        assert rows["Xantheport"]["geo_status"] == "unmatched"
        # Only the normalised location text was sent: no other column.
        assert all(set(req["q"].split()) <= set(UNKNOWN) for req in server.requests)
        again = _clean(tmp_path, src, adapter, "--budget", 2)
        assert again.exit_code == 0
        assert sum(server.counts().values()) == 4  # two new strings, nothing asked twice
        third = _clean(tmp_path, src, adapter)
        assert server.counts() == dict.fromkeys(UNKNOWN, 1)
        assert "0 request(s) for 0 new answer(s)" in _clean(tmp_path, src, adapter).stderr
        assert third.exit_code == 0
        refreshed = _clean(tmp_path, src, adapter, "--refresh", "--budget", 1)
        assert refreshed.exit_code == 0 and server.counts()["zorbaville"] == 2


def test_budget_total_is_kept_across_runs(tmp_path):
    with FixtureServer() as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        src = _table(tmp_path / "in.csv", UNKNOWN)
        _clean(tmp_path, src, adapter, "--budget-total", 3, "--budget", 2)
        _clean(tmp_path, src, adapter, "--budget-total", 3)
        assert sum(server.counts().values()) == 3


def test_429_with_retry_after_and_5xx_then_success(tmp_path):
    behaviour = Behaviour(
        answers={"zorbaville": [hit("FR", 45.1, 4.8)], "quellmoor": [hit("DE", 52.0, 9.0)]},
        fail_first={
            "zorbaville": [(429, {"Retry-After": "1"})],
            "quellmoor": [(503, {}), (500, {})],
        },
    )
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        src = _table(tmp_path / "in.csv", {"zorbaville": 2, "quellmoor": 1})
        started = time.monotonic()
        r = _clean(tmp_path, src, adapter, "--report", tmp_path / "r.json")
        assert r.exit_code == 0, r.output
        assert time.monotonic() - started >= 0.9  # Retry-After: 1 was honoured
        assert server.counts() == {"zorbaville": 2, "quellmoor": 3}
        rep = json.loads((tmp_path / "r.json").read_text())["remote"]
        assert rep["retries"] == 3 and rep["requests"] == 5 and rep["with_results"] == 2
        assert {row["location"]: row["geo_country"] for row in _rows(tmp_path)} == {
            "Zorbaville": "FR",
            "Quellmoor": "DE",
        }


def test_timeouts_are_retried(tmp_path):
    behaviour = Behaviour(answers={"zorbaville": [hit("FR", 45.1, 4.8)]}, slow={"zorbaville": 1.5})
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url, timeout=0.5)
        src = _table(tmp_path / "in.csv", {"zorbaville": 1})
        r = _clean(tmp_path, src, adapter)
        assert r.exit_code == 0, r.output
        assert server.counts()["zorbaville"] == 2
        assert _rows(tmp_path)[0]["geo_country"] == "FR"


def test_bad_answers_are_rejected_one_by_one(tmp_path):
    behaviour = Behaviour(
        answers={
            "zorbaville": [hit("ZZ", 45.1, 4.8)],  # not an ISO code
            "quellmoor": [
                hit("DE", 95.0, 9.0, "Hannover"),
                hit("DE", 52.37, 9.73, "Hannover"),
            ],  # first out of range, second fine
            "brindleford": [{"lat": 1.0, "lon": 2.0}],  # no country field
            "xantheport": [hit("Norway", 60.0, 10.0)],
        },  # an English country name
        malformed={"quarnbeck"},
    )
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        src = _table(tmp_path / "in.csv", UNKNOWN)
        r = _clean(tmp_path, src, adapter, "--report", tmp_path / "r.json")
        assert r.exit_code == 0, r.output
        rows = {row["location"]: row for row in _rows(tmp_path)}
        assert rows["Zorbaville"]["geo_status"] == "unmatched"
        assert (rows["Quellmoor"]["geo_country"], rows["Quellmoor"]["geo_lat"]) == (
            "DE",
            "52.37000",
        )
        assert rows["Brindleford"]["geo_status"] == "unmatched"
        assert rows["Xantheport"]["geo_country"] == "NO"
        rep = json.loads((tmp_path / "r.json").read_text())["remote"]
        assert (
            rep["errors"] == 1 and rep["rejected_results"] == 2
        )  # broken JSON; out-of-range + no country
        _clean(tmp_path, src, adapter)
        assert server.counts() == dict.fromkeys(
            UNKNOWN, 1
        )  # errors and no-results are not asked again


def test_circuit_breaker_stops_calling(tmp_path):
    many = {f"zorb{i}ville": 50 - i for i in range(12)}
    with FixtureServer(Behaviour(always=500)) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url, concurrency=1, retries=0)
        src = _table(tmp_path / "in.csv", many)
        r = _clean(tmp_path, src, adapter)
        assert r.exit_code == 0, r.output
        assert sum(server.counts().values()) == 5
        assert (
            "remote team-geocoder: 5 failures in a row (last: HTTP 500); stopped calling, "
            "the run goes on offline"
        ) in r.stderr
        assert "7 string(s) were not sent because the circuit breaker opened" in r.stderr
        assert len(_rows(tmp_path)) == sum(many.values())  # the run finished offline, nothing lost


def test_agreement_raises_confidence_and_disagreement_goes_to_review(tmp_path):
    behaviour = Behaviour(
        answers={
            "vancouver": [hit("CA", 49.25, -123.12, "Vancouver", "CA-BC", 0.95)],
            "valencia": [hit("ES", 39.47, -0.38, "Valencia", "", 0.9)],
        }
    )
    with FixtureServer(behaviour):
        pass
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        src = _table(tmp_path / "in.csv", {"vancouver": 3, "valencia": 2})
        offline = runner.invoke(
            app,
            [
                "clean",
                str(src),
                "--column",
                "location",
                "--out",
                str(tmp_path / "offline.csv"),
                "--cache",
                str(tmp_path / "c0.sqlite"),
            ],
        )
        assert offline.exit_code == 0
        with open(tmp_path / "offline.csv", encoding="utf-8") as fh:
            before = {r["location"]: r for r in csv.DictReader(fh)}
        r = _clean(tmp_path, src, adapter)
        assert r.exit_code == 0, r.output
        after = {row["location"]: row for row in _rows(tmp_path)}
        assert before["Vancouver"]["geo_status"] == "review"
        assert after["Vancouver"]["geo_reason"] == "remote_agrees:team-geocoder"
        assert float(after["Vancouver"]["geo_confidence"]) > float(
            before["Vancouver"]["geo_confidence"]
        )
        assert after["Vancouver"]["geo_status"] == "matched"
        assert after["Valencia"]["geo_country"] == before["Valencia"]["geo_country"] == "VE"
        assert after["Valencia"]["geo_reason"] == "remote_differs:team-geocoder"
        assert after["Valencia"]["geo_status"] == "review"


def test_the_secret_stays_secret(tmp_path):
    secret = "sekret-4711-do-not-store"
    behaviour = Behaviour(answers={"zorbaville": [hit("FR", 45.1, 4.8)]}, key=secret)
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url, key=True, method="POST")
        src = _table(tmp_path / "in.csv", {"zorbaville": 2, "quellmoor": 1})
        r = _clean(
            tmp_path, src, adapter, "--report", tmp_path / "r.json", env={"TEAM_GEO_KEY": secret}
        )
        assert r.exit_code == 0, r.output
        assert server.requests[0]["headers"]["X-Api-Key"] == secret  # sent, as a header only
        assert _rows(tmp_path)[0]["geo_country"] == "FR"
        for path in tmp_path.iterdir():
            assert secret.encode() not in path.read_bytes(), path
        assert secret not in r.output


def test_nothing_is_sent_without_remote(tmp_path):
    with FixtureServer() as server:
        src = _table(tmp_path / "in.csv", UNKNOWN)
        r = runner.invoke(
            app,
            [
                "clean",
                str(src),
                "--column",
                "location",
                "--out",
                str(tmp_path / "o.csv"),
                "--cache",
                str(tmp_path / "c.sqlite"),
            ],
        )
        assert r.exit_code == 0 and server.counts() == {}
        bad = runner.invoke(
            app,
            [
                "clean",
                str(src),
                "--column",
                "location",
                "--out",
                str(tmp_path / "o.csv"),
                "--budget",
                "3",
            ],
        )
        assert bad.exit_code == 1 and "only apply with --remote" in bad.stderr


def test_kill_mid_run_then_rerun_sends_nothing_twice(tmp_path):
    many = {f"zorb{i}ville": 1 for i in range(60)}
    behaviour = Behaviour(answers={k: [hit("FR", 45.0, 4.0)] for k in many}, delay=0.05)
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url, concurrency=1)
        src = _table(tmp_path / "in.csv", many)
        cache = tmp_path / "cache.sqlite"
        cmd = [
            sys.executable,
            "-m",
            "geonorm.cli",
            "clean",
            str(src),
            "--column",
            "location",
            "--out",
            str(tmp_path / "out.csv"),
            "--cache",
            str(cache),
            "--remote",
            str(adapter),
            "--quiet",
            "--workers",
            "1",
        ]
        proc = subprocess.Popen(cmd)
        wait_for_rows(proc, cache, "remote_answer", 10)
        assert proc.poll() is None, "the run ended before it could be interrupted"
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        with sqlite3.connect(cache) as db:
            kept = {k for (k,) in db.execute("SELECT key FROM remote_answer")}
        assert len(kept) >= 10
        subprocess.run(cmd, check=True)
        counts = server.counts()
        assert set(counts) == set(many)
        assert all(
            counts[k] == 1 for k in kept
        )  # what was answered before the kill is not asked again
        assert (
            sum(counts.values()) <= len(many) + 1
        )  # at most the one request in flight at the kill


def _run(tmp_path, server, texts, **kw):
    """``run_remote`` against the fixture service, one request at a time; waits are recorded."""
    waits: list[float] = []
    adapter = TomlAdapter(adapter_file(tmp_path / "a.toml", server.url, concurrency=1))
    with Cache(tmp_path / "cache.sqlite") as cache:
        wanted = [(t, len(texts) - i) for i, t in enumerate(texts)]  # sent in this order
        summary = run_remote(adapter, wanted, cache, sleep=waits.append, **kw)
        answers = cache.remote_answers(adapter.name, texts)
    return summary, waits, answers


def test_unreadable_retry_after_is_ignored_and_backoff_applies(tmp_path):
    behaviour = Behaviour(
        answers={"zorbaville": [hit("FR", 45.1, 4.8)], "quellmoor": [hit("DE", 52.0, 9.0)]},
        fail_first={
            "zorbaville": [(429, {"Retry-After": "soon"})],
            "quellmoor": [(503, {"Retry-After": "Wed, 21 Oct 99999 07:28:00 GMT"})],
        },
    )
    started = time.monotonic()
    with FixtureServer(behaviour) as server:
        summary, waits, answers = _run(
            tmp_path, server, ["zorbaville", "quellmoor"], backoff=0.2, budget=10
        )
        assert server.counts() == {"zorbaville": 2, "quellmoor": 2}
    assert time.monotonic() - started < 30
    assert (summary.requests, summary.retries, summary.results) == (4, 2, 2)
    # No wait named: the first retry waits backoff × [0.5, 1.5).
    assert len(waits) == 2 and all(0.1 <= w < 0.3 for w in waits), waits
    assert {k: a.hits[0].country for k, a in answers.items()} == {
        "zorbaville": "FR",
        "quellmoor": "DE",
    }


def test_retry_after_as_an_http_date(tmp_path):
    now = datetime.now(timezone.utc)
    in_30s = email.utils.format_datetime(now + timedelta(seconds=30), usegmt=True)
    past = email.utils.format_datetime(now - timedelta(hours=1), usegmt=True)
    tomorrow = email.utils.format_datetime(now + timedelta(days=1), usegmt=True)
    behaviour = Behaviour(
        answers={t: [hit("FR", 45.1, 4.8)] for t in ("zorbaville", "quellmoor", "brindleford")},
        fail_first={
            "zorbaville": [(429, {"Retry-After": in_30s})],
            "quellmoor": [(429, {"Retry-After": past})],
            "brindleford": [(503, {"Retry-After": tomorrow})],
        },
    )
    with FixtureServer(behaviour) as server:
        summary, waits, _ = _run(tmp_path, server, ["zorbaville", "quellmoor", "brindleford"])
        assert sum(server.counts().values()) == 6
    assert summary.results == 3 and summary.retries == 3
    # HTTP dates have whole seconds: 30 s ahead is a wait of 29–30 s; a past date is no
    # wait; a day ahead is capped.
    assert 28.5 <= waits[0] <= 30.5, waits
    assert waits[1:] == [0.0, MAX_RETRY_AFTER]


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        ("2", 2.0),
        ("-3", None),  # delta-seconds has no sign (RFC 9110)
        ("100000", MAX_RETRY_AFTER),
        ("soon", None),
        ("nan", None),
        ("", None),
        ("Mon, 99 Foo 2020 00:00:00 GMT", None),
        ("Wed, 21 Oct 2015 07:28:00 GMT", 0.0),
    ],
)
def test_retry_after_values(value, expected):
    response = httpx.Response(429, headers={"Retry-After": value})
    assert _retry_after(response) == expected


def test_malformed_numbers_and_deep_json_are_rejected_not_raised(tmp_path):
    huge = 10**400  # an integer JSON allows and a float cannot hold
    behaviour = Behaviour(
        answers={
            "zorbaville": [
                {"where": {"country": "FR"}, "lat": huge, "lon": 4.8},
                {"where": {"country": "FR"}, "lat": True, "lon": 4.8},
                {"where": {"country": "FR"}, "lat": 45.1, "lon": 4.8, "certainty": huge},
            ],
            "quellmoor": [hit("DE", 52.0, 9.0, certainty=float("nan"))],
        },
        raw={"brindleford": b"[" * 100_000 + b"]" * 100_000},
    )
    with FixtureServer(behaviour) as server:
        summary, _, answers = _run(tmp_path, server, ["zorbaville", "quellmoor", "brindleford"])
        assert sum(server.counts().values()) == 3
    assert summary.rejected == 2 and summary.results == 2 and summary.errors == 1
    assert answers["zorbaville"].hits == [RemoteHit("FR", 45.1, 4.8, "", "", None)]
    assert answers["quellmoor"].hits[0].score is None  # NaN is no score
    assert answers["brindleford"] == RemoteAnswer("error", error="the response is not valid JSON")


def test_status_is_set_by_settle_not_by_merge(resolver):
    index = resolver.index
    found = RemoteAnswer("ok", [RemoteHit("CA", 49.25, -123.12, "Vancouver", "", 0.95)])
    local = Resolution(
        Status.REVIEW, Reason.CITY_BY_SIZE, "CA", confidence=0.6, candidates=[Candidate("CA")]
    )
    agrees = merge(local, found, "svc", index)
    assert agrees.reason is Reason.REMOTE_AGREES and agrees.confidence == 0.98
    assert agrees.status is Status.REVIEW  # as it came in: merge does not decide
    assert merge(local, found, "svc", index, accept=0.5) == agrees  # ``accept`` is ignored
    assert local.status is Status.REVIEW and local.reason is Reason.CITY_BY_SIZE
    assert settle(agrees, 0.75).status is Status.MATCHED

    other = Resolution(Status.MATCHED, Reason.CITY, "ES", confidence=0.99)
    differs = merge(other, found, "svc", index)
    assert (differs.reason, differs.status) == (Reason.REMOTE_DIFFERS, Status.MATCHED)
    assert settle(differs, 0.75).status is Status.REVIEW  # always review, whatever the score

    nothing = Resolution(Status.UNMATCHED, Reason.NO_MATCH)
    new = merge(nothing, found, "svc", index)
    assert (new.reason, new.country, new.status) == (
        Reason.REMOTE_FOUND,
        "CA",
        Status.UNMATCHED,
    )
    assert settle(new, 0.75).status is Status.MATCHED  # 0.95 × 0.85 ≥ 0.75
    assert settle(merge(nothing, found, "svc", index), 0.9).status is Status.REVIEW
    assert merge(nothing, RemoteAnswer("no_result"), "svc", index) is nothing


# -- a faulty or hostile service ------------------------------------------
def _cache_state(path, provider="team-geocoder", keys=tuple(UNKNOWN)):
    """The cached answers of ``provider`` and the requests counted against it."""
    with Cache(path) as cache:
        return cache.remote_answers(provider, list(keys)), cache.remote_used(provider)


def test_a_redirect_to_another_origin_is_refused_and_the_key_stays_home(tmp_path):
    secret = "sekret-4711-do-not-store"
    elsewhere = Behaviour(answers={"zorbaville": [hit("FR", 45.76, 4.84, "Lyon")]})
    with FixtureServer(elsewhere) as other:  # another port: another origin
        behaviour = Behaviour(
            key=secret,
            answers={"quellmoor": [hit("DE", 52.37, 9.73, "Hannover")]},
            redirect={
                "zorbaville": (302, f"{other.url}?text=zorbaville"),
                "quellmoor": (307, "/moved?text=quellmoor"),  # the same origin: followed
            },
        )
        with FixtureServer(behaviour) as server:
            adapter = adapter_file(tmp_path / "a.toml", server.url, key=True)
            src = _table(tmp_path / "in.csv", {"zorbaville": 2, "quellmoor": 1})
            r = _clean(tmp_path, src, adapter, env={"TEAM_GEO_KEY": secret})
            assert r.exit_code == 0, r.output
            assert other.requests == []  # nothing reached the other origin, least of all the key
            assert server.counts() == {"zorbaville": 1, "quellmoor": 2}  # refused, not retried
            assert [q["path"] for q in server.requests if q["q"] == "quellmoor"] == [
                "/locate",
                "/moved",
            ]
            assert all(q["headers"].get("X-Api-Key") == secret for q in server.requests)
            assert f"redirected to another origin ({other.origin}); not followed" in r.stderr
    rows = {row["location"]: row for row in _rows(tmp_path)}
    assert rows["Zorbaville"]["geo_status"] == "unmatched"  # no other origin's answer is taken
    assert rows["Quellmoor"]["geo_country"] == "DE"
    answers, used = _cache_state(tmp_path / "cache.sqlite")
    assert set(answers) == {"quellmoor"} and used == 2  # the refused answer is not cached


@pytest.mark.parametrize("part", ["head", "body"])
def test_a_trickling_answer_ends_at_the_request_deadline(tmp_path, part):
    # 24 bytes, one every 0.25 s: each within the 1 s read timeout, 6 s in all.
    behaviour = Behaviour(trickle={"zorbaville": (part, 0.25, 24)})
    with FixtureServer(behaviour) as server:
        adapter = TomlAdapter(adapter_file(tmp_path / "a.toml", server.url, timeout=1, retries=0))
        started = time.monotonic()
        with Cache(tmp_path / "cache.sqlite") as cache:
            summary = run_remote(adapter, [("zorbaville", 1)], cache)
        elapsed = time.monotonic() - started
    assert elapsed < 4, elapsed  # timeout_s bounds the request as a whole (6 s without)
    assert (summary.requests, summary.errors, summary.answered) == (1, 1, 0)
    assert _cache_state(tmp_path / "cache.sqlite") == ({}, 1)  # counted, not cached


def test_the_remote_phase_stops_at_its_time_budget_and_the_run_finishes_offline(tmp_path):
    from geonorm.batch.clean import clean_file

    many = {f"zorb{i}ville": 20 - i for i in range(8)}
    answers = {k: [hit("FR", 45.76, 4.84, "Lyon")] for k in many}
    with FixtureServer(Behaviour(answers=answers, delay=0.3)) as server:
        path = adapter_file(tmp_path / "a.toml", server.url, concurrency=1, timeout=5)
        adapter = TomlAdapter(path, time_budget_s=1.5)  # the Python API overrides the default
        src = _table(tmp_path / "in.csv", many)
        with Cache(tmp_path / "cache.sqlite") as cache:
            summary = clean_file(src, "location", tmp_path / "out.csv", cache=cache, remote=adapter)
        sent = sum(server.counts().values())
    remote = summary.remote
    assert remote["answered"] < len(many) and remote["requests"] == sent >= 1
    assert remote["messages"] == [
        "team-geocoder: the remote phase used its time budget (1.5 s); stopped calling, the run "
        "goes on offline",
        f"{len(many) - sent} string(s) were not sent because the time budget ran out",
    ]
    assert len(_rows(tmp_path)) == sum(many.values())  # nothing lost
    answers_cached, used = _cache_state(tmp_path / "cache.sqlite", keys=many)
    assert len(answers_cached) == remote["answered"] and used == sent


def test_time_budget_and_answer_cap_must_be_positive(tmp_path):
    path = adapter_file(tmp_path / "a.toml", "https://geo.example.invalid/locate")
    for bad in ({"time_budget_s": 0}, {"time_budget_s": float("nan")}, {"max_answer_bytes": 0}):
        with pytest.raises(RemoteError, match="above 0"):
            TomlAdapter(path, **bad)
    with Cache(tmp_path / "c.sqlite") as cache, pytest.raises(RemoteError, match="above 0"):
        run_remote(TomlAdapter(path), [("zorbaville", 1)], cache, time_budget_s=-1)


def test_hostile_answers_do_not_stop_the_run_and_every_request_is_counted(tmp_path):
    deep = b"[" * 200_000 + b"]" * 200_000
    behaviour = Behaviour(
        answers={"zorbaville": [hit("FR", 45.76, 4.84, "Lyon")], "quellmoor": []},
        fail_first={
            "zorbaville": [(429, {"Retry-After": "nan"})],
            "quellmoor": [(503, {"Retry-After": "Mon, 99 Foo 20x0 25:61:00 GMT"})],
        },
        raw={"brindleford": deep, "xantheport": b'{"matches": ' + deep + b"}"},
    )
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        src = _table(tmp_path / "in.csv", UNKNOWN)
        r = _clean(tmp_path, src, adapter, "--report", tmp_path / "r.json")
        sent = sum(server.counts().values())
    assert r.exit_code == 0, r.output
    assert sent == 7  # two retries after the unreadable waits, one request for each other string
    rep = json.loads((tmp_path / "r.json").read_text())["remote"]
    assert (rep["requests"], rep["retries"], rep["errors"]) == (7, 2, 2)
    assert len(_rows(tmp_path)) == sum(UNKNOWN.values())
    answers, used = _cache_state(tmp_path / "cache.sqlite")
    assert used == 7 and answers["zorbaville"].hits[0].country == "FR"
    assert answers["brindleford"].error == answers["xantheport"].error
    assert answers["brindleford"] == RemoteAnswer("error", error="the response is not valid JSON")


def test_an_adapter_tripping_over_an_answer_gives_an_error_not_a_crash(tmp_path):
    class Tripping(TomlAdapter):
        def parse(self, response):
            if b"deep" in response.content:
                raise RecursionError("maximum recursion depth exceeded")
            return super().parse(response)

    behaviour = Behaviour(
        answers={"zorbaville": [hit("FR", 45.76, 4.84, "Lyon")]}, raw={"quellmoor": b'{"deep": 1}'}
    )
    with FixtureServer(behaviour) as server:
        adapter = Tripping(adapter_file(tmp_path / "a.toml", server.url))
        with Cache(tmp_path / "cache.sqlite") as cache:
            summary = run_remote(adapter, [("zorbaville", 2), ("quellmoor", 1)], cache)
        sent = sum(server.counts().values())
    assert (sent, summary.requests, summary.results, summary.errors) == (2, 2, 1, 1)
    answers, used = _cache_state(tmp_path / "cache.sqlite")
    assert used == 2
    assert answers["quellmoor"] == RemoteAnswer(
        "error", error="the answer could not be read (RecursionError)"
    )


def test_requests_sent_are_counted_before_a_failure_is_raised(tmp_path):
    class BadUrlFor(TomlAdapter):
        def request(self, client, text):
            if text == "quellmoor":
                raise httpx.InvalidURL("no host")
            return super().request(client, text)

    behaviour = Behaviour(answers={"zorbaville": [hit("FR", 45.76, 4.84, "Lyon")]})
    behaviour.slow = {"zorbaville": 0.5}  # still in flight when the other string fails
    with FixtureServer(behaviour) as server:
        adapter = BadUrlFor(adapter_file(tmp_path / "a.toml", server.url, concurrency=2))
        with (
            Cache(tmp_path / "cache.sqlite") as cache,
            pytest.raises(RemoteError, match="cannot build a request"),
        ):
            run_remote(adapter, [("zorbaville", 2), ("quellmoor", 1)], cache)
        assert server.counts() == {"zorbaville": 1}
    answers, used = _cache_state(tmp_path / "cache.sqlite")
    assert used == 1 and set(answers) == {"zorbaville"}  # what was sent stays counted


def test_waits_are_capped_however_many_retries():
    from geonorm.batch.remote import _backoff_wait

    assert 0.25 <= _backoff_wait(0.5, 1) < 0.75
    assert _backoff_wait(0.5, 5000) <= MAX_RETRY_AFTER  # no overflow, no hour-long wait


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (b"inf", None),
        (b"1e3", None),
        (b"1_000", None),
        (b"2.5", 2.5),
        ("١٢".encode(), None),  # digits of another script are no delta-seconds
        (b"9" * 5000, MAX_RETRY_AFTER),  # longer than an int may be read, still capped
    ],
)
def test_retry_after_is_read_strictly(value, expected):
    response = httpx.Response(429, headers=[(b"Retry-After", value)])
    assert _retry_after(response) == expected


def test_answers_beyond_the_size_cap_are_errors_and_are_not_read(tmp_path):
    import tracemalloc

    cap = 1_000_000  # the documented default
    behaviour = Behaviour(
        answers={"xantheport": [hit("NO", 59.91, 10.75, "Oslo")]},
        huge={
            "zorbaville": (30 * cap, True),  # its length declared: not read at all
            "quellmoor": (30 * cap, False),  # undeclared: read up to the cap
            "brindleford": (cap, False),  # exactly the cap: read
        },
    )
    keys = ["zorbaville", "quellmoor", "brindleford", "xantheport"]
    with FixtureServer(behaviour) as server:
        adapter = TomlAdapter(adapter_file(tmp_path / "a.toml", server.url, concurrency=1))
        tracemalloc.start()
        try:
            with Cache(tmp_path / "cache.sqlite") as cache:
                summary = run_remote(adapter, [(k, 4 - i) for i, k in enumerate(keys)], cache)
                run_remote(adapter, [(k, 1) for k in keys], cache)  # a rerun asks nothing
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
        assert server.counts() == dict.fromkeys(keys, 1)
        assert peak < 10 * cap, peak  # a 30 MB answer is never held
        assert (summary.errors, summary.no_result, summary.results) == (2, 1, 1)
        answers, used = _cache_state(tmp_path / "cache.sqlite", keys=keys)
        too_big = RemoteAnswer("error", error="the answer is larger than 1,000,000 bytes")
        assert answers["zorbaville"] == answers["quellmoor"] == too_big and used == 4
        small = TomlAdapter(tmp_path / "a.toml", max_answer_bytes=50)  # the Python API sets it
        with Cache(tmp_path / "c2.sqlite") as cache:
            run_remote(small, [("xantheport", 1)], cache)
            assert cache.remote_answers(small.name, ["xantheport"])["xantheport"].error == (
                "the answer is larger than 50 bytes"
            )
    from geonorm.batch.remote import MAX_ANSWER_BYTES

    assert cap == MAX_ANSWER_BYTES


def test_remote_fields_are_validated_before_they_reach_the_output(tmp_path):
    formula = '=HYPERLINK("http://example.invalid","Paris")'
    behaviour = Behaviour(
        answers={
            # a city the index does not know: dropped, with its coordinates
            "zorbaville": [hit("FR", 48.85, 2.35, formula)],
            # a boolean is no score: the default trust applies
            "quellmoor": [hit("CA", 49.25, -123.12, "Vancouver", "CA-BC", certainty=True)],
            # a city and a subdivision of another country: both dropped
            "brindleford": [hit("FR", 49.25, -123.12, "Vancouver", "CA-BC")],
            # the subdivision stays when the city goes
            "xantheport": [hit("CA", 52.0, -110.0, formula, "CA-BC")],
        },
        raw={
            "glimmerholt": b'{"matches": [{"where": {"country": "DE", "settlement": "Berlin"}, '
            b'"lat": 52.52, "lon": 13.4, "certainty": NaN}]}'
        },
    )
    with FixtureServer(behaviour) as server:
        adapter = adapter_file(tmp_path / "a.toml", server.url)
        texts = ["zorbaville", "quellmoor", "brindleford", "xantheport", "glimmerholt"]
        src = _table(tmp_path / "in.csv", dict.fromkeys(texts, 1))
        r = _clean(tmp_path, src, adapter)
    assert r.exit_code == 0, r.output
    rows = {row["location"]: row for row in _rows(tmp_path)}
    got = {
        k: tuple(row[f"geo_{c}"] for c in ("country", "subdivision", "city", "lat"))
        for k, row in rows.items()
    }
    assert got == {
        "Zorbaville": ("FR", "", "", ""),
        "Quellmoor": ("CA", "CA-BC", "Vancouver", "49.25000"),
        "Brindleford": ("FR", "", "", ""),
        "Xantheport": ("CA", "CA-BC", "", ""),
        "Glimmerholt": ("DE", "DE-BE", "Berlin", "52.52000"),
    }
    confidences = {k: float(row["geo_confidence"]) for k, row in rows.items()}
    assert confidences["Quellmoor"] == confidences["Glimmerholt"] == round(0.8 * 0.85, 4)
    assert confidences["Zorbaville"] == round(0.9 * 0.85, 4)
    assert "HYPERLINK" not in (tmp_path / "out.csv").read_text(encoding="utf-8")


def test_merge_checks_what_any_adapter_or_cache_entry_holds(resolver):
    index = resolver.index
    nothing = Resolution(Status.UNMATCHED, Reason.NO_MATCH)

    def merged(*hits):
        return merge(nothing, RemoteAnswer("ok", list(hits)), "svc", index)

    for bad in (
        RemoteHit("FR", True, 4.8),  # a boolean is no coordinate
        RemoteHit("FR", float("nan"), 4.8),
        RemoteHit("FR", 45.0, float("inf")),
        RemoteHit("FR", "45.0", 4.8),  # type: ignore[arg-type]
        RemoteHit(250, 45.0, 4.8),  # type: ignore[arg-type]
        RemoteHit("Atlantis", 45.0, 4.8),
    ):
        assert merged(bad) is nothing, bad
    lyon = merged(RemoteHit("FR", 45.76, 4.84, "Lyon", "", float("nan")))
    assert (lyon.city, lyon.geonameid, lyon.confidence) == ("Lyon", 2996944, 0.68)
    odd = merged(RemoteHit("FR", 45.76, 4.84, ["Lyon"], {"x": 1}, 7.0))  # type: ignore[arg-type]
    assert (odd.country, odd.city, odd.lat, odd.subdivision, odd.confidence) == (
        "FR",
        "",
        None,
        "",
        0.68,
    )
