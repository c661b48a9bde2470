"""Benchmark: ``geonorm clean --engine dask`` on a 2-worker local cluster vs a single-machine clean.

Run by hand: ``python tests/perf/bench_dask.py [--rows 10000000] [--distinct 500000]
[--parts 20] [--workers 2] [--check]``.

Writes ``--rows`` rows with ``--distinct`` distinct location strings (the mix of
``bench_clean.py``, repeating in a Zipf-like way) as ``--parts`` Parquet files,
and the same rows as one Parquet file. Then, each with a fresh cache (cold) and
again with the filled cache (warm):

- single machine: ``geonorm clean all.parquet --workers N``;
- Dask: a ``LocalCluster`` of N single-threaded worker processes on 127.0.0.1
  (started here, not timed) and ``geonorm clean DIR --engine dask --scheduler …``.

Prints JSON: wall seconds and peak RSS (sampled every 0.1 s) of each client
process and each worker process; for the single-machine clean also with its
process pool summed in (forked children share pages, so the sum overstates).
``--check`` compares the two outputs row for row. Timings are reported, never asserted.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_clean import distinct_strings


def make_dataset(root: Path, rows: int, n_distinct: int, parts: int, seed: int = 7) -> None:
    """``root/parts/p00.parquet`` … and ``root/all.parquet`` with the same rows in order."""
    import polars as pl

    rng = random.Random(seed)
    values = distinct_strings(n_distinct, rng)
    weights = [1.0 / (r + 1) ** 1.05 for r in range(len(values))]
    picks = rng.choices(range(len(values)), weights=weights, k=rows)
    for j, v in enumerate(rng.sample(range(len(values)), len(values))):
        picks[j] = v  # every distinct string appears at least once
    frame = pl.DataFrame(
        {
            "member_id": [f"M{i:08d}" for i in range(rows)],
            "joined": [f"20{10 + i % 15}-0{1 + i % 9}-1{i % 10}" for i in range(rows)],
            "location": [values[p] for p in picks],
        }
    )
    (root / "parts").mkdir()
    size = -(-rows // parts)
    for i in range(parts):
        frame.slice(i * size, size).write_parquet(root / "parts" / f"p{i:02d}.parquet")
    frame.write_parquet(root / "all.parquet")


class PeakRss:
    """Samples the resident memory of some processes (and their children) in a thread.

    Sampling, not ``ru_maxrss``: a process started by fork and exec inherits its
    parent's high-water mark, which would hide the child's own peak.
    """

    def __init__(self, pids: list[int], every: float = 0.1) -> None:
        import psutil

        self.procs = [psutil.Process(p) for p in pids]
        self.peak = dict.fromkeys(pids, 0.0)  # each process alone
        self.tree = dict.fromkeys(pids, 0.0)  # each process and its children, summed
        self.every = every
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def _sample(self) -> None:
        import psutil

        while not self._stop.is_set():
            for proc in self.procs:
                try:
                    own = proc.memory_info().rss / 2**20
                    kids = sum(k.memory_info().rss for k in proc.children(recursive=True)) / 2**20
                except psutil.Error:
                    continue
                self.peak[proc.pid] = max(self.peak[proc.pid], own)
                self.tree[proc.pid] = max(self.tree[proc.pid], own + kids)
            self._stop.wait(self.every)

    def __enter__(self) -> PeakRss:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()


def run(cmd: list[str]) -> tuple[float, float, float]:
    """Seconds, peak RSS (MB) of a command's process, and of it with its child processes."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    with PeakRss([proc.pid]) as rss:
        status = proc.wait()
    if status != 0:
        raise SystemExit(f"{cmd} failed with status {status}")
    return time.perf_counter() - t0, rss.peak[proc.pid], rss.tree[proc.pid]


def bench_single(root: Path, workers: int) -> dict[str, float]:
    cmd = [
        "geonorm",
        "clean",
        str(root / "all.parquet"),
        "--column",
        "location",
        "--out",
        str(root / "single.parquet"),
        "--cache",
        str(root / "single.sqlite"),
        "--workers",
        str(workers),
        "--quiet",
    ]
    cold, cold_rss, cold_tree = run(cmd)
    warm, warm_rss, _ = run(cmd)
    return {
        "cold_s": round(cold, 1),
        "warm_s": round(warm, 1),
        "cold_peak_rss_mb": round(cold_rss),
        "cold_peak_rss_with_pool_mb": round(cold_tree),
        "warm_peak_rss_mb": round(warm_rss),
    }


def bench_dask(root: Path, workers: int) -> dict[str, object]:
    from distributed import Client, LocalCluster

    with (
        LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
        ) as cluster,
        Client(cluster) as client,
    ):
        cmd = [
            "geonorm",
            "clean",
            str(root / "parts"),
            "--column",
            "location",
            "--out",
            str(root / "dask_out"),
            "--cache",
            str(root / "dask.sqlite"),
            "--engine",
            "dask",
            "--scheduler",
            cluster.scheduler_address,
            "--quiet",
        ]
        pids = client.run(os.getpid)
        with PeakRss(list(pids.values())) as workers_cold:
            cold, cold_rss, _ = run(cmd)
        with PeakRss(list(pids.values())) as workers_warm:
            warm, warm_rss, _ = run(cmd)
    return {
        "cold_s": round(cold, 1),
        "warm_s": round(warm, 1),
        "client_cold_peak_rss_mb": round(cold_rss),
        "client_warm_peak_rss_mb": round(warm_rss),
        "worker_cold_peak_rss_mb": sorted(round(v) for v in workers_cold.peak.values()),
        "worker_warm_peak_rss_mb": sorted(round(v) for v in workers_warm.peak.values()),
    }


def same_output(root: Path) -> bool:
    import polars as pl

    single = pl.read_parquet(root / "single.parquet")
    parts = sorted((root / "dask_out").glob("part-*.parquet"))
    return pl.concat([pl.read_parquet(p) for p in parts]).equals(single)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--distinct", type=int, default=500_000)
    ap.add_argument("--parts", type=int, default=20)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--check", action="store_true", help="compare the outputs row for row")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as td:
        root = Path(td)
        t0 = time.perf_counter()
        make_dataset(root, args.rows, args.distinct, args.parts)
        result: dict[str, object] = {
            "rows": args.rows,
            "distinct": args.distinct,
            "parts": args.parts,
            "workers": args.workers,
            "make_data_s": round(time.perf_counter() - t0, 1),
            "single": bench_single(root, args.workers),
            "dask": bench_dask(root, args.workers),
        }
        if args.check:
            result["same_output"] = same_output(root)
        print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
