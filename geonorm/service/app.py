"""The FastAPI app of ``geonorm serve``: routes, limits, tokens, one error shape.

``create_app(data_dir)`` builds the app around one ``Service`` (``core.py``):
the lifespan loads the index once and starts the job workers; tokens, roles
and rate limits are dependencies of the routes; request bodies over their
limit are refused by a small ASGI middleware before they are read; and every
error leaves through one handler as ``{"error": …, "hint": …}``.
"""

from __future__ import annotations

import json
import math
import shutil
import time
from collections.abc import AsyncIterator, Awaitable, Callable
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Annotated, Any

import anyio
import anyio.to_thread
from fastapi import Depends, FastAPI, Request, Security
from fastapi.concurrency import run_in_threadpool
from fastapi.exceptions import RequestValidationError
from fastapi.responses import FileResponse, JSONResponse, Response
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..batch.formats import FORMATS
from ..errors import CacheError, GeonormError, InputError
from ..resolve.resolver import DEFAULT_ACCEPT
from ..version import __version__
from .core import Service
from .errors import (
    Forbidden,
    Invalid,
    NotFound,
    NotReady,
    ServiceError,
    TooLarge,
    Unauthorized,
)
from .jobs import FORMAT_SUFFIX, new_job_id, suffix_format, valid_job_id
from .metrics import Metrics, MetricsMiddleware
from .models import (
    MAX_TEXTS,
    Decision,
    DecisionsStored,
    ErrorBody,
    Health,
    JobCreated,
    JobList,
    JobStatus,
    ResolveRequest,
    ResolveResponse,
)
from .review_page import router as review_router
from .store import Job, role_allows
from .upload import receive_upload

__all__ = ["MAX_BODY_BYTES", "create_app"]

MAX_BODY_BYTES = 8 * 1024 * 1024  # a JSON request body
RESOLVE_THREADS = 1  # /v1/resolve requests worked on at once; the others wait in order
_MEDIA = {
    "csv": "text/csv; charset=utf-8",
    "tsv": "text/tab-separated-values; charset=utf-8",
    "parquet": "application/vnd.apache.parquet",
    "jsonl": "application/x-ndjson; charset=utf-8",
}
_MAKE_TOKEN = "make one with: geonorm serve token add NAME --role ROLE --data-dir DIR"


def _error_response(
    status: int,
    error: str,
    hint: str,
    extra: dict[str, Any] | None = None,
    headers: dict[str, str] | None = None,
) -> JSONResponse:
    return JSONResponse(
        {"error": error, "hint": hint, **(extra or {})}, status_code=status, headers=headers
    )


class _BodyTooLarge(StarletteHTTPException):
    """Raised while a body is read (FastAPI lets HTTP exceptions through as they are)."""

    def __init__(self, limit: int) -> None:
        super().__init__(413, f"the request body is larger than {limit:,} bytes")


_LARGE_HINT = "send fewer texts per request (at most 10,000 and 8 MB), or upload a file as a job"


class _BodyLimit:
    """Refuses a body over its route's limit: at once by its Content-Length, else while
    it arrives (chunked), so an oversized body is never held in memory."""

    def __init__(self, app: Any, limit_of: Callable[[str], int]) -> None:
        self.app = app
        self.limit_of = limit_of

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        limit = self.limit_of(scope.get("path", ""))
        for name, value in scope.get("headers", []):
            if name == b"content-length" and value.isdigit() and int(value) > limit:
                response = _error_response(
                    413, f"the request body is larger than {limit:,} bytes", _LARGE_HINT
                )
                await response(scope, receive, send)
                return
        seen = 0

        async def receiving() -> Any:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > limit:
                    raise _BodyTooLarge(limit)
            return message

        await self.app(scope, receiving, send)


