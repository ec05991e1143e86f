"""What both entry apps (folder mode and lab mode) share: refusals as located problems, the
error handlers that turn every failure into one (never a traceback), and the OpenAPI document
with the study's schema in it.

Each app passes its own ``located`` (an error as a :class:`~reporting.web.api.Problem`) and
``shown`` (text as the page may show it: folder mode names files relative to the studies folder).
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.openapi.utils import get_openapi
from fastapi.responses import JSONResponse

from reporting.errors import InputError, InputErrors, ReportingError
from reporting.model import Study
from reporting.web.api import Problem, ProblemList

log = logging.getLogger(__name__)

Located = Callable[[InputError | ReportingError], Problem]


def refused(
    status: int, detail: str, problems: list[Problem], headers: Mapping[str, str] | None = None
) -> JSONResponse:
    """A refusal: ``{detail, problems}`` with ``status``."""
    body = ProblemList(detail=detail, problems=problems)
    return JSONResponse(
        body.model_dump(mode="json"), status_code=status, headers=dict(headers or {})
    )


def add_error_handlers(
    app: FastAPI,
    *,
    located: Located,
    shown: Callable[[str], str] = str,
    unnamed_file: str = "studies folder",
) -> None:
    """Answer bad input with 422 and located problems, a missing file with 404, an unreadable or
    unwritable one with 403/409 (named by ``shown``, ``unnamed_file`` when the error names none),
    and anything unexpected with a plain 500 (the details go to the server's log)."""

    @app.exception_handler(InputErrors)
    async def _input_errors(request: Request, exc: InputErrors) -> JSONResponse:
        problems = [located(p) for p in exc.problems]
        count = len(problems)
        return refused(422, f"{count} problem{'s' if count != 1 else ''} to fix", problems)

    @app.exception_handler(InputError)
    async def _input_error(request: Request, exc: InputError) -> JSONResponse:
        return refused(422, "1 problem to fix", [located(exc)])

    @app.exception_handler(ReportingError)
    async def _reporting_error(request: Request, exc: ReportingError) -> JSONResponse:
        return refused(422, shown(str(exc)), [located(exc)])

    @app.exception_handler(RequestValidationError)
    async def _bad_request(request: Request, exc: RequestValidationError) -> JSONResponse:
        problems = []
        for error in exc.errors():
            where, *rest = [str(p) for p in error["loc"]] or ["request"]
            path = ".".join(rest)
            problems.append(
                Problem(
                    location=f"{where}: {path}" if path else where, path=path, problem=error["msg"]
                )
            )
        return refused(422, "the request is not valid", problems)

    @app.exception_handler(FileNotFoundError)
    async def _missing(request: Request, exc: FileNotFoundError) -> JSONResponse:
        return refused(404, shown(f"no such file: {exc.args[0] if exc.args else ''}"), [])

    @app.exception_handler(OSError)
    async def _os_error(request: Request, exc: OSError) -> JSONResponse:
        # a folder or file the server cannot read or write: say which, relative, never a traceback
        name = shown(str(exc.filename)) if exc.filename else unnamed_file
        status = 403 if isinstance(exc, PermissionError) else 409
        problem = exc.strerror or type(exc).__name__
        return refused(
            status, f"{name}: {problem}", [Problem(location=name, path="", problem=problem)]
        )

    @app.exception_handler(RecursionError)
    async def _too_deep(request: Request, exc: RecursionError) -> JSONResponse:
        return refused(422, "the request is nested too deeply", [])

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error answering %s %s", request.method, request.url.path)
        return refused(500, "internal error; the server's log has the details", [])


def use_study_openapi(app: FastAPI) -> None:
    """``/openapi.json`` of ``app`` with the study file's schema as component ``Study``."""

    def openapi() -> dict[str, Any]:
        if app.openapi_schema:
            return app.openapi_schema
        schema = get_openapi(
            title=app.title, version=app.version, description=app.description, routes=app.routes
        )
        study = Study.model_json_schema(ref_template="#/components/schemas/{model}")
        components = schema.setdefault("components", {}).setdefault("schemas", {})
        components.update(study.pop("$defs", {}))
        study.pop("$id", None)
        components["Study"] = study
        app.openapi_schema = schema
        return schema

    app.openapi = openapi  # type: ignore[method-assign]
