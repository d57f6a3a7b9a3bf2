"""Comparison pages and their JSON twins: a live view with its state in the URL, and saved permalinks.

Pages:  GET /compare?corpus=1&corpus=2[&common_size=&horizon=&first=&second=&min_freq=&limit=&scale=share]
        POST /compare (form: the same fields) -> 303 to /compare/{slug}
        GET /compare/{slug}
JSON:   POST /api/comparisons, GET /api/comparisons/{slug}[?download=1], GET /api/compare?corpus=...,
        and the CSV tables under both: .../table.csv, .../distinctive.csv
"""

from __future__ import annotations

import re
from collections.abc import Callable, Hashable
from dataclasses import dataclass
from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Depends, Form, HTTPException, Query, Request
from fastapi.responses import HTMLResponse, JSONResponse, RedirectResponse, Response
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.engine import Engine

from app.services import comparisons as service
from app.services import corpora, memo
from app.web.api import MAX_CORPUS_ID
from app.web.compare_figures import comparison_figures
from app.web.deps import engine_of
from app.web.downloads import attachment
from app.web.figures import PALETTE
from app.web.forms import require_confirmation
from app.web.jsonsafe import FiniteJSONResponse
from app.web.pages import render, render_kept
from app.web.security import Viewer, viewer_of

router = APIRouter()
EngineDep = Annotated[Engine, Depends(engine_of)]
ViewerDep = Annotated[Viewer, Depends(viewer_of)]
SLUG = re.compile(r"[A-Za-z0-9_-]{16,86}")


def publisher(viewer: Viewer) -> service.Publisher:
    member = viewer.member
    return service.Publisher(viewer.lab, member.id if member else None, bool(member and member.is_admin))


def _save(engine: Engine, settings: service.ComparisonSettings, viewer: Viewer, public: bool) -> str:
    """Save the comparison after its checks: 404/422 for bad corpora or settings, 403 for publishing
    corpora of other members; nothing is stored when refused."""
    _live(engine, settings)
    try:
        return service.save(engine, settings, publisher(viewer), public)
    except service.NotAllowedError as exc:
        raise HTTPException(status_code=403, detail=str(exc)) from exc


def _manage(action, engine: Engine, slug: str, *args) -> None:
    """Run a change of a saved comparison: 404 for an unknown one, 403 when the viewer may not."""
    if not SLUG.fullmatch(slug):
        raise HTTPException(status_code=404, detail="no saved comparison at this address")
    try:
        action(engine, slug, *args)
    except service.ComparisonNotFoundError as exc:
        raise HTTPException(status_code=404, detail="no saved comparison at this address") from exc
    except service.NotAllowedError as exc:
        raise HTTPException(status_code=403, detail=str(exc)) from exc


class Visibility(BaseModel):
    """Body of PATCH /api/comparisons/{slug}."""

    model_config = ConfigDict(extra="forbid")

    public: bool = Field(
        description="true: anyone with the link sees it (without words); false: members only"
    )


class ComparisonRequest(BaseModel):
    """Body of POST /api/comparisons."""

    model_config = ConfigDict(extra="forbid")

    corpora: list[Annotated[int, Field(ge=1, le=MAX_CORPUS_ID)]] = Field(
        description="ids of the 2 to 8 corpora to compare, in legend order"
    )
    common_size: int | None = Field(None, description="tokens; default: the smallest corpus")
    horizon: int | None = Field(None, description="tokens the model curves reach; default: twice the largest")
    pair: list[int] | None = Field(
        None, description="two of the corpora for distinctive words; default: first two"
    )
    min_freq: int | None = Field(None, description="minimum count of a word in the pair together (default 5)")
    limit: int | None = Field(None, description="distinctive words kept, by G^2 (default 100)")
    public: bool = Field(
        False,
        description="lab mode: anyone with the link sees the numbers and plots (never words) without signing in",
    )


def _optional_int(name: str, text: str | None) -> int | None:
    """A whole number from a query or form field; blank means "use the default"."""
    if text is None or not text.strip():
        return None
    cleaned = text.strip().replace(",", "").replace("_", "")
    if not re.fullmatch(r"[+-]?\d{1,40}", cleaned):
        raise service.ComparisonInputError(f"{name} must be a whole number of tokens (got {text[:40]!r})")
    return int(cleaned)


