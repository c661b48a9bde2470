"""The answer pipeline: every entry point gives the same answer for the same key."""

from __future__ import annotations

import csv
import json

import pytest
from typer.testing import CliRunner

import geonorm
from geonorm.batch.answers import count_keys, needs_remote, resolve_keys
from geonorm.batch.cache import Cache
from geonorm.batch.clean import clean_file
from geonorm.batch.engines import LocalEngine
from geonorm.batch.options import CleanOptions
from geonorm.cli import app, as_flags
from geonorm.errors import CacheError, InputError
from geonorm.progress import ProgressEvent
from geonorm.resolve.resolution import Reason, Resolution, Status, settle

runner = CliRunner()


def _write(path, rows):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


def _read(path):
    with open(path, encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def _invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_status_is_set_by_the_threshold_at_the_end(resolver, tmp_path):
    """The same cached answers give other statuses under another threshold: status is not stored."""
    counts = count_keys(["Paris", "Springfield", "nowhere-at-all-xq"], resolver)
    with Cache(tmp_path / "c.sqlite") as cache:
        strict = resolve_keys(counts, resolver=resolver, cache=cache, accept=1.0)
        loose = resolve_keys(counts, resolver=resolver, cache=cache, accept=0.0)
    assert strict.resolved == 3 and loose.from_cache == 3
    paris = resolver.key("Paris")
    assert strict.results[paris].status is Status.REVIEW
    assert loose.results[paris].status is Status.MATCHED
    assert strict.results[paris].country == loose.results[paris].country == "FR"


def test_settle_rules():
    """One function decides matched/review/unmatched; reasons that need a person always review."""
    guess = Resolution(Status.UNMATCHED, Reason.CITY, country="FR", confidence=0.8)
    assert settle(guess, 0.7).status is Status.MATCHED
    assert settle(guess, 0.9).status is Status.REVIEW
    differs = Resolution(Status.MATCHED, Reason.REMOTE_DIFFERS, country="FR", confidence=0.99)
    assert settle(differs, 0.5).status is Status.REVIEW
    several = Resolution(Status.MATCHED, Reason.SEVERAL_COUNTRIES)
    assert settle(several, 0.5).status is Status.REVIEW
    none = Resolution(Status.REVIEW, Reason.NO_MATCH)
    assert settle(none, 0.5).status is Status.UNMATCHED
    junk = Resolution(Status.NOT_A_PLACE, Reason.JUNK, confidence=1.0)
    assert settle(junk, 0.5).status is Status.NOT_A_PLACE


def test_needs_remote_only_for_the_doubtful_rest():
    assert needs_remote(Resolution(Status.UNMATCHED, Reason.NO_MATCH), 0.7)
    assert needs_remote(Resolution(Status.MATCHED, Reason.CITY, "FR", confidence=0.5), 0.7)
    assert not needs_remote(Resolution(Status.MATCHED, Reason.CITY, "FR", confidence=0.9), 0.7)
    assert not needs_remote(Resolution(Status.UNMATCHED, Reason.WORLD_REGION), 0.7)
    assert not needs_remote(Resolution(Status.NOT_A_PLACE, Reason.JUNK), 0.7)
    assert not needs_remote(Resolution(Status.MATCHED, Reason.REVIEWED, "FR", confidence=1), 0.7)


def test_the_pool_gives_the_answers_of_one_process(resolver):
    texts = [f"{city}, {cc}" for city in ("Lyon", "Porto", "Gent", "Graz") for cc in ("FR", "PT")]
    texts += ["Valencia", "Georgia", "東京", "🇧🇷", "n/a"]
    counts = count_keys(texts, resolver)
    one = resolve_keys(counts, resolver=resolver, engine=LocalEngine(1))
    two = resolve_keys(counts, resolver=resolver, engine=LocalEngine(2, chunk=3))
    assert {k: r.to_dict() for k, r in one.results.items()} == {
        k: r.to_dict() for k, r in two.results.items()
    }


def _reviewed_cache(tmp_path):
    """A cache in which a person decided that 'Valencia' is Valencia, Venezuela."""
    src, cleaned, cache = tmp_path / "p.csv", tmp_path / "clean.csv", tmp_path / "c.sqlite"
    _write(src, [["id", "location"], ["1", "Valencia"], ["2", "Oslo"]])
    assert _invoke("clean", src, "-c", "location", "-o", cleaned, "--cache", cache).exit_code == 0
    queue = tmp_path / "queue.csv"
    assert _invoke("review", "export", cleaned, "-o", queue, "--cache", cache).exit_code == 0
    rows = _read(queue)
    for row in rows:
        if row["text"] == "Valencia":
            row["decision_country"] = "VE"
    with open(queue, "w", encoding="utf-8", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]), quoting=csv.QUOTE_ALL)
        writer.writeheader()
        writer.writerows(rows)
    applied = _invoke("review", "apply", queue, "--cache", cache)
    assert applied.exit_code == 0, applied.stderr
    return cache


