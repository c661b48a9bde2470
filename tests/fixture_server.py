"""A small geocoding web service for tests, bound to 127.0.0.1, answering from fixtures.

Switches make it misbehave the way real services do: 429 with Retry-After,
5xx, slow answers (timeouts), malformed JSON, any raw body, every call failing. It records
each request (query text, headers) so tests can count what was sent.
"""

from __future__ import annotations

import json
import threading
import time
from collections import Counter
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import parse_qs, urlparse


@dataclass
class Behaviour:
    answers: dict[str, list[dict]] = field(default_factory=dict)  # query → results
    key: str | None = None  # expected X-Api-Key, if any
    fail_first: dict[str, list] = field(
        default_factory=dict
    )  # query → [(status, headers), …] before success
    slow: dict[str, float] = field(
        default_factory=dict
    )  # query → seconds to wait (first call only)
    malformed: set[str] = field(default_factory=set)  # queries answered with broken JSON
    raw: dict[str, bytes] = field(default_factory=dict)  # query → body sent as it is
    always: int | None = None  # every call answers this status
    delay: float = 0.0  # every call waits this long


class FixtureServer:
    def __init__(self, behaviour: Behaviour | None = None) -> None:
        self.behaviour = behaviour or Behaviour()
        self.requests: list[dict] = []
        self.lock = threading.Lock()
        server = self

        class Handler(BaseHTTPRequestHandler):
            def log_message(self, *args) -> None:  # quiet
                pass

            def do_GET(self) -> None:
                q = parse_qs(urlparse(self.path).query).get("q", [""])[0]
                server.handle(self, q)

            def do_POST(self) -> None:
                length = int(self.headers.get("Content-Length") or 0)
                body = json.loads(self.rfile.read(length) or b"{}")
                server.handle(self, str(body.get("q", "")))

        self.httpd = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.httpd.daemon_threads = True
        self.thread = threading.Thread(target=self.httpd.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.httpd.server_address[1]}/find"

    def __enter__(self) -> FixtureServer:
        self.thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self.httpd.shutdown()
        self.httpd.server_close()

    def counts(self) -> Counter[str]:
        with self.lock:
            return Counter(r["q"] for r in self.requests)

    def handle(self, h: BaseHTTPRequestHandler, q: str) -> None:
        b = self.behaviour
        with self.lock:
            self.requests.append({"q": q, "headers": dict(h.headers)})
            seen = sum(1 for r in self.requests if r["q"] == q)
        if b.delay:
            time.sleep(b.delay)
        if q in b.slow and seen == 1:
            time.sleep(b.slow[q])
        if b.key is not None and h.headers.get("X-Api-Key") != b.key:
            return self.reply(h, 401, {"error": "bad key"})
        if b.always is not None:
            return self.reply(h, b.always, {"error": "down"})
        failures = b.fail_first.get(q, [])
        if seen <= len(failures):
            status, headers = failures[seen - 1]
            return self.reply(h, status, {"error": "try later"}, headers)
        if q in b.malformed:
            return self.reply(h, 200, None, raw=b'{"hits": [ {"lat": 1,')
        if q in b.raw:
            return self.reply(h, 200, None, raw=b.raw[q])
        return self.reply(h, 200, {"hits": b.answers.get(q, [])})

    @staticmethod
    def reply(
        h: BaseHTTPRequestHandler,
        status: int,
        body,
        headers: dict | None = None,
        raw: bytes | None = None,
    ):
        data = raw if raw is not None else json.dumps(body).encode()
        try:
            h.send_response(status)
            for k, v in (headers or {}).items():
                h.send_header(k, v)
            h.send_header("Content-Type", "application/json")
            h.send_header("Content-Length", str(len(data)))
            h.end_headers()
            h.wfile.write(data)
        except (BrokenPipeError, ConnectionResetError):
            pass


def hit(
    cc: str, lat: float, lon: float, town: str = "", region: str = "", relevance: float | None = 0.9
) -> dict:
    """One result in the shape the test adapter reads."""
    out = {"address": {"cc": cc, "town": town, "region": region}, "lat": lat, "lon": lon}
    if relevance is not None:
        out["relevance"] = relevance
    return out


ADAPTER = """[remote]
name = "team-geocoder"
url = "{url}"
method = "{method}"
query_param = "q"
params = {{ limit = "3" }}
{key}
[remote.response]
results = "hits"
country = "address.cc"
lat = "lat"
lon = "lon"
city = "address.town"
subdivision = "address.region"
score = "relevance"

[remote.limits]
per_second = {per_second}
concurrency = {concurrency}
timeout_s = {timeout}
retries = {retries}
"""


def adapter_file(
    path,
    url: str,
    *,
    method: str = "GET",
    key: bool = False,
    per_second: float = 200,
    concurrency: int = 4,
    timeout: float = 2,
    retries: int = 3,
):
    key_lines = 'key_env = "TEAM_GEO_KEY"\nkey_header = "X-Api-Key"\n' if key else ""
    path.write_text(
        ADAPTER.format(
            url=url,
            method=method,
            key=key_lines,
            per_second=per_second,
            concurrency=concurrency,
            timeout=timeout,
            retries=retries,
        ),
        encoding="utf-8",
    )
    return path
