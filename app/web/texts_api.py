"""The JSON API of a corpus's texts: the per-text table, and growth and planning by texts.

A corpus without texts (made from a word-count list, a spectrum or a bundle, or stored before texts were
kept) answers 200 with ``available: false`` and the ``reason``, as every text-level view says so.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, HTTPException, Query
from sqlalchemy.engine import Engine

from app.core.text_growth import UnreachableTextTargetError
from app.services import texts
from app.web.api import CorpusId
from app.web.deps import corpus_or_404, engine_of
from app.web.forms import optional

router = APIRouter(prefix="/api/corpora", tags=["api"])

EngineDep = Annotated[Engine, Depends(engine_of)]
MAX_ROWS = 10_000


def _unavailable(exc: texts.NoTextsError) -> dict[str, Any]:
    return {"available": False, "reason": str(exc)}


@router.get("/{corpus_id}/texts")
def corpus_texts(
    corpus_id: CorpusId,
    engine: EngineDep,
    offset: Annotated[int, Query(ge=0)] = 0,
    rows: Annotated[int, Query(ge=1, le=MAX_ROWS)] = 100,
) -> dict:
    """The corpus's texts in upload order (``position``, ``name``, ``tokens``, ``types``), ``rows`` at a time
    from ``offset``, with ``total``, the ``separator`` they were split by and ``empty_skipped`` (texts
    without any word token, not kept)."""
    corpus_or_404(engine, corpus_id)
    try:
        return {"available": True} | texts.text_table(engine, corpus_id, limit=rows, offset=offset)
    except texts.NoTextsError as exc:
        return _unavailable(exc)


@router.get("/{corpus_id}/texts/growth")
def text_growth(
    corpus_id: CorpusId,
    engine: EngineDep,
    horizon: Annotated[
        float, Query(ge=1, le=texts.MAX_HORIZON, description="extrapolate to this multiple of the texts")
    ] = texts.DEFAULT_HORIZON,
    types: Annotated[
        optional(float, gt=0, le=1e13), Query(description="plan: more texts until V* types")
    ] = None,
) -> dict:
    """Vocabulary growth by texts: ``interpolation`` (the exact expected types of k texts drawn at random
    from the corpus's T texts, with a nominal 90% range), ``extrapolation`` (to ``horizon`` x T texts,
    Chao et al. 2014, with its bootstrap range), the incidence frequencies Q_j and Chao2; with ``types=V*``
    also ``plan``: how many more texts of this kind until V* types, with a range (or ``not_applicable`` with
    the reason)."""
    corpus_or_404(engine, corpus_id)
    try:
        payload = {"available": True} | texts.text_growth(engine, corpus_id, horizon)
    except texts.NoTextsError as exc:
        return _unavailable(exc)
    except ValueError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc
    if types is not None:
        try:
            payload["plan"] = texts.plan_texts(engine, corpus_id, types) | {"not_applicable": None}
        except UnreachableTextTargetError as exc:
            payload["plan"] = {"target_types": types, "more_texts": None, "not_applicable": str(exc)}
    return payload
