"""The review page: people decide the doubtful strings in a browser.

Routes (all under ``/review``; the service's app includes ``router``):

- ``GET /review`` — the login form without a session; with one, the doubtful
  strings of the whole cache (or of one job, ``?job=ID``), ranked by impact,
  at most ``?limit=`` of them (default 50, at most 500). Each shows its text,
  row count, impact, the service's guess and its alternatives.
- ``POST /review/login`` — form field ``token`` (a ``review`` or ``admin``
  token); starts a session and returns to the page. A wrong token gets the
  form again (401) with a message; a ``resolve`` token gets it with 403.
- ``POST /review/logout`` — ends the session (form field ``csrf``).
- ``POST /review/decisions`` — one decision as JSON
  (``{"text", "country", "subdivision", "city", "not_a_place"}``) with the
  session's CSRF token in the ``X-CSRF-Token`` header; stored at once through
  the service, validated exactly like ``review apply``.
- ``GET /review/codes.json`` — every valid ISO 3166-1 country code and
  ISO 3166-2 subdivision code with its name, built from pycountry (plus XK,
  Kosovo, which decisions also accept), so the page validates typed codes.
- ``GET /review/static/{name}`` — the page's script and style sheet.

Decisions taken here:

- **Sessions.** A session id is 32 random bytes (``secrets``) in a cookie
  named ``geonorm_review`` (HttpOnly, SameSite=Strict, Path=/review, Secure
  when the request came over HTTPS). The server keeps, in memory, only the
  SHA-256 of the id with the role, a CSRF token and two clocks; never the
  token that logged in. A session ends after 30 minutes without a request, 12
  hours after login, at logout, when the token that opened it is revoked, or
  when the service restarts (log in again). The session keeps the token's
  public id (``client_of``) to see a revocation, never its secret.
  At most 1,000 sessions are kept; beyond that the oldest is dropped.
- **CSRF.** The cookie is SameSite=Strict, every POST of a session carries
  the session's CSRF token (a header from the script, a hidden field in the
  logout form), compared in constant time, and a POST whose ``Origin`` header
  names another host is refused. Decisions must be sent as JSON.
- **Guessing tokens.** More than 10 failed logins from one address within
  five minutes are answered with 429 and ``Retry-After`` until the window ends.
- **Choices.** Keys ``1``–``3`` pick from the guess followed by its
  alternatives (same country, subdivision and city listed once), so at most
  three numbered choices show. ``n`` stores "not a place" (as ``review
  apply``'s ``not_a_place``), ``s`` skips to the next item without storing
  anything (skipped strings come round again after the others, and on the
  next visit), ``/`` opens a field for an ISO
  code (``DE`` or ``DE-BY``) checked against ``codes.json`` as it is typed;
  Enter stores a valid code, Escape closes the field. Every key action has a
  button too. Decisions carry the note and source ``review page``.
- **Which strings.** The service's ``review_items``: strings sent to
  ``/v1/resolve`` (or in a job) whose answer is ``review`` or ``unmatched``
  and that have no decision yet, so a decided string leaves the list for
  every reviewer at once.
- **Rendering.** Plain HTML built here with every text escaped (texts are
  whatever people typed; they show inside ``<bdi>`` so right-to-left text
  cannot reorder the page). The exact texts the decisions are sent for travel
  in a JSON data block, since HTML attributes cannot carry every string
  (NUL, carriage returns). A strict Content-Security-Policy allows only the
  service's own script and style; no asset comes from anywhere else, so the
  page works offline.
"""

from __future__ import annotations

import hashlib
import hmac
import html
import json
import secrets
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any
from urllib.parse import urlencode, urlsplit

import pycountry
from fastapi import APIRouter, Form, Query, Request
from fastapi.responses import FileResponse, JSONResponse, RedirectResponse, Response
from pydantic import BaseModel, Field

from ..codes import KOSOVO
from ..errors import GeonormError

__all__ = ["COOKIE", "PageDecision", "Sessions", "router"]

router = APIRouter(include_in_schema=False)

