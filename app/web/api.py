"""The JSON API: the twin of every page (see PRODUCT.md for the contract)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, File, Form, HTTPException, Query, Response, UploadFile
from fastapi.responses import JSONResponse
from sqlalchemy.engine import Engine

from app.config import Settings
from app.ingest.profiles import BUILTIN_PROFILES
from app.services import ingestion, modelling
from app.services.jobs import JobRunner
from app.store import corpora as store
from app.web import downloads
from app.web.deps import INPUT_ERRORS, corpus_or_404, engine_of, input_error, jobs_of, settings_of
from app.web.uploads import parse_profile, receive

router = APIRouter(prefix="/api", tags=["api"])

EngineDep = Annotated[Engine, Depends(engine_of)]


@router.get("/health")
def health() -> dict:
    return {"status": "ok"}


@router.get("/profiles")
def profiles() -> dict:
    """The built-in tokenization profiles."""
    return {name: p.to_dict() for name, p in BUILTIN_PROFILES.items()}


@router.get("/corpora")
def list_corpora(engine: EngineDep) -> list[dict]:
    return [store.summary(c) for c in store.list_corpora(engine)]


@router.post("/corpora", status_code=201)
def upload_corpus(
    engine: EngineDep,
    settings: Annotated[Settings, Depends(settings_of)],
    jobs: Annotated[JobRunner, Depends(jobs_of)],
    name: Annotated[str, Form(max_length=1000)],
    files: Annotated[list[UploadFile] | None, File()] = None,
    text: Annotated[str | None, Form()] = None,
    labels: Annotated[str | None, Form()] = None,
    profile: Annotated[str | None, Form()] = None,
    wait: bool = False,
):
    """Ingest files (and/or pasted ``text``) as one corpus. With ``wait=1`` answer 201 with the summary once
    stored; otherwise 202 with a job to poll at ``/api/jobs/{id}``."""
    try:
        name = ingestion.check_name(name)
        label_map = ingestion.parse_labels(labels)
        chosen = parse_profile(profile)
        upload = receive(files or [], text, settings.work_dir, settings.max_upload_mb)
    except INPUT_ERRORS as exc:
        raise input_error(exc) from exc

    def work(progress) -> int:
        return ingestion.ingest(engine, upload.sources, name, label_map, chosen, progress, settings.work_dir)

    if wait:
        try:
            corpus_id = work(None)
        except INPUT_ERRORS as exc:
            raise input_error(exc) from exc
        finally:
            upload.cleanup()
        return store.summary(store.get_corpus(engine, corpus_id))
    job = jobs.submit(work, cleanup=upload.cleanup)
    return JSONResponse(job.as_dict() | {"url": f"/api/jobs/{job.id}"}, status_code=202)


@router.get("/jobs/{job_id}")
def job_status(job_id: str, jobs: Annotated[JobRunner, Depends(jobs_of)]) -> dict:
    job = jobs.get(job_id)
    if job is None:
        raise HTTPException(status_code=404, detail=f"no job {job_id}")
    return job.as_dict()


@router.get("/corpora/{corpus_id}")
def corpus_summary(corpus_id: int, engine: EngineDep) -> dict:
    return store.summary(corpus_or_404(engine, corpus_id))


@router.delete("/corpora/{corpus_id}", status_code=204)
def delete_corpus(corpus_id: int, engine: EngineDep) -> Response:
    corpus_or_404(engine, corpus_id)
    store.delete_corpus(engine, corpus_id)
    return Response(status_code=204)


@router.get("/corpora/{corpus_id}/spectrum")
def spectrum(corpus_id: int, engine: EngineDep) -> dict:
    corpus = corpus_or_404(engine, corpus_id)
    return {
        "tokens": corpus.tokens,
        "types": corpus.types,
        "spectrum": [list(p) for p in store.spectrum_pairs(engine, corpus_id)],
    }


@router.get("/corpora/{corpus_id}/growth")
def growth(corpus_id: int, engine: EngineDep) -> dict:
    """Exact text-order type growth and the random-order expectation with its 95% band."""
    corpus_or_404(engine, corpus_id)
    return {
        "text_order": [{"tokens": n, "types": v} for n, v in store.growth_points(engine, corpus_id)],
        "random_order": modelling.random_order_growth(engine, corpus_id),
    }


@router.get("/corpora/{corpus_id}/words")
def words(
    corpus_id: int,
    engine: EngineDep,
    search: Annotated[str | None, Query(max_length=200)] = None,
    limit: Annotated[int, Query(ge=1, le=10_000)] = 100,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> dict:
    corpus_or_404(engine, corpus_id)
    total, rows = store.word_counts(engine, corpus_id, search, limit, offset)
    return {"total": total, "offset": offset, "words": [{"word": w, "count": c} for w, c in rows]}


@router.get("/corpora/{corpus_id}/spectrum.tsv")
def spectrum_tsv(corpus_id: int, engine: EngineDep) -> Response:
    corpus = corpus_or_404(engine, corpus_id)
    return downloads.spectrum_tsv_response(corpus, store.spectrum_pairs(engine, corpus_id))


@router.get("/corpora/{corpus_id}/words.csv")
def words_csv(corpus_id: int, engine: EngineDep) -> Response:
    corpus = corpus_or_404(engine, corpus_id)
    return downloads.word_counts_csv_response(corpus, store.word_counts(engine, corpus_id, limit=None)[1])
