"""Runtime settings, read from ``PROTOLYTE_*`` environment variables.

| variable | default | meaning |
| --- | --- | --- |
| ``PROTOLYTE_HOST`` | ``127.0.0.1`` | address ``protolyte serve`` binds |
| ``PROTOLYTE_PORT`` | ``8000`` | TCP port |
| ``PROTOLYTE_WORKERS`` | ``1`` | worker processes (>1 runs gunicorn) |
| ``PROTOLYTE_BATCH_MAX_ITEMS`` | ``10000`` | most streams in one batch request |
| ``PROTOLYTE_BODY_LIMIT_BYTES`` | ``16777216`` (16 MiB) | largest request body [bytes] |
| ``PROTOLYTE_LOG_LEVEL`` | ``INFO`` | log level of the JSON log lines |
| ``PROTOLYTE_API_KEY`` | unset | when set, every ``/v1`` route needs header ``X-API-Key`` |
| ``PROTOLYTE_CORS_ORIGINS`` | empty | comma-separated allowed origins; empty = CORS closed |
| ``PROTOLYTE_SOLVE_TIME_BUDGET_S`` | ``10`` | wall-clock budget of one request's solve [s] |
| ``PROTOLYTE_COALESCE`` | ``1`` | ``1``: concurrent single-stream solves share one vectorized call; ``0``: each alone |
| ``PROTOLYTE_COALESCE_MAX_BATCH`` | ``256`` | most single-stream requests solved in one coalesced call |
| ``PROTOLYTE_COALESCE_WAIT_MS`` | ``20`` | longest wait [ms] for requests still arriving before a coalesced call (``0``: none) |
| ``PROTOLYTE_FAST_PATH`` | ``1`` | ``1``: a valid ``POST /v1/equilibrium`` skips FastAPI's stack (``service.fastpath``); ``0``: every request takes the full app |
| ``PROTOLYTE_CPU_AFFINITY`` | ``off`` | ``auto``: worker *i* runs on the *i*-th CPU it may use; ``0,2``: on the listed CPUs in turn; ``off``: the scheduler decides (``service.affinity``) |
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field

from service.affinity import OFF, parse_cpu_affinity

__all__ = ["ENV_PREFIX", "LOG_LEVELS", "Settings", "SettingsError"]

ENV_PREFIX = "PROTOLYTE_"
LOG_LEVELS: tuple[str, ...] = ("DEBUG", "INFO", "WARNING", "ERROR", "CRITICAL")


class SettingsError(ValueError):
    """An environment variable holds a value the service cannot use."""


def _int(env: Mapping[str, str], name: str, default: int, minimum: int) -> int:
    raw = env.get(ENV_PREFIX + name)
    if raw is None or raw.strip() == "":
        return default
    try:
        value = int(raw.strip())
    except ValueError:
        raise SettingsError(f"{ENV_PREFIX}{name} must be an integer, got {raw!r}") from None
    if value < minimum:
        raise SettingsError(f"{ENV_PREFIX}{name} must be at least {minimum}, got {value}")
    return value


def _flag(env: Mapping[str, str], name: str, default: bool) -> bool:
    raw = env.get(ENV_PREFIX + name)
    if raw is None or raw.strip() == "":
        return default
    value = raw.strip().lower()
    if value in ("1", "true", "yes", "on"):
        return True
    if value in ("0", "false", "no", "off"):
        return False
    raise SettingsError(f"{ENV_PREFIX}{name} must be 1 or 0, got {raw!r}")


def _float(env: Mapping[str, str], name: str, default: float, minimum: float) -> float:
    raw = env.get(ENV_PREFIX + name)
    if raw is None or raw.strip() == "":
        return default
    try:
        value = float(raw.strip())
    except ValueError:
        raise SettingsError(f"{ENV_PREFIX}{name} must be a number, got {raw!r}") from None
    if not (value >= minimum) or value == float("inf"):
        raise SettingsError(f"{ENV_PREFIX}{name} must be a finite number >= {minimum}, got {raw!r}")
    return value


@dataclass(frozen=True, slots=True)
class Settings:
    """Everything configurable about one service process."""

    host: str = "127.0.0.1"
    port: int = 8000
    workers: int = 1
    batch_max_items: int = 10_000
    body_limit_bytes: int = 16 * 1024 * 1024
    log_level: str = "INFO"
    api_key: str | None = field(default=None, repr=False)
    cors_origins: tuple[str, ...] = ()
    solve_time_budget_s: float = 10.0
    coalesce: bool = True
    coalesce_max_batch: int = 256
    coalesce_wait_ms: float = 20.0
    fast_path: bool = True
    cpu_affinity: str = OFF

    def __post_init__(self) -> None:
        if self.log_level not in LOG_LEVELS:
            raise SettingsError(f"log level must be one of {', '.join(LOG_LEVELS)}, got {self.log_level!r}")
        if self.batch_max_items < 1 or self.body_limit_bytes < 1 or self.workers < 1:
            raise SettingsError("batch_max_items, body_limit_bytes and workers must be >= 1")
        if not 0 < self.port < 65536:
            raise SettingsError(f"port must be 1-65535, got {self.port}")
        if not self.solve_time_budget_s > 0:
            raise SettingsError("solve_time_budget_s must be > 0")
        if self.coalesce_max_batch < 1:
            raise SettingsError("coalesce_max_batch must be >= 1")
        if not 0 <= self.coalesce_wait_ms <= 1000:
            raise SettingsError(f"coalesce_wait_ms must be 0-1000, got {self.coalesce_wait_ms!r}")
        try:
            normal = parse_cpu_affinity(self.cpu_affinity)
        except ValueError as exc:
            raise SettingsError(f"cpu_affinity {exc}") from None
        if normal != self.cpu_affinity:
            raise SettingsError(f"cpu_affinity must be given as {normal!r}, got {self.cpu_affinity!r}")

    @classmethod
    def from_env(cls, env: Mapping[str, str] | None = None) -> Settings:
        """Read settings from ``env`` (default ``os.environ``); unset variables keep defaults."""
        env = os.environ if env is None else env
        key = env.get(ENV_PREFIX + "API_KEY")
        origins = env.get(ENV_PREFIX + "CORS_ORIGINS", "")
        return cls(
            host=env.get(ENV_PREFIX + "HOST", "").strip() or "127.0.0.1",
            port=_int(env, "PORT", 8000, 1),
            workers=_int(env, "WORKERS", 1, 1),
            batch_max_items=_int(env, "BATCH_MAX_ITEMS", 10_000, 1),
            body_limit_bytes=_int(env, "BODY_LIMIT_BYTES", 16 * 1024 * 1024, 1),
            log_level=(env.get(ENV_PREFIX + "LOG_LEVEL", "").strip() or "INFO").upper(),
            api_key=key if key else None,
            cors_origins=tuple(o.strip() for o in origins.split(",") if o.strip()),
            solve_time_budget_s=_float(env, "SOLVE_TIME_BUDGET_S", 10.0, 0.001),
            coalesce=_flag(env, "COALESCE", True),
            coalesce_max_batch=_int(env, "COALESCE_MAX_BATCH", 256, 1),
            coalesce_wait_ms=_float(env, "COALESCE_WAIT_MS", 20.0, 0.0),
            fast_path=_flag(env, "FAST_PATH", True),
            cpu_affinity=_cpu_affinity(env),
        )


def _cpu_affinity(env: Mapping[str, str]) -> str:
    raw = env.get(ENV_PREFIX + "CPU_AFFINITY", "")
    try:
        return parse_cpu_affinity(raw)
    except ValueError as exc:
        raise SettingsError(f"{ENV_PREFIX}CPU_AFFINITY {exc}") from None