def _validation_problems(exc: RequestValidationError) -> list[dict[str, Any]]:
    problems = []
    for err in exc.errors()[:50]:
        loc = [str(x) for x in err.get("loc", ()) if x != "body"]
        problem: dict[str, Any] = {"where": ".".join(loc) or "body", "reason": err.get("msg", "")}
        raw = [x for x in err.get("loc", ()) if x != "body"]
        if raw and isinstance(raw[0], int):
            problem["index"] = raw[0]
        problems.append(problem)
    return problems


def _install_error_handlers(app: FastAPI) -> None:
    """One shape for every error: ``{"error", "hint"}`` (+ ``problems`` for bad items)."""

    @app.exception_handler(GeonormError)
    async def geonorm_error(request: Request, exc: GeonormError) -> JSONResponse:
        status: int = 400
        extra: dict[str, Any] = {}
        headers: dict[str, str] = {}
        if isinstance(exc, ServiceError):
            status, extra, headers = exc.status, exc.extra(), exc.headers()
        elif isinstance(exc, InputError):
            status = 422
        elif isinstance(exc, CacheError):
            status = 503
        return _error_response(status, exc.message, exc.hint, extra, headers)

    @app.exception_handler(RequestValidationError)
    async def invalid(request: Request, exc: RequestValidationError) -> JSONResponse:
        problems = _validation_problems(exc)
        json_error = any(p["reason"].startswith("JSON decode error") for p in problems)
        return _error_response(
            422,
            "the body is not valid JSON"
            if json_error
            else "the body does not have the expected shape",
            "see the problems, and the request schema in /openapi.json",
            {"problems": problems},
        )

    @app.exception_handler(StarletteHTTPException)
    async def http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        if exc.status_code == 400:  # FastAPI could not read the body: not text, not JSON
            return _error_response(
                422,
                "the body is not valid JSON in UTF-8",
                "send JSON encoded as UTF-8 with Content-Type: application/json",
            )
        headers = dict(getattr(exc, "headers", None) or {})
        if exc.status_code == 405:  # every method of the path, not only the first route's
            methods = set()
            for route in request.app.router.routes:
                regex = getattr(route, "path_regex", None)
                if regex is not None and regex.match(request.url.path):
                    methods |= set(getattr(route, "methods", None) or ())
            if methods:
                headers["Allow"] = ", ".join(sorted(methods))
        hints = {
            404: "see /openapi.json for the routes",
            405: "see /openapi.json for the methods each route takes",
            413: _LARGE_HINT,
        }
        return _error_response(
            exc.status_code,
            str(exc.detail) if exc.status_code != 404 else "no such route",
            hints.get(exc.status_code, "see /openapi.json"),
            headers=headers,
        )

    @app.exception_handler(Exception)
    async def unexpected(request: Request, exc: Exception) -> JSONResponse:
        return _error_response(
            500,
            f"the service failed: {type(exc).__name__}",
            "try again; if it fails again, the service's log says more",
        )


_bearer = HTTPBearer(
    auto_error=False, description="A token made by `geonorm serve token add`.", scheme_name="token"
)


def _needs(role: str) -> Callable[..., Awaitable[str]]:
    """A dependency: the request carries a token of ``role`` (or a higher one), within rate."""

    async def check(
        request: Request,
        credentials: Annotated[HTTPAuthorizationCredentials | None, Security(_bearer)],
    ) -> str:
        service: Service = request.app.state.service
        if credentials is None:
            raise Unauthorized(
                "this route needs a token (Authorization: Bearer TOKEN)", hint=_MAKE_TOKEN
            )
        token = credentials.credentials
        remembered = service.remembered_role(token) if len(token) <= 300 else None
        if remembered is False:  # not seen before: the salted hash, off the event loop
            got = await run_in_threadpool(service.role_of, token)
        else:
            got = remembered if isinstance(remembered, str) else None
        if got is None:
            raise Unauthorized(
                "the token is not known, or was revoked", hint=f"check the token, or {_MAKE_TOKEN}"
            )
        if not role_allows(got, role):
            raise Forbidden(
                f"this route needs a token with the role {role} (this one's is {got})",
                hint=f"ask whoever runs the service for a {role} token",
            )
        service.check_rate(service.client_of(token))
        return got

    return check