def test_lookup_with_the_cache_shows_a_reviewed_answer(tmp_path):
    cache = _reviewed_cache(tmp_path)
    r = _invoke("lookup", "Valencia", "Oslo", "--cache", cache, "--json")
    assert r.exit_code == 0, r.stderr
    got = {d["text"]: d for d in json.loads(r.stdout)}
    assert got["Valencia"]["country"] == "VE" and got["Valencia"]["reason"] == "reviewed"
    assert got["Valencia"]["status"] == "matched"
    assert got["Oslo"]["country"] == "NO" and got["Oslo"]["reason"] != "reviewed"
    table = _invoke("lookup", "valencia ", "--cache", cache)
    assert "reviewed" in table.stdout and "a person's decision" in table.stdout
    # Without the cache, the cascade's answer.
    plain = _invoke("lookup", "Valencia", "--json")
    assert json.loads(plain.stdout)[0]["reason"] != "reviewed"


def test_every_entry_point_agrees_on_a_reviewed_answer(tmp_path):
    cache_path = _reviewed_cache(tmp_path)
    with Cache(cache_path) as cache:
        series = geonorm.resolve_series(["Valencia", "Oslo"], cache=cache)
        resolver = geonorm.Resolver()
        answers = resolve_keys({resolver.key("Valencia"): 1}, resolver=resolver, cache=cache)
    assert series["geo_country"] == ["VE", "NO"]
    assert series["geo_reason"][0] == "reviewed"
    assert answers.decided == 1
    assert answers.results[resolver.key("Valencia")].country == "VE"


def test_review_export_alternatives_agree_with_the_guess(tmp_path):
    """The file prior turns a bare 'Valencia' Spanish in a Spanish file. The queue's
    alternatives come from that same answer: the guess is not among them, and the
    Venezuelan reading is shown with its re-ranked (minority) share."""
    src, cleaned, cache = tmp_path / "p.csv", tmp_path / "clean.csv", tmp_path / "c.sqlite"
    rows = [["id", "location"]]
    rows += [[str(i), city] for i, city in enumerate(["Madrid", "Sevilla", "Bilbao"] * 30)]
    rows += [["900", "Valencia"], ["901", "Córdoba"], ["902", "Victoria"]]
    _write(src, rows)
    r = _invoke("clean", src, "-c", "location", "-o", cleaned, "--cache", cache)
    assert r.exit_code == 0, r.stderr
    queue = tmp_path / "q.csv"
    r = _invoke("review", "export", cleaned, "-o", queue, "--cache", cache, "--below", 1.0)
    assert r.exit_code == 0, r.stderr
    lines = {row["text"]: row for row in _read(queue)}
    for line in lines.values():
        alternatives = [a.rsplit("(", 1)[0].strip() for a in line["alternatives"].split("; ") if a]
        guess = line["guess_country"]
        assert not guess or all(not a.endswith(guess) for a in alternatives)
    valencia = lines["Valencia"]
    assert valencia["guess_country"] == "ES" and valencia["reason"] == "file_prior"
    alternative, score = valencia["alternatives"].split("; ")[0].rsplit(" (", 1)
    assert alternative.endswith("VE")
    assert float(score.rstrip(")")) < 0.5


def test_options_are_checked_by_the_library(tmp_path):
    src = tmp_path / "p.csv"
    _write(src, [["id", "location"], ["1", "Oslo"]])
    with pytest.raises(InputError, match="`dry_run` only apply with `remote`"):
        clean_file(src, "location", tmp_path / "o.csv", dry_run=True)
    with pytest.raises(InputError, match="`workers` must be at least 1"):
        clean_file(src, "location", tmp_path / "o.csv", workers=0)
    with pytest.raises(InputError, match="unknown option"):
        clean_file(src, "location", tmp_path / "o.csv", acept=0.5)
    with pytest.raises(InputError, match="`accept` must be between 0 and 1"):
        CleanOptions(accept=1.5)
    with pytest.raises(InputError, match="not both"):
        clean_file(src, "location", tmp_path / "o.csv", CleanOptions(), accept=0.5)
    assert not (tmp_path / "o.csv").exists()


def test_the_cli_names_flags_where_the_library_names_fields(tmp_path):
    assert (
        as_flags("pass `bad_lines` FILE, or `encoding`") == "pass --bad-lines FILE, or --encoding"
    )
    src = tmp_path / "p.csv"
    _write(src, [["id", "location"], ["1", "Oslo"]])
    r = _invoke("clean", src, "-c", "location", "-o", tmp_path / "o.csv", "--workers", 0)
    assert r.exit_code == 1
    assert (
        r.stderr == "Error: --workers must be at least 1, got 0\nHint: set --workers to 1 or more\n"
    )


