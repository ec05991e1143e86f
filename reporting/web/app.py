"""The entry server: a FastAPI app over one studies folder (:mod:`reporting.web.server` runs it).

The page (``templates/entry.html.j2`` with ``static/entry.js``) lets the reader click or type
scores on the bull's-eye maps; every change goes to ``POST /api/analyze``, which runs the same
load and analysis code as ``segreport analyze`` and answers with the record and the draft
narrative, or with the command line's located problems (422). ``GET /api/studies/{id}`` sends the
file's version as an ``ETag``; a save sends it back as ``If-Match`` (:mod:`reporting.web.versions`:
428 without it for an existing study, 412 when the file changed since, with the study as stored
now) and writes the file it was opened from, or ``<study id>.yaml`` for a new study. "Report"
writes the record, maps and PDF into the ``reports`` folder with
:func:`reporting.render.write_report` and serves the PDF. Drafts autosave into a hidden folder,
each owned by the browser tab that wrote it (``X-Client-Id``). Every refusal is a 4xx with
located problems that name files relative to the studies folder; no route answers with a
traceback.

The server binds to 127.0.0.1 only, answers only loopback host names, caps request bodies at
256 KB and serves every asset itself (no CDN; FastAPI's documentation pages, which load scripts
from a CDN, are switched off, while ``/openapi.json`` stays).
"""

from __future__ import annotations

import datetime as dt
import json
import logging
from pathlib import Path
from typing import Any

from fastapi import FastAPI, Request
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, Response
from fastapi.staticfiles import StaticFiles

from reporting import __version__
from reporting.analysis import analyze, resolve_territory_map
from reporting.errors import InputError, InputErrors, ReportingError
from reporting.load import study_from_data
from reporting.model import STAGE_ORDER, Protocol, SafeId, Study
from reporting.phrases import PhraseLibrary, built_in_library
from reporting.results import Analysis
from reporting.segments import BUILT_IN_MAPS
from reporting.settings import Settings, default_settings
from reporting.web import form, guard, pages, shapes
from reporting.web.analysing import analysis_response, analysis_result
from reporting.web.api import (
    DRAFT_BODY,
    IF_MATCH,
    OWNED,
    PRECONDITIONS,
    REFUSED,
    AnalyzeResult,
    Conflict,
    DraftListing,
    DraftSaved,
    FolderListing,
    OpenedStudy,
    Problem,
    ReportFiles,
    Saved,
    StudyListing,
    problem_of,
    study_body,
)
from reporting.web.bodies import parse_body
from reporting.web.handlers import add_error_handlers, refused, use_study_openapi
from reporting.web.reader import add_reader_routes
from reporting.web.store import DraftOwned, Folder, Stored, checked_id
from reporting.web.versions import PreconditionError
from reporting.wording import CAUTIONS

log = logging.getLogger(__name__)

HOST = "127.0.0.1"
DEFAULT_PORT = 8765
STUDY_SOURCE = "study"
CLIENT_HEADER = "x-client-id"


async def _json_body(request: Request, source: str) -> Any:
    return parse_body(await request.body(), source)


def _client_id(request: Request) -> str:
    """The page (browser tab) sending a draft request, from the ``X-Client-Id`` header."""
    return checked_id(request.headers.get(CLIENT_HEADER, ""), f"header {CLIENT_HEADER}")


