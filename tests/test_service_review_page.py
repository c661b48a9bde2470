"""The review page in a real browser: Debian's Chromium driven by Playwright.

A real service (uvicorn on a free port of 127.0.0.1, in a thread) over a
temporary data dir; doubtful strings reach its cache through ``/v1/resolve``;
a review token comes from ``geonorm serve token add``. The browser logs in,
decides three strings with the keyboard, and the decisions are checked
through the API and in a second tab. The browser may reach 127.0.0.1 only:
every other request is refused and counted. Each wait is bounded.
"""

from __future__ import annotations

import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

CHROMIUM = Path("/usr/bin/chromium")
pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="Debian's chromium is not installed (apt-get install -y chromium; .ci/run does it)",
)

# Ambiguous names the resolver leaves for review (answers `review`, checked below).
DOUBTFUL = ["San Jose", "Valencia", "Cordoba", "Santiago", "Victoria", "Georgia"]
WAIT_MS = 20_000  # the longest any single browser step may take
BROWSER_ARGS = [
    # Nothing leaves the machine: every host but 127.0.0.1 fails to resolve.
    "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE 127.0.0.1",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]


def _token(data_dir: Path, name: str, role: str) -> str:
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "geonorm",
            "serve",
            "token",
            "add",
            name,
            "--role",
            role,
            "--data-dir",
            str(data_dir),
        ],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )
    return done.stdout.strip()


