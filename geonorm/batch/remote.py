"""An optional remote geocoder for the doubtful rest: opt-in, budgeted, cached, fault-tolerant.

Nothing is sent unless an adapter is given. Only the normalised location text
of strings the offline cascade left in ``review`` or ``unmatched`` is sent,
most rows first, within a request budget. Every answer (results, "no result",
permanent errors) is cached per provider and text, one small transaction per
answer, so a rerun — even after a SIGKILL — never asks twice. Requests go
through a token-bucket rate limit with bounded concurrency, are retried with
exponential backoff and jitter on timeouts, 429 and 5xx (honouring
``Retry-After`` in seconds or as an HTTP date; no wait is longer than
``MAX_RETRY_AFTER``), and a circuit breaker stops calling after several
failures in a row; the run then finishes offline.

Limits keep a faulty or hostile service from holding or swamping a run: a
request, redirects and the whole answer included, ends within the adapter's
``timeout_s``; the phase stops asking after ``TIME_BUDGET_S`` (or the time
budget given) and the run finishes offline; an answer larger than
``MAX_ANSWER_BYTES`` is not read further and is cached as an error; redirects
are followed only on the service's own origin (scheme, host, port), so the key
is never sent anywhere else and no other origin's answer is taken for the
service's.

Whatever the service sends back is data, never a crash: malformed JSON is a
permanent error, a malformed result is rejected and counted, an unreadable
``Retry-After`` is ignored, an adapter that trips over an answer gives an
error answer. Every request is counted, in the summary and in the cache's
request total, before anything can fail. A bad adapter file raises
``RemoteError``.

Adapters: the built-in one reads a TOML file (see ``TomlAdapter``); others
can be plugged in as Python entry points in the group ``geonorm.remote``.
"""

from __future__ import annotations

import email.utils
import math
import os
import random
import re
import ssl
import sys
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable, Mapping
from concurrent.futures import FIRST_COMPLETED, Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from dataclasses import replace as dc_replace
from datetime import timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import httpcore
import httpx

from ..errors import RemoteError
from .remote_answer import RemoteAnswer, RemoteHit

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib  # type: ignore[import-not-found,unused-ignore]

if TYPE_CHECKING:
    from ..resolve.index import PlaceIndex
    from ..resolve.resolution import Resolution
    from .cache import Cache

__all__ = [
    "BREAKER_AFTER",
    "MAX_ANSWER_BYTES",
    "MAX_REDIRECTS",
    "MAX_RETRY_AFTER",
    "TIME_BUDGET_S",
    "RemoteAdapter",
    "RemoteAnswer",
    "RemoteError",
    "RemoteHit",
    "RemoteSummary",
    "TomlAdapter",
    "load_adapter",
    "merge",
    "run_remote",
]

BREAKER_AFTER = 5  # consecutive failed strings before the circuit breaker opens (common practice)
MAX_RETRY_AFTER = 60.0  # the longest wait between two tries, in seconds (common practice)
# The largest answer read, in bytes: a page of a few results is a few kilobytes, and 1 MB is
# a common web server's default body limit (from memory).
MAX_ANSWER_BYTES = 1_000_000
# The wall time of one run's remote phase, in seconds: bounding a batch step is common
# practice; 30 minutes (1,800 requests at one a second) is a chosen default, not tuned. A
# rerun goes on from the cache.
TIME_BUDGET_S = 1800.0
MAX_REDIRECTS = 5  # redirects followed per request, all on the service's origin (common practice)
_DEFAULT_PORTS = {"http": 80, "https": 443}
_BODY = frozenset({"content-length", "content-type", "transfer-encoding"})  # gone with the body


class RemoteAdapter(Protocol):
    """What an adapter does: build the request for a text, read the response.

    An adapter may also carry ``time_budget_s`` and ``max_answer_bytes``; the
    run uses them in place of ``TIME_BUDGET_S`` and ``MAX_ANSWER_BYTES``.
    """

    name: str
    per_second: float
    concurrency: int
    timeout_s: float
    retries: int

    def request(self, client: httpx.Client, text: str) -> httpx.Request: ...

    def parse(self, response: httpx.Response) -> RemoteAnswer: ...


# -- the TOML adapter -----------------------------------------------------
_KEYS: dict[str, dict[str, tuple[type | tuple[type, ...], bool]]] = {
    "remote": {
        "name": (str, True),
        "url": (str, True),
        "method": (str, True),
        "query_param": (str, True),
        "params": (dict, False),
        "key_env": (str, False),
        "key_header": (str, False),
    },
    "remote.response": {
        "results": (str, True),
        "country": (str, True),
        "lat": (str, True),
        "lon": (str, True),
        "city": (str, False),
        "subdivision": (str, False),
        "score": (str, False),
    },
    "remote.limits": {
        "per_second": ((int, float), True),
        "concurrency": (int, True),
        "timeout_s": ((int, float), True),
        "retries": (int, True),
    },
}
_TYPE_WORD = {str: "string", int: "whole number", dict: "table"}
_HEADER_NAME = re.compile(r"^[!#$%&'*+\-.^_`|~0-9A-Za-z]+$")  # an HTTP token (RFC 9110)


def _key_line(text: str, section: str, key: str | None) -> int:
    """The line of ``key`` in ``[section]`` (or of the section header), 1-based; 0 if absent."""
    current, header_line = "", 0
    for n, line in enumerate(text.splitlines(), start=1):
        m = re.match(r"\s*\[\s*([^\]]+?)\s*\]", line)
        if m:
            current = m.group(1)
            if current == section:
                header_line = n
            continue
        if key is not None and current == section and re.match(rf"\s*{re.escape(key)}\s*=", line):
            return n
    return header_line


