"""A real ``geonorm serve`` process on a free 127.0.0.1 port: a job's output equals
``geonorm clean`` byte for byte; a server killed with SIGKILL during a job is started
again and the job resumes from the cache; SIGTERM stops it cleanly. Every wait is bounded."""

from __future__ import annotations

import os
import random
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from geonorm.resolve.normalize import normalize_key
from geonorm.service.server import add_token

sys.path.insert(0, str(Path(__file__).parent / "perf"))
from bench_clean import distinct_strings  # the benchmark's invented mix

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
WAIT = 120.0  # seconds: the longest any step may take


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start(data: Path, port: int, log: Path) -> subprocess.Popen:
    cmd = [sys.executable, "-m", "geonorm", "serve", "--data-dir", str(data)]
    cmd += ["--port", str(port), "--rate", "1000"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=open(log, "ab"))
    deadline = time.monotonic() + WAIT
    while time.monotonic() < deadline:
        assert proc.poll() is None, log.read_text()
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=2).status_code == 200:
                return proc
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    proc.kill()
    raise AssertionError("the service did not start in time")


def _stop(proc: subprocess.Popen) -> int:
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
    try:
        return proc.wait(timeout=60)
    except subprocess.TimeoutExpired:
        proc.kill()
        raise


def _csv(path: Path, values: list[str]) -> Path:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write("member_id,location\n")
        for i, v in enumerate(values):
            fh.write(f'M{i:06d},"{v.replace(chr(34), chr(34) * 2)}"\n')
    return path


def _upload(client: httpx.Client, path: Path) -> str:
    with open(path, "rb") as fh:
        r = client.post("/v1/jobs", files={"file": (path.name, fh)}, data={"column": "location"})
    assert r.status_code == 202, r.text
    return str(r.json()["id"])


def _wait_state(client: httpx.Client, job_id: str, done: bool = True) -> dict:
    """Poll the job until it is finished (or, with ``done=False``, has committed a chunk)."""
    deadline = time.monotonic() + WAIT
    while time.monotonic() < deadline:
        status = client.get(f"/v1/jobs/{job_id}").json()
        if status["state"] not in ("queued", "running"):
            return status
        if not done and status["state"] == "running" and status["progress"] > 0:
            return status
        time.sleep(0.05)
    raise AssertionError(f"job {job_id} not finished in {WAIT} s")


def _clean(src: Path, out: Path, cache: Path) -> bytes:
    cmd = [sys.executable, "-m", "geonorm", "clean", str(src), "-c", "location"]
    cmd += ["-o", str(out), "--cache", str(cache), "--quiet"]
    subprocess.run(cmd, check=True, timeout=WAIT)
    return out.read_bytes()


def _children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (Linux /proc)."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            found.append(int(stat.parent.name))
    return found


def _gone(pids: list[int], timeout: float = 30) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if not any(Path(f"/proc/{p}").exists() for p in pids):
            return True
        time.sleep(0.1)
    return False


def _cached(cache: Path) -> int:
    with sqlite3.connect(cache, timeout=30) as conn:
        return int(conn.execute("SELECT count(*) FROM resolution").fetchone()[0])


def test_serve_process_jobs_kill_and_restart(tmp_path):
    data = tmp_path / "data"
    token = add_token(data, "tester", "admin")
    port = _free_port()
    log = tmp_path / "serve.log"
    base = f"http://127.0.0.1:{port}"
    headers = {"Authorization": f"Bearer {token}"}
    rng = random.Random(11)
    small = _csv(tmp_path / "small.csv", rng.choices(distinct_strings(300, rng), k=900))
    proc = _start(data, port, log)
    try:
        with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
            # 1. A job's output is `geonorm clean` of the same file with the same cache.
            first = _upload(client, small)
            assert _wait_state(client, first)["state"] == "done"
            served = client.get(f"/v1/jobs/{first}/output").content
            assert served == _clean(small, tmp_path / "small-out.csv", data / "cache.sqlite")

            # 2. A second, bigger job; the server is killed once it has stored a chunk.
            values = distinct_strings(16_000, random.Random(5))
            big = _csv(tmp_path / "big.csv", values + values[:4000])
            second = _upload(client, big)
            status = _wait_state(client, second, done=False)
            workers = _children(proc.pid)
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait(timeout=30)
        if sys.platform.startswith("linux"):  # the job's worker does not outlive its server
            assert workers and _gone(workers)
        stored_before = _cached(data / "cache.sqlite")
        killed_running = status["state"] == "running"

        # 3. Started again: the job resumes from the cache and finishes.
        proc = _start(data, port, log)
        with httpx.Client(base_url=base, headers=headers, timeout=30) as client:
            done = _wait_state(client, second)
            assert done["state"] == "done", done
            assert done["rows"] == 20_000 and done["distinct"] == len(
                {normalize_key(v) for v in values}
            )
            # What was stored before the kill was not resolved again.
            assert killed_running, status
            assert done["summary"]["cache_hits"] >= stored_before - 300
            assert done["resolved"] < done["distinct"]
            out = client.get(f"/v1/jobs/{second}/output").content
            listed = [j["id"] for j in client.get("/v1/jobs").json()["jobs"]]
            assert listed == [first, second]
            assert client.get(f"/v1/jobs/{first}/output").content == served
        # SIGTERM: uvicorn's graceful shutdown, then it exits by the same signal.
        assert _stop(proc) in (0, -signal.SIGTERM)
        assert "Application shutdown complete" in log.read_text()
        assert out == _clean(big, tmp_path / "big-out.csv", data / "cache.sqlite")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