COOKIE = "geonorm_review"
CSRF_HEADER = "X-CSRF-Token"
NOTE = "review page"
SOURCE = "review page"  # where the cache records the decisions came from
NOT_A_PLACE = "not_a_place"  # how review apply writes a not-a-place decision
IDLE_SECONDS = 30 * 60
MAX_AGE_SECONDS = 12 * 3600
MAX_SESSIONS = 1000
LOGIN_FAILURES = 10
LOGIN_WINDOW_SECONDS = 300
DEFAULT_LIMIT = 50
MAX_LIMIT = 500
CHOICES = 3
ROLES = ("review", "admin")
STATIC = Path(__file__).parent / "static"
_STATIC_FILES = {
    "review.js": "text/javascript; charset=utf-8",
    "review.css": "text/css; charset=utf-8",
    "icon.svg": "image/svg+xml",
}
_HEADERS = {
    "Content-Security-Policy": (
        "default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; "
        "img-src 'self'; form-action 'self'; base-uri 'none'; frame-ancestors 'none'"
    ),
    "X-Content-Type-Options": "nosniff",
    # Not no-referrer: under it a browser sends "Origin: null" with same-origin posts.
    "Referrer-Policy": "same-origin",
    "Cache-Control": "no-store",
    "X-Frame-Options": "DENY",
}


# -- sessions -------------------------------------------------------------------


@dataclass
class Session:
    role: str
    csrf: str
    started: float
    seen: float
    token_id: str = ""  # the public part of the token that logged in, to see a revocation


def _digest(session_id: str) -> str:
    return hashlib.sha256(session_id.encode("utf-8", "surrogatepass")).hexdigest()


@dataclass
class Sessions:
    """Review sessions in memory, keyed by the SHA-256 of their id; thread-safe."""

    clock: Callable[[], float] = time.monotonic
    idle: float = IDLE_SECONDS
    max_age: float = MAX_AGE_SECONDS
    limit: int = MAX_SESSIONS
    _items: dict[str, Session] = field(default_factory=dict)
    _failures: dict[str, list[float]] = field(default_factory=dict)
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def start(self, role: str, token_id: str = "") -> tuple[str, Session]:
        """A new session for ``role``: its id (for the cookie only) and its record."""
        session_id = secrets.token_urlsafe(32)
        now = self.clock()
        session = Session(
            role=role, csrf=secrets.token_urlsafe(32), started=now, seen=now, token_id=token_id
        )
        with self._lock:
            self._prune(now)
            while len(self._items) >= self.limit:
                oldest = min(self._items, key=lambda k: self._items[k].started)
                del self._items[oldest]
            self._items[_digest(session_id)] = session
        return session_id, session

    def get(self, session_id: str | None) -> Session | None:
        """The live session of ``session_id``, its idle clock reset; None when there is none."""
        if not session_id or len(session_id) > 128:
            return None
        now = self.clock()
        with self._lock:
            key = _digest(session_id)
            session = self._items.get(key)
            if session is None:
                return None
            if self._expired(session, now):
                del self._items[key]
                return None
            session.seen = now
            return session

    def end(self, session_id: str | None) -> None:
        if session_id:
            with self._lock:
                self._items.pop(_digest(session_id), None)

    def __len__(self) -> int:
        with self._lock:
            return len(self._items)

    def _expired(self, session: Session, now: float) -> bool:
        return now - session.seen > self.idle or now - session.started > self.max_age

    def _prune(self, now: float) -> None:
        for key in [k for k, s in self._items.items() if self._expired(s, now)]:
            del self._items[key]

    # -- failed logins, per client address ---------------------------------------
    def blocked_for(self, client: str) -> int:
        """Seconds until ``client`` may try to log in again (0: now)."""
        now = self.clock()
        with self._lock:
            recent = [t for t in self._failures.get(client, []) if now - t < LOGIN_WINDOW_SECONDS]
            if recent:
                self._failures[client] = recent
            else:
                self._failures.pop(client, None)
            if len(recent) < LOGIN_FAILURES:
                return 0
            return max(1, int(LOGIN_WINDOW_SECONDS - (now - recent[0])) + 1)

    def failed(self, client: str) -> None:
        now = self.clock()
        with self._lock:
            if len(self._failures) >= 10 * self.limit:  # bounded: forget the oldest address
                self._failures.pop(next(iter(self._failures)))
            self._failures.setdefault(client, []).append(now)


_SESSIONS_LOCK = threading.Lock()