_ERRORS: dict[int | str, dict[str, Any]] = {
    code: {"model": ErrorBody, "description": text}
    for code, text in {
        401: "No token, or an unknown one",
        403: "The token's role does not allow this",
        413: "Too large",
        422: "A body of the wrong shape, or values that fail their checks",
        429: "Over the token's rate; see Retry-After",
    }.items()
}
_JOB_ERRORS = {**_ERRORS, 404: {"model": ErrorBody, "description": "No such job"}}
_FILE_ERRORS = {
    **_JOB_ERRORS,
    409: {"model": ErrorBody, "description": "The job is not done yet"},
}


def create_app(
    data_dir: Path,
    *,
    rate: float = 50.0,
    job_workers: int = 1,
    keep_days: int = 30,
    max_upload_mb: int = 2048,
) -> FastAPI:
    """The service's app over ``data_dir`` (cache, jobs table, job files, token hashes)."""
    service = Service(
        Path(data_dir),
        rate=rate,
        job_workers=job_workers,
        keep_days=keep_days,
        max_upload_mb=max_upload_mb,
    )

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        await run_in_threadpool(service.start)
        try:
            yield
        finally:
            await run_in_threadpool(service.stop)

    app = FastAPI(
        title="geonorm",
        version=__version__,
        summary="Resolve free-text locations to ISO 3166 places, offline: the batch service.",
        docs_url=None,  # the interactive pages would fetch their assets from the internet
        redoc_url=None,
        openapi_url="/openapi.json",
        lifespan=lifespan,
    )
    app.state.service = service
    metrics = Metrics(service)
    app.state.metrics = metrics
    upload_limit = service.max_upload_bytes + 1024 * 1024
    app.add_middleware(
        _BodyLimit,
        limit_of=lambda path: upload_limit if path.rstrip("/") == "/v1/jobs" else MAX_BODY_BYTES,
    )
    app.add_middleware(MetricsMiddleware, metrics=metrics)
    _install_error_handlers(app)
    _add_routes(app, service, metrics)
    app.include_router(review_router)
    return app


def _job_or_404(service: Service, job_id: str) -> Job:
    job = service.store.job(job_id) if valid_job_id(job_id) else None
    if job is None:
        raise NotFound(
            f"there is no job {job_id!r}",
            hint=f"check the id POST /v1/jobs returned; jobs are kept {service.keep_days} days",
        )
    return job


def _job_file(service: Service, job_id: str, name: str, what: str) -> Path:
    job = _job_or_404(service, job_id)
    if job.state in ("queued", "running"):
        raise NotReady(
            f"the job is {job.state}; its {what} is made when it is done",
            hint=f"poll GET /v1/jobs/{job_id} until its state is done",
        )
    if job.state == "failed":
        raise NotReady(
            f"the job failed, so it has no {what}: {job.error}", hint=job.hint or "send it again"
        )
    path = service.jobs_dir / job_id / name
    if job.state == "cancelled" or not path.is_file():
        raise NotFound(
            f"the job's {what} is not there (the job was deleted, or made none)",
            hint="send the file again as a new job",
        )
    return path


def _resolved(service: Service, texts: list[str], accept: float) -> bytes:
    results = service.resolve(texts, accept)
    return json.dumps({"results": results}, ensure_ascii=False, allow_nan=False).encode("utf-8")