def test_progress_reaches_the_callback(tmp_path):
    src, out = tmp_path / "p.csv", tmp_path / "o.csv"
    _write(src, [["id", "location"], *[[str(i), f"Town {i}, Norway"] for i in range(5)]])
    events: list[ProgressEvent] = []
    summary = clean_file(src, "location", out, workers=1, progress=events.append)
    kinds = [e.kind for e in events]
    assert "note" in kinds and "start" in kinds
    started = next(e for e in events if e.kind == "start")
    assert started.total == summary.resolved == 5
    assert sum(e.done for e in events if e.kind == "advance") == 5


def test_cache_is_a_context_manager_and_translates_sqlite_errors(tmp_path):
    path = tmp_path / "c.sqlite"
    with Cache(path) as cache:
        assert cache.count() == 0
    with pytest.raises(CacheError) as err:  # closed: sqlite3.ProgrammingError inside
        cache.count()
    assert err.value.hint
    bad = tmp_path / "not-a-db.sqlite"
    bad.write_bytes(b"this is not a database file, just text" * 100)
    with pytest.raises(CacheError, match="cannot open the cache"):
        Cache(bad)


def test_a_long_text_gets_the_same_answer_from_every_entry_point(resolver, tmp_path):
    """The text is cut in one place, its key: "Lisbon", 600 spaces and "Berlin" names two
    countries for the Python API, the pipeline, lookup and clean alike."""
    text = "Lisbon" + " " * 600 + "Berlin"
    direct = resolver.resolve(text)
    assert direct.reason is Reason.SEVERAL_COUNTRIES
    piped = resolve_keys(count_keys([text], resolver), resolver=resolver).results
    looked = json.loads(_invoke("lookup", text, "--json").stdout)[0]
    src, out = tmp_path / "p.csv", tmp_path / "o.csv"
    _write(src, [["location"], [text]])
    clean_file(src, "location", out, workers=1)
    cleaned = _read(out)[0]
    assert cleaned["location"] == text  # the cell itself is kept whole
    for reason, country in [
        (piped[resolver.key(text)].reason.value, piped[resolver.key(text)].country),
        (looked["reason"], looked["country"]),
        (cleaned["geo_reason"], cleaned["geo_country"]),
    ]:
        assert (reason, country) == (direct.reason.value, direct.country)


def test_a_huge_cell_makes_a_short_key_and_a_small_cache(resolver, tmp_path):
    from geonorm.resolve.tuning import MAX_TEXT

    texts = ["Oslo " + "x" * 2_000_000, "Berlin, " + "ab " * 700_000, "🇧🇷" * 600_000]
    for text in texts:
        assert len(resolver.key(text)) <= MAX_TEXT  # 500 characters at most
    src, out, cache = tmp_path / "p.csv", tmp_path / "o.csv", tmp_path / "c.sqlite"
    _write(src, [["location"], *[[t] for t in texts]])
    clean_file(src, "location", out, workers=1, cache=cache)
    assert [row["location"] for row in _read(out)] == texts
    stored = sum(p.stat().st_size for p in tmp_path.glob("c.sqlite*"))
    assert stored < 1_000_000  # three strings: a few pages, not megabytes of keys


def test_the_lookup_table_shows_text_as_typed_and_never_controls_the_terminal():
    shown = {"[/x]": "[/x]", "[b]X[/b]": "[b]X[/b]", "X\x1b[2J": "X\\x1b[2J", "Y\u202e": "Y\\u202e"}
    for text, cell in shown.items():
        r = _invoke("lookup", text)
        assert r.exit_code == 0, r.output  # before, "[/x]" raised a markup error
        assert cell in r.stdout.replace("│", " ").split()  # as typed, not read as styling
        assert "\x1b" not in r.stdout and "\u202e" not in r.stdout
    as_json = _invoke("lookup", "Rome\x1b[2J", "Lima\u202e", "--json")
    assert "\x1b" not in as_json.stdout and "\u202e" not in as_json.stdout
    assert [d["text"] for d in json.loads(as_json.stdout)] == ["Rome\x1b[2J", "Lima\u202e"]


def test_the_clean_summary_shows_control_characters_escaped(tmp_path):
    src, out = tmp_path / "p.csv", tmp_path / "o\x1b\u202e.csv"
    _write(src, [["location"], ["Oslo"]])
    r = _invoke("clean", src, "-c", "location", "-o", out, "--workers", 1)
    assert r.exit_code == 0, r.output
    assert "\x1b" not in r.stderr and "\u202e" not in r.stderr
    assert "o\\x1b\\u202e.csv" in r.stderr  # "wrote …": the name, visibly