def _dig(obj: Any, path: str) -> Any:
    """Follow a dotted path (``where.country``, ``matches.0``) into JSON; None when absent."""
    if path == "":
        return obj
    for part in path.split("."):
        if isinstance(obj, dict):
            obj = obj.get(part)
        elif isinstance(obj, list) and part.isdecimal() and int(part) < len(obj):
            obj = obj[int(part)]
        else:
            return None
    return obj


_DECIMAL = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)


def _finite(value: Any) -> float | None:
    """A JSON number or plain decimal string as a finite float; None for anything else.

    Booleans, NaN, infinities, words and numbers written otherwise (``1_000``,
    digits of other scripts) are no numbers here.
    """
    if value is None or isinstance(value, bool):
        return None
    if isinstance(value, str) and not _DECIMAL.fullmatch(value.strip()):
        return None
    if not isinstance(value, (str, int, float)):
        return None
    try:
        number = float(value)
    except (ValueError, OverflowError):  # an integer beyond float
        return None
    return number if math.isfinite(number) else None


def _probability(value: Any) -> float | None:
    """A score: a finite number in [0, 1]; None for anything else (NaN, ``true``, 95, a word)."""
    number = _finite(value)
    return number if number is not None and 0.0 <= number <= 1.0 else None


def _check_time_budget(value: Any) -> float:
    """A phase's time budget in seconds: a number above 0 (``math.inf``: none)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        raise RemoteError(
            f"the remote time budget must be a number of seconds above 0, got {value!r}",
            hint="set time_budget_s to a positive number of seconds (math.inf for no limit)",
        )
    return float(value)


def _check_answer_bytes(value: Any) -> int:
    """The size cap of one answer: a whole number of bytes above 0."""
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise RemoteError(
            f"the answer size cap must be a whole number of bytes above 0, got {value!r}",
            hint="set max_answer_bytes to 1 or more",
        )
    return value


@dataclass(frozen=True)
class _AdapterFile:
    """An adapter file's path and text: messages name the line of the key at fault."""

    path: Path
    text: str

    def line(self, section: str, key: str | None) -> int:
        return _key_line(self.text, section, key)

    def error(self, section: str, key: str | None, message: str, hint: str) -> RemoteError:
        return RemoteError(f"{self.path} line {self.line(section, key)}: {message}", hint=hint)


def _read_adapter_file(path: Path) -> tuple[_AdapterFile, dict[str, Any]]:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise RemoteError(
            f"cannot read the remote adapter file {path} ({exc.strerror})",
            hint="pass the path of a TOML adapter file with `remote`",
        ) from exc
    except UnicodeDecodeError as exc:
        raise RemoteError(
            f"{path} is not UTF-8 text (byte {exc.start})",
            hint="save the adapter file as UTF-8",
        ) from exc
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RemoteError(
            f"{path} is not valid TOML: {exc}",
            hint="fix the line named above; see the README for the adapter format",
        ) from exc
    return _AdapterFile(path, text), data


