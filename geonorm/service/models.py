"""Request and response bodies: typed models, so ``/openapi.json`` is the contract."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from ..resolve.resolver import DEFAULT_ACCEPT

__all__ = [
    "Answer",
    "CandidateOut",
    "Decision",
    "DecisionsStored",
    "ErrorBody",
    "Health",
    "JobCreated",
    "JobList",
    "JobStatus",
    "ResolveRequest",
    "ResolveResponse",
]

MAX_TEXTS = 10_000


class ErrorBody(BaseModel):
    """Every error: what went wrong, and what to do next."""

    error: str
    hint: str
    problems: list[dict[str, Any]] | None = Field(
        default=None, description="Per item: its index (or where) and the reason."
    )


class Health(BaseModel):
    status: str
    index_version: str
    resolver_version: str


class ResolveRequest(BaseModel):
    model_config = ConfigDict(strict=True)  # JSON false is no number, 3 no text
    texts: list[str] = Field(description=f"Location strings, at most {MAX_TEXTS:,}.")
    accept: float = Field(
        default=DEFAULT_ACCEPT, ge=0.0, le=1.0, description="Confidence needed for 'matched'."
    )


class CandidateOut(BaseModel):
    country: str
    subdivision: str
    city: str
    lat: float | None
    lon: float | None
    score: float


class Answer(BaseModel):
    """As ``geonorm lookup --json`` prints it."""

    text: str
    status: str
    reason: str
    country: str
    subdivision: str
    city: str
    lat: float | None
    lon: float | None
    geonameid: int | None
    confidence: float
    candidates: list[CandidateOut]
    source: str


class ResolveResponse(BaseModel):
    results: list[Answer]


class JobCreated(BaseModel):
    id: str
    state: str


class JobError(BaseModel):
    error: str
    hint: str


class JobStatus(BaseModel):
    id: str
    state: str = Field(description="queued, running, done, failed or cancelled")
    rows: int | None
    distinct: int | None
    resolved: int | None
    progress: float
    summary: dict[str, Any] | None
    error: JobError | None


class JobList(BaseModel):
    jobs: list[JobStatus]


class Decision(BaseModel):
    """A person's decision, as a line of the review queue: ``country`` is an ISO 3166-1
    code or ``not_a_place``; ``subdivision`` an ISO 3166-2 code; ``city`` a name in
    the place index or ``Name (lat, lon)``."""

    model_config = ConfigDict(strict=True)

    text: str
    country: str = ""
    subdivision: str = ""
    city: str = ""
    note: str = ""


class DecisionsStored(BaseModel):
    stored: int
