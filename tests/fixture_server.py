"""A small geocoding web service for tests, bound to 127.0.0.1, answering from fixtures.

The request and answer shapes are our own: ``GET /locate?text=…`` (or a JSON
body ``{"text": …}`` by POST) answers ``{"matches": [{"where": {"country",
"settlement", "division"}, "lat", "lon", "certainty"}]}``.

Switches make it misbehave the way real services do: 429 with Retry-After,
5xx, slow answers (timeouts), malformed JSON, any raw body, every call failing,
redirects, answers trickled a byte at a time, answers of many megabytes. It
records each request (query text, path, headers) so tests can count what was
sent and see what each origin received.
"""

from __future__ import annotations

import json
import threading
import time
from collections import Counter
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import parse_qs, urlparse

PATH = "/locate"  # the service's path; redirects (below) apply on it only
CHUNK = 64 * 1024


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
    # query → (status, Location): a redirect, sent for requests to PATH
    redirect: dict[str, tuple[int, str]] = field(default_factory=dict)
    # query → (part, seconds, n): n bytes of the "head" or the "body", one every `seconds`
    trickle: dict[str, tuple[str, float, int]] = field(default_factory=dict)
    # query → (bytes, declared): a valid answer padded to that size, with or without its length
    huge: dict[str, tuple[int, bool]] = field(default_factory=dict)


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
                q = parse_qs(urlparse(self.path).query).get("text", [""])[0]
                server.handle(self, q)

            def do_POST(self) -> None:
                length = int(self.headers.get("Content-Length") or 0)
                body = json.loads(self.rfile.read(length) or b"{}")
                server.handle(self, str(body.get("text", "")))

        self.httpd = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.httpd.daemon_threads = True
        self.thread = threading.Thread(target=self.httpd.serve_forever, daemon=True)

    @property
    def origin(self) -> str:
        return f"http://127.0.0.1:{self.httpd.server_address[1]}"

    @property
    def url(self) -> str:
        return self.origin + PATH

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
        path = urlparse(h.path).path
        with self.lock:
            self.requests.append({"q": q, "path": path, "headers": dict(h.headers)})
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
        if q in b.redirect and path == PATH:
            status, location = b.redirect[q]
            return self.reply(h, status, {"moved": True}, {"Location": location})
        if q in b.trickle:
            return self.trickle(h, *b.trickle[q])
        if q in b.huge:
            return self.huge(h, *b.huge[q])
        if q in b.malformed:
            return self.reply(h, 200, None, raw=b'{"matches": [ {"lat": 1,')
        if q in b.raw:
            return self.reply(h, 200, None, raw=b.raw[q])
        return self.reply(h, 200, {"matches": b.answers.get(q, [])})

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

    @staticmethod
    def trickle(h: BaseHTTPRequestHandler, part: str, seconds: float, n: int) -> None:
        """A valid empty answer, ``n`` bytes of its head or body sent one every ``seconds``."""
        body = b'{"matches": []}'.ljust(n if part == "body" else 0)
        lead = b"HTTP/1.0 200 OK\r\nContent-Type: application/json\r\n"
        lead += b"Content-Length: %d\r\n" % len(body)
        if part == "head":
            lead, slow, rest = lead + b"X-Padding: ", b"a" * n, b"\r\n\r\n" + body
        else:
            lead, slow, rest = lead + b"\r\n", body, b""
        try:
            h.wfile.write(lead)
            for i in range(len(slow)):
                time.sleep(seconds)
                h.wfile.write(slow[i : i + 1])
            h.wfile.write(rest)
        except (BrokenPipeError, ConnectionResetError):
            pass
        h.close_connection = True

    @staticmethod
    def huge(h: BaseHTTPRequestHandler, size: int, declared: bool) -> None:
        """A valid answer with no results, padded to ``size`` bytes, streamed in chunks."""
        start, end = b'{"matches": [], "padding": "', b'"}'
        pad = size - len(start) - len(end)
        chunk = b"x" * CHUNK
        try:
            h.send_response(200)
            h.send_header("Content-Type", "application/json")
            if declared:
                h.send_header("Content-Length", str(size))
            h.end_headers()
            h.wfile.write(start)
            while pad > 0:
                h.wfile.write(chunk[: min(pad, CHUNK)])
                pad -= CHUNK
            h.wfile.write(end)
        except (BrokenPipeError, ConnectionResetError):
            pass
        h.close_connection = True


def hit(
    cc: str,
    lat: float,
    lon: float,
    settlement: str = "",
    division: str = "",
    certainty: float | None = 0.9,
) -> dict:
    """One result in the shape the test adapter reads."""
    out = {
        "where": {"country": cc, "settlement": settlement, "division": division},
        "lat": lat,
        "lon": lon,
    }
    if certainty is not None:
        out["certainty"] = certainty
    return out


ADAPTER = """[remote]
name = "team-geocoder"
url = "{url}"
method = "{method}"
query_param = "text"
params = {{ max_matches = "3" }}
{key}
[remote.response]
results = "matches"
country = "where.country"
lat = "lat"
lon = "lon"
city = "where.settlement"
subdivision = "where.division"
score = "certainty"

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
