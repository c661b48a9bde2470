"""The review page's routes with FastAPI's test client, over a stand-in service.

The stand-in has the service's interface (``role_of``, ``review_items``,
``decide``) and records what the page asks of it, so these tests check the
page alone: sessions, CSRF, escaping, codes, statuses.
"""

from __future__ import annotations

import json
import re
from typing import Any

import pycountry
import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from geonorm.errors import InputError
from geonorm.service import review_page
from geonorm.service.review_page import COOKIE, Sessions, choices_of, router

TOKENS = {"tok-review": "review", "tok-admin": "admin", "tok-resolve": "resolve"}
EVIL = '<script>alert("x")</script> & "quotes"'


def _item(text: str, rows: int, impact: float, alts: list[tuple[str, str, str]]) -> dict:
    country, sub, city = alts[0]
    return {
        "key": text.lower(),
        "text": text,
        "rows": rows,
        "impact": impact,
        "guess": {
            "country": country,
            "subdivision": sub,
            "city": city,
            "confidence": 0.31,
            "status": "review",
        },
        "alternatives": [
            {"country": c, "subdivision": s, "city": t, "score": 0.2} for c, s, t in alts[1:]
        ],
    }


class FakeService:
    def __init__(self) -> None:
        self.decided: list[dict[str, Any]] = []
        self.fail_with: Exception | None = None
        self.items = [
            _item("Valencia", 3, 2.1, [("VE", "VE-G", "Valencia"), ("ES", "ES-VC", "Valencia")]),
            _item(
                "San Jose",
                9,
                6.3,
                [
                    ("US", "US-CA", "San Jose"),
                    ("US", "US-CA", "San Jose"),  # the same place twice: listed once
                    ("CR", "CR-SJ", "San José"),
                    ("UY", "UY-SJ", "San José de Mayo"),
                    ("PH", "PH-41", "San Jose"),
                ],
            ),
            _item(EVIL, 1, 0.9, [("FR", "", "")]),
        ]
        self.asked: list[tuple[str | None, int]] = []

    def role_of(self, token: str) -> str | None:
        return TOKENS.get(token)

    def review_items(self, job_id: str | None = None, limit: int = 50) -> list[dict]:
        self.asked.append((job_id, limit))
        if job_id not in (None, "job1"):
            raise InputError(f"no job {job_id!r}", hint="list the jobs with GET /v1/jobs")
        return self.items[:limit]

    def decide(self, items: list[dict], source: str = "service") -> int:
        if self.fail_with is not None:
            raise self.fail_with
        assert source == "review page"
        self.decided.extend(items)
        return len(items)

    def client_of(self, token: str) -> str:
        return "id-" + token

    @property
    def store(self) -> FakeService:
        return self

    def token_role(self, ident: str) -> str | None:
        return TOKENS.get(ident.removeprefix("id-"))


@pytest.fixture
def service() -> FakeService:
    return FakeService()


@pytest.fixture
def client(service: FakeService) -> TestClient:
    app = FastAPI()
    app.include_router(router)
    app.state.service = service
    return TestClient(app)


def _login(client: TestClient, token: str = "tok-review") -> str:
    """Log in; returns the page's CSRF token."""
    r = client.post("/review/login", data={"token": token}, follow_redirects=False)
    assert r.status_code == 303, r.text
    page = client.get("/review")
    assert page.status_code == 200
    found = re.search(r'<meta name="geonorm-csrf" content="([^"]+)">', page.text)
    assert found
    return found.group(1)


def test_without_a_session_the_page_is_the_login_form(client: TestClient) -> None:
    r = client.get("/review")
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/html")
    assert '<form method="post" action="/review/login">' in r.text
    assert '<label for="token">' in r.text
    assert "San Jose" not in r.text
    csp = r.headers["content-security-policy"]
    assert "script-src 'self'" in csp and "default-src 'none'" in csp
    assert r.headers["x-frame-options"] == "DENY"


def test_a_wrong_token_gets_the_form_again_with_a_message(client: TestClient) -> None:
    r = client.post("/review/login", data={"token": "nope"}, follow_redirects=False)
    assert r.status_code == 401
    assert "not known to this service" in r.text
    assert COOKIE not in r.headers.get("set-cookie", "")
    r = client.post("/review/login", data={"token": ""}, follow_redirects=False)
    assert r.status_code == 401