def _settings(
    corpus: list[str],
    common_size: str | None,
    horizon: str | None,
    first: str | None,
    second: str | None,
    min_freq: str | None,
    limit: str | None,
) -> service.ComparisonSettings:
    """Settings from query or form fields, with a 422 that says what is wrong."""
    try:
        ids = [_optional_int("corpus", c) for c in corpus]
        if any(i is not None and not 1 <= i <= MAX_CORPUS_ID for i in ids):
            raise service.ComparisonInputError(f"corpus ids lie between 1 and {MAX_CORPUS_ID:,}")
        pair = [_optional_int("first", first), _optional_int("second", second)]
        return service.check_settings(
            [i for i in ids if i is not None],
            _optional_int("common_size", common_size),
            _optional_int("horizon", horizon),
            pair if None not in pair else None,
            _optional_int("min_freq", min_freq),
            _optional_int("limit", limit),
        )
    except service.ComparisonInputError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc


def _query_settings(
    corpus: Annotated[list[str], Query(description="corpus ids (2 to 8)")] = [],  # noqa: B006
    common_size: Annotated[str | None, Query(max_length=60)] = None,
    horizon: Annotated[str | None, Query(max_length=60)] = None,
    first: Annotated[str | None, Query(max_length=20)] = None,
    second: Annotated[str | None, Query(max_length=20)] = None,
    min_freq: Annotated[str | None, Query(max_length=20)] = None,
    limit: Annotated[str | None, Query(max_length=20)] = None,
) -> service.ComparisonSettings:
    return _settings(corpus, common_size, horizon, first, second, min_freq, limit)


def _form_settings(
    corpus: Annotated[list[str], Form()] = [],  # noqa: B006
    common_size: Annotated[str | None, Form(max_length=60)] = None,
    horizon: Annotated[str | None, Form(max_length=60)] = None,
    first: Annotated[str | None, Form(max_length=20)] = None,
    second: Annotated[str | None, Form(max_length=20)] = None,
    min_freq: Annotated[str | None, Form(max_length=20)] = None,
    limit: Annotated[str | None, Form(max_length=20)] = None,
) -> service.ComparisonSettings:
    return _settings(corpus, common_size, horizon, first, second, min_freq, limit)


QuerySettings = Annotated[service.ComparisonSettings, Depends(_query_settings)]

PAGE_SETTINGS = ("common_size", "horizon", "pair", "min_freq", "limit")
"""The settings of the page's forms; a bad one falls back to its default and is shown beside its form."""


@dataclass(frozen=True)
class PageSettings:
    """The settings of a page request: those that hold, and a message per setting that does not (keyed
    as ``PAGE_SETTINGS``) with the fields as typed, shown again in their forms."""

    settings: service.ComparisonSettings
    problems: dict[str, str]
    typed: dict[str, str]


def _page_settings(
    corpus: Annotated[list[str], Query()] = [],  # noqa: B006
    common_size: Annotated[str | None, Query(max_length=60)] = None,
    horizon: Annotated[str | None, Query(max_length=60)] = None,
    first: Annotated[str | None, Query(max_length=20)] = None,
    second: Annotated[str | None, Query(max_length=20)] = None,
    min_freq: Annotated[str | None, Query(max_length=20)] = None,
    limit: Annotated[str | None, Query(max_length=20)] = None,
) -> PageSettings:
    """The page's settings, each checked on its own: the corpora must hold (else 422, nothing to show), a
    bad setting is dropped for its default with its problem kept for the page (a form's problem beside it)."""
    fields = {
        "common_size": {"common_size": common_size},
        "horizon": {"horizon": horizon},
        "pair": {"first": first, "second": second},
        "min_freq": {"min_freq": min_freq},
        "limit": {"limit": limit},
    }
    typed = {key: value for group in fields.values() for key, value in group.items()}
    kept: dict[str, str | None] = {}
    problems: dict[str, str] = {}
    settings = _query_settings(corpus)
    for name in PAGE_SETTINGS:
        try:
            settings = _query_settings(corpus, **(kept | fields[name]))
            kept |= fields[name]
        except HTTPException as exc:
            problems[name] = str(exc.detail)
    return PageSettings(settings, problems, {k: v or "" for k, v in typed.items()})


def _live(engine: Engine, settings: service.ComparisonSettings) -> dict[str, Any]:
    return _snapshot(engine, _live_version(engine, settings))


def _snapshot(engine: Engine, live: service.LiveComparison) -> dict[str, Any]:
    try:
        return service.live_snapshot(engine, live)
    except service.ComparisonInputError as exc:  # a corpus whose stored data cannot be compared
        raise HTTPException(status_code=422, detail=str(exc)) from exc


def _live_version(engine: Engine, settings: service.ComparisonSettings) -> service.LiveComparison:
    try:
        return service.live_version(engine, settings)
    except corpora.CorpusNotFoundError as exc:
        raise HTTPException(status_code=404, detail=f"{exc}: it cannot be compared") from exc
    except service.ComparisonInputError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc


def _saved(engine: Engine, slug: str, viewer: Viewer) -> dict[str, Any]:
    """The saved snapshot; a visitor who is not signed in (only let through for a public one) gets no words."""
    if not SLUG.fullmatch(slug):
        raise HTTPException(status_code=404, detail="no saved comparison at this address")
    try:
        snapshot = service.saved_comparison(engine, slug)
    except service.ComparisonNotFoundError as exc:
        raise HTTPException(status_code=404, detail="no saved comparison at this address") from exc
    if not viewer.anonymous:
        return snapshot
    if not snapshot["public"]:
        raise HTTPException(status_code=404, detail="no saved comparison at this address")
    return service.without_word_lists(snapshot)


def live_query(s: dict[str, Any]) -> str:
    """The URL query of the live view of these settings (``ComparisonSettings.as_dict``)."""
    fields = [("corpus", cid) for cid in s["corpora"]] + [
        ("common_size", s["common_size"]),
        ("horizon", s["horizon"]),
        ("first", s["pair"][0]),
        ("second", s["pair"][1]),
        ("min_freq", s["min_freq"]),
        ("limit", s["limit"]),
    ]
    return urlencode(fields)


def _page(
    request: Request,
    snapshot: Callable[[], dict[str, Any]],
    settings: dict[str, Any],
    version: Hashable,
    slug: str | None = None,
    manage: bool = False,
    scale: str | None = None,
    asked: PageSettings | None = None,
) -> Response:
    """The Comparison page of a snapshot computed only when the page is not kept (``render_kept``):
    ``settings`` as the snapshot records them, ``slug`` for a saved one; ``asked``: settings with problems,
    shown beside their forms with the fields as typed (rendered as it is, 422)."""
    query = live_query(settings)
    base = f"/api/comparisons/{slug}" if slug else "/api/compare"
    suffix = "" if slug else f"?{query}"

    def build_context() -> dict[str, Any]:
        shown = snapshot()
        memo.checkpoint()  # the figures are for nobody if everyone who asked has gone
        return {
            "snapshot": shown,
            "saved": slug is not None,
            "corpora": {c["id"]: c for c in shown["corpora"]},
            "figures": comparison_figures(shown),
            "palette": PALETTE,
            "may_manage": manage,
            "scale": "share" if scale == "share" else "tokens",
            "live_query": query,
            "json_url": f"{base}{suffix}",
            "downloads": {
                "table": f"{base}/table.csv{suffix}",
                "distinctive": f"{base}/distinctive.csv{suffix}",
                "json": f"{base}{suffix}{'&' if suffix else '?'}download=1",
            },
            "problems": asked.problems if asked else {},
            "typed": asked.typed if asked else {},
        }

    if asked:
        return render(request, "compare.html", status_code=422, **build_context())
    return render_kept(request, "compare.html", version, build_context)


def _stem(snapshot: dict[str, Any]) -> str:
    return f"comparison-{snapshot['slug']}" if snapshot.get("slug") else "comparison"


def _json(snapshot: dict[str, Any], download: bool) -> JSONResponse:
    headers = {"Content-Disposition": f'attachment; filename="{_stem(snapshot)}.json"'} if download else None
    return FiniteJSONResponse(snapshot, headers=headers)


def _table_csv(snapshot: dict[str, Any]) -> Response:
    return attachment(
        service.size_matched_csv(snapshot), f"{_stem(snapshot)}-size-matched.csv", "text/csv; charset=utf-8"
    )


def _distinctive_csv(snapshot: dict[str, Any]) -> Response:
    return attachment(
        service.distinctive_csv(snapshot),
        f"{_stem(snapshot)}-distinctive-words.csv",
        "text/csv; charset=utf-8",
    )


# ------------------------------------------------------------------------------------------------ pages


@router.get("/compare", response_class=HTMLResponse, include_in_schema=False)
def compare_page(
    request: Request,
    engine: EngineDep,
    asked: Annotated[PageSettings, Depends(_page_settings)],
    scale: Annotated[str | None, Query(max_length=10)] = None,
):
    """A live comparison; a setting that cannot be used is shown beside its form (422), the comparison
    made with its default meanwhile."""
    live = _live_version(engine, asked.settings)  # a kept page is sent without its snapshot
    return _page(
        request,
        lambda: _snapshot(engine, live),
        live.settings.as_dict(),
        live.key,
        scale=scale,
        asked=asked if asked.problems else None,
    )


@router.post("/compare", include_in_schema=False)
def save_from_page(
    engine: EngineDep,
    viewer: ViewerDep,
    settings: Annotated[service.ComparisonSettings, Depends(_form_settings)],
    public: Annotated[bool, Form()] = False,
) -> RedirectResponse:
    slug = _save(engine, settings, viewer, public)
    return RedirectResponse(service.permalink(slug), status_code=303)


