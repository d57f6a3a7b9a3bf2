"""Server-rendered pages (Jinja2). Each has a JSON twin under /api."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import HTMLResponse
from sqlalchemy.engine import Engine

from app.config import TEMPLATES_DIR
from app.ingest.profiles import BUILTIN_PROFILES
from app.services import modelling
from app.store import corpora as store
from app.web import figures
from app.web.deps import corpus_or_404, engine_of
from app.web.glossary import GLOSSARY
from app.web.templating import make_templates

router = APIRouter(include_in_schema=False)
templates = make_templates(TEMPLATES_DIR)
templates.env.globals["glossary"] = GLOSSARY
EngineDep = Annotated[Engine, Depends(engine_of)]
WORDS_PER_PAGE = 50


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
    corpus_id: int,
    engine: EngineDep,
    q: Annotated[str | None, Query(max_length=200)] = None,
    page: Annotated[int, Query(ge=1, le=10**7)] = 1,
):
    corpus = corpus_or_404(engine, corpus_id)
    summary = store.summary(corpus)
    pairs = store.spectrum_pairs(engine, corpus_id)
    text_order = store.growth_points(engine, corpus_id)
    random_order = modelling.random_order_growth(engine, corpus_id)["points"]
    total_words, word_rows = store.word_counts(
        engine, corpus_id, q, WORDS_PER_PAGE, (page - 1) * WORDS_PER_PAGE
    )
    dense = dict(pairs)
    return render(
        request,
        "corpus.html",
        corpus=summary,
        spectrum_rows=[(m, dense.get(m, 0)) for m in range(1, 21)],
        spectrum_figure=figures.spectrum_bars(pairs),
        growth_figure=figures.growth_lines(text_order, random_order),
        words=word_rows,
        words_total=total_words,
        words_query=q or "",
        words_page=page,
        words_pages=max(1, -(-total_words // WORDS_PER_PAGE)),
        json_url=f"/api/corpora/{corpus_id}",
    )
