"""Running the service and managing its tokens: what ``geonorm serve`` calls."""

from __future__ import annotations

import ipaddress
from pathlib import Path

from ..errors import InputError
from .store import ServiceStore, TokenInfo

__all__ = ["DEFAULT_PORT", "add_token", "is_loopback", "list_tokens", "revoke_token", "serve"]

DEFAULT_PORT = 8750


def is_loopback(host: str) -> bool:
    """Whether ``host`` names this machine only (127.0.0.0/8, ::1, localhost)."""
    if host.strip().lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _store(data_dir: Path) -> ServiceStore:
    return ServiceStore(Path(data_dir) / "service.sqlite")


def add_token(data_dir: Path, name: str, role: str) -> str:
    """Make a token for ``name`` with ``role``; returns it (it is stored only as a hash)."""
    store = _store(data_dir)
    try:
        return store.add_token(name, role)
    finally:
        store.close()


def list_tokens(data_dir: Path) -> list[TokenInfo]:
    store = _store(data_dir)
    try:
        return store.tokens()
    finally:
        store.close()


def revoke_token(data_dir: Path, name: str) -> None:
    """Remove a token; requests carrying it are refused from the next one on."""
    store = _store(data_dir)
    try:
        store.revoke_token(name)
    finally:
        store.close()


def serve(
    data_dir: Path,
    *,
    host: str = "127.0.0.1",
    port: int = DEFAULT_PORT,
    job_workers: int = 1,
    keep_days: int = 30,
    rate: float = 50.0,
    max_upload_mb: int = 2048,
) -> None:
    """Run the service under uvicorn until it is stopped (SIGTERM or Ctrl-C: running
    requests finish, running jobs are kept in the cache and resume at the next start)."""
    for name, value, low in (
        ("job_workers", job_workers, 1),
        ("keep_days", keep_days, 1),
        ("max_upload_mb", max_upload_mb, 1),
    ):
        if value < low:
            raise InputError(f"`{name}` must be at least {low}, got {value}", hint=f"set `{name}`")
    if rate < 0:
        raise InputError(f"`rate` must be 0 or more, got {rate}", hint="0 means no limit")
    if not is_loopback(host) and not list_tokens(data_dir):
        raise InputError(
            f"refusing to listen on {host} while the service has no token: anyone who "
            "reaches it could read what it stores",
            hint=f"make a token first: geonorm serve token add NAME --role admin --data-dir "
            f"{data_dir}",
        )
    import uvicorn

    from .app import create_app

    app = create_app(
        Path(data_dir),
        rate=rate,
        job_workers=job_workers,
        keep_days=keep_days,
        max_upload_mb=max_upload_mb,
    )
    uvicorn.run(app, host=host, port=port, log_level="info", timeout_graceful_shutdown=30)