def test_a_resolve_token_may_not_review(client: TestClient) -> None:
    r = client.post("/review/login", data={"token": "tok-resolve"}, follow_redirects=False)
    assert r.status_code == 403
    assert "may not review" in r.text
    assert "set-cookie" not in r.headers


def test_login_sets_a_strict_httponly_cookie_holding_a_session_id_not_the_token(
    client: TestClient,
) -> None:
    r = client.post("/review/login", data={"token": "tok-review"}, follow_redirects=False)
    assert r.status_code == 303
    assert r.headers["location"] == "/review"
    cookie = r.headers["set-cookie"]
    assert cookie.startswith(f"{COOKIE}=")
    assert "HttpOnly" in cookie and "SameSite=strict" in cookie and "Path=/review" in cookie
    value = cookie.split(";")[0].split("=", 1)[1]
    assert "tok-review" not in value and len(value) >= 40
    # Plain HTTP: no Secure flag (the browser would drop the cookie).
    assert "Secure" not in cookie


def test_login_returns_to_the_job_it_came_from(client: TestClient) -> None:
    r = client.post(
        "/review/login", data={"token": "tok-admin", "job": "job1"}, follow_redirects=False
    )
    assert r.status_code == 303
    assert r.headers["location"] == "/review?job=job1"
    page = client.get("/review?job=job1")
    assert "job <code>job1</code>" in page.text


def test_the_page_lists_items_ranked_by_impact_with_their_choices(
    client: TestClient, service: FakeService
) -> None:
    _login(client)
    text = client.get("/review").text
    order = [
        m.group(1)
        for m in re.finditer(r'<li class="item" data-index="\d+" data-text="([^"]*)"', text)
    ]
    assert order == [
        "San Jose",
        "Valencia",
        "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &quot;quotes&quot;",
    ]
    assert service.asked[-1] == (None, 50)
    san_jose = text[text.index('data-text="San Jose"') : text.index('data-text="Valencia"')]
    keys = re.findall(r'data-key="(\d)" data-country="(\w+)"', san_jose)
    # The guess, then the alternatives; the repeated place once; at most three.
    assert keys == [("1", "US"), ("2", "CR"), ("3", "UY")]
    assert "San Jose, California (US-CA), United States (US)" in san_jose
    for key in ("n", "s", "/"):
        assert f"<kbd>{key}</kbd>" in san_jose


def test_every_text_is_escaped(client: TestClient) -> None:
    _login(client)
    text = client.get("/review").text
    assert "<script>alert" not in text
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &quot;quotes&quot;" in text
    # Only the page's own script and its JSON data block.
    assert text.count("<script") == 2


def test_a_job_query_is_escaped_and_an_unknown_job_is_404(client: TestClient) -> None:
    _login(client)
    r = client.get("/review", params={"job": '"><b>x'})
    assert r.status_code == 404
    assert "<b>x" not in r.text
    assert "&quot;&gt;&lt;b&gt;x" in r.text
    assert "list the jobs with GET /v1/jobs" in r.text


def test_limit_is_passed_on_and_bounded(client: TestClient, service: FakeService) -> None:
    _login(client)
    assert client.get("/review?limit=2").status_code == 200
    assert service.asked[-1] == (None, 2)
    assert client.get("/review?limit=0").status_code == 422
    assert client.get("/review?limit=100000").status_code == 422


def test_a_decision_needs_a_session_and_its_csrf_token(
    client: TestClient, service: FakeService
) -> None:
    body = {"text": "Valencia", "country": "ES", "subdivision": "ES-VC", "city": "Valencia"}
    r = client.post("/review/decisions", json=body)
    assert r.status_code == 401
    assert r.json()["hint"] == "reload the page and log in again"
    csrf = _login(client)
    r = client.post("/review/decisions", json=body)
    assert r.status_code == 403
    r = client.post("/review/decisions", json=body, headers={"X-CSRF-Token": "x" + csrf})
    assert r.status_code == 403
    r = client.post(
        "/review/decisions",
        json=body,
        headers={"X-CSRF-Token": csrf, "Origin": "http://elsewhere.example"},
    )
    assert r.status_code == 403
    assert service.decided == []
    r = client.post("/review/decisions", json=body, headers={"X-CSRF-Token": csrf})
    assert r.status_code == 200, r.text
    assert r.json()["stored"] == 1
    assert service.decided == [{**body, "note": "review page"}]


