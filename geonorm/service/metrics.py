"""``/metrics`` in the Prometheus text format: requests, latency, jobs, cache hits.

Each app has its own registry (several apps may live in one process, as in
tests). Request counts and latencies are recorded by a small ASGI middleware
under the route's path template (``/v1/jobs/{job_id}``), never the raw path,
so the number of series stays bounded.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from prometheus_client import CollectorRegistry, Counter, Histogram, generate_latest
from prometheus_client.core import GaugeMetricFamily, Metric
from prometheus_client.registry import Collector

if TYPE_CHECKING:
    from .core import Service

__all__ = ["Metrics", "MetricsMiddleware"]

_BUCKETS = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0)


class _State(Collector):
    """Read when scraped: jobs by state and the cache's hit ratio."""

    def __init__(self, service: Service) -> None:
        self.service = service

    def collect(self) -> Iterator[Metric]:
        jobs = GaugeMetricFamily("geonorm_jobs", "Jobs by state", labels=["state"])
        for state, n in self.service.store.count_jobs().items():
            jobs.add_metric([state], n)
        yield jobs
        s = self.service
        ratio = s.cache_hits / s.lookups if s.lookups else 0.0
        yield GaugeMetricFamily(
            "geonorm_cache_hit_ratio",
            "Share of the distinct strings of /v1/resolve answered from the cache",
            value=ratio,
        )
        yield GaugeMetricFamily(
            "geonorm_resolve_strings", "Distinct strings asked of /v1/resolve", value=s.lookups
        )


class Metrics:
    def __init__(self, service: Service) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        self.requests = Counter(
            "geonorm_requests",
            "HTTP requests by route and status code",
            ["route", "code"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "geonorm_request_seconds",
            "Time to answer a request, by route",
            ["route"],
            buckets=_BUCKETS,
            registry=self.registry,
        )
        self.registry.register(_State(service))

    def render(self) -> bytes:
        return generate_latest(self.registry)


class MetricsMiddleware:
    """Counts every HTTP request by route template and status, and times it."""

    def __init__(self, app: Any, metrics: Metrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = [500]

        async def sending(message: Any) -> None:
            if message["type"] == "http.response.start":
                status[0] = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, sending)
        finally:
            route = getattr(scope.get("route"), "path", None) or "unmatched"
            self.metrics.requests.labels(route, str(status[0])).inc()
            self.metrics.latency.labels(route).observe(time.perf_counter() - started)
