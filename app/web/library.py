"""Keeping the Library in order: rename, relabel and delete a corpus from its page, list and delete saved
comparisons; each with its JSON twin. In lab mode only a corpus's owner (or an admin) may change it, and only
the member who saved a comparison (or an admin) may delete it: the same check as deleting by the API."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Form, HTTPException, Request
from fastapi.responses import HTMLResponse, RedirectResponse
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.engine import Engine

from app.services import corpora, library
from app.services.ingestion import IngestionInputError
from app.services.jobs import Dispatcher
from app.web.api import CorpusId, with_warnings
from app.web.deps import corpus_or_404, engine_of, jobs_of
from app.web.forms import require_confirmation
from app.web.pages import corpus_page, render
from app.web.security import Viewer, viewer_of

router = APIRouter()
EngineDep = Annotated[Engine, Depends(engine_of)]
ViewerDep = Annotated[Viewer, Depends(viewer_of)]
NOT_OWNER = "only the member who uploaded this corpus, or an admin, may change it"
NOT_CREATOR = "only the member who saved this comparison, or an admin, may delete it"


def _owned(engine: Engine, corpus_id: int, viewer: Viewer):
    corpus = corpus_or_404(engine, corpus_id)
    if not viewer.may_delete(corpus.owner_id):
        raise HTTPException(status_code=403, detail=NOT_OWNER)
    return corpus


# ------------------------------------------------------------------------------------------------ pages


@router.post("/corpora/{corpus_id}/edit", include_in_schema=False)
def edit_corpus(
    request: Request,
    corpus_id: CorpusId,
    engine: EngineDep,
    viewer: ViewerDep,
    jobs: Annotated[Dispatcher, Depends(jobs_of)],
    name: Annotated[str, Form(max_length=1000)] = "",
    labels: Annotated[str, Form(max_length=20_000)] = "",
):
    """The corpus page's "Name and labels" form: saved, then back to the page; a problem is shown beside
    the form with what was typed."""
    _owned(engine, corpus_id, viewer)
    try:
        library.rename_and_relabel(engine, corpus_id, name, labels)
    except IngestionInputError as exc:
        return corpus_page(
            request, corpus_id, engine, jobs, edit={"error": str(exc), "name": name, "labels": labels}
        )
    return RedirectResponse(f"/corpora/{corpus_id}?saved=1#manage", status_code=303)


@router.post("/corpora/{corpus_id}/delete", include_in_schema=False)
def delete_corpus_from_page(
    corpus_id: CorpusId,
    engine: EngineDep,
    viewer: ViewerDep,
    confirm: Annotated[str, Form(max_length=10)] = "",
):
    corpus = _owned(engine, corpus_id, viewer)
    require_confirmation(confirm)
    corpora.delete(engine, corpus_id)
    return RedirectResponse(f"/?deleted={corpus.name[:200]}", status_code=303)


def _comparison_rows(engine: Engine, viewer: Viewer) -> list[dict[str, Any]]:
    return [
        row | {"may_delete": viewer.may_delete(row["creator_id"])}
        for row in library.saved_comparisons(engine)
    ]


@router.get("/comparisons", response_class=HTMLResponse, include_in_schema=False)
def comparisons_page(request: Request, engine: EngineDep, viewer: ViewerDep):
    return render(
        request,
        "comparisons.html",
        rows=_comparison_rows(engine, viewer),
        deleted=request.query_params.get("deleted"),
        json_url="/api/comparisons",
    )


def _delete_comparison(engine: Engine, slug: str, viewer: Viewer) -> None:
    rows = {row["slug"]: row for row in library.saved_comparisons(engine)}
    if slug not in rows:
        raise HTTPException(status_code=404, detail="no saved comparison at this address")
    if not viewer.may_delete(rows[slug]["creator_id"]):
        raise HTTPException(status_code=403, detail=NOT_CREATOR)
    library.delete_comparison(engine, slug)


@router.post("/comparisons/{slug}/delete", include_in_schema=False)
def delete_comparison_from_page(
    slug: str, engine: EngineDep, viewer: ViewerDep, confirm: Annotated[str, Form(max_length=10)] = ""
) -> RedirectResponse:
    require_confirmation(confirm)
    _delete_comparison(engine, slug, viewer)
    return RedirectResponse(f"/comparisons?deleted={slug}", status_code=303)


# ------------------------------------------------------------------------------------------------- JSON


class CorpusChange(BaseModel):
    """Body of PATCH /api/corpora/{id}: the fields to change."""

    model_config = ConfigDict(extra="forbid")

    name: str | None = Field(None, max_length=1000, description="new name")
    labels: dict[str, str] | str | None = Field(
        None, description="new labels, replacing the old ones: a JSON object or key=value lines"
    )


@router.patch("/api/corpora/{corpus_id}", tags=["api"])
def change_corpus(corpus_id: CorpusId, body: CorpusChange, engine: EngineDep, viewer: ViewerDep) -> dict:
    """Rename and/or relabel a corpus (in lab mode its owner or an admin: 403 otherwise)."""
    _owned(engine, corpus_id, viewer)
    try:
        return with_warnings(library.rename_and_relabel(engine, corpus_id, body.name, body.labels))
    except IngestionInputError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc


@router.get("/api/comparisons", tags=["comparisons"])
def list_comparisons(engine: EngineDep, viewer: ViewerDep) -> list[dict]:
    """Every saved comparison, newest first, with ``may_delete`` for the one asking."""
    return _comparison_rows(engine, viewer)