def test_not_a_place_and_typed_codes_take_review_apply_form(
    client: TestClient, service: FakeService
) -> None:
    csrf = _login(client)
    h = {"X-CSRF-Token": csrf}
    assert client.post(
        "/review/decisions", json={"text": "Valencia", "not_a_place": True}, headers=h
    ).is_success
    assert client.post(
        "/review/decisions",
        json={"text": "Cordoba", "country": "es", "subdivision": "es-an"},
        headers=h,
    ).is_success
    assert service.decided == [
        {
            "text": "Valencia",
            "country": "not_a_place",
            "subdivision": "",
            "city": "",
            "note": "review page",
        },
        {
            "text": "Cordoba",
            "country": "ES",
            "subdivision": "ES-AN",
            "city": "",
            "note": "review page",
        },
    ]


def test_refused_decisions_show_the_service_message(
    client: TestClient, service: FakeService
) -> None:
    csrf = _login(client)
    h = {"X-CSRF-Token": csrf}
    r = client.post("/review/decisions", json={"text": "Valencia"}, headers=h)
    assert r.status_code == 422
    assert "country code or not_a_place" in r.json()["error"]
    service.fail_with = InputError("'ZZ' is not an ISO 3166-1 country code", hint="use FR")
    r = client.post("/review/decisions", json={"text": "Valencia", "country": "ZZ"}, headers=h)
    assert r.status_code == 422
    assert r.json() == {
        "error": "'ZZ' is not an ISO 3166-1 country code",
        "hint": "use FR",
        "problems": [],
    }
    r = client.post("/review/decisions", json={"country": "ES"}, headers=h)
    assert r.status_code == 422  # no text


def test_logout_ends_the_session(client: TestClient, service: FakeService) -> None:
    csrf = _login(client)
    r = client.post("/review/logout", data={"csrf": "wrong"}, follow_redirects=False)
    assert r.status_code == 403
    r = client.post("/review/logout", data={"csrf": csrf}, follow_redirects=False)
    assert r.status_code == 303
    assert f'{COOKIE}=""' in r.headers["set-cookie"] or "Max-Age=0" in r.headers["set-cookie"]
    assert "San Jose" not in client.get("/review").text
    r = client.post(
        "/review/decisions", json={"text": "x", "country": "FR"}, headers={"X-CSRF-Token": csrf}
    )
    assert r.status_code == 401


def test_an_old_cookie_is_useless_after_logout(client: TestClient) -> None:
    csrf = _login(client)
    sid = client.cookies.get(COOKIE)
    client.post("/review/logout", data={"csrf": csrf})
    client.cookies.set(COOKIE, sid or "", path="/review")
    assert "San Jose" not in client.get("/review").text


def test_sessions_end_when_idle_or_old() -> None:
    now = [1000.0]
    store = Sessions(clock=lambda: now[0], idle=60, max_age=300)
    sid, session = store.start("review")
    assert store.get(sid) is session
    now[0] += 59
    assert store.get(sid) is session  # the idle clock restarts on each request
    now[0] += 59
    assert store.get(sid) is session
    now[0] += 61
    assert store.get(sid) is None
    sid, _ = store.start("review")
    for _ in range(6):
        now[0] += 55
        found = store.get(sid)
    assert found is None  # older than max_age although never idle
    assert store.get(None) is None and store.get("x" * 500) is None


def test_sessions_are_bounded_and_keyed_by_a_digest() -> None:
    store = Sessions(limit=3)
    ids = [store.start("review")[0] for _ in range(5)]
    assert len(store) == 3
    assert store.get(ids[0]) is None and store.get(ids[-1]) is not None
    assert not any(sid in store._items for sid in ids)


