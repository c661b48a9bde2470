"""Benchmark: warm single lookups and cleaning the demo file (cold and warm cache).

Run by hand: ``python tests/perf/bench_lookup.py``. Prints JSON. Not part of the
test suite: timings are reported, never asserted.
"""

from __future__ import annotations

import json
import subprocess
import tempfile
import time
from pathlib import Path


def _time(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True)
    return time.perf_counter() - t0


def main() -> None:
    exe = ["geonorm"]
    _time([*exe, "lookup", "Lyon"])  # make sure the index exists
    warm = sorted(_time([*exe, "lookup", "Lyon"]) for _ in range(5))
    from geonorm import Resolver
    from geonorm.demo import demo_file

    resolver = Resolver()
    texts = [
        "Lyon",
        "austin tx",
        "Perth, Scotland",
        "東京",
        "Lisbon / Berlin",
        "Amsterdamn",
        "n/a",
    ] * 200
    t0 = time.perf_counter()
    for t in texts:
        resolver.resolve(t)
    per_call_ms = (time.perf_counter() - t0) / len(texts) * 1000
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
    print(
        json.dumps(
            {
                "warm_lookup_process_s_median": round(warm[2], 3),
                "resolve_in_process_ms_mean": round(per_call_ms, 3),
                "demo_rows": 20000,
                "demo_clean_cold_cache_s": round(cold, 2),
                "demo_clean_warm_cache_s": round(warm_clean, 2),
            },
            indent=1,
        )
    )


if __name__ == "__main__":
    main()