def _add_routes(app: FastAPI, service: Service, metrics: Metrics) -> None:
    resolving = anyio.CapacityLimiter(RESOLVE_THREADS)
    resolve_role = Depends(_needs("resolve"))
    review_role = Depends(_needs("review"))
    admin_role = Depends(_needs("admin"))

    @app.get("/v1/health", response_model=Health, tags=["service"])
    def health() -> Health:
        """Whether the service runs, and the versions its answers depend on (no token)."""
        return Health(
            status="ok",
            index_version=service.index_version,
            resolver_version=service.resolver.version,
        )

    @app.post(
        "/v1/resolve",
        response_model=ResolveResponse,
        responses=_ERRORS,
        dependencies=[resolve_role],
        tags=["resolve"],
    )
    async def resolve(body: ResolveRequest) -> Response:
        """Answers for up to 10,000 texts, in order, exactly as `geonorm lookup --json`
        gives them with this service's cache (review decisions included)."""
        if len(body.texts) > MAX_TEXTS:
            raise TooLarge(
                f"{len(body.texts):,} texts in one request; at most {MAX_TEXTS:,}",
                hint="split them over several requests, or upload a file as a job",
            )
        # A few threads at a time: requests wait their turn in order on the event loop
        # rather than all threads fighting over the interpreter lock (steadier latency).
        payload = await anyio.to_thread.run_sync(
            _resolved, service, body.texts, body.accept, limiter=resolving
        )
        return Response(payload, media_type="application/json")

    @app.post(
        "/v1/jobs",
        status_code=202,
        response_model=JobCreated,
        responses=_ERRORS,
        dependencies=[resolve_role],
        tags=["jobs"],
        openapi_extra={
            "requestBody": {
                "required": True,
                "content": {
                    "multipart/form-data": {
                        "schema": {
                            "type": "object",
                            "required": ["file", "column"],
                            "properties": {
                                "file": {"type": "string", "format": "binary"},
                                "column": {"type": "string", "minLength": 1},
                                "accept": {"type": "number", "minimum": 0, "maximum": 1},
                                "format": {"type": "string", "enum": list(FORMATS)},
                            },
                        }
                    }
                },
            }
        },
    )
    async def create_job(request: Request) -> JSONResponse:
        """Upload a table (CSV, TSV, Parquet, JSON Lines) to clean as `geonorm clean` would;
        `column` names its location column."""
        job_id = new_job_id()
        folder = service.jobs_dir / job_id
        folder.mkdir(parents=True)
        try:
            upload = await receive_upload(request, folder / "upload.part", service.max_upload_bytes)
            job = _new_job(job_id, upload.fields, upload.filename, upload.got_file)
            (folder / "upload.part").rename(folder / job.input)
            await run_in_threadpool(service.store.add_job, job)
        except BaseException:
            shutil.rmtree(folder, ignore_errors=True)
            raise
        await run_in_threadpool(service.jobs.submit, job_id)
        return JSONResponse({"id": job_id, "state": "queued"}, status_code=202)

    @app.get(
        "/v1/jobs",
        response_model=JobList,
        responses=_ERRORS,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def list_jobs() -> JobList:
        """Every job kept (they are kept --keep-days days), oldest first."""
        return JobList(jobs=[JobStatus(**j.public()) for j in service.store.jobs()])

    @app.get(
        "/v1/jobs/{job_id}",
        response_model=JobStatus,
        responses=_JOB_ERRORS,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def job_status(job_id: str) -> JobStatus:
        """A job's state and progress; its summary once done, its error once failed."""
        return JobStatus(**_job_or_404(service, job_id).public())

    @app.delete(
        "/v1/jobs/{job_id}",
        response_model=JobStatus,
        responses=_JOB_ERRORS,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def delete_job(job_id: str) -> JobStatus:
        """Cancel a job (if queued or running) and delete its files."""
        _job_or_404(service, job_id)
        job = service.jobs.cancel(job_id)
        if job is None:
            raise NotFound(f"there is no job {job_id!r}", hint="it was deleted already")
        return JobStatus(**job.public())

    @app.get(
        "/v1/jobs/{job_id}/output",
        responses={**_FILE_ERRORS, 200: {"content": {m: {} for m in _MEDIA.values()}}},
        response_class=FileResponse,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def job_output(job_id: str) -> FileResponse:
        """The cleaned file: byte for byte what `geonorm clean` writes."""
        job = _job_or_404(service, job_id)
        path = _job_file(service, job_id, job.output, "output")
        fmt = job.format or suffix_format(job.output) or "csv"
        return FileResponse(path, media_type=_MEDIA[fmt], filename=f"cleaned-{job_id}{path.suffix}")

    @app.get(
        "/v1/jobs/{job_id}/queue",
        responses={**_FILE_ERRORS, 200: {"content": {"text/csv": {}}}},
        response_class=FileResponse,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def job_queue(job_id: str) -> FileResponse:
        """The review queue of the job's doubtful strings (as `geonorm review export`)."""
        path = _job_file(service, job_id, "queue.csv", "review queue")
        return FileResponse(path, media_type=_MEDIA["csv"], filename=f"queue-{job_id}.csv")

    @app.get(
        "/v1/jobs/{job_id}/tally",
        responses={**_FILE_ERRORS, 200: {"content": {"text/csv": {}}}},
        response_class=FileResponse,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def job_tally(job_id: str) -> FileResponse:
        """Rows per country, with rates (as `geonorm tally`)."""
        path = _job_file(service, job_id, "tally.csv", "tally")
        return FileResponse(path, media_type=_MEDIA["csv"], filename=f"tally-{job_id}.csv")

    @app.get(
        "/v1/jobs/{job_id}/map.svg",
        responses={**_FILE_ERRORS, 200: {"content": {"image/svg+xml": {}}}},
        response_class=FileResponse,
        dependencies=[resolve_role],
        tags=["jobs"],
    )
    def job_map(job_id: str) -> FileResponse:
        """A world map of the tally (as `geonorm map`)."""
        path = _job_file(service, job_id, "map.svg", "map")
        return FileResponse(path, media_type="image/svg+xml")

    @app.post(
        "/v1/decisions",
        response_model=DecisionsStored,
        responses=_ERRORS,
        dependencies=[review_role],
        tags=["review"],
    )
    def decisions(items: list[Decision]) -> DecisionsStored:
        """Store people's decisions, checked as `geonorm review apply` checks them; all of
        them or none. Later resolves and jobs use them."""
        return DecisionsStored(stored=service.decide([d.model_dump() for d in items]))

    @app.get(
        "/metrics",
        responses={**_ERRORS, 200: {"content": {"text/plain": {}}}},
        response_class=Response,
        dependencies=[admin_role],
        tags=["service"],
    )
    def prometheus_metrics() -> Response:
        """Requests by route and code, latencies, jobs by state, cache hit ratio."""
        return Response(metrics.render(), media_type="text/plain; version=0.0.4; charset=utf-8")


def _new_job(job_id: str, fields: dict[str, str], filename: str | None, got_file: bool) -> Job:
    """The job a form asks for, its fields checked."""
    if not got_file:
        raise Invalid(
            "the form has no part named file", hint="send the table as the form part file"
        )
    column = fields.get("column", "")
    if not column:
        raise Invalid(
            "the form has no column", hint="name the location column in the form part column"
        )
    accept = DEFAULT_ACCEPT
    if fields.get("accept", "").strip():
        try:
            accept = float(fields["accept"])
        except ValueError:
            accept = math.nan
        if not 0.0 <= accept <= 1.0:
            raise Invalid(
                f"accept must be a number between 0 and 1, got {fields['accept']!r}",
                hint="use a probability such as 0.8, or leave accept out",
            )
    fmt = fields.get("format", "").strip() or None
    if fmt is not None and fmt not in FORMATS:
        raise Invalid(f"unknown format {fmt!r}", hint=f"use one of: {', '.join(FORMATS)}")
    given = suffix_format(filename)
    suffix = Path(filename.replace("\\", "/")).suffix.lower() if filename and given else ""
    now = time.time()
    return Job(
        id=job_id,
        state="queued",
        column=column,
        accept=accept,
        format=fmt,
        input=f"input{suffix}",
        output="output" + FORMAT_SUFFIX[fmt or given or "csv"],
        upload_name=(filename or "")[:200],
        created=now,
        updated=now,
        rows=None,
        distinct=None,
        resolved=None,
        progress=0.0,
        summary=None,
        error=None,
        hint=None,
    )