def _tables(src: _AdapterFile, data: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """The three tables of the file, each with known keys of the right types only."""
    remote = data.get("remote")
    if not isinstance(remote, dict):
        raise RemoteError(
            f"{src.path} has no [remote] table (line 1)",
            hint="start the file with [remote]; see the README for the adapter format",
        )
    found = {
        "remote": remote,
        "remote.response": remote.get("response"),
        "remote.limits": remote.get("limits"),
    }
    tables: dict[str, dict[str, Any]] = {}
    for name, spec in _KEYS.items():
        table = found[name]
        if not isinstance(table, dict):
            raise RemoteError(
                f"{src.path} has no [{name}] table (line {src.line('remote', None) or 1})",
                hint=f"add a [{name}] table; see the README for its keys",
            )
        _check_keys(src, name, spec, table)
        tables[name] = table
    return tables


def _check_keys(
    src: _AdapterFile,
    name: str,
    spec: dict[str, tuple[type | tuple[type, ...], bool]],
    table: dict[str, Any],
) -> None:
    for key, value in table.items():
        if name == "remote" and key in ("response", "limits"):
            continue
        if key not in spec:
            raise src.error(
                name,
                key,
                f"unknown key {key!r} in [{name}]",
                f"the keys of [{name}] are: {', '.join(spec)}",
            )
        types, _ = spec[key]
        if not isinstance(value, types) or isinstance(value, bool):
            want = _TYPE_WORD.get(types, "number") if isinstance(types, type) else "number"
            raise src.error(
                name, key, f"{key} must be a {want}", "see the README for the adapter format"
            )
    for key, (_, required) in spec.items():
        if required and key not in table:
            raise src.error(name, None, f"[{name}] lacks {key!r}", f"add {key} = … to [{name}]")


def _check_remote(src: _AdapterFile, r: dict[str, Any]) -> None:
    if not r["name"].strip():
        raise src.error("remote", "name", "name is empty", "give the service a short label")
    bad_url = src.error(
        "remote", "url", f"url {r['url']!r} is not an http(s) URL", "write https://host/path"
    )
    if not re.match(r"^https?://[^\s/]+", r["url"]):
        raise bad_url
    try:
        httpx.URL(r["url"])
    except httpx.InvalidURL as exc:
        raise bad_url from exc
    if r["method"].upper() not in ("GET", "POST"):
        raise src.error(
            "remote",
            "method",
            f"method must be GET or POST, not {r['method']!r}",
            "use GET or POST",
        )
    if ("key_env" in r) != ("key_header" in r):
        raise src.error(
            "remote",
            "key_env" if "key_env" in r else "key_header",
            "key_env and key_header go together",
            "give both (the variable holding the secret, and the header to send it in) or neither",
        )
    if "key_header" in r and not _HEADER_NAME.match(r["key_header"]):
        raise src.error(
            "remote",
            "key_header",
            f"key_header {r['key_header']!r} is not a header name",
            "use letters, digits and dashes, e.g. X-Api-Key",
        )


def _check_limits(src: _AdapterFile, lim: dict[str, Any]) -> None:
    for key in ("per_second", "timeout_s"):
        if lim[key] <= 0:
            raise src.error(
                "remote.limits", key, f"{key} must be above 0", f"set {key} to a positive number"
            )
    if lim["concurrency"] < 1 or lim["retries"] < 0:
        key = "concurrency" if lim["concurrency"] < 1 else "retries"
        raise src.error(
            "remote.limits", key, f"{key} is out of range", "concurrency ≥ 1, retries ≥ 0"
        )


def _secret_headers(
    src: _AdapterFile, r: dict[str, Any], environ: Mapping[str, str]
) -> dict[str, str]:
    """The header carrying the key, read from the environment (never from the file)."""
    if "key_env" not in r:
        return {}
    variable = r["key_env"]
    secret = environ.get(variable)
    if not secret:
        raise src.error(
            "remote",
            "key_env",
            f"the environment variable {variable} is not set",
            f"export {variable}=… with your key before running",
        )
    if not secret.isascii():
        raise src.error(
            "remote",
            "key_env",
            f"the environment variable {variable} holds characters a header cannot carry",
            f"set {variable} to the key itself, in plain ASCII",
        )
    return {r["key_header"]: secret}


class TomlAdapter:
    """The built-in adapter, configured by a TOML file (keys in the README).

    ``time_budget_s`` bounds the wall time of a run's remote phase and
    ``max_answer_bytes`` the size of one answer (defaults ``TIME_BUDGET_S``
    and ``MAX_ANSWER_BYTES``).
    """

    def __init__(
        self,
        path: str | Path,
        environ: Mapping[str, str] | None = None,
        *,
        time_budget_s: float = TIME_BUDGET_S,
        max_answer_bytes: int = MAX_ANSWER_BYTES,
    ) -> None:
        self.time_budget_s = _check_time_budget(time_budget_s)
        self.max_answer_bytes = _check_answer_bytes(max_answer_bytes)
        src, data = _read_adapter_file(Path(path))
        tables = _tables(src, data)
        r, resp, lim = tables["remote"], tables["remote.response"], tables["remote.limits"]
        _check_remote(src, r)
        _check_limits(src, lim)
        self.path = src.path
        self.name = r["name"].strip()
        self.url, self.method, self.query_param = r["url"], r["method"].upper(), r["query_param"]
        self.params = {str(k): str(v) for k, v in (r.get("params") or {}).items()}
        self.response = {k: resp.get(k, "") for k in _KEYS["remote.response"]}
        self.per_second, self.concurrency = float(lim["per_second"]), int(lim["concurrency"])
        self.timeout_s, self.retries = float(lim["timeout_s"]), int(lim["retries"])
        self._headers = _secret_headers(src, r, os.environ if environ is None else environ)

    def request(self, client: httpx.Client, text: str) -> httpx.Request:
        if self.method == "GET":
            return client.build_request(
                "GET",
                self.url,
                params={**self.params, self.query_param: text},
                headers=self._headers,
                timeout=self.timeout_s,
            )
        return client.build_request(
            "POST",
            self.url,
            json={**self.params, self.query_param: text},
            headers=self._headers,
            timeout=self.timeout_s,
        )

    def parse(self, response: httpx.Response) -> RemoteAnswer:
        try:
            body = response.json()
        except (ValueError, RecursionError):  # not JSON, not text, or nested beyond reading
            return RemoteAnswer("error", error="the response is not valid JSON")
        results = _dig(body, self.response["results"])
        if results is None:
            return RemoteAnswer("no_result")
        if not isinstance(results, list):
            results = [results]
        hits = [h for h in map(self._hit, results) if h is not None]
        return RemoteAnswer("ok" if hits else "no_result", hits, rejected=len(results) - len(hits))

    def _hit(self, item: Any) -> RemoteHit | None:
        """One result, or None when it is malformed: no country, or bad coordinates."""
        country = _dig(item, self.response["country"])
        if not isinstance(country, str) or not country.strip():
            return None
        place = self._coordinates(item)
        if place is None:
            return None
        return RemoteHit(
            country.strip(),
            *place,
            self._text(item, "city"),
            self._text(item, "subdivision"),
            self._score(item),
        )

    def _coordinates(self, item: Any) -> tuple[float | None, float | None] | None:
        """(lat, lon), each None when the result lacks it; None when either is not a coordinate."""
        raw_lat, raw_lon = _dig(item, self.response["lat"]), _dig(item, self.response["lon"])
        lat, lon = _finite(raw_lat), _finite(raw_lon)
        if (raw_lat is not None and lat is None) or (raw_lon is not None and lon is None):
            return None
        if (lat is not None and not -90 <= lat <= 90) or (
            lon is not None and not -180 <= lon <= 180
        ):
            return None
        return lat, lon

    def _score(self, item: Any) -> float | None:
        """The service's own confidence in [0, 1]; None when it gives none we can read."""
        raw = _dig(item, self.response["score"]) if self.response["score"] else None
        return _probability(raw)

    def _text(self, item: Any, name: str) -> str:
        value = _dig(item, self.response[name]) if self.response[name] else ""
        return value if isinstance(value, str) else ""


def load_adapter(spec: str, environ: Mapping[str, str] | None = None) -> RemoteAdapter:
    """An adapter from a TOML file, or one installed as a ``geonorm.remote`` entry point."""
    if Path(spec).is_file() or spec.endswith(".toml"):
        return TomlAdapter(spec, environ)
    from importlib.metadata import entry_points

    found = [ep for ep in entry_points(group="geonorm.remote") if ep.name == spec]
    if not found:
        raise RemoteError(
            f"no remote adapter {spec!r}: not a file, and no 'geonorm.remote' entry point has "
            "that name",
            hint="pass the path of a TOML adapter file, or install the adapter package",
        )
    try:
        factory = found[0].load()
    except ImportError as exc:
        raise RemoteError(
            f"the remote adapter {spec!r} cannot be loaded ({exc})",
            hint="reinstall the package that provides it",
        ) from exc
    return factory()


# -- talking to the service -----------------------------------------------
class _Deadlines(threading.local):
    """The deadline (``time.monotonic()``) of the request each thread is making, or None."""

    def __init__(self) -> None:
        self.at: float | None = None

    def left(self, timeout: float | None, error: type[Exception]) -> float | None:
        """``timeout`` cut to the time left before the deadline; ``error`` once it has passed."""
        if self.at is None:
            return timeout
        left = self.at - time.monotonic()
        if left <= 0:
            raise error("the request ran past its deadline")
        return left if timeout is None else min(timeout, left)


class _DeadlineStream(httpcore.NetworkStream):
    """A connection whose every wait ends by the deadline of the request using it.

    A read timeout alone bounds each wait for a byte, not a request: a service
    sending one byte a second would hold a run for as long as it likes.
    """

    def __init__(self, stream: httpcore.NetworkStream, deadlines: _Deadlines) -> None:
        self._stream, self._deadlines = stream, deadlines

    def read(self, max_bytes: int, timeout: float | None = None) -> bytes:
        return self._stream.read(max_bytes, self._deadlines.left(timeout, httpcore.ReadTimeout))

    def write(self, buffer: bytes, timeout: float | None = None) -> None:
        self._stream.write(buffer, self._deadlines.left(timeout, httpcore.WriteTimeout))

    def close(self) -> None:
        self._stream.close()

    def start_tls(
        self,
        ssl_context: ssl.SSLContext,
        server_hostname: str | None = None,
        timeout: float | None = None,
    ) -> httpcore.NetworkStream:
        wait_s = self._deadlines.left(timeout, httpcore.ConnectTimeout)
        tls = self._stream.start_tls(ssl_context, server_hostname, wait_s)
        return _DeadlineStream(tls, self._deadlines)

    def get_extra_info(self, info: str) -> Any:
        return self._stream.get_extra_info(info)


class _DeadlineBackend(httpcore.NetworkBackend):
    """httpcore's own sockets, wrapped in ``_DeadlineStream``."""

    def __init__(self, deadlines: _Deadlines) -> None:
        self._backend, self._deadlines = httpcore.SyncBackend(), deadlines

    def connect_tcp(
        self,
        host: str,
        port: int,
        timeout: float | None = None,
        local_address: str | None = None,
        socket_options: Iterable[Any] | None = None,
    ) -> httpcore.NetworkStream:
        wait_s = self._deadlines.left(timeout, httpcore.ConnectTimeout)
        stream = self._backend.connect_tcp(host, port, wait_s, local_address, socket_options)
        return _DeadlineStream(stream, self._deadlines)

    def connect_unix_socket(
        self, path: str, timeout: float | None = None, socket_options: Iterable[Any] | None = None
    ) -> httpcore.NetworkStream:
        wait_s = self._deadlines.left(timeout, httpcore.ConnectTimeout)
        stream = self._backend.connect_unix_socket(path, wait_s, socket_options)
        return _DeadlineStream(stream, self._deadlines)

    def sleep(self, seconds: float) -> None:
        self._backend.sleep(seconds)


class _DeadlineTransport(httpx.HTTPTransport):
    """httpx's transport with httpx's default pool, on connections that keep to deadlines."""

    def __init__(self, deadlines: _Deadlines) -> None:
        super().__init__()
        self._pool = httpcore.ConnectionPool(
            ssl_context=httpx.create_ssl_context(),
            max_connections=100,
            max_keepalive_connections=20,
            keepalive_expiry=5.0,
            network_backend=_DeadlineBackend(deadlines),
        )


def _origin(url: httpx.URL) -> tuple[str, str, int | None]:
    """Scheme, host and port: where a request goes, as far as a secret is concerned."""
    return url.scheme, url.host, url.port or _DEFAULT_PORTS.get(url.scheme)


def _origin_text(url: httpx.URL) -> str:
    scheme, host, port = _origin(url)
    return f"{scheme}://{host}:{port}" if port else f"{scheme}://{host}"


def _read_capped(response: httpx.Response, limit: int, deadline: float | None) -> bytes | None:
    """The body as sent (decoded), or None when it is larger than ``limit`` bytes.

    A larger body is not read further: its declared length is enough, and an
    undeclared one is counted as it streams in.
    """
    declared = response.headers.get("Content-Length", "").strip()
    if re.fullmatch(r"\d+", declared, re.ASCII) and (len(declared) > 18 or int(declared) > limit):
        return None
    chunks: list[bytes] = []
    size = 0
    for chunk in response.iter_bytes():
        size += len(chunk)
        if size > limit:
            return None
        if deadline is not None and time.monotonic() > deadline:
            raise httpx.ReadTimeout("the answer ran past its deadline", request=response.request)
        chunks.append(chunk)
    return b"".join(chunks)


def _holding(response: httpx.Response, body: bytes) -> httpx.Response:
    """A response like ``response`` that holds ``body``, already read and decoded."""
    headers = [
        (k, v)
        for k, v in response.headers.multi_items()
        if k.lower() not in ("content-encoding", "content-length", "transfer-encoding")
    ]
    return httpx.Response(
        response.status_code, headers=headers, content=body, request=response.request
    )


# -- running requests -----------------------------------------------------
class TokenBucket:
    """At most ``rate`` requests per second on average, bursts up to one second's worth."""

    def __init__(self, rate: float) -> None:
        self.rate = rate
        self.capacity = max(1.0, rate)
        self.tokens = self.capacity
        self.stamp = time.monotonic()
        self.lock = threading.Lock()

    def take(self, until: float = math.inf) -> bool:
        """Wait for a token; False, without one, when it would come only after ``until``."""
        while True:
            with self.lock:
                now = time.monotonic()
                self.tokens = min(self.capacity, self.tokens + (now - self.stamp) * self.rate)
                self.stamp = now
                if self.tokens >= 1:
                    self.tokens -= 1
                    return True
                wait_s = (1 - self.tokens) / self.rate
            if now + wait_s >= until:
                return False
            time.sleep(wait_s)


@dataclass
class RemoteSummary:
    provider: str = ""
    planned: list[tuple[str, int]] = field(default_factory=list)  # (text, rows) in sending order
    requests: int = 0
    answered: int = 0
    results: int = 0
    no_result: int = 0
    errors: int = 0
    rejected: int = 0
    retries: int = 0
    from_cache: int = 0
    breaker_open: bool = False
    out_of_time: bool = False
    stopped_by_budget: int = 0
    messages: list[str] = field(default_factory=list)


_SECONDS = re.compile(r"\d+(?:\.\d+)?", re.ASCII)  # delta-seconds (RFC 9110), fractions allowed


def _retry_after(response: httpx.Response) -> float | None:
    """The wait a 429 or 5xx asks for, in seconds (at most ``MAX_RETRY_AFTER``).

    ``Retry-After`` holds seconds or an HTTP date; anything else (``soon``,
    ``nan``, ``-3``, a date out of range) is treated as absent, so backoff applies.
    """
    value = response.headers.get("Retry-After", "").strip()
    if not value:
        return None
    seconds = float(value) if _SECONDS.fullmatch(value) else _seconds_until(value)
    if seconds is None:
        return None
    return min(max(seconds, 0.0), MAX_RETRY_AFTER)


def _seconds_until(http_date: str) -> float | None:
    try:
        when = email.utils.parsedate_to_datetime(http_date)
        if when.tzinfo is None:  # "-0000": the zone is unknown; HTTP dates are in UTC
            when = when.replace(tzinfo=timezone.utc)
        return when.timestamp() - time.time()
    except (TypeError, ValueError, IndexError, OverflowError):
        return None


def _backoff_wait(backoff: float, attempt: int) -> float:
    """The wait before retry ``attempt`` (1, 2, …) when the service names none.

    ``backoff`` × 2^(attempt − 1) × a jitter in [0.5, 1.5), at most ``MAX_RETRY_AFTER``.
    """
    return min(backoff * 2.0 ** min(attempt - 1, 32) * (0.5 + random.random()), MAX_RETRY_AFTER)


def _plan(
    adapter: RemoteAdapter,
    wanted: Iterable[tuple[str, int]],
    cache: Cache,
    budget: int | None,
    budget_total: int | None,
    refresh: bool,
) -> tuple[RemoteSummary, float]:
    """What to send, most rows first, without cached answers and within the budgets."""
    summary = RemoteSummary(provider=adapter.name)
    order = sorted(wanted, key=lambda kv: (-kv[1], kv[0]))
    known = set() if refresh else set(cache.remote_answers(adapter.name, [k for k, _ in order]))
    summary.from_cache = len(known)
    todo = [(k, n) for k, n in order if k not in known]
    left: float = budget if budget is not None else math.inf
    if budget_total is not None:
        left = min(left, max(0, budget_total - cache.remote_used(adapter.name)))
    summary.planned = todo[: max(0, int(left))] if left != math.inf else todo
    summary.stopped_by_budget = len(todo) - len(summary.planned)
    return summary, left


@dataclass
class _Try:
    """What one request brought: a final answer, or the problem and whether to try again."""

    answer: RemoteAnswer | None = None
    problem: str = ""
    wait: float | None = None  # the wait the service asked for
    retry: bool = True


@dataclass
class _Outcome:
    """One string's end: its answer (None: nothing lasting), the requests it cost, a failure."""

    answer: RemoteAnswer | None
    sent: int
    failure: Exception | None = None


@dataclass(frozen=True)
class _Limits:
    breaker_after: int
    backoff: float
    sleep: Callable[[float], None]
    time_budget_s: float
    max_answer_bytes: int


class _RemoteRun:
    """The state one run shares between its request threads: budgets, breaker, counts."""

    def __init__(
        self,
        adapter: RemoteAdapter,
        cache: Cache,
        summary: RemoteSummary,
        left: float,
        limits: _Limits,
    ) -> None:
        self.adapter, self.cache, self.summary, self.left = adapter, cache, summary, left
        self.limits = limits
        self.ends = time.monotonic() + limits.time_budget_s
        self.bucket = TokenBucket(adapter.per_second)
        self.deadlines = _Deadlines()
        self.lock = threading.Lock()
        self.failures_in_a_row = 0
        self.strings_sent = 0
        self.stopped = ""  # why the rest was left unsent

    def run(self, transport: httpx.BaseTransport | None) -> None:
        """Send the planned strings, ``concurrency`` at a time, until done, broke or spent.

        Every string asked is counted in the cache before a failure (a bad
        adapter) is raised: what was sent stays spent.
        """
        adapter = self.adapter
        failure: Exception | None = None
        if transport is None:
            transport = _DeadlineTransport(self.deadlines)
        with (
            httpx.Client(transport=transport, timeout=adapter.timeout_s) as client,
            ThreadPoolExecutor(max_workers=adapter.concurrency) as pool,
        ):
            queue = deque(self.summary.planned)
            running: dict[Future[_Outcome], str] = {}
            while queue or running:
                while failure is None and queue and len(running) < adapter.concurrency:
                    if not self._may_send():
                        break
                    key, _ = queue.popleft()
                    running[pool.submit(self.ask, client, key)] = key
                if not running:
                    break
                done, _ = wait(running, return_when=FIRST_COMPLETED)
                for fut in done:
                    outcome = fut.result()
                    self.finish(running.pop(fut), outcome)
                    failure = failure or outcome.failure
        if failure is not None:
            raise failure

    def _may_send(self) -> bool:
        if time.monotonic() >= self.ends:
            self._out_of_time()
        with self.lock:
            summary = self.summary
            return not summary.breaker_open and not summary.out_of_time and self.left >= 1

    def _spend(self) -> bool:
        with self.lock:
            if self.left < 1 or self.summary.breaker_open or self.summary.out_of_time:
                return False
            self.left -= 1
            self.summary.requests += 1
            return True

    def _note(self, message: str) -> None:
        with self.lock:
            if message not in self.summary.messages:
                self.summary.messages.append(message)

    def _out_of_time(self) -> None:
        with self.lock:
            if self.summary.out_of_time:
                return
            self.summary.out_of_time = True
            self.stopped = self.stopped or "the time budget ran out"
            self.summary.messages.append(
                f"{self.adapter.name}: the remote phase used its time budget "
                f"({self.limits.time_budget_s:g} s); stopped calling, the run goes on offline"
            )

    def ask(self, client: httpx.Client, key: str) -> _Outcome:
        """One string's answer and how many requests it took; never raises."""
        sent = 0
        try:
            for attempt in range(self.adapter.retries + 1):
                request = self._request(client, key)
                if not self.bucket.take(self.ends):
                    self._out_of_time()
                    break
                if not self._spend():
                    break
                sent += 1
                tried = self._send(client, request)
                if tried.answer is not None:
                    return _Outcome(tried.answer, sent)
                last = RemoteAnswer("transient", error=tried.problem)
                if not tried.retry or attempt == self.adapter.retries:
                    return _Outcome(last, sent)
                wait_s = tried.wait
                if wait_s is None:
                    wait_s = _backoff_wait(self.limits.backoff, attempt + 1)
                if time.monotonic() + wait_s >= self.ends:
                    self._out_of_time()
                    return _Outcome(last, sent)
                with self.lock:
                    self.summary.retries += 1
                self.limits.sleep(wait_s)
        except Exception as exc:  # raised after the requests were counted
            return _Outcome(None, sent, exc)
        return _Outcome(None, sent)

    def _request(self, client: httpx.Client, key: str) -> httpx.Request:
        try:
            return self.adapter.request(client, key)
        except httpx.InvalidURL as exc:
            raise RemoteError(
                f"remote adapter {self.adapter.name}: cannot build a request ({exc})",
                hint="check the adapter's url",
            ) from exc

    def _send(self, client: httpx.Client, request: httpx.Request) -> _Try:
        """One request, redirects included, ended by its deadline: ``timeout_s`` in all."""
        self.deadlines.at = min(time.monotonic() + self.adapter.timeout_s, self.ends)
        try:
            return self._exchange(client, request)
        except httpx.TimeoutException:
            return _Try(problem="timed out")
        except httpx.TransportError as exc:
            return _Try(problem=f"could not connect ({type(exc).__name__})")
        except httpx.RequestError as exc:  # a body that cannot be decoded
            error = f"the response could not be read ({type(exc).__name__})"
            return _Try(RemoteAnswer("error", error=error))
        finally:
            self.deadlines.at = None

    def _exchange(self, client: httpx.Client, request: httpx.Request) -> _Try:
        """Send, following redirects on the service's own origin only."""
        origin = request.url
        for _ in range(MAX_REDIRECTS + 1):
            response = client.send(request, stream=True)
            try:
                if not response.has_redirect_location:
                    return self._judge(response)
                step = self._redirect(client, request, response, origin)
            finally:
                response.close()
            if isinstance(step, _Try):
                return step
            request = step
        return _Try(RemoteAnswer("error", error=f"more than {MAX_REDIRECTS} redirects"))

    def _redirect(
        self,
        client: httpx.Client,
        request: httpx.Request,
        response: httpx.Response,
        origin: httpx.URL,
    ) -> httpx.Request | _Try:
        """The redirected request; or, for another origin, a refusal (the key stays home)."""
        try:
            url = request.url.join(response.headers["Location"])
        except (httpx.InvalidURL, ValueError):
            return _Try(RemoteAnswer("error", error="redirected to an address that is no URL"))
        if _origin(url) != _origin(origin):
            self._note(
                f"{self.adapter.name}: redirected to another origin ({_origin_text(url)}); "
                f"not followed: requests and the key go only to {_origin_text(origin)}"
            )
            return _Try(problem=f"redirected to {_origin_text(url)}, not followed", retry=False)
        status, method = response.status_code, request.method
        if (status == 303 and method != "HEAD") or (status in (301, 302) and method == "POST"):
            headers = [(k, v) for k, v in request.headers.multi_items() if k.lower() not in _BODY]
            return client.build_request("GET", url, headers=headers, extensions=request.extensions)
        return client.build_request(
            method,
            url,
            headers=request.headers,
            content=request.content,
            extensions=request.extensions,
        )

    def _judge(self, response: httpx.Response) -> _Try:
        """A final answer from a response that is no redirect, or the problem to retry."""
        status = response.status_code
        if status == 429 or status >= 500:
            return _Try(problem=f"HTTP {status}", wait=_retry_after(response))
        if status >= 400:
            return _Try(RemoteAnswer("error", error=f"HTTP {status} (not retried)"))
        limit = self.limits.max_answer_bytes
        body = _read_capped(response, limit, self.deadlines.at)
        if body is None:
            return _Try(RemoteAnswer("error", error=f"the answer is larger than {limit:,} bytes"))
        return _Try(self._parse(_holding(response, body)))

    def _parse(self, response: httpx.Response) -> RemoteAnswer:
        """The adapter's reading of an answer; an adapter tripping over one is an error."""
        try:
            answer = self.adapter.parse(response)
        except Exception as exc:  # e.g. a RecursionError in an adapter walking deep JSON
            return RemoteAnswer(
                "error", error=f"the answer could not be read ({type(exc).__name__})"
            )
        if not isinstance(answer, RemoteAnswer):
            return RemoteAnswer("error", error="the adapter gave no answer")
        return answer

    def finish(self, key: str, outcome: _Outcome) -> None:
        """Count an answer and cache it; requests that gave no lasting answer are still counted."""
        answer = outcome.answer
        if outcome.sent:
            self.strings_sent += 1
        if answer is None or answer.status == "transient":
            self.cache.add_remote_used(self.adapter.name, outcome.sent)
        if answer is None:
            return
        with self.lock:
            lasting = self._count(answer)
        if lasting:
            self.cache.put_remote_answer(self.adapter.name, key, answer, outcome.sent)

    def _count(self, answer: RemoteAnswer) -> bool:
        """Add ``answer`` to the summary (under the lock); whether it is worth caching."""
        summary = self.summary
        if answer.status == "transient":
            summary.errors += 1
            self.failures_in_a_row += 1
            if self.failures_in_a_row >= self.limits.breaker_after and not summary.breaker_open:
                summary.breaker_open = True
                self.stopped = self.stopped or "the circuit breaker opened"
                summary.messages.append(
                    f"{self.adapter.name}: {self.limits.breaker_after} failures in a row "
                    f"(last: {answer.error}); stopped calling, the run goes on offline"
                )
            return False  # not cached: a later run may try again
        self.failures_in_a_row = 0
        summary.answered += 1
        summary.rejected += answer.rejected
        if answer.status == "ok":
            summary.results += 1
        elif answer.status == "no_result":
            summary.no_result += 1
        else:
            summary.errors += 1
        return True


def _setting(given: Any, adapter: RemoteAdapter, name: str, default: Any) -> Any:
    """A run's limit: given to ``run_remote``, else set on the adapter, else the default."""
    if given is not None:
        return given
    value = getattr(adapter, name, None)
    return default if value is None else value


def run_remote(
    adapter: RemoteAdapter,
    wanted: Iterable[tuple[str, int]],
    cache: Cache,
    *,
    budget: int | None = None,
    budget_total: int | None = None,
    refresh: bool = False,
    dry_run: bool = False,
    transport: httpx.BaseTransport | None = None,
    breaker_after: int = BREAKER_AFTER,
    backoff: float = 0.5,
    sleep: Callable[[float], None] = time.sleep,
    time_budget_s: float | None = None,
    max_answer_bytes: int | None = None,
) -> RemoteSummary:
    """Ask the service about ``wanted`` (key, rows) pairs, most rows first, within the budgets.

    ``backoff`` is the first retry's mean wait in seconds (doubling after each
    try) when the service names none; ``sleep`` waits between tries.
    ``time_budget_s`` bounds the whole phase in seconds and ``max_answer_bytes``
    the size of one answer; left out, they are the adapter's (``TomlAdapter``
    takes both) or ``TIME_BUDGET_S`` and ``MAX_ANSWER_BYTES``. With a
    ``transport`` of the caller's, the request deadline is checked only between
    chunks of the answer (the built-in transport holds it on every wait).
    """
    limits = _Limits(
        breaker_after,
        backoff,
        sleep,
        _check_time_budget(_setting(time_budget_s, adapter, "time_budget_s", TIME_BUDGET_S)),
        _check_answer_bytes(
            _setting(max_answer_bytes, adapter, "max_answer_bytes", MAX_ANSWER_BYTES)
        ),
    )
    summary, left = _plan(adapter, wanted, cache, budget, budget_total, refresh)
    if dry_run or not summary.planned:
        return summary
    run = _RemoteRun(adapter, cache, summary, left, limits)
    run.run(transport)
    unsent = len(summary.planned) - run.strings_sent
    if run.stopped and unsent > 0:
        summary.messages.append(f"{unsent} string(s) were not sent because {run.stopped}")
    return summary


# -- merging an answer with the offline resolution -------------------------
REMOTE_TRUST = 0.8  # trust in a result that carries no score of its own
REMOTE_ALONE = 0.85  # a single unverified source: its trust is discounted


def _country_code(index, value: str) -> str:
    from ..codes import country

    return country(value, index=index) or ""


def _text(value: Any) -> str:
    """A text field of a result, stripped; anything but a string is no text."""
    return value.strip() if isinstance(value, str) else ""


def _coordinate(value: Any, bound: float) -> float | None:
    """A finite number within ±``bound``, or None when absent; ValueError for anything else."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"not a coordinate: {value!r}")
    if not -bound <= value <= bound:  # NaN and infinities fail too
        raise ValueError(f"not a coordinate: {value!r}")
    return float(value)


def _subdivision(index, cc: str, text: str) -> str:
    """The ISO 3166-2 code of ``text`` (a code or a name) in country ``cc``, or ''."""
    if not text:
        return ""
    from ..resolve.normalize import fold

    code = text.upper()
    place = index.subdivisions.get(code)
    if place is not None and place.cc == cc:
        return code
    subs = {
        h.place.sub
        for h in index.lookup(fold(text))
        if h.place.kind == "subdivision" and h.place.cc == cc
    }
    return subs.pop() if len(subs) == 1 else ""


def validated_hit(index, hit: RemoteHit) -> dict | None:
    """A remote result checked against the index, or None when it cannot be used.

    The country must be an ISO 3166-1 country (else the result is rejected), as
    must the coordinates be finite numbers in range. A subdivision not of that
    country is dropped. A city is kept only when the place index knows it in
    that country (``find_city``), under the index's name; otherwise it is dropped
    with its coordinates, and the country (and subdivision) stay. A score that is
    no number in [0, 1] (NaN, ``true``, 95) counts as none: the default trust.
    Nothing the service wrote reaches the output unchecked.
    """
    name = _text(hit.country)
    cc = _country_code(index, name) if name else ""
    if not cc:
        return None
    try:
        lat, lon = _coordinate(hit.lat, 90.0), _coordinate(hit.lon, 180.0)
    except ValueError:
        return None
    sub = _subdivision(index, cc, _text(hit.subdivision))
    city, gid, best = "", None, None
    if _text(hit.city):
        from ..codes import find_city

        best = find_city(index, cc, _text(hit.city), sub)
    if best is None:
        lat = lon = None  # coordinates belong to a city; there is none
    else:
        city, gid, sub = best.name, best.gid, sub or best.sub
        if lat is None or lon is None:
            lat, lon = best.lat, best.lon
    trust = _probability(hit.score)
    return {
        "country": cc,
        "subdivision": sub,
        "city": city,
        "lat": lat,
        "lon": lon,
        "geonameid": gid,
        "trust": REMOTE_TRUST if trust is None else trust,
    }


def merge(
    res: Resolution,
    answer: RemoteAnswer,
    provider: str,
    index: PlaceIndex,
    *,
    accept: float | None = None,
) -> Resolution:
    """Combine an offline resolution with a remote answer.

    Agreement raises the confidence (1 − (1 − local)(1 − trust)); disagreement
    keeps the offline answer with both candidates; a result where the cascade
    had none is taken with its trust discounted. The reason names the service.
    The status is left as it was: ``settle`` sets it from the reason and the
    confidence (``remote_differs`` always goes to review). ``accept`` is
    ignored; it is accepted so that older callers keep working. ``res`` itself
    is returned, unchanged, when the answer brings nothing usable.
    """
    from ..resolve.resolution import Candidate, Reason

    del accept  # the status is not decided here
    hits = [h for h in (validated_hit(index, h) for h in answer.hits) if h is not None]
    if answer.status != "ok" or not hits:
        return res
    top = hits[0]
    remote = Candidate(
        top["country"],
        top["subdivision"],
        top["city"],
        top["lat"],
        top["lon"],
        round(top["trust"], 4),
    )
    if res.country == top["country"]:
        conf = 1 - (1 - res.confidence) * (1 - top["trust"])
        new = dc_replace(
            res, reason=Reason.REMOTE_AGREES, source=provider, confidence=round(conf, 4)
        )
        if not new.city and top["city"]:
            new.city, new.lat, new.lon, new.geonameid = (
                top["city"],
                top["lat"],
                top["lon"],
                top["geonameid"],
            )
            new.subdivision = new.subdivision or top["subdivision"]
        return new
    if res.country:
        return dc_replace(
            res,
            reason=Reason.REMOTE_DIFFERS,
            source=provider,
            candidates=[*res.candidates[:1], remote],
        )
    return dc_replace(
        res,
        country=top["country"],
        subdivision=top["subdivision"],
        city=top["city"],
        lat=top["lat"],
        lon=top["lon"],
        geonameid=top["geonameid"],
        confidence=round(top["trust"] * REMOTE_ALONE, 4),
        reason=Reason.REMOTE_FOUND,
        source=provider,
        candidates=[remote],
        evidence={top["country"]: 1.0},
    )