def sessions_of(request: Request) -> Sessions:
    """The app's session store, made on first use."""
    state = request.app.state
    with _SESSIONS_LOCK:
        store = getattr(state, "review_sessions", None)
        if store is None:
            store = Sessions()
            state.review_sessions = store
    return store


def _session(request: Request) -> tuple[str | None, Session | None]:
    """The request's live session; one whose token was revoked since login is ended."""
    session_id = request.cookies.get(COOKIE)
    store = sessions_of(request)
    session = store.get(session_id)
    if session is not None and session.token_id:
        token_role = getattr(getattr(_service(request), "store", None), "token_role", None)
        if callable(token_role) and token_role(session.token_id) not in ROLES:
            store.end(session_id)
            return session_id, None
    return session_id, session


def _same_origin(request: Request) -> bool:
    """False when the request names an ``Origin`` other than the host it was sent to.

    The host is the ``Host`` header, or ``X-Forwarded-Host`` from a reverse proxy
    that rewrites ``Host`` (a page of another site can set neither on a post).
    """
    origin = request.headers.get("origin")
    if origin is None:
        return True
    if origin == "null":
        return False
    netloc = urlsplit(origin).netloc.lower()
    hosts = {request.headers.get("host", "")}
    hosts |= {h.strip() for h in request.headers.get("x-forwarded-host", "").split(",")}
    return netloc in {h.lower() for h in hosts if h}


def _csrf_ok(session: Session, sent: str | None) -> bool:
    return bool(sent) and hmac.compare_digest(session.csrf.encode(), (sent or "").encode())


# -- codes ------------------------------------------------------------------------


@lru_cache(maxsize=1)
def iso_codes() -> dict[str, dict[str, str]]:
    """Valid ISO 3166-1 alpha-2 and ISO 3166-2 codes with their names (pycountry)."""
    countries = {c.alpha_2: c.name for c in pycountry.countries}
    countries[KOSOVO] = "Kosovo"
    subdivisions = {s.code: s.name for s in pycountry.subdivisions}
    return {
        "countries": dict(sorted(countries.items())),
        "subdivisions": dict(sorted(subdivisions.items())),
    }


@lru_cache(maxsize=1)
def _codes_body() -> bytes:
    return json.dumps(iso_codes(), ensure_ascii=False, separators=(",", ":")).encode()


# -- rendering --------------------------------------------------------------------


def _e(value: object) -> str:
    """Text for HTML: escaped, and any lone surrogate (no character) shown as ``?``."""
    text = "" if value is None else str(value)
    text = text.encode("utf-8", "replace").decode("utf-8")
    return html.escape(text, quote=True)


def _json_block(element_id: str, value: object) -> str:
    """``value`` as a JSON data block (not a script): ASCII only, ``<`` escaped, so every
    text comes back exactly as sent (NUL, carriage returns, lone surrogates included)."""
    body = json.dumps(value, ensure_ascii=True).replace("<", "\\u003c").replace(">", "\\u003e")
    return f'<script type="application/json" id="{element_id}">{body}</script>'


def _page(title: str, body: str, *, csrf: str = "", status: int = 200) -> Response:
    meta = f'<meta name="geonorm-csrf" content="{_e(csrf)}">' if csrf else ""
    text = (
        "<!doctype html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{_e(title)} · geonorm</title>{meta}"
        '<link rel="icon" href="/review/static/icon.svg" type="image/svg+xml">'
        '<link rel="stylesheet" href="/review/static/review.css">'
        '<script src="/review/static/review.js" defer></script>'
        f"</head><body>{body}</body></html>\n"
    )
    return Response(text, status_code=status, media_type="text/html", headers=_HEADERS)


def _job_query(job: str | None) -> str:
    return "?" + urlencode({"job": job}) if job else ""


def _login_page(message: str = "", *, job: str | None = None, status: int = 200) -> Response:
    note = f'<p class="problem" role="alert">{_e(message)}</p>' if message else ""
    job_field = f'<input type="hidden" name="job" value="{_e(job)}">' if job else ""
    body = (
        '<main class="login"><h1>Review doubtful locations</h1>'
        "<p>Log in with a review or admin token of this service "
        "(<code>geonorm serve token add NAME --role review</code> makes one).</p>"
        f"{note}"
        '<form method="post" action="/review/login">'
        '<label for="token">Token</label>'
        '<input id="token" name="token" type="password" autocomplete="off" required '
        'maxlength="512" autofocus>'
        f"{job_field}"
        '<button type="submit">Log in</button></form></main>'
    )
    return _page("Log in", body, status=status)


