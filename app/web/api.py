"""The JSON API: the twin of every page (see PRODUCT.md for the contract)."""

from __future__ import annotations

import asyncio
import time
from typing import Annotated

from fastapi import APIRouter, Depends, File, Form, HTTPException, Path, Query, Request, Response, UploadFile
from pydantic import BaseModel, Field, field_validator
from sqlalchemy.engine import Engine
from starlette.concurrency import run_in_threadpool

from app.config import Settings
from app.core.planning import Target
from app.services import corpora, estimator, exchange, ingestion, library, modelling, sources, tasks
from app.services import planning as plan_targets
from app.services.jobs import Dispatcher, Task, failed, succeeded
from app.services.texts import word_dispersion
from app.web import downloads
from app.web.deps import corpus_or_404, engine_of, input_error, jobs_of, settings_of
from app.web.forms import optional
from app.web.jsonsafe import FiniteJSONResponse
from app.web.uploads import receive

router = APIRouter(prefix="/api", tags=["api"])

EngineDep = Annotated[Engine, Depends(engine_of)]

MAX_CORPUS_ID = 2**31 - 1
"""Corpus ids are positive INTEGER keys (32-bit on PostgreSQL): a larger one cannot exist, and passing it to
the database driver fails (OverflowError on SQLite), so it is refused as input (422) instead of a 500."""
CorpusId = Annotated[int, Path(ge=1, le=MAX_CORPUS_ID, description="corpus id")]
WAIT_POLL_SECONDS = 0.05
WAIT_POLL_MAX_SECONDS = 0.5


@router.get("/health")
def health(request: Request, jobs: Annotated[Dispatcher, Depends(jobs_of)]) -> dict:
    """``{"status": "ok"}`` while tasks are being processed; ``"degraded"`` with ``problems`` (in words)
    when this server process's task worker is dead or stuck, or the oldest queued task has waited more
    than 30 s while no task runs. Also: ``worker`` (alive, pid, restarts, seconds since its last sign of
    life: this server process's own worker; each process of a multi-process server has one) and ``queue``
    (running, queued, the oldest queued task's wait in seconds: the whole store). The HTTP status stays 200:
    pages are still served."""
    return jobs.health(request.app.state.worker)


@router.get("/profiles")
def profiles() -> dict:
    """The built-in tokenization profiles."""
    return {name: p.to_dict() for name, p in sources.profiles().items()}


@router.get("/corpora")
def list_corpora(engine: EngineDep) -> list[dict]:
    return corpora.summaries(engine)


# The pasted text is one form field: it may be as large as the body limit allows (app.web.limits), which
# receive() then holds to the upload limit; Starlette's own default would stop it at 1 MB.
PASTED_TEXT_PART_BYTES = 1 << 40


