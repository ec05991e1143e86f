"""Score entry in the browser: a local web app over a folder of study files.

:func:`create_app` builds the FastAPI app (entry page, ``/api/analyze`` and the study, draft and
report endpoints); :func:`serve` runs it with uvicorn on 127.0.0.1 only. FastAPI, uvicorn and
jinja2 load only when this package is imported, so ``segreport --help`` stays quick.
"""

from __future__ import annotations

from reporting.web.app import DEFAULT_PORT, HOST, create_app
from reporting.web.server import serve, serve_store

__all__ = ["DEFAULT_PORT", "HOST", "create_app", "serve", "serve_store"]
