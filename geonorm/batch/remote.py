"""An optional remote geocoder for the doubtful rest: opt-in, budgeted, cached, fault-tolerant.

Nothing is sent unless an adapter is given. Only the normalised location text
of strings the offline cascade left in ``review`` or ``unmatched`` is sent,
most rows first, within a request budget. Every answer (results, "no result",
permanent errors) is cached per provider and text, one small transaction per
answer, so a rerun — even after a SIGKILL — never asks twice. Requests go
through a token-bucket rate limit with bounded concurrency, are retried with
exponential backoff and jitter on timeouts, 429 and 5xx (honouring
``Retry-After`` in seconds or as an HTTP date), and a circuit breaker stops
calling after several failures in a row; the run then finishes offline.

Whatever the service sends back is data, never a crash: malformed JSON is a
permanent error, a malformed result is rejected and counted, an unreadable
``Retry-After`` is ignored. A bad adapter file raises ``RemoteError``.

Adapters: the built-in one reads a TOML file (see ``TomlAdapter``); others
can be plugged in as Python entry points in the group ``geonorm.remote``.
"""

from __future__ import annotations

import email.utils
import math
import os
import random
import re
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
MAX_RETRY_AFTER = 60.0  # the longest wait a service may ask for, in seconds (common practice)


class RemoteAdapter(Protocol):
    """What an adapter does: build the request for a text, read the response."""

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
    """Follow a dotted path (``address.cc``, ``hits.0``) into JSON; None when it is not there."""
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


def _finite(value: Any) -> float | None:
    """A JSON number or numeric string as a finite float; None for anything else."""
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError, OverflowError):  # a list, a word, an integer beyond float
        return None
    return number if math.isfinite(number) else None


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
    """The built-in adapter, configured by a TOML file (keys in the README)."""

    def __init__(self, path: str | Path, environ: Mapping[str, str] | None = None) -> None:
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
        """The service's own confidence, clipped to [0, 1]; None when it gives none we can read."""
        raw = _dig(item, self.response["score"]) if self.response["score"] else None
        try:
            score = float(raw) if raw is not None else math.nan
        except (TypeError, ValueError, OverflowError):  # a word, a list, an integer beyond float
            return None
        return None if math.isnan(score) else min(max(score, 0.0), 1.0)

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


# -- running requests -----------------------------------------------------
class TokenBucket:
    """At most ``rate`` requests per second on average, bursts up to one second's worth."""

    def __init__(self, rate: float) -> None:
        self.rate = rate
        self.capacity = max(1.0, rate)
        self.tokens = self.capacity
        self.stamp = time.monotonic()
        self.lock = threading.Lock()

    def take(self) -> None:
        while True:
            with self.lock:
                now = time.monotonic()
                self.tokens = min(self.capacity, self.tokens + (now - self.stamp) * self.rate)
                self.stamp = now
                if self.tokens >= 1:
                    self.tokens -= 1
                    return
                wait_s = (1 - self.tokens) / self.rate
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
    stopped_by_budget: int = 0
    messages: list[str] = field(default_factory=list)


def _retry_after(response: httpx.Response) -> float | None:
    """The wait a 429 or 5xx asks for, in seconds (at most ``MAX_RETRY_AFTER``).

    ``Retry-After`` holds seconds or an HTTP date; anything else (``soon``, a
    date out of range, ``nan``) is treated as absent, so backoff applies.
    """
    value = response.headers.get("Retry-After", "").strip()
    if not value:
        return None
    try:
        seconds: float | None = float(value)
    except ValueError:
        seconds = _seconds_until(value)
    if seconds is None or math.isnan(seconds):
        return None
    return min(max(seconds, 0.0), MAX_RETRY_AFTER)


def _seconds_until(http_date: str) -> float | None:
    try:
        when = email.utils.parsedate_to_datetime(http_date)
    except (TypeError, ValueError, IndexError, OverflowError):
        return None
    if when.tzinfo is None:  # "-0000": the zone is unknown; HTTP dates are in UTC
        when = when.replace(tzinfo=timezone.utc)
    return when.timestamp() - time.time()


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


