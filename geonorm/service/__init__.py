"""The batch service, ``geonorm serve``: one warm index, the shared cache, file jobs,
people's decisions and tokens over HTTP (FastAPI under uvicorn).

``create_app(data_dir)`` builds the app; ``serve`` runs it; ``tokens`` manages
the tokens. The service calls the same library functions as the command line,
so its answers and files are the command line's.
"""

from __future__ import annotations

from .app import create_app

__all__ = ["create_app"]