def test_many_failed_logins_from_one_address_are_slowed_down(client: TestClient) -> None:
    for _ in range(review_page.LOGIN_FAILURES):
        assert client.post("/review/login", data={"token": "bad"}).status_code == 401
    r = client.post("/review/login", data={"token": "tok-review"}, follow_redirects=False)
    assert r.status_code == 429
    assert int(r.headers["retry-after"]) > 0
    assert "Too many failed logins" in r.text


def test_a_login_posted_from_another_site_is_refused(client: TestClient) -> None:
    r = client.post(
        "/review/login",
        data={"token": "tok-review"},
        headers={"Origin": "http://elsewhere.example"},
        follow_redirects=False,
    )
    assert r.status_code == 403
    assert "set-cookie" not in r.headers


def test_codes_are_every_iso_3166_code_from_pycountry(client: TestClient) -> None:
    r = client.get("/review/codes.json")
    assert r.status_code == 200
    data = r.json()
    # Source: pycountry (ISO 3166-1 and ISO 3166-2), plus XK as geonorm.codes accepts it.
    assert set(data["countries"]) == {c.alpha_2 for c in pycountry.countries} | {"XK"}
    assert set(data["subdivisions"]) == {s.code for s in pycountry.subdivisions}
    assert data["countries"]["DE"] == pycountry.countries.get(alpha_2="DE").name
    assert data["subdivisions"]["DE-BY"] == pycountry.subdivisions.get(code="DE-BY").name


def test_static_files_are_served_by_name_only(client: TestClient) -> None:
    js = client.get("/review/static/review.js")
    assert js.status_code == 200 and js.headers["content-type"].startswith("text/javascript")
    assert "X-CSRF-Token" in js.text
    css = client.get("/review/static/review.css")
    assert css.status_code == 200 and css.headers["content-type"].startswith("text/css")
    assert client.get("/review/static/../review_page.py").status_code == 404
    assert client.get("/review/static/other.js").status_code == 404


def test_the_page_loads_nothing_from_elsewhere(client: TestClient) -> None:
    _login(client)
    page = client.get("/review").text
    refs = re.findall(r'(?:src|href)="([^"]+)"', page)
    assert refs and all(ref.startswith("/review") for ref in refs)
    for name in ("review.js", "review.css"):
        body = client.get(f"/review/static/{name}").text
        assert "http://" not in body and "https://" not in body and "@import" not in body


def test_choices_skip_places_without_a_country() -> None:
    item = {
        "guess": {"country": "", "subdivision": "", "city": ""},
        "alternatives": [
            {"country": "", "city": "x", "score": 0.5},
            {"country": "ES", "subdivision": "ES-VC", "city": "Valencia", "score": 0.4},
        ],
    }
    assert [c["country"] for c in choices_of(item)] == ["ES"]
    assert choices_of({}) == []


def test_revoking_the_token_ends_its_sessions(client: TestClient) -> None:
    csrf = _login(client, "tok-admin")
    assert "San Jose" in client.get("/review").text
    del TOKENS["tok-admin"]
    try:
        assert "San Jose" not in client.get("/review").text
        r = client.post(
            "/review/decisions",
            json={"text": "x", "country": "FR"},
            headers={"X-CSRF-Token": csrf},
        )
        assert r.status_code == 401
    finally:
        TOKENS["tok-admin"] = "admin"


def test_texts_html_cannot_carry_come_back_exactly(
    client: TestClient, service: FakeService
) -> None:
    odd = ["a\r\nb\x00c", "\ud800x", "</script><script>alert(1)</script>", "  spaced  "]
    service.items = [_item(t, 1, 0.5, [("FR", "", "")]) for t in odd]
    _login(client)
    r = client.get("/review")
    assert r.status_code == 200
    block = re.search(r'<script type="application/json" id="texts">(.*?)</script>', r.text, re.S)
    assert block and "<" not in block.group(1)
    assert json.loads(block.group(1)) == odd
    assert "?x" in r.text  # the lone surrogate shows as ?
    assert r.text.count("<script") == 2  # the page's script and the data block


def test_a_proxy_that_rewrites_host_keeps_same_origin_posts_working(client: TestClient) -> None:
    r = client.post(
        "/review/login",
        data={"token": "tok-review"},
        headers={"Origin": "https://geo.example.org", "X-Forwarded-Host": "geo.example.org"},
        follow_redirects=False,
    )
    assert r.status_code == 303
