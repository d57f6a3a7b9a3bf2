"""The application factory: store, jobs, demo corpora, pages, JSON API and local assets."""

from __future__ import annotations

import logging
from contextlib import asynccontextmanager

from fastapi import FastAPI, Request
from fastapi.exception_handlers import http_exception_handler, request_validation_exception_handler
from fastapi.exceptions import RequestValidationError
from fastapi.responses import Response
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.middleware.gzip import GZipMiddleware
from swagger_ui_bundle import swagger_ui_path

from app.config import PROGRAM_VERSION, STATIC_DIR, Settings, get_settings, private_dir
from app.ingest import scratch
from app.services import tasks
from app.services.jobs import Dispatcher
from app.services.worker import TaskWorker
from app.store.db import make_engine
from app.web import api, assets, compare, library, pages, security, texts_api
from app.web.caching import GZIP_LEVEL, EntityTagMiddleware
from app.web.jsonsafe import FiniteJSONResponse
from app.web.limits import BodyLimitMiddleware, HeadMiddleware

log = logging.getLogger("lexigrowth")


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        interrupted = tasks.recover(app.state.engine)
        if interrupted:
            log.info("marked %d tasks of ended processes as failed", len(interrupted))
        orphans = scratch.remove_orphans(settings.work_dir)
        if orphans:
            log.info("removed %d scratch entries left by ended processes", len(orphans))
        worker = (
            None
            if not settings.task_worker
            else TaskWorker(settings.resolved_database_url, settings.work_dir, app.state.engine)
        )
        app.state.worker = worker  # supervised: restarted when it dies (see /api/health)
        if worker is not None:
            worker.start()
        if settings.load_demo:
            queued = [app.state.jobs.submit(task) for task in tasks.queue_demo_corpora(app.state.engine)]
            if queued:
                log.info("queued %d demo corpora for counting", len(queued))
        yield
        if worker is not None:
            worker.stop()

    app = FastAPI(
        title="Lexigrowth",
        version=PROGRAM_VERSION,
        description="Frequency spectra, vocabulary growth and n-legomena models for comparing corpora.",
        lifespan=lifespan,
        docs_url=None,  # served by app.web.security from local files, with its own Content-Security-Policy
        redoc_url=None,
        default_response_class=FiniteJSONResponse,
    )
    private_dir(settings.data_dir)
    app.state.settings = settings
    app.state.engine = make_engine(settings.resolved_database_url)
    app.state.jobs = Dispatcher(app.state.engine, settings.work_dir, inline=not settings.task_worker)
    app.state.worker = None
    app.state.guard = security.Guard(settings, app.state.engine)
    # Outermost first: HEAD as GET, then the viewer and security headers, then entity tags, then the body
    # limits.
    app.add_middleware(BodyLimitMiddleware, upload_mb=settings.max_upload_mb)
    app.add_middleware(EntityTagMiddleware)
    app.add_middleware(security.SecurityMiddleware, guard=app.state.guard)
    app.add_middleware(HeadMiddleware)

    # Responses of 1 kB or more are gzip-compressed when the browser accepts it (plotly.js is compressed once).
    app.add_middleware(GZipMiddleware, minimum_size=1000, compresslevel=GZIP_LEVEL)
    # Outermost: requests for other host names (DNS rebinding) are refused before anything else.
    app.add_middleware(security.AllowedHostsMiddleware, names=settings.host_names)

    app.mount(security.SWAGGER_ASSETS, StaticFiles(directory=swagger_ui_path), name="swagger-ui")

    @app.get(assets.PLOTLY_JS_URL, include_in_schema=False)
    def plotly_js(request: Request) -> Response:
        return assets.serve(assets.plotly_assets()[0], request)

    @app.get(assets.PLOTLY_CSS_URL, include_in_schema=False)
    def plotly_css(request: Request) -> Response:
        return assets.serve(assets.plotly_assets()[1], request)

    app.mount("/static", assets.CachedStaticFiles(directory=STATIC_DIR), name="static")
    app.include_router(api.router)
    app.include_router(texts_api.router)
    app.include_router(pages.router)
    app.include_router(compare.router)
    app.include_router(library.router)
    app.include_router(security.router)

    def typed_back(request: Request) -> dict:
        """What the error page offers: the values that were sent (shown again) and the page the visitor came
        from (same site only), so that nothing typed is lost."""
        referer = request.headers.get("referer", "")
        same_site = referer.startswith(str(request.base_url)) and referer != str(request.url)
        return {
            "typed": [(k, v[:200]) for k, v in request.query_params.multi_items() if v.strip()][:30],
            "back_url": referer if same_site else None,
        }

    def wants_json(request: Request) -> bool:
        return request.url.path.startswith(("/api", "/static", "/docs", "/openapi"))

    @app.exception_handler(RequestValidationError)
    async def html_validation_errors(request: Request, exc: RequestValidationError):
        """Invalid parameters of a page get the error page, saying which parameter and why; the JSON API
        keeps FastAPI's 422 body."""
        if wants_json(request):
            return await request_validation_exception_handler(request, exc)
        problems = "; ".join(
            f"{'.'.join(str(part) for part in error['loc'][1:]) or error['loc'][0]}: {error['msg']}"
            for error in exc.errors()
        )
        return pages.render(
            request,
            "error.html",
            status_code=422,
            heading="Cannot use this input",
            detail=f"Check the address or the form: {problems}.",
            json_url=None,
            **typed_back(request),
        )

    @app.exception_handler(StarletteHTTPException)
    async def html_errors(request: Request, exc: StarletteHTTPException):
        if wants_json(request):
            return await http_exception_handler(request, exc)
        heading = {403: "Not allowed", 404: "Not found", 413: "Too large", 422: "Cannot use this input"}.get(
            exc.status_code, "Error"
        )
        return pages.render(
            request,
            "error.html",
            status_code=exc.status_code,
            heading=heading,
            detail=exc.detail,
            json_url=None,
            **typed_back(request),
        )

    return app
