"""The entry server: a FastAPI app over one studies folder, and :func:`serve` to run it locally.

The page (``templates/entry.html.j2`` with ``static/entry.js``) lets the reader click or type scores
on the bull's-eye maps; every change goes to ``POST /api/analyze``, which runs the same load and
analysis code as ``segreport analyze`` and answers with the record and the draft narrative, or with
the command line's located problems (422). Saving writes ``<study id>.yaml`` into the folder;
"report" writes the record, maps and PDF into its ``reports`` folder with
:func:`reporting.render.write_report` and serves the PDF. Drafts autosave into a hidden folder.

The server binds to 127.0.0.1 only, answers only loopback host names, caps request bodies at
256 KB and serves every asset itself (no CDN; FastAPI's documentation pages, which load scripts
from a CDN, are switched off, while ``/openapi.json`` stays).
"""

from __future__ import annotations

import datetime as dt
import json
import logging
from pathlib import Path
from typing import Annotated, Any

from fastapi import Body, FastAPI, Query, Request
from fastapi.exceptions import RequestValidationError
from fastapi.openapi.utils import get_openapi
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, Response
from fastapi.staticfiles import StaticFiles

from reporting import __version__
from reporting.analysis import analyze, resolve_territory_map
from reporting.errors import InputError, InputErrors, ReportingError
from reporting.export.record import record_dict
from reporting.load import study_from_data
from reporting.model import STAGE_ORDER, Protocol, SafeId, Study
from reporting.segments import BUILT_IN_MAPS
from reporting.settings import Settings, default_settings
from reporting.web import guard, pages, shapes
from reporting.web.api import (
    AnalyzeResult,
    DraftListing,
    DraftSaved,
    FolderListing,
    OpenedStudy,
    Problem,
    ProblemList,
    ReportFiles,
    Saved,
    StudyListing,
    problem_of,
)
from reporting.web.store import Folder
from reporting.wording import CAUTIONS

log = logging.getLogger(__name__)

HOST = "127.0.0.1"
DEFAULT_PORT = 8765
STUDY_SOURCE = "study"
_REFUSED: dict[int | str, dict[str, Any]] = {
    413: {"model": ProblemList, "description": "Request body too large."},
    422: {
        "model": ProblemList,
        "description": "Located problems, as the command line prints them.",
    },
}


def _study_body(ref: str = "#/components/schemas/Study") -> dict[str, Any]:
    return {
        "requestBody": {
            "required": True,
            "description": "A study in the study-file format, as JSON.",
            "content": {"application/json": {"schema": {"$ref": ref}}},
        }
    }


def _refused(status: int, detail: str, problems: list[Problem]) -> JSONResponse:
    body = ProblemList(detail=detail, problems=problems)
    return JSONResponse(body.model_dump(mode="json"), status_code=status)


async def _json_body(request: Request, source: str) -> Any:
    raw = await request.body()
    if not raw.strip():
        raise InputError(source, "the request has no body; send the study as JSON")
    try:
        return json.loads(raw)
    except UnicodeDecodeError:
        raise InputError(source, "the body is not UTF-8 text") from None
    except json.JSONDecodeError as exc:
        raise InputError(
            f"{source}: line {exc.lineno}, column {exc.colno}", f"invalid JSON: {exc.msg}"
        ) from None