def _place_label(country: str, subdivision: str, city: str) -> str:
    names = iso_codes()
    parts = []
    if city:
        parts.append(city)
    if subdivision:
        parts.append(f"{names['subdivisions'].get(subdivision, subdivision)} ({subdivision})")
    if country:
        parts.append(f"{names['countries'].get(country, country)} ({country})")
    return ", ".join(parts) or "no place"


def choices_of(item: Mapping[str, Any]) -> list[dict[str, Any]]:
    """The numbered choices of an item: its guess, then its alternatives, each place once."""
    out: list[dict[str, Any]] = []
    seen: set[tuple[str, str, str]] = set()
    guess = item.get("guess") or {}
    entries: list[tuple[Mapping[str, Any], str, Any]] = []
    if guess.get("country"):
        entries.append((guess, "guess", guess.get("confidence")))
    for alt in item.get("alternatives") or []:
        entries.append((alt, "alternative", alt.get("score")))
    for place, kind, number in entries:
        where = (
            place.get("country") or "",
            place.get("subdivision") or "",
            place.get("city") or "",
        )
        if not where[0] or where in seen:
            continue
        seen.add(where)
        out.append(
            {
                "country": where[0],
                "subdivision": where[1],
                "city": where[2],
                "kind": kind,
                "number": number,
            }
        )
        if len(out) == CHOICES:
            break
    return out


def _number(value: Any) -> str:
    try:
        return f"{float(value):.2f}"
    except (TypeError, ValueError):
        return ""


def _text(item: Mapping[str, Any]) -> str:
    return "" if item.get("text") is None else str(item.get("text"))


def _item_html(position: int, item: Mapping[str, Any]) -> str:
    text = _text(item)
    guess = item.get("guess") or {}
    head_id = f"item-{position}"
    buttons = []
    for n, choice in enumerate(choices_of(item), start=1):
        label = _place_label(choice["country"], choice["subdivision"], choice["city"])
        figure = _number(choice["number"])
        measure = "confidence" if choice["kind"] == "guess" else "score"
        detail = f"{choice['kind']}, {measure} {figure}" if figure else choice["kind"]
        buttons.append(
            f'<button type="button" class="choice" data-action="pick" data-key="{n}" '
            f'data-country="{_e(choice["country"])}" '
            f'data-subdivision="{_e(choice["subdivision"])}" data-city="{_e(choice["city"])}">'
            f'<kbd>{n}</kbd> <span class="place">{_e(label)}</span> '
            f'<span class="detail">{_e(detail)}</span></button>'
        )
    if not buttons:
        buttons.append('<p class="none">No candidate place: type a code or mark it.</p>')
    status = guess.get("status") or ""
    facts = (
        f"<dt>Rows</dt><dd>{_e(item.get('rows', ''))}</dd>"
        f"<dt>Impact</dt><dd>{_e(_number(item.get('impact')) or item.get('impact', ''))}</dd>"
        f"<dt>Status</dt><dd>{_e(status)}</dd>"
    )
    return (
        f'<li class="item" data-index="{position - 1}" data-text="{_e(text)}" '
        f'aria-labelledby="{head_id}">'
        f'<h2 id="{head_id}" tabindex="-1"><bdi class="text">{_e(text)}</bdi></h2>'
        f'<dl class="facts">{facts}</dl>'
        f'<div class="choices" role="group" aria-label="Candidates">{"".join(buttons)}</div>'
        '<div class="actions" role="group" aria-label="Other decisions">'
        '<button type="button" data-action="not_a_place"><kbd>n</kbd> Not a place</button>'
        '<button type="button" data-action="skip"><kbd>s</kbd> Skip</button>'
        '<button type="button" data-action="code"><kbd>/</kbd> Type a code</button>'
        "</div></li>"
    )


