"""Prometheus metrics of one service process (a private registry, so apps in tests don't clash)."""

from __future__ import annotations

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram, generate_latest


class Metrics:
    """Prometheus metrics of one application: requests, latency, queue depth, job seconds, multiply-adds, cache hits
    and misses."""

    def __init__(self) -> None:
        r = self.registry = CollectorRegistry()
        self.requests = Counter("veramp_requests_total", "HTTP requests", ["method", "route", "status"], registry=r)
        self.latency = Histogram("veramp_request_seconds", "HTTP request latency", ["route"], registry=r,
                                 buckets=(0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 1, 5, 30))
        self.cache_hits = Counter("veramp_cache_hits_total", "amplitudes served from the cache", registry=r)
        self.cache_misses = Counter("veramp_cache_misses_total", "amplitudes computed", registry=r)
        self.queue_depth = Gauge("veramp_queue_depth", "jobs queued or running", registry=r)
        self.job_seconds = Histogram("veramp_job_seconds", "job wall time", registry=r,
                                     buckets=(0.1, 1, 10, 60, 600, 3600, 86400))
        self.madds = Counter("veramp_madds_total", "complex multiply-adds contracted", registry=r)

    def render(self) -> bytes:
        """The metrics in Prometheus' text format."""
        return generate_latest(self.registry)