def create_app(
    studies_dir: Path,
    *,
    drafts_dir: Path | None = None,
    reports_dir: Path | None = None,
    settings: Settings | None = None,
    max_body_bytes: int = guard.MAX_BODY_BYTES,
    allowed_hosts: tuple[str, ...] = guard.LOOPBACK_HOSTS,
) -> FastAPI:
    """The entry app over ``studies_dir`` (created when missing).

    Drafts go to ``drafts_dir`` (default ``<studies>/.drafts``, hidden from ``segreport batch``),
    reports to ``reports_dir`` (default ``<studies>/reports``). ``settings`` are the lab thresholds
    (default: the published defaults), the same object ``segreport analyze --settings`` builds.
    """
    folder = Folder.at(studies_dir, drafts_dir, reports_dir)
    lab = settings or default_settings()
    app = FastAPI(
        title="segreport score entry",
        version=__version__,
        description=("Local score entry for stress-echo studies. " + " ".join(CAUTIONS)),
        docs_url=None,
        redoc_url=None,
    )
    app.add_middleware(guard.Guard, max_body_bytes=max_body_bytes, allowed_hosts=allowed_hosts)
    app.mount("/static", StaticFiles(packages=[("reporting.web", "static")]), name="static")

    # --- errors ----------------------------------------------------------------------------

    @app.exception_handler(InputErrors)
    async def _input_errors(request: Request, exc: InputErrors) -> JSONResponse:
        problems = [problem_of(p, STUDY_SOURCE) for p in exc.problems]
        count = len(problems)
        return _refused(422, f"{count} problem{'s' if count != 1 else ''} to fix", problems)

    @app.exception_handler(InputError)
    async def _input_error(request: Request, exc: InputError) -> JSONResponse:
        return _refused(422, "1 problem to fix", [problem_of(exc, STUDY_SOURCE)])

    @app.exception_handler(ReportingError)
    async def _reporting_error(request: Request, exc: ReportingError) -> JSONResponse:
        return _refused(422, str(exc), [Problem(location="", path="", problem=str(exc))])

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
        return _refused(422, "the request is not valid", problems)

    @app.exception_handler(FileNotFoundError)
    async def _missing(request: Request, exc: FileNotFoundError) -> JSONResponse:
        return _refused(404, f"no such file: {exc.args[0] if exc.args else ''}", [])

    @app.exception_handler(FileExistsError)
    async def _exists(request: Request, exc: FileExistsError) -> JSONResponse:
        name = exc.args[0] if exc.args else ""
        return _refused(409, f"{name} already exists; save with overwrite=true to replace it", [])

    # --- computing -------------------------------------------------------------------------

    def within(relative: str, where: str) -> Path:
        path = (folder.studies / relative).resolve()
        if not path.is_relative_to(folder.studies):
            raise InputError(where, "the file must lie inside the studies folder")
        return path

    def run_analysis(study: Study) -> AnalyzeResult:
        curves = None
        if study.territory_map is not None and study.territory_map not in BUILT_IN_MAPS:
            within(study.territory_map, "territory_map")
        territory_map = resolve_territory_map(study, folder.studies)
        if study.perfusion_curves is not None:
            from reporting.kinetics import load_curves

            curves = load_curves(
                within(study.perfusion_curves, "perfusion_curves"),
                segment_model=study.segment_model,
                settings=lab,
            )
        analysis = analyze(study, settings=lab, territory_map=territory_map, curves=curves)
        from reporting.render import narrative_html, narrative_text
        from reporting.render.narrative import summary

        return AnalyzeResult(
            record=analysis,
            summary=summary(analysis),
            narrative_text=narrative_text(analysis),
            narrative_html=narrative_html(analysis),
            territory_boundaries=shapes.territory_boundaries_d(
                analysis.segment_model, [s.territory for s in analysis.segments]
            ),
        )

    @app.post(
        "/api/analyze",
        response_model=AnalyzeResult,
        responses=_REFUSED,
        openapi_extra=_study_body(),
        summary="Validate and analyse a study (same code as `segreport analyze`)",
    )
    async def analyze_study(request: Request) -> JSONResponse:
        study = study_from_data(await _json_body(request, STUDY_SOURCE), source=STUDY_SOURCE)
        result = run_analysis(study)
        # the record exactly as the command line writes it
        body = result.model_dump(mode="json") | {"record": record_dict(result.record)}
        return JSONResponse(body)

    # --- study files -----------------------------------------------------------------------

    def listing() -> FolderListing:
        return FolderListing(
            studies=[
                StudyListing(
                    id=s.id,
                    file=s.file,
                    modified=s.modified,
                    date=s.date,
                    patient=s.patient,
                    valid=s.valid,
                )
                for s in folder.list_studies()
            ],
            drafts=[DraftListing(id=d, modified=m) for d, m in folder.list_drafts()],
        )

    def opened(study_id: str) -> OpenedStudy:
        name, data, problems = folder.read_study(study_id)
        return OpenedStudy(
            id=study_id,
            file=name,
            study=_jsonable(data) if isinstance(data, dict) else {},
            problems=[problem_of(p, name) for p in problems],
        )

    @app.get("/api/studies", response_model=FolderListing, summary="Study files and drafts")
    async def list_studies() -> FolderListing:
        return listing()

    @app.get(
        "/api/studies/{study_id}",
        response_model=OpenedStudy,
        responses=_REFUSED,
        summary="Read a study file for editing",
    )
    async def open_study(study_id: SafeId) -> OpenedStudy:
        return opened(study_id)

    @app.put(
        "/api/studies/{study_id}",
        response_model=Saved,
        responses=_REFUSED,
        openapi_extra=_study_body(),
        summary="Save a study as <study id>.yaml in the studies folder",
    )
    async def save_study(
        study_id: SafeId,
        request: Request,
        overwrite: Annotated[bool, Query(description="Replace an existing file.")] = False,
    ) -> Saved:
        study = study_from_data(await _json_body(request, STUDY_SOURCE), source=STUDY_SOURCE)
        if study.study.id != study_id:
            raise InputError(
                f"{STUDY_SOURCE}: study.id",
                f"the study id {study.study.id!r} differs from {study_id!r} in the address",
            )
        path = folder.save_study(study, overwrite=overwrite)
        return Saved(id=study_id, file=path.name)

    @app.post(
        "/api/studies/{study_id}/report",
        response_model=ReportFiles,
        responses=_REFUSED,
        summary="Write the record, maps and PDF of a saved study into the reports folder",
    )
    def write_report(
        study_id: SafeId,
    ) -> ReportFiles:  # plain def: rendering runs in a worker thread
        from reporting.load import load_study
        from reporting.render import write_report as write_files

        path = folder.study_path(study_id)
        if path is None:
            raise FileNotFoundError(f"{study_id}.yaml (save the study first)")
        try:
            study = load_study(path)
        except InputErrors as exc:
            raise exc.prefixed(STUDY_SOURCE) from None
        written = write_files(run_analysis(study).record, folder.reports)
        urls = [f"/reports/{p.name}" for p in written]
        return ReportFiles(id=study_id, pdf=next(u for u in urls if u.endswith(".pdf")), files=urls)

    @app.get("/reports/{name}", summary="A written report file (PDF, SVG map or record)")
    async def report_file(name: str) -> Response:
        path, media = folder.report_file(name)
        return FileResponse(
            path,
            media_type=media,
            headers={"content-disposition": f'inline; filename="{path.name}"'},
        )

    # --- drafts ----------------------------------------------------------------------------

    @app.get("/api/drafts", response_model=list[DraftListing], summary="Autosaved drafts")
    async def list_drafts() -> list[DraftListing]:
        return [DraftListing(id=d, modified=m) for d, m in folder.list_drafts()]

    @app.get("/api/drafts/{draft_id}", responses=_REFUSED, summary="Read an autosaved draft")
    async def read_draft(draft_id: SafeId) -> dict[str, Any]:
        return folder.read_draft(draft_id)

    @app.put(
        "/api/drafts/{draft_id}",
        response_model=DraftSaved,
        responses=_REFUSED,
        summary="Autosave the page's form data (may be incomplete)",
    )
    async def save_draft(
        draft_id: SafeId,
        form: Annotated[dict[str, Any], Body(description="The form data, valid or not.")],
    ) -> DraftSaved:
        folder.save_draft(draft_id, form)
        return DraftSaved(
            id=draft_id, saved_at=dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        )

    @app.delete("/api/drafts/{draft_id}", summary="Remove a draft (after saving the study)")
    async def delete_draft(draft_id: SafeId) -> dict[str, bool]:
        return {"deleted": folder.delete_draft(draft_id)}

    # --- the page --------------------------------------------------------------------------

    @app.get("/", response_class=HTMLResponse, include_in_schema=False)
    async def entry_page(study: str | None = None) -> HTMLResponse:
        initial = None
        problems: list[Problem] = []
        if study:
            try:
                initial = opened(study)
            except FileNotFoundError:
                problems.append(
                    Problem(
                        location="study", path="", problem=f"no study file {study!r} in the folder"
                    )
                )
            except (InputError, InputErrors) as exc:
                errors = exc.problems if isinstance(exc, InputErrors) else (exc,)
                problems.extend(problem_of(p, STUDY_SOURCE) for p in errors)
        html = pages.entry_page(
            geometry=shapes.page_geometry(),
            initial=initial.model_dump(mode="json") if initial else None,
            problems=[p.model_dump() for p in problems],
            folder=listing(),
            protocols=[p.value for p in Protocol],
            stages=[s.value for s in STAGE_ORDER],
            territory_maps=list(BUILT_IN_MAPS),
            cautions=list(CAUTIONS),
            version=__version__,
            studies_dir=str(folder.studies),
        )
        return HTMLResponse(html)

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
    return app


def _jsonable(data: dict[Any, Any]) -> dict[str, Any]:
    """Parsed YAML as JSON data: dates as ISO text, keys as text."""
    out: dict[str, Any] = json.loads(json.dumps(data, default=_plain))
    return out


def _plain(value: Any) -> Any:
    if isinstance(value, dt.date | dt.datetime):
        return value.isoformat()
    return str(value)


def serve(
    studies_dir: Path,
    port: int = DEFAULT_PORT,
    *,
    drafts_dir: Path | None = None,
    reports_dir: Path | None = None,
    settings: Settings | None = None,
    log_level: str = "info",
) -> None:
    """Run the entry server on http://127.0.0.1:``port`` until interrupted (loopback only)."""
    import uvicorn

    app = create_app(studies_dir, drafts_dir=drafts_dir, reports_dir=reports_dir, settings=settings)
    log.info("serving %s on http://%s:%d/", studies_dir, HOST, port)
    uvicorn.run(app, host=HOST, port=port, log_level=log_level, server_header=False)
