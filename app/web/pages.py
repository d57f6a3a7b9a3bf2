"""Server-rendered pages (Jinja2). Each has a JSON twin under /api."""

from __future__ import annotations

import gzip
import logging
from collections.abc import Callable, Hashable
from typing import Annotated, Any

from anyio import from_thread
from fastapi import APIRouter, Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from sqlalchemy.engine import Engine

from app.config import TEMPLATES_DIR
from app.core.planning import Target
from app.services import corpora, estimator, library, memo, modelling, sources
from app.services import planning as plan_targets
from app.services.jobs import Dispatcher
from app.services.memo import RecentResults
from app.web import api, assets, corpus_view, figures
from app.web.caching import GZIP_LEVEL
from app.web.deps import corpus_or_404, engine_of, jobs_of
from app.web.forms import FormInput
from app.web.glossary import GLOSSARY
from app.web.templating import make_templates

router = APIRouter(include_in_schema=False)
log = logging.getLogger("lexigrowth.pages")
templates = make_templates(TEMPLATES_DIR)
templates.env.globals["glossary"] = GLOSSARY
templates.env.globals["plotly_map_style_id"] = assets.plotly_assets()[2]
templates.env.globals["plotly_js_url"] = assets.versioned_url(assets.PLOTLY_JS_URL, assets.plotly_assets()[0])
templates.env.globals["plotly_css_url"] = assets.versioned_url(
    assets.PLOTLY_CSS_URL, assets.plotly_assets()[1]
)
EngineDep = Annotated[Engine, Depends(engine_of)]


def render(request: Request, name: str, status_code: int = 200, **context) -> HTMLResponse:
    return templates.TemplateResponse(request, name, context, status_code=status_code)


RENDERED_PAGES: RecentResults[bytes] = RecentResults(256)
"""Rendered pages, gzip-compressed (a corpus page: about 25 kB), by address, viewer and the version of what
they show (see ``render_kept``)."""


CLIENT_GONE = 499
"""The status of a request whose client closed the connection before its page was computed (what nginx
logs in that case; no client receives it)."""


def client_gone(request: Request) -> memo.Gone:
    """Whether the client of ``request`` has closed its connection, asked from the route's thread (the
    server's event loop is asked, as ``Request.is_disconnected`` needs)."""

    def gone() -> bool:
        try:
            return from_thread.run(request.is_disconnected)
        except RuntimeError:  # not in a thread of the server's pool: nobody to ask
            return False

    return gone


def render_kept(
    request: Request, name: str, version: Hashable, build_context: Callable[[], dict[str, Any]]
) -> Response:
    """A page rendered (and compressed) once per address, viewer (``Viewer.page_key``) and ``version``:
    the caller's key of everything else the page depends on (corpus counts, model-report stamps, names
    and labels...). The page's context is built only when the page is rendered, and not at all (or not to
    its end) when the client has gone (``app.services.memo``)."""
    key = (name, str(request.url), request.state.viewer.page_key(), version)

    def rendered() -> bytes:
        context = build_context()
        memo.checkpoint()  # computed for nobody if every request that asked for it has gone meanwhile
        html = templates.get_template(name).render({"request": request, **context})
        return gzip.compress(html.encode(), GZIP_LEVEL, mtime=0)

    try:
        with memo.for_client(client_gone(request)):
            page = RENDERED_PAGES.get(key, rendered)
    except memo.ClientGone:
        log.info("%s: its client had gone; not computed (or not to its end)", request.url.path)
        return Response(status_code=CLIENT_GONE)  # nobody reads it
    if "gzip" in request.headers.get("accept-encoding", ""):
        # already compressed: the gzip middleware passes an answer with a content-encoding through
        headers = {"content-encoding": "gzip", "vary": "Accept-Encoding"}
        return Response(page, media_type="text/html; charset=utf-8", headers=headers)
    return HTMLResponse(gzip.decompress(page))  # a client without gzip (rare): inflated again