@router.post("/corpora", status_code=201, form_limits={"max_part_size": PASTED_TEXT_PART_BYTES})
async def upload_corpus(
    request: Request,
    engine: EngineDep,
    settings: Annotated[Settings, Depends(settings_of)],
    jobs: Annotated[Dispatcher, Depends(jobs_of)],
    name: Annotated[str | None, Form(max_length=1000)] = None,
    files: Annotated[list[UploadFile] | None, File()] = None,
    text: Annotated[str | None, Form()] = None,
    labels: Annotated[str | None, Form()] = None,
    profile: Annotated[str | None, Form()] = None,
    kind: Annotated[str | None, Form(max_length=40)] = None,
    text_separator: Annotated[str | None, Form(max_length=1000)] = None,
    wait: bool = False,
):
    """Ingest files (and/or pasted ``text``) as one corpus. With ``wait=1`` answer 201 with the summary once
    stored, or 202 with the job if that takes longer than ``LEXIGROWTH_UPLOAD_WAIT_SECONDS`` (default 60);
    otherwise 202 at once with a job to poll at ``/api/jobs/{id}``.

    ``kind`` says what the files hold: ``text`` (default), ``word-counts`` (CSV/TSV rows word, count),
    ``spectrum`` (rows frequency, types) or ``bundle`` (a file from ``/api/corpora/{id}/bundle``; its own
    name is kept when ``name`` is empty).

    ``text_separator`` says where the texts of a file end: ``file`` (default: each file is one text),
    ``paragraph`` (blank lines), ``line`` (each line), or a line holding only the given marker (e.g. ``###``).

    The route is a coroutine: copying the files and every store access run in the thread pool, and while
    it waits for the task it holds no thread (``asyncio.sleep`` between two looks at the job)."""
    try:
        source_kind = exchange.check_kind(kind)
        if source_kind != "bundle" or name:
            name = ingestion.check_name(name or "")
        label_map = ingestion.parse_labels(labels)
        chosen = sources.parse_profile(profile)
        separator = ingestion.check_text_separator(text_separator)
        if source_kind != "text" and sources.splits_texts(separator):
            raise ingestion.IngestionInputError("text_separator: only files of texts are split into texts")
        describe = sources.text_file if source_kind == "text" else sources.plain_file
        upload = await run_in_threadpool(
            receive, files or [], text, settings.work_dir, settings.max_upload_mb, describe
        )
    except sources.INPUT_ERRORS as exc:
        raise input_error(exc) from exc

    member = request.state.viewer.member  # in lab mode, the uploader owns the corpus
    params = tasks.ingest_params(
        [(s.path, s.name) for s in upload.sources],
        name,
        label_map,
        chosen,
        scratch=upload.directory,
        owner_id=member.id if member is not None else None,
        source_kind=source_kind,
        text_separator=separator,
    )
    try:
        task = await run_in_threadpool(tasks.queue_upload, engine, params, upload.total_bytes)
    except BaseException:
        upload.cleanup()
        raise
    task = await run_in_threadpool(jobs.submit, task)
    if wait:
        task = await wait_for(request, jobs, task, settings.upload_wait_seconds)
    if not (wait and task.finished):
        job = await run_in_threadpool(jobs.job, task.id)
        return FiniteJSONResponse(job | {"url": f"/api/jobs/{task.id}"}, status_code=202)
    if failed(task):
        raise HTTPException(status_code=422, detail=task.message)
    corpus = await run_in_threadpool(corpora.lookup, engine, task.corpus_id)
    same = await run_in_threadpool(library.same_content, engine, corpus)
    return with_warnings(corpora.summary(corpus)) | {"same_content": same}


async def wait_for(request: Request, jobs: Dispatcher, task: Task, seconds: float) -> Task:
    """The task once finished, or as it stands after ``seconds`` or when the client has gone (the task goes
    on); looks at it every ``WAIT_POLL_SECONDS`` at first, less often as it takes longer (at most every
    ``WAIT_POLL_MAX_SECONDS``)."""
    deadline = time.monotonic() + seconds
    pause = WAIT_POLL_SECONDS
    while not task.finished and time.monotonic() < deadline and not await request.is_disconnected():
        await asyncio.sleep(min(pause, max(0.0, deadline - time.monotonic())))
        pause = min(pause * 1.5, WAIT_POLL_MAX_SECONDS)
        task = await run_in_threadpool(jobs.current, task)
    return task


@router.get("/jobs")
def jobs_under_way(jobs: Annotated[Dispatcher, Depends(jobs_of)]) -> list[dict]:
    """Uploads (and demo corpora) being counted now: the Library's list of corpora on their way."""
    return jobs.uploads_under_way()


@router.get("/jobs/{job_id}")
def job_status(
    job_id: Annotated[str, Path(max_length=64)], jobs: Annotated[Dispatcher, Depends(jobs_of)]
) -> dict:
    """An upload's state, stage (reading, counting, storing...), bytes counted, and once its corpus exists
    the corpus and the state of its models. Any server process of the store can answer."""
    job = jobs.job(job_id)
    if job is None:
        raise HTTPException(status_code=404, detail=f"no job {job_id}")
    return job


def with_warnings(summary: dict) -> dict:
    """A corpus summary with ``warnings``: sentences to show before any extrapolation (tiny texts)."""
    warning = modelling.small_corpus_warning(summary["tokens"], summary["types"])
    return summary | {"warnings": [warning] if warning else []}


@router.get("/corpora/{corpus_id}")
def corpus_summary(
    corpus_id: CorpusId, engine: EngineDep, jobs: Annotated[Dispatcher, Depends(jobs_of)]
) -> dict:
    """The corpus summary, whether its models are ready (``models.status``), ``warnings`` to show before
    any extrapolation (e.g. a text under 1,000 tokens) and ``same_content``: the other corpora counted from
    the same content (id, name, url, counted_at)."""
    corpus = corpus_or_404(engine, corpus_id)
    summary = with_warnings(corpora.summary(corpus)) | {"same_content": library.same_content(engine, corpus)}
    return summary | {"models": jobs.models_status(corpus_id)}


