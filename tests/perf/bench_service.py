"""Load on a real ``geonorm serve``: /v1/resolve batches from concurrent clients.

Starts the service on a free 127.0.0.1 port over a fresh data dir, then runs two
bounded phases of ``--seconds`` each with ``--clients`` concurrent HTTP clients
posting batches of ``--batch`` strings from the benchmark's invented mix
(``bench_clean.distinct_strings``):

- cold: every batch holds strings the service has not seen (cache misses);
- warm: batches drawn at random from strings already in the cache.

Prints one JSON object: requests/s, strings/s, p50/p99 latency per batch, errors.
Only 127.0.0.1 is contacted; the server is stopped at the end.

    python tests/perf/bench_service.py [--seconds 30] [--clients 16] [--batch 100]
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import random
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import httpx

sys.path.insert(0, str(Path(__file__).parent))
from bench_clean import distinct_strings  # the invented mix the other benchmarks use

from geonorm.service.server import add_token


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def start(data: Path, port: int) -> subprocess.Popen:
    cmd = [sys.executable, "-m", "geonorm", "serve", "--data-dir", str(data)]
    cmd += ["--port", str(port), "--rate", "0"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=2).status_code == 200:
                return proc
        except httpx.TransportError:
            time.sleep(0.2)
    proc.kill()
    raise SystemExit("the service did not start")


def cpu_seconds(pid: int) -> float:
    """CPU time the server process has used so far (Linux /proc; 0 elsewhere)."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def phase(proc: subprocess.Popen, run: Any) -> dict[str, Any]:
    """A load phase with the server's CPU time per request and the machine's load beside it
    (the machine is shared: the CPU time per request is the figure that does not depend
    on what else runs)."""
    cpu = cpu_seconds(proc.pid)
    result = asyncio.run(run)
    used = cpu_seconds(proc.pid) - cpu
    result["server_cpu_ms_per_request"] = round(used * 1000 / max(1, result["requests"]), 2)
    result["load_average_1m"] = round(os.getloadavg()[0], 2)
    return result


def percentile(values: list[float], q: float) -> float:
    if not values:
        return 0.0
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, round(q * (len(ordered) - 1)))]


async def load(
    base: str,
    token: str,
    batches: Any,
    *,
    seconds: float,
    clients: int,
) -> dict[str, Any]:
    """``clients`` tasks posting the batches ``batches()`` yields, for ``seconds``."""
    latencies: list[float] = []
    errors: dict[str, int] = {}
    strings = 0
    limits = httpx.Limits(max_connections=clients, max_keepalive_connections=clients)
    headers = {"Authorization": f"Bearer {token}"}
    async with httpx.AsyncClient(
        base_url=base, headers=headers, limits=limits, timeout=60
    ) as client:
        end = time.monotonic() + seconds

        async def worker() -> None:
            nonlocal strings
            while time.monotonic() < end:
                texts = batches()
                if texts is None:
                    return
                t0 = time.perf_counter()
                try:
                    r = await client.post("/v1/resolve", json={"texts": texts})
                    ok = r.status_code == 200 and len(r.json()["results"]) == len(texts)
                    code = str(r.status_code)
                except httpx.HTTPError as exc:
                    ok, code = False, type(exc).__name__
                latencies.append(time.perf_counter() - t0)
                if ok:
                    strings += len(texts)
                else:
                    errors[code] = errors.get(code, 0) + 1

        started = time.monotonic()
        await asyncio.gather(*(worker() for _ in range(clients)))
        took = time.monotonic() - started
    return {
        "seconds": round(took, 2),
        "requests": len(latencies),
        "strings": strings,
        "errors": sum(errors.values()),
        "error_codes": errors,
        "requests_per_s": round(len(latencies) / took, 1),
        "strings_per_s": round(strings / took),
        "p50_ms": round(percentile(latencies, 0.50) * 1000, 1),
        "p99_ms": round(percentile(latencies, 0.99) * 1000, 1),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seconds", type=float, default=30.0, help="length of each phase")
    ap.add_argument("--clients", type=int, default=16, help="concurrent clients")
    ap.add_argument("--batch", type=int, default=100, help="strings per request")
    ap.add_argument("--distinct", type=int, default=120_000, help="strings in the mix")
    args = ap.parse_args()
    pool = distinct_strings(args.distinct, random.Random(17))
    rng = random.Random(3)
    with tempfile.TemporaryDirectory(prefix="geonorm-bench-") as tmp:
        data = Path(tmp) / "data"
        token = add_token(data, "bench", "resolve")
        port = free_port()
        proc = start(data, port)
        base = f"http://127.0.0.1:{port}"
        try:
            unseen = iter(range(0, len(pool), args.batch))

            def cold() -> list[str] | None:
                start_at = next(unseen, None)
                return None if start_at is None else pool[start_at : start_at + args.batch]

            cold_result = phase(
                proc, load(base, token, cold, seconds=args.seconds, clients=args.clients)
            )
            seen = pool[: cold_result["strings"]] or pool[: args.batch]

            def warm() -> list[str]:
                return rng.sample(seen, min(args.batch, len(seen)))

            warm_result = phase(
                proc, load(base, token, warm, seconds=args.seconds, clients=args.clients)
            )
        finally:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(timeout=60)
            except subprocess.TimeoutExpired:
                proc.kill()
    print(
        json.dumps(
            {
                "cores": os.cpu_count(),
                "clients": args.clients,
                "batch": args.batch,
                "cold": cold_result,
                "warm": warm_result,
                "warm_distinct_strings": len(seen),
            },
            indent=2,
        )
    )


if __name__ == "__main__":
    main()
