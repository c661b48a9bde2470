"""Benchmark: resolution per distinct string, single lookups and the demo clean.

Run by hand: ``python tests/perf/bench_lookup.py [--distinct 5000]``. Prints JSON.
Not part of the test suite: timings are reported, never asserted.

- ``resolve_ms_per_distinct``: a fresh process and a fresh ``Resolver`` resolve
  ``--distinct`` distinct strings (by key) of the benchmark mix of
  ``bench_clean.py`` (fixed seed) plus a few hand-written examples, once each,
  as ``clean`` does in one process (``LocalEngine(1)``): the mean wall time per
  string, first-use loading included (construction of the resolver is reported
  apart). CPU time is reported beside it: on a shared machine it moves less
  than wall time. ``plain_loop_…``: the same in another fresh process, in a
  plain loop over ``Resolver.resolve`` (without the engine's garbage-collector
  setting).
- ``lookup_process_s_median``: ``geonorm lookup Lyon``, the whole process, on a
  built index (median of five).
- ``demo_clean_*``: cleaning the demo file with a fresh cache, then again.
- ``python_start_s_median`` and ``yardstick_loop_s``: what a bare ``python -c pass``
  takes, and a fixed pure-Python loop (ten million additions) in this process: how
  fast this machine runs Python, so figures from two machines can be compared.
"""

from __future__ import annotations

import argparse
import json
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

EXAMPLES = [
    "Lyon",
    "austin tx",
    "Perth, Scotland",
    "東京",
    "Lisbon / Berlin",
    "Amsterdamn",
    "n/a",
]


def _time(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True)
    return time.perf_counter() - t0


def yardstick() -> float:
    """Seconds for ten million additions in a plain loop (the best of three)."""
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        total = 0
        for i in range(10_000_000):
            total += i
        best = min(best, time.perf_counter() - t0)
    return best


def per_string(n: int, plain: bool) -> dict[str, float]:
    """Mean cost of one distinct string in this (fresh) process."""
    sys.path.insert(0, str(Path(__file__).parent))
    from bench_clean import distinct_strings

    texts = [*EXAMPLES, *distinct_strings(n, random.Random(7))]
    wall0, cpu0 = time.perf_counter(), time.process_time()
    from geonorm import Resolver
    from geonorm.batch.engines import LocalEngine

    resolver = Resolver()
    construct = time.perf_counter() - wall0
    # What a run loads once (tables, word list, patterns), as ``clean`` does before its
    # workers fork: reported apart, so that the figure per string is the steady cost.
    resolver.warm()
    load = time.perf_counter() - wall0 - construct
    keys = list({resolver.key(t): t for t in texts})[:n]  # distinct strings: one per key
    done: dict[str, object] = {}
    wall1, cpu1 = time.perf_counter(), time.process_time()
    if plain:
        for k in keys:
            resolver.resolve(k)
    else:
        LocalEngine(1).resolve(resolver, keys, done.update)  # as clean does in one process
    wall2, cpu2 = time.perf_counter(), time.process_time()
    return {
        "distinct": len(keys),
        "import_and_construct_s": round(construct, 3),
        "load_tables_s": round(load, 3),
        "resolve_ms_per_distinct": round((wall2 - wall1) / len(keys) * 1000, 4),
        "resolve_cpu_ms_per_distinct": round((cpu2 - cpu1) / len(keys) * 1000, 4),
        "with_construct_cpu_ms_per_distinct": round((cpu2 - cpu0) / len(keys) * 1000, 4),
    }


def _fresh(n: int, plain: bool) -> dict[str, float]:
    cmd = [sys.executable, __file__, "--per-string", "--distinct", str(n)]
    done = subprocess.run(
        [*cmd, "--plain"] if plain else cmd, check=True, capture_output=True, text=True
    )
    return json.loads(done.stdout)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--distinct", type=int, default=5000)
    ap.add_argument("--per-string", action="store_true", help="only the in-process figure")
    ap.add_argument("--plain", action="store_true", help="a loop over Resolver.resolve")
    args = ap.parse_args()
    if args.per_string:
        print(json.dumps(per_string(args.distinct, args.plain)))
        return
    result: dict[str, object] = dict(_fresh(args.distinct, plain=False))
    plain = _fresh(args.distinct, plain=True)
    result["plain_loop_resolve_cpu_ms_per_distinct"] = plain["resolve_cpu_ms_per_distinct"]
    sys.path.insert(0, str(Path(__file__).parent))
    from bench_clean import geonorm_command

    exe = geonorm_command()
    _time([*exe, "lookup", "Lyon"])  # make sure the index exists
    lookups = sorted(_time([*exe, "lookup", "Lyon"]) for _ in range(5))
    starts = sorted(_time([sys.executable, "-c", "pass"]) for _ in range(5))
    from geonorm.demo import demo_file

    with tempfile.TemporaryDirectory() as td:
        cache, out = Path(td) / "c.sqlite", Path(td) / "o.csv"
        clean = [
            *exe,
            "clean",
            str(demo_file()),
            "--column",
            "location",
            "--out",
            str(out),
            "--cache",
            str(cache),
            "--quiet",
        ]
        cold = _time(clean)
        warm_clean = _time(clean)
    result.update(
        {
            "lookup_process_s_median": round(lookups[2], 3),
            "python_start_s_median": round(starts[2], 3),
            "yardstick_loop_s": round(yardstick(), 3),
            "demo_rows": 20000,
            "demo_clean_cold_cache_s": round(cold, 2),
            "demo_clean_warm_cache_s": round(warm_clean, 2),
        }
    )
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
