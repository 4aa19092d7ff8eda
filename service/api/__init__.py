"""The HTTP surface of oxyrule (FastAPI); the only package that imports the web framework.

``create_app(settings)`` builds the app; ``service.api.server`` runs it under uvicorn for
``oxyrule serve``. Importing this package does no work beyond importing its modules.
"""

from __future__ import annotations

from service.api.app import create_app

__all__ = ["create_app"]
