"""Server-rendered pages (Jinja2). Each has a JSON twin under /api."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, HTTPException, Query, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.engine import Engine

from app.config import TEMPLATES_DIR
from app.ingest.profiles import BUILTIN_PROFILES
from app.services import estimator
from app.services.jobs import Dispatcher
from app.store import corpora as store
from app.web import api, corpus_view, figures
from app.web.deps import corpus_or_404, engine_of, jobs_of
from app.web.glossary import GLOSSARY
from app.web.templating import make_templates

router = APIRouter(include_in_schema=False)
templates = make_templates(TEMPLATES_DIR)
templates.env.globals["glossary"] = GLOSSARY
EngineDep = Annotated[Engine, Depends(engine_of)]


def render(request: Request, name: str, status_code: int = 200, **context) -> HTMLResponse:
    return templates.TemplateResponse(request, name, context, status_code=status_code)


@router.get("/", response_class=HTMLResponse)
def library(request: Request, engine: EngineDep, label: str | None = None):
    corpora = [store.summary(c) for c in store.list_corpora(engine)]
    label_values = sorted({f"{k}={v}" for c in corpora for k, v in c["labels"].items()})
    if label and "=" in label:
        key, value = label.split("=", 1)
        corpora = [c for c in corpora if c["labels"].get(key) == value]
    return render(
        request,
        "library.html",
        corpora=corpora,
        label_values=label_values,
        label=label,
        json_url="/api/corpora",
    )


@router.get("/upload", response_class=HTMLResponse)
def upload(request: Request):
    return render(request, "upload.html", profiles=BUILTIN_PROFILES, json_url="/api/profiles")


@router.get("/corpora/{corpus_id}", response_class=HTMLResponse)
def corpus_page(
    request: Request,
    corpus_id: api.CorpusId,
    engine: EngineDep,
    q: Annotated[str | None, Query(max_length=200)] = None,
    page: Annotated[int, Query(ge=1, le=10**7)] = 1,
    sizes: Annotated[str | None, Query(max_length=500)] = None,
    horizon: Annotated[float, Query(ge=1, le=1000)] = 10.0,
    common_size: Annotated[int | None, Query(ge=1, le=10**12)] = None,
    types: Annotated[float | None, Query(gt=0, le=1e13)] = None,
    new_type_rate: Annotated[float | None, Query(gt=0, lt=1)] = None,
    coverage: Annotated[float | None, Query(gt=0, lt=1)] = None,
    share: Annotated[float | None, Query(gt=0, lt=1)] = None,
    plan_model: Annotated[str, Query(max_length=60)] = "recommended",
    jobs: Annotated[Dispatcher, Depends(jobs_of)] = None,
):
    corpus_or_404(engine, corpus_id)
    asked = [v for v in (types, new_type_rate, coverage, share) if v is not None]
    target = api.planning_target(types, new_type_rate, coverage, share) if asked else None
    try:
        context = corpus_view.corpus_context(
            engine, corpus_id, q, page, sizes, horizon, common_size, target, plan_model
        )
    except ValueError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc
    if context.get("models_pending"):
        task = jobs.models_state(corpus_id)
        if task.state == "failed":
            context.update(models_pending=None, models_error=task.message)
        else:
            context["models_pending"] = "fitting now" if task.state == "running" else "waiting for a worker"
    return render(request, "corpus.html", **context)


@router.get("/estimate", response_class=HTMLResponse)
def estimate_page(
    request: Request,
    tokens: Annotated[int | None, Query(ge=1, le=10**12)] = None,
    types: Annotated[int | None, Query(ge=1, le=10**12)] = None,
    hapaxes: Annotated[int | None, Query(ge=1, le=10**12)] = None,
    sizes: Annotated[str | None, Query(max_length=500)] = None,
    plan_types: Annotated[float | None, Query(gt=0, le=1e13)] = None,
    plan_new_type_rate: Annotated[float | None, Query(gt=0, lt=1)] = None,
    uniform_types: Annotated[int | None, Query(ge=1, le=10**9)] = None,
    repeats: Annotated[int | None, Query(ge=1, le=10**9)] = None,
    draws: Annotated[str | None, Query(max_length=500)] = None,
):
    result = uniform = error = None
    try:
        if tokens and types:
            asked = plan_types is not None or plan_new_type_rate is not None
            target = api.planning_target(plan_types, plan_new_type_rate, None, None) if asked else None
            result = estimator.estimate_from_totals(
                tokens, types, hapaxes, corpus_view.parse_sizes(sizes, tokens), target
            )
        if uniform_types and repeats:
            total = uniform_types * repeats
            drawn = (
                corpus_view.parse_sizes(draws, total) if draws else sorted({1, total // 4, total // 2, total})
            )
            uniform = estimator.uniform_design(uniform_types, repeats, drawn)
    except ValueError as exc:
        error = str(exc)
    return render(
        request,
        "estimate.html",
        result=result,
        uniform=uniform,
        error=error,
        form={
            "tokens": tokens,
            "types": types,
            "hapaxes": hapaxes,
            "sizes": sizes or "",
            "plan_types": plan_types,
            "plan_new_type_rate": plan_new_type_rate,
            "uniform_types": uniform_types,
            "repeats": repeats,
            "draws": draws or "",
        },
        growth_figure=estimate_figure(result) if result else None,
        json_url="/docs#/api/estimate_api_estimate_post",
    )


def estimate_figure(result: dict) -> dict:
    rows = result["predictions"]
    curve = figures.line(
        result["curve"]["tokens"],
        result["curve"]["types"],
        "perfect-Zipf prediction",
        figures.colour(0),
        dashed=True,
    )
    points = figures.line(
        [r["tokens"] for r in rows],
        [r["types"] for r in rows],
        "sizes of the table",
        figures.colour(3),
        mode="markers",
        marker={"size": 8},
    )
    return figures.figure([curve, points], "tokens", "types", log_x=True)
