"""An optional remote geocoder for the doubtful rest: opt-in, budgeted, cached, fault-tolerant.

Nothing is sent unless an adapter is given. Only the normalised location text
of strings the offline cascade left in ``review`` or ``unmatched`` is sent,
most rows first, within a request budget. Every answer (results, "no result",
permanent errors) is cached per provider and text, one small transaction per
answer, so a rerun — even after a SIGKILL — never asks twice. Requests go
through a token-bucket rate limit with bounded concurrency, are retried with
exponential backoff and jitter on timeouts, 429 and 5xx (honouring
``Retry-After``), and a circuit breaker stops calling after several failures
in a row; the run then finishes offline.

Adapters: the built-in one reads a TOML file (see ``TomlAdapter``); others
can be plugged in as Python entry points in the group ``geonorm.remote``.
"""

from __future__ import annotations

import email.utils
import json
import math
import os
import random
import re
import sys
import threading
import time
from collections.abc import Callable, Iterable, Mapping
from concurrent.futures import FIRST_COMPLETED, Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import httpx

from ..errors import GeonormError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = [
    "BREAKER_AFTER",
    "RemoteAdapter",
    "RemoteAnswer",
    "RemoteError",
    "RemoteHit",
    "RemoteSummary",
    "TomlAdapter",
    "load_adapter",
    "run_remote",
]

BREAKER_AFTER = 5  # consecutive failed strings before the circuit breaker opens
MAX_RETRY_AFTER = 60.0


class RemoteError(GeonormError):
    """A bad adapter file or an unusable remote configuration."""


@dataclass(frozen=True)
class RemoteHit:
    country: str  # as the service wrote it (alpha-2, alpha-3 or an English name)
    lat: float | None = None
    lon: float | None = None
    city: str = ""
    subdivision: str = ""
    score: float | None = None


@dataclass
class RemoteAnswer:
    status: str  # ok | no_result | error (permanent)
    hits: list[RemoteHit] = field(default_factory=list)
    error: str = ""
    rejected: int = 0  # results dropped as malformed


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
        elif isinstance(obj, list) and part.isdigit() and int(part) < len(obj):
            obj = obj[int(part)]
        else:
            return None
    return obj