@router.post("/compare/{slug}/visibility", include_in_schema=False)
def change_visibility_from_page(
    slug: str, engine: EngineDep, viewer: ViewerDep, public: Annotated[bool, Form()] = False
) -> RedirectResponse:
    _manage(service.set_visibility, engine, slug, public, publisher(viewer))
    return RedirectResponse(service.permalink(slug), status_code=303)


@router.post("/compare/{slug}/delete", include_in_schema=False)
def delete_from_page(
    slug: str, engine: EngineDep, viewer: ViewerDep, confirm: Annotated[str, Form(max_length=10)] = ""
) -> RedirectResponse:
    require_confirmation(confirm)
    _manage(service.delete_saved, engine, slug, publisher(viewer))
    return RedirectResponse("/", status_code=303)


@router.get("/compare/{slug}", response_class=HTMLResponse, include_in_schema=False)
def saved_page(
    request: Request,
    slug: str,
    engine: EngineDep,
    viewer: ViewerDep,
    scale: Annotated[str | None, Query(max_length=10)] = None,
):
    snapshot = _saved(engine, slug, viewer)
    manage = not viewer.anonymous and service.may_manage(engine, slug, publisher(viewer))
    # a saved snapshot changes only in visibility and in which of its corpora are still in the library
    version = (
        snapshot["saved_at"],
        snapshot["public"],
        tuple(c["available"] for c in snapshot["corpora"]),
        manage,
    )
    return _page(request, lambda: snapshot, snapshot["settings"], version, slug, manage, scale)


# ------------------------------------------------------------------------------------------------- JSON


@router.post("/api/comparisons", status_code=201, tags=["comparisons"])
def create_comparison(body: ComparisonRequest, engine: EngineDep, viewer: ViewerDep) -> dict:
    """Save a comparison of 2 to 8 corpora; the permalink shows the numbers computed now, for good."""
    try:
        settings = service.check_settings(
            body.corpora, body.common_size, body.horizon, body.pair, body.min_freq, body.limit
        )
    except service.ComparisonInputError as exc:
        raise HTTPException(status_code=422, detail=str(exc)) from exc
    slug = _save(engine, settings, viewer, body.public)
    return {"slug": slug, "url": service.permalink(slug)}


@router.patch("/api/comparisons/{slug}", tags=["comparisons"])
def change_visibility(slug: str, body: Visibility, engine: EngineDep, viewer: ViewerDep) -> dict:
    """Make a saved comparison public or members-only (lab mode: its creator or an admin; publishing needs
    every corpus to be the member's own)."""
    _manage(service.set_visibility, engine, slug, body.public, publisher(viewer))
    return {"slug": slug, "public": body.public}


@router.delete("/api/comparisons/{slug}", status_code=204, tags=["comparisons"])
def delete_comparison(slug: str, engine: EngineDep, viewer: ViewerDep) -> Response:
    """Delete a saved comparison: its permalink stops working (lab mode: its creator or an admin)."""
    _manage(service.delete_saved, engine, slug, publisher(viewer))
    return Response(status_code=204)


@router.get("/api/compare", tags=["comparisons"])
def live_comparison(engine: EngineDep, settings: QuerySettings, download: bool = False) -> JSONResponse:
    """The live comparison (not saved) of the corpora given as ``corpus=ID`` (2 to 8 times)."""
    return _json(_live(engine, settings), download)


@router.get("/api/compare/table.csv", tags=["comparisons"])
def live_table_csv(engine: EngineDep, settings: QuerySettings) -> Response:
    return _table_csv(_live(engine, settings))


@router.get("/api/compare/distinctive.csv", tags=["comparisons"])
def live_distinctive_csv(engine: EngineDep, settings: QuerySettings) -> Response:
    return _distinctive_csv(_live(engine, settings))


@router.get("/api/comparisons/{slug}", tags=["comparisons"])
def saved_comparison(slug: str, engine: EngineDep, viewer: ViewerDep, download: bool = False) -> JSONResponse:
    """A saved comparison: the numbers as they were saved, with notices about corpora deleted since."""
    return _json(_saved(engine, slug, viewer), download)


@router.get("/api/comparisons/{slug}/table.csv", tags=["comparisons"])
def saved_table_csv(slug: str, engine: EngineDep, viewer: ViewerDep) -> Response:
    return _table_csv(_saved(engine, slug, viewer))


@router.get("/api/comparisons/{slug}/distinctive.csv", tags=["comparisons"])
def saved_distinctive_csv(slug: str, engine: EngineDep, viewer: ViewerDep) -> Response:
    return _distinctive_csv(_saved(engine, slug, viewer))