@pytest.fixture(scope="module")
def service(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    import uvicorn

    from geonorm.service.app import create_app

    data_dir = tmp_path_factory.mktemp("service")
    token = _token(data_dir, "reviewer", "review")
    app = create_app(data_dir)
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    server = uvicorn.Server(uvicorn.Config(app, log_level="warning", lifespan="on"))
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 120
    while not server.started:
        assert thread.is_alive(), "the service did not start"
        assert time.monotonic() < deadline, "the service did not start within 120 s"
        time.sleep(0.05)
    with httpx.Client(
        base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=60, trust_env=False
    ) as api:
        yield {"base": base, "token": token, "api": api}
    server.should_exit = True
    thread.join(timeout=30)
    sock.close()


def _resolve(api: httpx.Client, texts: list[str]) -> dict[str, dict[str, Any]]:
    r = api.post("/v1/resolve", json={"texts": texts})
    assert r.status_code == 200, r.text
    return dict(zip(texts, r.json()["results"], strict=True))


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(
            executable_path=str(CHROMIUM), headless=True, args=BROWSER_ARGS, timeout=WAIT_MS * 3
        )
        try:
            yield chromium
        finally:
            chromium.close()


def _current(page: Any) -> Any:
    return page.locator("#items > li.item:visible")


def _current_text(page: Any) -> str:
    item = _current(page)
    item.wait_for(state="visible")
    return str(item.get_attribute("data-text"))


def _next_after(page: Any, before: str) -> None:
    """Wait until the page shows another item than ``before`` (or none is left)."""
    page.wait_for_function(
        """(before) => {
            const li = document.querySelector('#items > li.item:not([hidden])');
            return !li || li.dataset.text !== before;
        }""",
        arg=before,
        timeout=WAIT_MS,
    )


def test_reviewing_with_the_keyboard(service: dict[str, Any], browser: Any) -> None:
    api = service["api"]
    # Two sends each: the strings count as seen twice (rows).
    before = _resolve(api, DOUBTFUL)
    _resolve(api, DOUBTFUL)
    doubtful = [t for t in DOUBTFUL if before[t]["status"] == "review"]
    assert len(doubtful) >= 4, before

    outside: list[str] = []
    context = browser.new_context(base_url=service["base"])
    context.set_default_timeout(WAIT_MS)

    def only_here(route: Any) -> None:
        if route.request.url.startswith(service["base"] + "/"):
            route.continue_()
        else:
            outside.append(route.request.url)
            route.abort()

    context.route("**/*", only_here)
    try:
        page = context.new_page()
        errors: list[str] = []
        page.on("pageerror", lambda exc: errors.append(str(exc)))
        page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)

        # A wrong token: the form again, with a message.
        page.goto("/review")
        page.get_by_label("Token").fill("gn_not_a_real_token")
        page.get_by_role("button", name="Log in").click()
        page.get_by_role("alert").wait_for()
        assert "not known to this service" in page.get_by_role("alert").inner_text()
        errors.clear()  # the browser logs the 401 of that page

        # The right one: the list, most impact first.
        page.get_by_label("Token").fill(service["token"])
        page.get_by_role("button", name="Log in").click()
        page.locator("body[data-ready]").wait_for(state="attached")
        cookies = context.cookies()
        assert [c["name"] for c in cookies] == ["geonorm_review"]
        assert cookies[0]["httpOnly"] and cookies[0]["sameSite"] == "Strict"
        assert service["token"] not in cookies[0]["value"]
        listed = page.locator("#items > li.item").evaluate_all(
            "els => els.map(e => e.dataset.text)"
        )
        assert set(doubtful) <= set(listed)

        # 1: the first candidate (the guess).
        first = _current_text(page)
        button = _current(page).locator('button[data-key="1"]')
        picked = {k: button.get_attribute(f"data-{k}") for k in ("country", "subdivision", "city")}
        page.keyboard.press("1")
        _next_after(page, first)

        # n: not a place.
        second = _current_text(page)
        page.keyboard.press("n")
        _next_after(page, second)

        # /: a typed ISO code, checked as it is typed; Enter stores it.
        third = _current_text(page)
        page.keyboard.press("/")
        field = page.get_by_label("ISO 3166 code")
        assert field.evaluate("el => el === document.activeElement")
        page.keyboard.type("ZZ")
        page.wait_for_function(
            "() => document.getElementById('code-status').textContent.includes('not an ISO')"
        )
        assert field.get_attribute("aria-invalid") == "true"
        page.keyboard.press("Enter")  # refused: nothing stored, the field stays
        assert _current_text(page) == third
        field.fill("")
        page.keyboard.type("es-an")
        page.wait_for_function(
            "() => document.getElementById('code-status').textContent.startsWith('ES-AN')"
        )
        assert field.get_attribute("aria-invalid") == "false"
        page.keyboard.press("Enter")
        _next_after(page, third)
        page.wait_for_function(
            "() => document.getElementById('progress').textContent.includes('3 stored')"
        )

        # s and the Skip button (a mouse works too) store nothing.
        fourth = _current_text(page)
        _current(page).get_by_role("button", name="Skip").click()
        _next_after(page, fourth)

        # The decisions, through the API: reason `reviewed`.
        after = _resolve(api, [first, second, third])
        assert after[first]["reason"] == "reviewed"
        assert after[first]["status"] == "matched"
        assert (after[first]["country"], after[first]["subdivision"]) == (
            picked["country"],
            picked["subdivision"],
        )
        assert after[first]["city"] == picked["city"]
        assert after[second]["reason"] == "reviewed"
        assert after[second]["status"] == "not_a_place"
        assert after[third]["reason"] == "reviewed"
        assert (after[third]["country"], after[third]["subdivision"]) == ("ES", "ES-AN")

        # A second tab of the same browser: the decided strings are gone, the rest stay.
        tab = context.new_page()
        tab.goto("/review")
        tab.locator("#items").wait_for(state="attached")
        shown = tab.locator("#items > li.item").evaluate_all("els => els.map(e => e.dataset.text)")
        assert not {first, second, third} & set(shown)
        assert fourth in shown
        tab.close()

        # Log out: the form again, and the old cookie opens nothing.
        page.get_by_role("button", name="Log out").click()
        page.get_by_label("Token").wait_for()
        assert errors == []
        assert outside == []
    finally:
        context.close()
