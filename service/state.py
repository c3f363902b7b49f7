"""Per-app runtime state: the loaded database, the self-test, readiness."""

from __future__ import annotations

import logging
import threading
from importlib.metadata import PackageNotFoundError, version
from typing import Any

from models.stream import Entry, StreamSpec

from service.convert import to_response
from service.core import Core

__all__ = ["SELF_TEST_STREAM", "AppState", "service_version"]

_log = logging.getLogger("protolyte.startup")

#: A small fixed stream solved at start-up; readiness waits for it.
SELF_TEST_STREAM = StreamSpec(
    composition=(
        Entry("Na+", 2.0, "mmol/L"),
        Entry("Cl-", 1.0, "mmol/L"),
        Entry("carbonate", 1.0, "mmol/L"),
    ),
)


def service_version() -> str:
    """The installed package version (``0.0.0+unknown`` when not installed)."""
    try:
        return version("protolyte")
    except PackageNotFoundError:
        return "0.0.0+unknown"


class AppState:
    """Loads the database once, runs the self-test, and knows whether the app is ready."""

    def __init__(self, core: Core) -> None:
        self.core = core
        self.version = service_version()
        self.database: Any = None
        self.reagents: Any = None
        self.ready = False
        self.failure: str | None = None
        self._lock = threading.Lock()

    def ensure_loaded(self) -> None:
        """Load data and run the self-test (once; later calls return at once)."""
        if self.ready:
            return
        with self._lock:
            if self.ready:
                return
            try:
                database = self.core.load_database()
                reagents = self.core.load_reagents() if self.core.load_reagents else None
                result = self.core.solve(SELF_TEST_STREAM)
                response = to_response(result, self.version)
                if not (0.0 < response.ph < 14.0) or abs(response.charge_balance_residual_mol_l) > 1e-6:
                    raise RuntimeError(
                        f"self-test gave pH {response.ph} with residual {response.charge_balance_residual_mol_l}"
                    )
            except Exception as exc:
                self.failure = f"{type(exc).__name__}: {exc}"
                _log.error("self-test failed", extra={"error_type": type(exc).__name__})
                raise
            self.database = database
            self.reagents = reagents
            self.failure = None
            self.ready = True
            _log.info("ready")
