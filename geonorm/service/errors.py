"""The errors a client of the service can cause, each with its HTTP status.

Every one is a ``GeonormError`` (a message and a hint), so the one error
handler of the app renders them all as ``{"error": …, "hint": …}``.
"""

from __future__ import annotations

from typing import Any

from ..errors import GeonormError

__all__ = [
    "BadRequest",
    "Forbidden",
    "Invalid",
    "NotFound",
    "NotReady",
    "RateLimited",
    "ServiceError",
    "TooLarge",
    "Unauthorized",
]


class ServiceError(GeonormError):
    """A request the service refuses; ``status`` is the HTTP status code."""

    status = 400

    def extra(self) -> dict[str, Any]:
        """Fields the response body carries beside ``error`` and ``hint``."""
        return {}

    def headers(self) -> dict[str, str]:
        return {}


class BadRequest(ServiceError):
    status = 400


class Unauthorized(ServiceError):
    status = 401

    def headers(self) -> dict[str, str]:
        return {"WWW-Authenticate": "Bearer"}


class Forbidden(ServiceError):
    status = 403


class NotFound(ServiceError):
    status = 404


class NotReady(ServiceError):
    """A job's file asked for before the job has made it."""

    status = 409


class TooLarge(ServiceError):
    status = 413


class Invalid(ServiceError):
    """A body of the wrong shape, or decisions that fail their checks (``problems``)."""

    status = 422

    def __init__(
        self, message: str, *, hint: str = "", problems: list[dict[str, Any]] | None = None
    ) -> None:
        super().__init__(message, hint=hint)
        self.problems = problems or []

    def extra(self) -> dict[str, Any]:
        return {"problems": self.problems} if self.problems else {}


class RateLimited(ServiceError):
    status = 429

    def __init__(self, message: str, *, hint: str = "", retry_after: int = 1) -> None:
        super().__init__(message, hint=hint)
        self.retry_after = retry_after

    def headers(self) -> dict[str, str]:
        return {"Retry-After": str(self.retry_after)}