@router.delete("/corpora/{corpus_id}", status_code=204)
def delete_corpus(corpus_id: CorpusId, engine: EngineDep, request: Request) -> Response:
    """Delete a corpus (in lab mode only its owner or an admin may: 403 otherwise)."""
    corpus = corpus_or_404(engine, corpus_id)
    if not request.state.viewer.may_delete(corpus.owner_id):
        raise HTTPException(
            status_code=403, detail="only the member who uploaded this corpus, or an admin, may delete it"
        )
    corpora.delete(engine, corpus_id)
    return Response(status_code=204)


SPECTRUM_ROWS_SHOWN = 10_000
"""Spectrum rows (m, V_m) in one JSON answer; the spectrum TSV download holds them all."""


@router.get("/corpora/{corpus_id}/spectrum")
def spectrum(
    corpus_id: CorpusId,
    engine: EngineDep,
    limit: Annotated[int, Query(ge=1, le=SPECTRUM_ROWS_SHOWN)] = SPECTRUM_ROWS_SHOWN,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> dict:
    """The frequency spectrum [[m, V_m], ...], m ascending: at most 10,000 rows from ``offset`` (``rows``:
    how many there are; a corpus of 10^8 tokens has a few thousand), all of them in ``download``."""
    corpus = corpus_or_404(engine, corpus_id)
    pairs = corpora.spectrum(engine, corpus_id)
    shown = pairs[offset : offset + limit]
    download = f"/api/corpora/{corpus_id}/spectrum.tsv"
    out = {
        "tokens": corpus.tokens,
        "types": corpus.types,
        "rows": len(pairs),
        "offset": offset,
        "spectrum": [list(p) for p in shown],
        "download": download,
    }
    if len(shown) < len(pairs):
        out["note"] = (
            f"rows {offset + 1:,} to {offset + len(shown):,} of {len(pairs):,} (at most "
            f"{SPECTRUM_ROWS_SHOWN:,} at a time; more with offset): the whole spectrum is at {download}"
        )
    return out


@router.get("/corpora/{corpus_id}/growth")
def growth(
    corpus_id: CorpusId,
    engine: EngineDep,
    horizon: Annotated[
        float, Query(ge=1, le=1000, description="how far the models reach, x corpus size")
    ] = 10,
) -> dict:
    """The type-growth plot of the Corpus page: exact text-order type growth; the random-order expectation
    (the exact interpolation, every model's prediction up to the corpus size) with its nominal 90% range;
    and ``models``: each model's prediction from the corpus size to ``horizon`` times it, as
    ``/predict`` serves it, with its nominal 90% range (``status`` pending or failed while there is none)."""
    corpus = corpus_or_404(engine, corpus_id)
    source = corpora.made_from(corpus)
    try:
        loaded = modelling.load_models(engine, corpus_id)
    except modelling.ModelsPendingError:
        models: dict = {"status": "pending"}
    except modelling.ModelsFailedError as exc:
        models = {"status": "failed", "reason": exc.reason}
    else:
        curves, failures = modelling.continuations(
            loaded, int(max(corpus.tokens * horizon, corpus.tokens + 1))
        )
        models = {"status": "ready", "curves": curves, "failures": failures}
    return {
        "text_order": [{"tokens": n, "types": v} for n, v in corpora.text_order_growth(engine, corpus_id)],
        "random_order": modelling.random_order_growth(engine, corpus_id),
        "models": models,
    } | ({} if source["text_order"] else {"text_order_note": no_text_order(source)})


@router.get("/corpora/{corpus_id}/words")
def words(
    corpus_id: CorpusId,
    engine: EngineDep,
    search: Annotated[str | None, Query(max_length=200)] = None,
    limit: Annotated[int, Query(ge=1, le=10_000)] = 100,
    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
) -> dict:
    corpus = corpus_or_404(engine, corpus_id)
    source = corpora.made_from(corpus)
    if not source["word_list"]:
        return {"total": 0, "offset": offset, "words": [], "available": False, "note": no_word_list(source)}
    total, rows = corpora.word_counts(engine, corpus_id, search, limit, offset)
    spread = word_dispersion(engine, corpus, [w for w, _ in rows])
    if spread is None:
        return {"total": total, "offset": offset, "words": [{"word": w, "count": c} for w, c in rows]}
    return {
        "total": total,
        "offset": offset,
        "texts": spread["texts"],
        "dispersion": spread["method"],
        "words": [{"word": w, "count": c} | spread["words"].get(w, {}) for w, c in rows],
    }


@router.get("/corpora/{corpus_id}/spectrum.tsv")
def spectrum_tsv(corpus_id: CorpusId, engine: EngineDep) -> Response:
    corpus = corpus_or_404(engine, corpus_id)
    return downloads.spectrum_tsv_response(corpus, corpora.spectrum(engine, corpus_id))


@router.get("/corpora/{corpus_id}/words.csv")
def words_csv(corpus_id: CorpusId, engine: EngineDep) -> Response:
    corpus = corpus_or_404(engine, corpus_id)
    source = corpora.made_from(corpus)
    if not source["word_list"]:
        raise HTTPException(status_code=409, detail=no_word_list(source))
    return downloads.word_counts_csv_response(corpus, corpora.word_counts(engine, corpus_id, limit=None)[1])


@router.get("/corpora/{corpus_id}/bundle")
def bundle(corpus_id: CorpusId, engine: EngineDep, compress: bool = True) -> Response:
    """The corpus as one bundle file (gzip-compressed JSON, or plain JSON with ``compress=0``) that
    ``POST /api/corpora`` with ``kind=bundle`` turns back into the same corpus on any installation."""
    corpus = corpus_or_404(engine, corpus_id)
    return downloads.bundle_response(corpus, exchange.export_bundle(engine, corpus_id, compress), compress)


def no_word_list(source: dict) -> str:
    return f"this corpus was made from {source['title']} and has no word list"


def no_text_order(source: dict) -> str:
    return (
        f"this corpus was made from {source['title']}, without the order of a text: "
        "only the random-order expectation exists"
    )


# ------------------------------------------------------------------------------------------- modelling

ModelName = Annotated[str, Query(max_length=60, description="sample, a model name, or recommended")]
Tokens = Annotated[int, Query(ge=1, le=modelling.MAX_PREDICTION_TOKENS)]


def _modelling_call(function, *args):
    try:
        return function(*args)
    except modelling.ModelsPendingError as exc:
        raise HTTPException(status_code=503, detail=str(exc), headers={"Retry-After": "2"}) from exc
    except modelling.PredictionError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc
    except (ValueError, ArithmeticError) as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc


@router.get("/corpora/{corpus_id}/predict")
def predict(
    corpus_id: CorpusId, engine: EngineDep, tokens: Tokens, model: ModelName = modelling.RECOMMENDED
) -> dict:
    """E[V(n)] with its range and E[V_k(n)] for k = 1..20 by one model (``sample`` = exact interpolation)."""
    corpus_or_404(engine, corpus_id)
    return _modelling_call(modelling.predict, engine, corpus_id, tokens, model)


@router.get("/models")
def model_catalogue() -> list[dict]:
    """Every model id the prediction and planning endpoints accept, with its name in words, its formula
    and its parameters (names as in ``/corpora/{id}/models``, with their meaning)."""
    return modelling.model_catalogue()


@router.get("/corpora/{corpus_id}/models")
def models(corpus_id: CorpusId, engine: EngineDep, jobs: Annotated[Dispatcher, Depends(jobs_of)]):
    """Every fitted model: parameters, goodness of fit, backtest errors, and the recommended ensemble.
    While they are being computed: 202 with the state of their task (``status``: queued or running)."""
    corpus_or_404(engine, corpus_id)
    try:
        return _modelling_call(modelling.model_report, engine, corpus_id)
    except HTTPException as exc:
        if exc.status_code != 503:
            raise
        task = jobs.models_state(corpus_id)
        if failed(task):
            raise HTTPException(status_code=422, detail=task.message) from exc
        if succeeded(task):  # finished between the two looks
            return _modelling_call(modelling.model_report, engine, corpus_id)
        body = {"status": task.state, "stage": task.stage, "detail": exc.detail}
        return FiniteJSONResponse(body, status_code=202, headers={"Retry-After": "1"})


@router.get("/corpora/{corpus_id}/richness")
def richness(
    corpus_id: CorpusId, engine: EngineDep, common_size: Annotated[int | None, Query(ge=1, le=10**12)] = None
) -> dict:
    """Lexical richness indices at the corpus size and, optionally, at a common size."""
    corpus_or_404(engine, corpus_id)
    return _modelling_call(modelling.richness, engine, corpus_id, common_size)


@router.get("/corpora/{corpus_id}/unseen")
def unseen(corpus_id: CorpusId, engine: EngineDep) -> list[dict]:
    """Estimates of unseen vocabulary, each with its range of validity."""
    corpus_or_404(engine, corpus_id)
    return _modelling_call(modelling.unseen_vocabulary, engine, corpus_id)


@router.get("/corpora/{corpus_id}/sample")
def random_sample(
    corpus_id: CorpusId,
    engine: EngineDep,
    tokens: Tokens,
    random_state: Annotated[int, Query(ge=0, le=2**32 - 1)] = 0,
) -> dict:
    """Draw a real random sample of ``tokens`` tokens from the stored counts: its observed spectrum beside
    the exact expectation."""
    corpus_or_404(engine, corpus_id)
    return _modelling_call(modelling.random_sample_spectrum, engine, corpus_id, tokens, random_state)


class TotalsEstimate(BaseModel):
    tokens: int = Field(ge=1, le=10**12, description="tokens N of the text")
    types: int = Field(ge=1, le=10**12, description="types V of the text")
    hapaxes: optional(int, ge=1, le=10**12) = Field(
        default=None, description="hapax legomena V_1, if known (null or empty: not known)"
    )
    sizes: list[int] = Field(default_factory=list, max_length=50, description="sizes to predict at")
    plan_types: optional(float, gt=0, le=1e13) = Field(
        default=None, description="planning: tokens until this many types (optional)"
    )
    plan_new_type_rate: optional(float, gt=0, lt=1) = Field(
        default=None, description="planning: until this new-type rate (optional)"
    )

    @field_validator("sizes")
    @classmethod
    def _sizes_in_range(cls, sizes: list[int]) -> list[int]:
        if any(not 1 <= n <= 10**12 for n in sizes):
            raise ValueError("every size must lie between 1 and 10^12 tokens")
        return sizes


class UniformEstimate(BaseModel):
    types: int = Field(ge=1, le=10**9, description="k: number of types")
    repeats: int = Field(ge=1, le=10**9, description="r: occurrences of each type")
    draws: list[int] = Field(min_length=1, max_length=200, description="numbers of tokens drawn")


@router.post("/estimate")
def estimate(request: TotalsEstimate) -> dict:
    """From tokens and types (and hapax legomena when known): predicted legomena and growth."""
    target = planning_target(request.plan_types, request.plan_new_type_rate, None, None, required=False)
    return _modelling_call(
        estimator.estimate_from_totals, request.tokens, request.types, request.hapaxes, request.sizes, target
    )


@router.post("/estimate/uniform")
def estimate_uniform(request: UniformEstimate) -> dict:
    """k types each occurring r times: exact and closed-form expected types after n draws."""
    return _modelling_call(estimator.uniform_design, request.types, request.repeats, request.draws)


def planning_target(
    types: float | None,
    new_type_rate: float | None,
    coverage: float | None,
    share: float | None,
    required: bool = True,
) -> Target | None:
    """The one planning target given (``app.services.planning``), a clear 422 otherwise."""
    try:
        return plan_targets.planning_target(types, new_type_rate, coverage, share, required=required)
    except plan_targets.TargetChoiceError as exc:
        raise HTTPException(
            status_code=422, detail="give exactly one target: types, new_type_rate, coverage or share"
        ) from exc
    except plan_targets.TargetValueError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc


@router.get("/corpora/{corpus_id}/plan")
def plan(
    corpus_id: CorpusId,
    engine: EngineDep,
    types: Annotated[optional(float, gt=0, le=1e13), Query(description="target number of types V*")] = None,
    new_type_rate: Annotated[
        optional(float, gt=0, lt=1), Query(description="target chance that the next token is new")
    ] = None,
    coverage: Annotated[
        optional(float, gt=0, lt=1), Query(description="target coverage 1 - new-type rate")
    ] = None,
    share: Annotated[
        optional(float, gt=0, lt=1), Query(description="target share of the whole population")
    ] = None,
    model: ModelName = modelling.RECOMMENDED,
) -> dict:
    """How many tokens until the corpus reaches a vocabulary target, with the range over models. Give one
    target; the others may be left out or sent empty (``coverage=``), as a browser form sends them."""
    corpus_or_404(engine, corpus_id)
    target = planning_target(types, new_type_rate, coverage, share)
    return _modelling_call(modelling.plan, engine, corpus_id, target, model)