@router.get("/", response_class=HTMLResponse)
def library_page(request: Request, engine: EngineDep, jobs: Annotated[Dispatcher, Depends(jobs_of)]):
    """The Library: filter by label values (several keys at once; values of one key are alternatives) and by
    a search over names, labels and free-text notes."""
    arriving = jobs.uploads_under_way()

    def build_context() -> dict[str, Any]:
        every = corpora.summaries(engine)
        chosen = [v[:500] for v in request.query_params.getlist("label")]
        search = (request.query_params.get("search") or "")[:200]
        return {
            "corpora": library.filter_corpora(every, chosen, search),
            "total": len(every),
            "arriving": arriving,
            "filters": library.label_filter(every),
            "chosen": set(chosen),
            "search": search,
            "deleted": request.query_params.get("deleted"),
            "json_url": "/api/corpora",
        }

    if arriving:  # their progress changes from one view to the next (the page reloads itself meanwhile)
        return render(request, "library.html", **build_context())
    return render_kept(request, "library.html", corpora.library_version(engine), build_context)


@router.get("/favicon.ico")
def favicon() -> RedirectResponse:
    """Browsers ask for /favicon.ico on pages that name no icon (the API documentation, a JSON answer): the
    dashboard's icon, not a 404 in their console."""
    return RedirectResponse("/static/favicon.svg", status_code=301)


@router.get("/upload", response_class=HTMLResponse)
def upload(request: Request):
    return render(request, "upload.html", profiles=sources.profiles(), json_url="/api/profiles")


def _planning_target(form: FormInput) -> Target | None:
    """The one planning target typed into the Planning form (empty fields are not given), or None."""
    values = {
        "types": form.number("types", "types", above=0, at_most=1e13),
        "new_type_rate": form.number("new_type_rate", "new-type rate", above=0, below=1),
        "coverage": form.number("coverage", "coverage", above=0, below=1),
        "share": form.number("share", "share of all types", above=0, below=1),
    }
    if form.errors_of(*plan_targets.TARGET_KINDS):
        return None
    try:
        return plan_targets.planning_target(**values, required=False)
    except plan_targets.TargetChoiceError:
        form.fail("types", "Fill in one target only: types, new-type rate, coverage or share of all types.")
    except plan_targets.TargetValueError as exc:
        form.fail(exc.kind, str(exc))
    return None


@router.get("/corpora/{corpus_id}", response_class=HTMLResponse)
def corpus_page_route(
    request: Request,
    corpus_id: api.CorpusId,
    engine: EngineDep,
    jobs: Annotated[Dispatcher, Depends(jobs_of)],
):
    """The corpus page. Its forms send every field, empty ones included; problems are shown beside the
    form they belong to, with the text kept as typed."""
    return corpus_page(request, corpus_id, engine, jobs)


def corpus_page(
    request: Request, corpus_id: int, engine: Engine, jobs: Dispatcher, edit: dict | None = None
) -> HTMLResponse:
    """The corpus page; ``edit``: the "Name and labels" form as typed, with its error, to show again."""
    corpus = corpus_or_404(engine, corpus_id)
    form = FormInput(dict(request.query_params))
    page = form.number("page", "page", whole=True, at_least=1, at_most=10**7) or 1
    horizon = form.number("horizon", "extrapolate to", at_least=1, at_most=1000) or 10.0
    common_size = form.number(
        "common_size", "common size", whole=True, at_least=1, at_most=max(corpus.tokens, 1)
    )
    sizes_text = form.text("sizes")[:500] or None
    try:
        corpus_view.parse_sizes(sizes_text, corpus.tokens)
    except ValueError as exc:
        form.fail("sizes", str(exc))
        sizes_text = None
    plan_model = form.text("plan_model") or modelling.RECOMMENDED
    if plan_model not in modelling.PLAN_MODELS:
        form.fail("plan_model", f"unknown model {plan_model[:60]!r}")
        plan_model = modelling.RECOMMENDED
    target = _planning_target(form)
    version = corpus_view.view_version(engine, corpus)
    same = library.same_content(engine, corpus)
    settings = (form.text("q")[:200] or None, page, sizes_text, horizon, common_size, target, plan_model)

    def build_context() -> dict[str, Any]:
        context = corpus_view.corpus_context(engine, corpus, version, *settings)
        if context.get("models_pending"):
            task = jobs.models_state(corpus_id)
            if task.state == "failed":
                context.update(models_pending=None, models_error=task.message)
            else:
                context["models_pending"] = (
                    "fitting now" if task.state == "running" else "waiting for a worker"
                )
        return context | {
            "form": form,
            "may_edit": request.state.viewer.may_delete(corpus.owner_id),
            "labels_text": library.labels_as_text(context["corpus"]["labels"]),
            "edit_form": edit,
            "edit_error": edit["error"] if edit else None,
            "edit_saved": form.text("saved") == "1" and not edit,
            "same_content": same,
        }

    if form.errors or edit or version.report_stamp is None:
        # problems shown beside their forms (422), or models still being computed: rendered as they are
        status = 422 if form.errors or edit else 200
        return render(request, "corpus.html", status_code=status, **build_context())
    kept_key = (version, corpus.name, corpus.labels_json, corpus.owner_id, tuple(c["id"] for c in same))
    return render_kept(request, "corpus.html", kept_key, build_context)