class TomlAdapter:
    """The built-in adapter, configured by a TOML file (keys in the README)."""

    def __init__(self, path: str | Path, environ: Mapping[str, str] | None = None) -> None:
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as exc:
            raise RemoteError(
                f"cannot read the remote adapter file {path} ({exc.strerror})",
                hint="pass the path of a TOML adapter file with --remote",
            ) from exc
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise RemoteError(
                f"{path} is not valid TOML: {exc}",
                hint="fix the line named above; see the README for the adapter format",
            ) from exc
        self.path = path
        sections = {"remote": data.get("remote")}
        if not isinstance(sections["remote"], dict):
            raise RemoteError(
                f"{path} has no [remote] table (line 1)",
                hint="start the file with [remote]; see the README for the adapter format",
            )
        sections["remote.response"] = sections["remote"].get("response")
        sections["remote.limits"] = sections["remote"].get("limits")
        for name, spec in _KEYS.items():
            table = sections[name]
            if not isinstance(table, dict):
                raise RemoteError(
                    f"{path} has no [{name}] table (line {_key_line(text, 'remote', None) or 1})",
                    hint=f"add a [{name}] table; see the README for its keys",
                )
            for key, value in table.items():
                if name == "remote" and key in ("response", "limits"):
                    continue
                if key not in spec:
                    raise RemoteError(
                        f"{path} line {_key_line(text, name, key)}: unknown key {key!r} in [{name}]",
                        hint=f"the keys of [{name}] are: {', '.join(spec)}",
                    )
                types, _ = spec[key]
                if not isinstance(value, types) or isinstance(value, bool):
                    want = (
                        {str: "string", int: "whole number", dict: "table"}.get(types, "number")
                        if isinstance(types, type)
                        else "number"
                    )
                    raise RemoteError(
                        f"{path} line {_key_line(text, name, key)}: {key} must be a {want}",
                        hint="see the README for the adapter format",
                    )
            for key, (_, required) in spec.items():
                if required and key not in table:
                    raise RemoteError(
                        f"{path} line {_key_line(text, name, None)}: [{name}] lacks {key!r}",
                        hint=f"add {key} = … to [{name}]",
                    )
        r: dict = sections["remote"]
        resp: dict = sections["remote.response"]  # type: ignore[assignment]  # checked above
        lim: dict = sections["remote.limits"]  # type: ignore[assignment]

        def bad(section: str, key: str, message: str, hint: str) -> RemoteError:
            return RemoteError(f"{path} line {_key_line(text, section, key)}: {message}", hint=hint)

        if not r["name"].strip():
            raise bad("remote", "name", "name is empty", "give the service a short label")
        if not re.match(r"^https?://[^\s/]+", r["url"]):
            raise bad(
                "remote",
                "url",
                f"url {r['url']!r} is not an http(s) URL",
                "write https://host/path",
            )
        if r["method"].upper() not in ("GET", "POST"):
            raise bad(
                "remote",
                "method",
                f"method must be GET or POST, not {r['method']!r}",
                "use GET or POST",
            )
        if ("key_env" in r) != ("key_header" in r):
            key = "key_env" if "key_env" in r else "key_header"
            raise bad(
                "remote",
                key,
                "key_env and key_header go together",
                "give both (the variable holding the secret, and the header to send it in) or neither",
            )
        for key in ("per_second", "timeout_s"):
            if lim[key] <= 0:
                raise bad(
                    "remote.limits",
                    key,
                    f"{key} must be above 0",
                    f"set {key} to a positive number",
                )
        if lim["concurrency"] < 1 or lim["retries"] < 0:
            key = "concurrency" if lim["concurrency"] < 1 else "retries"
            raise bad(
                "remote.limits", key, f"{key} is out of range", "concurrency ≥ 1, retries ≥ 0"
            )
        self.name = r["name"].strip()
        self.url, self.method, self.query_param = r["url"], r["method"].upper(), r["query_param"]
        self.params = {str(k): str(v) for k, v in (r.get("params") or {}).items()}
        self.response = {k: resp.get(k, "") for k in _KEYS["remote.response"]}
        self.per_second, self.concurrency = float(lim["per_second"]), int(lim["concurrency"])
        self.timeout_s, self.retries = float(lim["timeout_s"]), int(lim["retries"])
        self._headers: dict[str, str] = {}
        if "key_env" in r:
            env = os.environ if environ is None else environ
            secret = env.get(r["key_env"])
            if not secret:
                raise bad(
                    "remote",
                    "key_env",
                    f"the environment variable {r['key_env']} is not set",
                    f"export {r['key_env']}=… with your key before running",
                )
            self._headers[r["key_header"]] = secret

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
        except (json.JSONDecodeError, UnicodeDecodeError, ValueError):
            return RemoteAnswer("error", error="the response is not valid JSON")
        results = _dig(body, self.response["results"])
        if results is None:
            return RemoteAnswer("no_result")
        if not isinstance(results, list):
            results = [results]
        hits, rejected = [], 0
        for item in results:
            hit = self._hit(item)
            if hit is None:
                rejected += 1
            else:
                hits.append(hit)
        return RemoteAnswer("ok" if hits else "no_result", hits, rejected=rejected)

    def _hit(self, item: Any) -> RemoteHit | None:
        paths = self.response
        country = _dig(item, paths["country"])
        if not isinstance(country, str) or not country.strip():
            return None
        try:
            lat = _dig(item, paths["lat"])
            lon = _dig(item, paths["lon"])
            lat = float(lat) if lat is not None else None
            lon = float(lon) if lon is not None else None
        except (TypeError, ValueError):
            return None
        if (lat is not None and not (-90 <= lat <= 90)) or (
            lon is not None and not (-180 <= lon <= 180)
        ):
            return None
        if lat is not None and (math.isnan(lat) or math.isnan(lon or 0.0)):
            return None
        score = _dig(item, paths["score"]) if paths["score"] else None
        try:
            score = min(max(float(score), 0.0), 1.0) if score is not None else None
        except (TypeError, ValueError):
            score = None
        city = _dig(item, paths["city"]) if paths["city"] else ""
        sub = _dig(item, paths["subdivision"]) if paths["subdivision"] else ""
        return RemoteHit(
            country.strip(),
            lat,
            lon,
            city if isinstance(city, str) else "",
            sub if isinstance(sub, str) else "",
            score,
        )