class _RemoteRun:
    """The state one run shares between its request threads: budget, breaker, counts."""

    def __init__(
        self,
        adapter: RemoteAdapter,
        cache: Cache,
        summary: RemoteSummary,
        left: float,
        *,
        breaker_after: int,
        backoff: float,
        sleep: Callable[[float], None],
    ) -> None:
        self.adapter, self.cache, self.summary, self.left = adapter, cache, summary, left
        self.breaker_after, self.backoff, self.sleep = breaker_after, backoff, sleep
        self.bucket = TokenBucket(adapter.per_second)
        self.lock = threading.Lock()
        self.failures_in_a_row = 0

    def run(self, transport: httpx.BaseTransport | None) -> None:
        """Send the planned strings, ``concurrency`` at a time, until done, broke or spent."""
        adapter = self.adapter
        with (
            httpx.Client(
                transport=transport, timeout=adapter.timeout_s, follow_redirects=True
            ) as client,
            ThreadPoolExecutor(max_workers=adapter.concurrency) as pool,
        ):
            queue = deque(self.summary.planned)
            running: dict[Future[tuple[RemoteAnswer | None, int]], str] = {}
            while queue or running:
                while queue and len(running) < adapter.concurrency and self._may_send():
                    key, _ = queue.popleft()
                    running[pool.submit(self.ask, client, key)] = key
                if not running:
                    break
                done, _ = wait(running, return_when=FIRST_COMPLETED)
                for fut in done:
                    self.finish(running.pop(fut), *fut.result())

    def _may_send(self) -> bool:
        return not self.summary.breaker_open and self.left >= 1

    def _spend(self) -> bool:
        with self.lock:
            if self.left < 1 or self.summary.breaker_open:
                return False
            self.left -= 1
            self.summary.requests += 1
            return True

    def ask(self, client: httpx.Client, key: str) -> tuple[RemoteAnswer | None, int]:
        """One string's answer, and how many requests it took (retries included)."""
        attempt = 0
        while True:
            if not self._spend():
                return None, attempt
            self.bucket.take()
            answer, problem, wait_s = self._send(client, key)
            if answer is not None:
                return answer, attempt + 1
            if attempt >= self.adapter.retries:
                return RemoteAnswer("transient", error=problem), attempt + 1
            attempt += 1
            with self.lock:
                self.summary.retries += 1
            jitter = self.backoff * 2 ** (attempt - 1) * (0.5 + random.random())
            self.sleep(wait_s if wait_s is not None else jitter)

    def _send(
        self, client: httpx.Client, key: str
    ) -> tuple[RemoteAnswer | None, str, float | None]:
        """One request: a final answer, or the problem and the wait the service asked for."""
        try:
            request = self.adapter.request(client, key)
        except httpx.InvalidURL as exc:
            raise RemoteError(
                f"remote adapter {self.adapter.name}: cannot build a request ({exc})",
                hint="check the adapter's url",
            ) from exc
        try:
            response = client.send(request)
        except httpx.TimeoutException:
            return None, "timed out", None
        except httpx.TransportError as exc:
            return None, f"could not connect ({type(exc).__name__})", None
        except httpx.RequestError as exc:  # redirected in circles, or a body that cannot be decoded
            error = f"the response could not be read ({type(exc).__name__})"
            return RemoteAnswer("error", error=error), "", None
        status = response.status_code
        if status == 429 or status >= 500:
            return None, f"HTTP {status}", _retry_after(response)
        if status >= 400:
            return RemoteAnswer("error", error=f"HTTP {status} (not retried)"), "", None
        return self.adapter.parse(response), "", None

    def finish(self, key: str, answer: RemoteAnswer | None, sent: int) -> None:
        """Count an answer and cache it; requests that gave no lasting answer are still counted."""
        if answer is None or answer.status == "transient":
            self.cache.add_remote_used(self.adapter.name, sent)
        if answer is None:
            return
        with self.lock:
            lasting = self._count(answer)
        if lasting:
            self.cache.put_remote_answer(self.adapter.name, key, answer, sent)

    def _count(self, answer: RemoteAnswer) -> bool:
        """Add ``answer`` to the summary (under the lock); whether it is worth caching."""
        summary = self.summary
        if answer.status == "transient":
            summary.errors += 1
            self.failures_in_a_row += 1
            if self.failures_in_a_row >= self.breaker_after and not summary.breaker_open:
                summary.breaker_open = True
                summary.messages.append(
                    f"{self.adapter.name}: {self.breaker_after} failures in a row "
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
) -> RemoteSummary:
    """Ask the service about ``wanted`` (key, rows) pairs, most rows first, within the budgets.

    ``backoff`` is the first retry's mean wait in seconds (doubling after each
    try) when the service names none; ``sleep`` waits between tries.
    """
    summary, left = _plan(adapter, wanted, cache, budget, budget_total, refresh)
    if dry_run or not summary.planned:
        return summary
    _RemoteRun(
        adapter, cache, summary, left, breaker_after=breaker_after, backoff=backoff, sleep=sleep
    ).run(transport)
    unsent = len(summary.planned) - summary.answered - summary.errors
    if summary.breaker_open and unsent > 0:
        summary.messages.append(
            f"{unsent} string(s) were not sent because the circuit breaker opened"
        )
    return summary


# -- merging an answer with the offline resolution -------------------------
REMOTE_TRUST = 0.8  # trust in a result that carries no score of its own
REMOTE_ALONE = 0.85  # a single unverified source: its trust is discounted


def _country_code(index, value: str) -> str:
    from ..codes import country

    return country(value, index=index) or ""


def validated_hit(index, hit: RemoteHit) -> dict | None:
    """A remote result checked against the index: ISO country, subdivision of it, coordinates."""
    cc = _country_code(index, hit.country)
    if not cc:
        return None
    from ..resolve.normalize import fold

    sub = ""
    if hit.subdivision:
        code = hit.subdivision.strip().upper()
        place = index.subdivisions.get(code)
        if place is not None and place.cc == cc:
            sub = code
        else:
            subs = {
                h.place.sub
                for h in index.lookup(fold(hit.subdivision))
                if h.place.kind == "subdivision" and h.place.cc == cc
            }
            sub = subs.pop() if len(subs) == 1 else ""
    lat, lon, city, gid = hit.lat, hit.lon, hit.city.strip(), None
    if city:
        from ..codes import find_city

        best = find_city(index, cc, city, sub)
        if best is not None:
            gid, sub = best.gid, sub or best.sub
            if lat is None or lon is None:
                lat, lon = best.lat, best.lon
    return {
        "country": cc,
        "subdivision": sub,
        "city": city,
        "lat": lat,
        "lon": lon,
        "geonameid": gid,
        "trust": hit.score if hit.score is not None else REMOTE_TRUST,
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
