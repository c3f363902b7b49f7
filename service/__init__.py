"""Protolyte's HTTP edge: FastAPI app, schemas, problem responses, metrics, logs, CLI.

The edge knows no chemistry: it validates requests, hands plain records to
``models`` and serialises what comes back.
"""

from __future__ import annotations

__all__: list[str] = []
