"""Prometheus metrics of the service (prefix ``protolyte_``), single- or multi-process.

Names are fixed (alert rules are written against them):

* ``protolyte_http_requests_total{route,method,status}`` counter
* ``protolyte_http_request_duration_seconds{route,method}`` histogram [s]
* ``protolyte_solver_iterations`` histogram [iterations per solved stream]
* ``protolyte_solve_failures_total{reason}`` counter
* ``protolyte_batch_size`` histogram [items per batch request]
* ``protolyte_coalesced_group_size`` histogram [single-stream requests solved in one call]
* ``protolyte_streams_solved_total`` counter
* ``protolyte_build_info{version,database_version}`` gauge, always 1

``route`` is the route template (``/v1/equilibrium``) or ``unmatched``; ``reason`` is a
short code from the core, sanitised to ``[a-z0-9_]`` (anything else is ``other``).

When ``PROMETHEUS_MULTIPROC_DIR`` is set (several workers) values live in that
directory and every scrape builds a fresh registry with ``MultiProcessCollector``.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path
from typing import Any

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Gauge,
    Histogram,
    generate_latest,
    multiprocess,
)
from prometheus_client.platform_collector import PlatformCollector
from prometheus_client.process_collector import ProcessCollector

__all__ = ["CONTENT_TYPE_LATEST", "METRIC_NAMES", "Metrics", "multiprocess_dir", "prepare_multiprocess_dir"]

METRIC_NAMES: tuple[str, ...] = (
    "protolyte_http_requests_total",
    "protolyte_http_request_duration_seconds",
    "protolyte_solver_iterations",
    "protolyte_solve_failures_total",
    "protolyte_batch_size",
    "protolyte_coalesced_group_size",
    "protolyte_streams_solved_total",
    "protolyte_build_info",
)

_DURATION_BUCKETS = (0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0)
_ITERATION_BUCKETS = (1, 2, 3, 5, 8, 12, 16, 20, 30, 40, 60, 80, 100, 150, 200)
_BATCH_BUCKETS = (1, 2, 5, 10, 50, 100, 500, 1000, 2500, 5000, 10000, 25000, 50000, 100000)
_GROUP_BUCKETS = (1, 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024)
_REASON_RE = re.compile(r"^[a-z0-9_]{1,40}$")


def multiprocess_dir() -> str | None:
    """The multiprocess directory when multiprocess mode is on, else None."""
    return os.environ.get("PROMETHEUS_MULTIPROC_DIR") or os.environ.get("prometheus_multiproc_dir")


def prepare_multiprocess_dir(path: str) -> str:
    """Wipe and create the multiprocess directory (at server start, before any worker)."""
    shutil.rmtree(path, ignore_errors=True)
    Path(path).mkdir(parents=True, exist_ok=True)
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = path
    return path


class Metrics:
    """The service's metric objects, registered in their own registry."""

    def __init__(self, version: str, registry: CollectorRegistry | None = None) -> None:
        self.multiprocess = multiprocess_dir() is not None
        self.registry = registry if registry is not None else CollectorRegistry()
        if not self.multiprocess:
            ProcessCollector(registry=self.registry)
            PlatformCollector(registry=self.registry)
        reg = self.registry
        self.requests = Counter(
            "protolyte_http_requests_total",
            "HTTP requests answered, by route template, method and status code.",
            ("route", "method", "status"),
            registry=reg,
        )
        self.duration = Histogram(
            "protolyte_http_request_duration_seconds",
            "Time from request start to the end of the response [s].",
            ("route", "method"),
            buckets=_DURATION_BUCKETS,
            registry=reg,
        )
        self.iterations = Histogram(
            "protolyte_solver_iterations",
            "Solver iterations per solved stream.",
            buckets=_ITERATION_BUCKETS,
            registry=reg,
        )
        self.failures = Counter(
            "protolyte_solve_failures_total",
            "Streams that could not be computed, by reason code.",
            ("reason",),
            registry=reg,
        )
        self.batch_size = Histogram(
            "protolyte_batch_size",
            "Items per batch request.",
            buckets=_BATCH_BUCKETS,
            registry=reg,
        )
        self.group_size = Histogram(
            "protolyte_coalesced_group_size",
            "Single-stream requests solved together in one vectorized call (coalescing).",
            buckets=_GROUP_BUCKETS,
            registry=reg,
        )
        self.solved = Counter(
            "protolyte_streams_solved_total",
            "Streams solved successfully.",
            registry=reg,
        )
        self.build_info = Gauge(
            "protolyte_build_info",
            "Build information; the value is always 1.",
            ("version", "database_version"),
            registry=reg,
            multiprocess_mode="max",
        )
        self._version = version
        self._request_children: dict[tuple[str, str, int], tuple[Any, Any]] = {}

    def set_build_info(self, database_version: str) -> None:
        """Publish the build-info gauge once the database version is known."""
        self.build_info.labels(version=self._version, database_version=database_version).set(1)

    def observe_request(self, route: str, method: str, status: int, seconds: float) -> None:
        """Count one answered request and its duration."""
        key = (route, method, status)
        children = self._request_children.get(key)
        if children is None:  # labels() looks the child up under a lock: once per label set
            children = (
                self.requests.labels(route=route, method=method, status=str(status)),
                self.duration.labels(route=route, method=method),
            )
            if len(self._request_children) < 4096:  # bounded: route is a template or "unmatched"
                self._request_children[key] = children
        children[0].inc()
        children[1].observe(seconds)

    def observe_solved(self, iterations: int) -> None:
        """Count one solved stream."""
        self.solved.inc()
        self.iterations.observe(iterations)

    def observe_group(self, size: int) -> None:
        """Record one coalesced solve of ``size`` requests."""
        self.group_size.observe(size)

    def observe_failure(self, reason: str) -> None:
        """Count one stream that failed, by reason code."""
        code = reason if _REASON_RE.match(reason or "") else "other"
        self.failures.labels(reason=code).inc()

    def exposition(self) -> bytes:
        """The text exposition for a scrape."""
        if self.multiprocess:
            registry = CollectorRegistry()
            multiprocess.MultiProcessCollector(registry)
            return generate_latest(registry)
        return generate_latest(self.registry)