@router.get("/estimate", response_class=HTMLResponse)
def estimate_page(request: Request):
    """The Estimator: from totals, or a uniform design. Empty optional fields are not given; problems are
    shown above the form they belong to, with the text kept as typed."""
    form = FormInput(dict(request.query_params))
    result = uniform = None
    tokens = form.number("tokens", "tokens", whole=True, at_least=1, at_most=10**12)
    types = form.number("types", "types", whole=True, at_least=1, at_most=10**12)
    hapaxes = form.number("hapaxes", "hapax legomena", whole=True, at_least=1, at_most=10**12)
    plan_types = form.number("plan_types", "planning: types", above=0, at_most=1e13)
    plan_rate = form.number("plan_new_type_rate", "planning: new-type rate", above=0, below=1)
    totals_fields = ("tokens", "types", "hapaxes", "sizes", "plan_types", "plan_new_type_rate")
    if plan_types is not None and plan_rate is not None:
        form.fail("plan_types", "Planning: fill in a number of types or a new-type rate, not both.")
    if tokens and types and not form.errors_of(*totals_fields):
        try:
            target = plan_targets.planning_target(types=plan_types, new_type_rate=plan_rate, required=False)
            sizes = corpus_view.parse_sizes(form.text("sizes")[:500] or None, tokens)
            result = estimator.estimate_from_totals(tokens, types, hapaxes, sizes, target)
        except (ValueError, ArithmeticError) as exc:
            form.fail("tokens", str(exc))
    elif form.given("tokens") != form.given("types") and not form.errors_of("tokens", "types"):
        form.fail("tokens", "Give both the tokens and the types of the text.")
    uniform_types = form.number("uniform_types", "types (k)", whole=True, at_least=1, at_most=10**9)
    repeats = form.number("repeats", "occurrences of each type (r)", whole=True, at_least=1, at_most=10**9)
    if uniform_types and repeats and not form.errors_of("uniform_types", "repeats"):
        total = uniform_types * repeats
        try:
            draws = form.text("draws")[:500]
            drawn = (
                corpus_view.parse_sizes(draws, total)
                if draws.strip()
                else sorted({1, total // 4, total // 2, total})
            )
            uniform = estimator.uniform_design(uniform_types, repeats, drawn)
        except (ValueError, ArithmeticError) as exc:
            form.fail("draws", str(exc).replace("sizes:", "draws:"))
    elif form.given("uniform_types") != form.given("repeats") and not form.errors_of(
        "uniform_types", "repeats"
    ):
        form.fail("uniform_types", "Give both the number of types (k) and the occurrences of each (r).")
    return render(
        request,
        "estimate.html",
        status_code=422 if form.errors else 200,
        result=result,
        uniform=uniform,
        form=form,
        totals_errors=form.errors_of(*totals_fields),
        uniform_errors=form.errors_of("uniform_types", "repeats", "draws"),
        growth_figure=estimate_figure(result) if result and not result["not_applicable"] else None,
        json_url="/docs#/api/estimate_api_estimate_post",
    )


def estimate_figure(result: dict) -> dict:
    """The perfect-Zipf growth curve solved from the totals, in that model's colour, with the table's sizes."""
    rows = result["predictions"]
    style = figures.model_style(
        "perfect_zipf_totals" if result["input"]["hapaxes"] is None else "perfect_zipf"
    )
    curve = figures.line(
        result["curve"]["tokens"],
        result["curve"]["types"],
        "perfect-Zipf prediction",
        style.colour,
        line={"color": style.colour, "width": 2, "dash": style.dash},
    )
    points = figures.line(
        [r["tokens"] for r in rows if r["types"] is not None],
        [r["types"] for r in rows if r["types"] is not None],
        "sizes of the table",
        figures.OBSERVED,
        mode="markers",
        marker={"size": 8, "symbol": "circle-open", "line": {"width": 2}},
    )
    return figures.figure([curve, points], "tokens", "types", log_x=True)