def create_app(
    studies_dir: Path,
    *,
    drafts_dir: Path | None = None,
    reports_dir: Path | None = None,
    settings: Settings | None = None,
    max_body_bytes: int = guard.MAX_BODY_BYTES,
    allowed_hosts: tuple[str, ...] = guard.LOOPBACK_HOSTS,
    phrases: PhraseLibrary | None = None,
    phrases_source: str = "built-in",
) -> FastAPI:
    """The entry app over ``studies_dir`` (created when missing).

    Drafts go to ``drafts_dir`` (default ``<studies>/.drafts``, hidden from ``segreport batch``),
    reports to ``reports_dir`` (default ``<studies>/reports``). ``settings`` are the lab thresholds
    (default: the published defaults), the same object ``segreport analyze --settings`` builds.
    ``phrases`` is the lab's phrase library (default: the built-in starter set), ``phrases_source``
    its file name as the page shows it.
    """
    folder = Folder.at(studies_dir, drafts_dir, reports_dir)
    lab = settings or default_settings()
    library = phrases if phrases is not None else built_in_library()
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

    roots = sorted(
        {
            str(folder.studies): "",
            str(folder.drafts): "drafts/",
            str(folder.reports): "reports/",
        }.items(),
        key=lambda item: len(item[0]),
        reverse=True,
    )

    def shown(text: str) -> str:
        """``text`` with the server's folders named relative to the studies folder."""
        for root, label in roots:
            text = text.replace(root + "/", label)
        for root, label in roots:
            text = text.replace(root, label.rstrip("/") or "studies folder")
        return text

    def located(problem: InputError | ReportingError) -> Problem:
        if isinstance(problem, InputError):
            source = "draft" if problem.location.startswith("draft") else STUDY_SOURCE
            found = problem_of(problem, source)
            return Problem(
                location=shown(found.location), path=shown(found.path), problem=shown(found.problem)
            )
        return Problem(location="", path="", problem=shown(str(problem)))

    add_error_handlers(app, located=located, shown=shown)

    @app.exception_handler(DraftOwned)
    async def _draft_owned(request: Request, exc: DraftOwned) -> JSONResponse:
        return refused(409, shown(str(exc)), [])

    # --- computing -------------------------------------------------------------------------

    def within(relative: str, where: str) -> Path:
        path = (folder.studies / relative).resolve()
        if not path.is_relative_to(folder.studies):
            raise InputError(where, "the file must lie inside the studies folder")
        return path

    def analysed(study: Study) -> Analysis:
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
        return analyze(study, settings=lab, territory_map=territory_map, curves=curves)

    def run_analysis(study: Study) -> AnalyzeResult:
        return analysis_result(analysed(study), library)

    add_reader_routes(app, analyse=analysed, library=library, source=phrases_source)

    @app.post(
        "/api/analyze",
        response_model=AnalyzeResult,
        responses=REFUSED,
        openapi_extra=study_body(),
        summary="Validate and analyse a study (same code as `segreport analyze`)",
    )
    async def analyze_study(request: Request) -> JSONResponse:
        study = study_from_data(await _json_body(request, STUDY_SOURCE), source=STUDY_SOURCE)
        return analysis_response(run_analysis(study))

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
            drafts=drafts(),
        )

    def drafts() -> list[DraftListing]:
        return [DraftListing(id=d, modified=m, study_id=sid) for d, m, sid in folder.list_drafts()]

    def opened(study_id: str, stored: Stored | None = None) -> OpenedStudy:
        stored = stored or folder.read_study(study_id)
        return OpenedStudy(
            id=study_id,
            file=stored.file,
            etag=stored.etag,
            study=_jsonable(stored.data) if isinstance(stored.data, dict) else {},
            problems=[located(p) for p in stored.problems],
        )

    @app.get("/api/studies", response_model=FolderListing, summary="Study files and drafts")
    async def list_studies() -> FolderListing:
        return listing()

    @app.get(
        "/api/studies/{study_id}",
        response_model=OpenedStudy,
        responses=REFUSED,
        summary="Read a study file for editing (its version in the ETag header)",
    )
    async def open_study(study_id: SafeId) -> JSONResponse:
        answer = opened(study_id)
        return JSONResponse(answer.model_dump(mode="json"), headers={"etag": answer.etag})

    @app.put(
        "/api/studies/{study_id}",
        response_model=Saved,
        responses=REFUSED | PRECONDITIONS,
        openapi_extra=study_body() | IF_MATCH,
        summary="Save a study: a new one as <study id>.yaml, an existing file under its own name",
    )
    async def save_study(study_id: SafeId, request: Request) -> JSONResponse:
        study = study_from_data(await _json_body(request, STUDY_SOURCE), source=STUDY_SOURCE)
        try:
            stored = folder.save_study(study_id, study, if_match=request.headers.get("if-match"))
        except PreconditionError as exc:
            return conflict(study_id, exc)
        body = Saved(id=study_id, file=stored.file, etag=stored.etag, study=stored.data)
        return JSONResponse(body.model_dump(mode="json"), headers={"etag": stored.etag})

    def conflict(study_id: str, exc: PreconditionError) -> JSONResponse:
        """412 with the study as it is now (the page shows what changed), or 428."""
        current: OpenedStudy | None = None
        if exc.status == 412:
            try:
                current = opened(study_id)
            except (FileNotFoundError, InputError, InputErrors):
                current = None  # removed, or unreadable now: the page offers a copy
        body = Conflict(
            detail=shown(str(exc)),
            problems=[Problem(location=exc.name, path="", problem=exc.problem)],
            current=current,
        )
        headers = {"etag": current.etag} if current else {}
        return JSONResponse(body.model_dump(mode="json"), status_code=exc.status, headers=headers)

    @app.post(
        "/api/studies/{study_id}/report",
        response_model=ReportFiles,
        responses=REFUSED,
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
        return drafts()

    @app.get("/api/drafts/{draft_id}", responses=REFUSED, summary="Read an autosaved draft")
    async def read_draft(draft_id: SafeId) -> dict[str, Any]:
        return folder.read_draft(draft_id)

    @app.put(
        "/api/drafts/{draft_id}",
        response_model=DraftSaved,
        responses=REFUSED | OWNED,
        openapi_extra=DRAFT_BODY,
        summary="Autosave the page's form data (may be incomplete); X-Client-Id names the tab",
    )
    async def save_draft(draft_id: SafeId, request: Request) -> DraftSaved:
        client = _client_id(request)
        form = await _json_body(request, "draft")
        if not isinstance(form, dict):
            raise InputError("draft", "send the form data as a JSON object")
        folder.save_draft(draft_id, form, client)
        return DraftSaved(
            id=draft_id, saved_at=dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
        )

    @app.delete(
        "/api/drafts/{draft_id}",
        responses=REFUSED | OWNED,
        summary="Remove a draft of this tab (X-Client-Id) after saving the study",
    )
    async def delete_draft(draft_id: SafeId, request: Request) -> dict[str, bool]:
        return {"deleted": folder.delete_draft(draft_id, _client_id(request))}

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
            form=form.page_form(),
            territory_maps=list(BUILT_IN_MAPS),
            cautions=list(CAUTIONS),
            version=__version__,
            studies_dir=str(folder.studies),
        )
        return HTMLResponse(html)

    use_study_openapi(app)
    return app


def _jsonable(data: dict[Any, Any]) -> dict[str, Any]:
    """Parsed YAML as JSON data: dates as ISO text, keys as text."""
    out: dict[str, Any] = json.loads(json.dumps(data, default=_plain))
    return out


def _plain(value: Any) -> Any:
    if isinstance(value, dt.date | dt.datetime):
        return value.isoformat()
    return str(value)