def load_adapter(spec: str, environ: Mapping[str, str] | None = None) -> RemoteAdapter:
    """A TOML adapter file, or the name of an adapter installed as a ``geonorm.remote`` entry point."""
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
    return found[0].load()()


# -- running requests -----------------------------------------------------
class TokenBucket:
    """At most ``rate`` requests per second on average, bursts up to ``capacity``."""

    def __init__(self, rate: float, capacity: float | None = None) -> None:
        self.rate = rate
        self.capacity = capacity or max(1.0, rate)
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
    budget_left: int | None = None
    stopped_by_budget: int = 0
    messages: list[str] = field(default_factory=list)


def _retry_after(response: httpx.Response) -> float | None:
    value = response.headers.get("Retry-After")
    if not value:
        return None
    try:
        return min(max(float(value), 0.0), MAX_RETRY_AFTER)
    except ValueError:
        when = email.utils.parsedate_to_datetime(value)
        return min(max(when.timestamp() - time.time(), 0.0), MAX_RETRY_AFTER) if when else None


def run_remote(
    adapter: RemoteAdapter,
    wanted: Iterable[tuple[str, int]],
    cache,
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
    """Ask the service about ``wanted`` (key, rows) pairs, most rows first, within the budgets."""
    summary = RemoteSummary(provider=adapter.name)
    order = sorted(wanted, key=lambda kv: (-kv[1], kv[0]))
    known = set() if refresh else set(cache.remote_answers(adapter.name, [k for k, _ in order]))
    summary.from_cache = len(known)
    todo = [(k, n) for k, n in order if k not in known]
    left = budget if budget is not None else math.inf
    if budget_total is not None:
        left = min(left, max(0, budget_total - cache.remote_used(adapter.name)))
    summary.planned = todo[: int(left)] if left != math.inf else list(todo)
    summary.stopped_by_budget = len(todo) - len(summary.planned)
    if dry_run or not summary.planned:
        summary.budget_left = None if left == math.inf else int(left)
        return summary
    bucket = TokenBucket(adapter.per_second)
    lock = threading.Lock()
    state = {"left": left, "failures_in_a_row": 0}

    def spend() -> bool:
        with lock:
            if state["left"] < 1 or summary.breaker_open:
                return False
            state["left"] -= 1
            summary.requests += 1
            return True

    def ask(client: httpx.Client, key: str) -> tuple[RemoteAnswer | None, int]:
        """One string's answer, and how many requests it took (retries included)."""
        attempt = 0
        while True:
            if not spend():
                return None, attempt
            bucket.take()
            try:
                response = client.send(adapter.request(client, key))
            except httpx.TimeoutException:
                problem, wait_s = "timed out", None
            except httpx.TransportError as exc:
                problem, wait_s = f"could not connect ({type(exc).__name__})", None
            else:
                if response.status_code == 429 or response.status_code >= 500:
                    problem, wait_s = f"HTTP {response.status_code}", _retry_after(response)
                elif response.status_code >= 400:
                    return RemoteAnswer(
                        "error", error=f"HTTP {response.status_code} (not retried)"
                    ), attempt + 1
                else:
                    return adapter.parse(response), attempt + 1
            if attempt >= adapter.retries:
                return RemoteAnswer("transient", error=problem), attempt + 1
            attempt += 1
            with lock:
                summary.retries += 1
            delay = (
                wait_s
                if wait_s is not None
                else backoff * 2 ** (attempt - 1) * (0.5 + random.random())
            )
            sleep(delay)

    def finish(key: str, answer: RemoteAnswer | None, sent: int) -> None:
        if answer is None or answer.status == "transient":
            cache.add_remote_used(adapter.name, sent)
        if answer is None:
            return
        with lock:
            if answer.status == "transient":
                summary.errors += 1
                state["failures_in_a_row"] += 1
                if state["failures_in_a_row"] >= breaker_after and not summary.breaker_open:
                    summary.breaker_open = True
                    summary.messages.append(
                        f"{adapter.name}: {breaker_after} failures in a row "
                        f"(last: {answer.error}); stopped calling, the run goes on offline"
                    )
                return  # not cached: a later run may try again
            state["failures_in_a_row"] = 0
            summary.answered += 1
            summary.rejected += answer.rejected
            if answer.status == "ok":
                summary.results += 1
            elif answer.status == "no_result":
                summary.no_result += 1
            else:
                summary.errors += 1
        cache.put_remote_answer(adapter.name, key, answer, sent)

    with (
        httpx.Client(
            transport=transport, timeout=adapter.timeout_s, follow_redirects=True
        ) as client,
        ThreadPoolExecutor(max_workers=adapter.concurrency) as pool,
    ):
        queue = list(summary.planned)
        running: dict[Future, str] = {}
        while queue or running:
            while (
                queue
                and len(running) < adapter.concurrency
                and not summary.breaker_open
                and state["left"] >= 1
            ):
                key, _ = queue.pop(0)
                running[pool.submit(ask, client, key)] = key
            if not running:
                break
            done, _ = wait(running, return_when=FIRST_COMPLETED)
            for fut in done:
                finish(running.pop(fut), *fut.result())
    if state["left"] != math.inf:
        summary.budget_left = int(state["left"])
    unsent = len(summary.planned) - summary.answered - summary.errors
    if summary.breaker_open and unsent > 0:
        summary.messages.append(
            f"{unsent} string(s) were not sent because the circuit breaker opened"
        )
    return summary


def remote_value(hit: RemoteHit) -> dict[str, Any]:
    return {
        "country": hit.country,
        "lat": hit.lat,
        "lon": hit.lon,
        "city": hit.city,
        "subdivision": hit.subdivision,
        "score": hit.score,
    }


def answer_to_json(answer: RemoteAnswer) -> str:
    return json.dumps(
        {
            "hits": [remote_value(h) for h in answer.hits],
            "error": answer.error,
            "rejected": answer.rejected,
        },
        ensure_ascii=False,
    )


def answer_from_json(status: str, text: str) -> RemoteAnswer:
    data = json.loads(text)
    return RemoteAnswer(
        status,
        [RemoteHit(**h) for h in data["hits"]],
        data.get("error", ""),
        data.get("rejected", 0),
    )


# -- merging an answer with the offline resolution -------------------------
REMOTE_TRUST = 0.8  # trust in a result that carries no score of its own
REMOTE_ALONE = 0.85  # a single unverified source: its trust is discounted


def _country_code(index, value: str) -> str:
    code = value.strip()
    if len(code) in (2, 3) and code.isalpha():
        import pycountry

        up = code.upper()
        if up == "XK" or up == "XKX":
            return "XK"
        c = (
            pycountry.countries.get(alpha_2=up)
            if len(up) == 2
            else pycountry.countries.get(alpha_3=up)
        )
        if c:
            return c.alpha_2
    from ..resolve.normalize import fold

    names = {
        h.place.cc
        for h in index.lookup(fold(code))
        if h.place.kind == "country" and h.origin in ("name", "alias", "translation")
    }
    return names.pop() if len(names) == 1 else ""


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
        places = [
            h.place
            for h in index.lookup(fold(city))
            if h.place.kind == "city" and h.place.cc == cc and (not sub or h.place.sub == sub)
        ]
        if places:
            best = max(places, key=lambda p: p.pop)
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


def merge(res, answer: RemoteAnswer, provider: str, index, accept: float):
    """Combine an offline resolution with a remote answer.

    Agreement raises the confidence (1 − (1 − local)(1 − trust)); disagreement
    goes to review with both candidates; a result where the cascade had none
    is taken with its trust discounted. The reason names the service.
    """
    from dataclasses import replace as dc_replace

    from ..resolve.resolution import Candidate, Reason, Status

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
        new.status = Status.MATCHED if conf >= accept else Status.REVIEW
        return new
    if res.country:
        return dc_replace(
            res,
            reason=Reason.REMOTE_DIFFERS,
            source=provider,
            status=Status.REVIEW,
            candidates=[*res.candidates[:1], remote],
        )
    conf = round(top["trust"] * REMOTE_ALONE, 4)
    return dc_replace(
        res,
        country=top["country"],
        subdivision=top["subdivision"],
        city=top["city"],
        lat=top["lat"],
        lon=top["lon"],
        geonameid=top["geonameid"],
        confidence=conf,
        reason=Reason.REMOTE_FOUND,
        source=provider,
        candidates=[remote],
        evidence={top["country"]: 1.0},
        status=Status.MATCHED if conf >= accept else Status.REVIEW,
    )