def _header(job: str | None, csrf: str) -> str:
    scope = f"job <code>{_e(job)}</code>" if job else "the whole cache"
    back = ' · <a href="/review">whole cache</a>' if job else ""
    return (
        '<header><p class="brand">geonorm · review</p>'
        f'<p class="scope">Doubtful strings of {scope}'
        f"{back}</p>"
        '<form method="post" action="/review/logout" class="logout">'
        f'<input type="hidden" name="csrf" value="{_e(csrf)}">'
        '<button type="submit">Log out</button></form></header>'
    )


_HELP = (
    '<details class="help"><summary>Keys</summary><p>'
    "<kbd>1</kbd>–<kbd>3</kbd> pick a candidate · <kbd>n</kbd> not a place · "
    "<kbd>s</kbd> skip · <kbd>/</kbd> type an ISO 3166 code, then <kbd>Enter</kbd> "
    "(<kbd>Esc</kbd> closes it). Each decision is stored at once.</p></details>"
)

_CODE_FORM = (
    '<form id="code-form" class="code" hidden>'
    '<label for="code-input">ISO 3166 code: a country such as <code>DE</code> '
    "or a subdivision such as <code>DE-BY</code></label>"
    '<input id="code-input" name="code" autocomplete="off" spellcheck="false" '
    'autocapitalize="characters" maxlength="6" aria-describedby="code-status">'
    '<button type="submit">Store</button> <button type="button" id="code-cancel">Cancel</button>'
    '<p id="code-status" aria-live="polite"></p></form>'
)


def _review_page(items: Sequence[Mapping[str, Any]], job: str | None, csrf: str) -> Response:
    ranked = sorted(items, key=lambda d: -_float(d.get("impact")))
    listing = "".join(_item_html(i, item) for i, item in enumerate(ranked, start=1))
    body = (
        f"{_header(job, csrf)}<main>"
        f'<p id="progress" aria-live="polite">{len(ranked)} to review</p>'
        f"{_HELP}"
        f'<ol id="items">{listing}</ol>'
        f"{_json_block('texts', [_text(item) for item in ranked])}"
        f"{_CODE_FORM}"
        '<p id="message" role="status" aria-live="polite"></p>'
        f'<p id="done"{"" if not ranked else " hidden"}>Nothing left to review here. '
        f'<a href="/review{_e(_job_query(job))}">Look again</a></p>'
        "</main>"
    )
    return _page("Review", body, csrf=csrf)


def _float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return 0.0


def _problem_page(job: str | None, csrf: str, exc: GeonormError, status: int) -> Response:
    hint = f"<p>{_e(exc.hint)}</p>" if exc.hint else ""
    body = (
        f'{_header(job, csrf)}<main><p class="problem" role="alert">{_e(exc.message)}</p>'
        f'{hint}<p><a href="/review">Review the whole cache</a></p></main>'
    )
    return _page("Review", body, csrf=csrf, status=status)


# -- routes -----------------------------------------------------------------------


def _service(request: Request) -> Any:
    return request.app.state.service


def _error(status: int, error: str, hint: str, **extra: Any) -> JSONResponse:
    return JSONResponse(
        {"error": error, "hint": hint, **extra}, status_code=status, headers=_HEADERS
    )


@router.get("/review", name="review_page")
def review_page(
    request: Request,
    job: str | None = Query(None, max_length=200),
    limit: int = Query(DEFAULT_LIMIT, ge=1, le=MAX_LIMIT),
) -> Response:
    _, session = _session(request)
    if session is None:
        return _login_page(job=job)
    try:
        items = _service(request).review_items(job or None, limit=limit)
    except GeonormError as exc:
        return _problem_page(job, session.csrf, exc, _status(exc, 404 if job else 422))
    return _review_page(items, job, session.csrf)


def _client(request: Request) -> str:
    return request.client.host if request.client else "unknown"


@router.post("/review/login", name="review_login")
def review_login(
    request: Request,
    token: str = Form("", max_length=512),
    job: str = Form("", max_length=200),
) -> Response:
    store = sessions_of(request)
    if not _same_origin(request):
        return _login_page(
            "This form was sent from another site; open this page's address yourself "
            "and log in here.",
            job=job,
            status=403,
        )
    wait = store.blocked_for(_client(request))
    if wait:
        page = _login_page(
            f"Too many failed logins from this address; try again in {wait} seconds.",
            job=job,
            status=429,
        )
        page.headers["Retry-After"] = str(wait)
        return page
    role = _service(request).role_of(token.strip()) if token.strip() else None
    if role is None:
        store.failed(_client(request))
        return _login_page(
            "That token is not known to this service. Paste the whole token printed by "
            "geonorm serve token add, or ask an admin for a new one.",
            job=job,
            status=401,
        )
    if role not in ROLES:
        return _login_page(
            f"That token has the role '{role}', which may not review. "
            "Log in with a review or admin token.",
            job=job,
            status=403,
        )
    store.end(request.cookies.get(COOKIE))
    client_of = getattr(_service(request), "client_of", None)
    token_id = str(client_of(token.strip())) if callable(client_of) else ""
    session_id, _ = store.start(role, token_id)
    response = RedirectResponse("/review" + _job_query(job or None), status_code=303)
    response.set_cookie(
        COOKIE,
        session_id,
        max_age=MAX_AGE_SECONDS,
        path="/review",
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
    )
    return response


@router.post("/review/logout", name="review_logout")
def review_logout(request: Request, csrf: str = Form("", max_length=200)) -> Response:
    session_id, session = _session(request)
    if session is not None and not (_same_origin(request) and _csrf_ok(session, csrf)):
        return _error(403, "the logout form is stale or came from another site", "reload the page")
    sessions_of(request).end(session_id)
    response = RedirectResponse("/review", status_code=303)
    response.delete_cookie(COOKIE, path="/review", httponly=True, samesite="strict")
    return response


class PageDecision(BaseModel):
    """One decision sent by the page."""

    text: str = Field(max_length=4000)
    country: str = Field("", max_length=16)
    subdivision: str = Field("", max_length=16)
    city: str = Field("", max_length=300)
    not_a_place: bool = False


def decision_item(decision: PageDecision) -> dict[str, str]:
    """The page's decision as an item of the service's ``decide`` (``review apply``'s form)."""
    if decision.not_a_place:
        return {
            "text": decision.text,
            "country": NOT_A_PLACE,
            "subdivision": "",
            "city": "",
            "note": NOTE,
        }
    return {
        "text": decision.text,
        "country": decision.country.strip().upper(),
        "subdivision": decision.subdivision.strip().upper(),
        "city": decision.city.strip(),
        "note": NOTE,
    }


def _status(exc: GeonormError, default: int) -> int:
    """The HTTP status an error of the service carries (``status``), else ``default``."""
    status = getattr(exc, "status", None)
    return status if isinstance(status, int) and 400 <= status < 500 else default


def _problems(exc: GeonormError) -> list[Any]:
    found = getattr(exc, "problems", None) or getattr(exc, "items", None)
    if isinstance(found, Iterable) and not isinstance(found, (str, bytes, Mapping)):
        return [p if isinstance(p, (dict, str, int, float)) else str(p) for p in found]
    return []


@router.post("/review/decisions", name="review_decide")
def review_decide(request: Request, decision: PageDecision) -> Response:
    _, session = _session(request)
    if session is None:
        return _error(401, "your review session has ended", "reload the page and log in again")
    if not _same_origin(request) or not _csrf_ok(session, request.headers.get(CSRF_HEADER)):
        return _error(403, "the decision came without this session's form token", "reload the page")
    if not decision.not_a_place and not decision.country.strip():
        return _error(422, "a decision needs a country code or not_a_place", "pick a candidate")
    item = decision_item(decision)
    try:
        stored = _service(request).decide([item], source=SOURCE)
    except GeonormError as exc:
        return _error(_status(exc, 422), exc.message, exc.hint, problems=_problems(exc))
    return JSONResponse({"stored": stored, "decision": item}, headers=_HEADERS)


@router.get("/review/codes.json", name="review_codes")
def review_codes() -> Response:
    return Response(
        _codes_body(),
        media_type="application/json",
        headers={"Cache-Control": "max-age=86400", "X-Content-Type-Options": "nosniff"},
    )


@router.get("/review/static/{name}", name="review_static")
def review_static(name: str) -> Response:
    media = _STATIC_FILES.get(name)
    if media is None:
        return _error(404, f"no file {name!r} here", "the page needs only review.js and review.css")
    return FileResponse(
        STATIC / name,
        media_type=media,
        headers={"Cache-Control": "no-cache", "X-Content-Type-Options": "nosniff"},
    )
