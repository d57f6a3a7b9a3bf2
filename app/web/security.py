"""Lab mode and the security of every response: who is asking, the sign-in gate, CSRF, and security headers.

Personal mode (the default while the store has no account): requests pass as they always did; only the
security headers are added. Lab mode (as soon as the store has an account, or always with
``LEXIGROWTH_MODE=lab``): every page and API route needs a signed-in member (session cookie) or an API token
(``Authorization: Bearer ...``), except the sign-in page, ``/api/health``, static assets and comparisons
their creator made public. Anonymous API calls get 401 JSON, anonymous pages a redirect to ``/login``.

Sessions live in the store (``app.store.sessions``): the cookie holds a random session id and the session's
CSRF token, signed (itsdangerous, HMAC-SHA1 over the JSON; key from ``LEXIGROWTH_SECRET_KEY`` or a random key
kept in the data folder with mode 0600), HttpOnly, SameSite=Lax, Secure over HTTPS. Signing out deletes the
session from the store and a password change deletes every session of the member, so a copied cookie stops
working in every server process at once (OWASP Session Management Cheat Sheet, "Session Expiration":
invalidate sessions on the server side). Failed sign-ins are counted in the store (``app.store.signins``). Every state-changing request (POST, PUT, PATCH, DELETE) made with the session cookie must send that
token, in the ``X-CSRF-Token`` header or the ``csrf_token`` form field (OWASP's synchronizer token pattern);
requests with an API token need none, because a browser never adds that header by itself.
"""

from __future__ import annotations

import hmac
import ipaddress
import logging
import math
import os
import re
import secrets
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import APIRouter, Form, HTTPException, Request
from fastapi.responses import HTMLResponse, JSONResponse, RedirectResponse, Response
from itsdangerous import BadData, URLSafeTimedSerializer
from sqlalchemy.engine import Engine
from starlette.concurrency import run_in_threadpool
from starlette.datastructures import MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.config import Settings
from app.store import accounts, sessions, signins
from app.store import comparisons as saved_comparisons
from app.store.accounts import Member
from app.web.pages import render

log = logging.getLogger("lexigrowth.security")

SESSION_COOKIE = "lexigrowth_session"
SESSION_MAX_AGE = 14 * 24 * 3600  # a sign-in lasts two weeks
MIN_KEY_CHARS = 32
CSRF_HEADER = "x-csrf-token"
CSRF_FIELD = "csrf_token"
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
OPEN_PATHS = frozenset({"/login", "/api/health"})
OPEN_PREFIXES = ("/static/",)
# Anonymous visitors may open these when the comparison is public (the word lists stay hidden).
PUBLIC_PERMALINK = re.compile(
    r"/compare/([A-Za-z0-9_-]{16,86})|/api/comparisons/([A-Za-z0-9_-]{16,86})(?:/table\.csv)?"
)
FORM_TYPES = ("application/x-www-form-urlencoded", "multipart/form-data")
SIGN_IN_ALLOWANCE = signins.Allowance(pair=5, address=20)

# Plotly fills an empty <style> element through the CSS object model (which a policy does not restrict);
# allowing exactly the empty element (this is the SHA-256 of "") lets it do that and nothing else inline.
EMPTY_STYLE = "'sha256-47DEQpj8HBSa+/TImW+5JCeuQeRkm5NMpJWZG3hSuFU='"
CONTENT_SECURITY_POLICY = "; ".join(
    [
        "default-src 'none'",
        "script-src 'self'",
        f"style-src 'self' {EMPTY_STYLE}",
        "img-src 'self' blob:",  # plotly's PNG and SVG export draws the figure through a blob: image
        "connect-src 'self'",
        "font-src 'self'",
        "form-action 'self'",
        "frame-ancestors 'none'",
        "base-uri 'none'",
    ]
)
SECURITY_HEADERS = {
    "content-security-policy": CONTENT_SECURITY_POLICY,
    "x-content-type-options": "nosniff",
    "referrer-policy": "same-origin",
    "x-frame-options": "DENY",
}


# ------------------------------------------------------------------------------------------- viewer


@dataclass
class Viewer:
    """Who is asking: in lab mode a member (by session or API token) or nobody; outside it, the owner."""

    lab: bool
    member: Member | None = None
    via_token: bool = False
    token_rejected: bool = False
    session: dict[str, Any] = field(default_factory=dict)
    session_changed: bool = False

    @property
    def anonymous(self) -> bool:
        """Lab mode and nobody signed in (a visitor of a public permalink)."""
        return self.lab and self.member is None

    def csrf_token(self) -> str:
        """The session's CSRF token (made on first use); empty outside lab mode, where none is checked."""
        if not self.lab:
            return ""
        if not self.session.get("csrf"):
            self.session = self.session | {"csrf": secrets.token_urlsafe(32)}
            self.session_changed = True
        return self.session["csrf"]

    def page_key(self) -> tuple:
        """Everything of the viewer that a page shows: the mode, the member (id, name, role) and the CSRF
        token its forms carry. Two requests with the same key see the same page."""
        member = self.member and (self.member.id, self.member.name, self.member.is_admin)
        return (self.lab, member, self.csrf_token())

    def csrf_matches(self, sent: str | None) -> bool:
        return _same(self.session.get("csrf"), sent)

    def sign_in(self, member: Member, session_id: str) -> None:
        """The new session ``session_id`` for ``member``, with a new CSRF token (nothing of the anonymous
        one is kept)."""
        self.member = member
        self.session = {"sid": session_id, "csrf": secrets.token_urlsafe(32)}
        self.session_changed = True

    def forget_session(self) -> None:
        self.member = None
        self.session = {}
        self.session_changed = True

    def may_delete(self, owner_id: int | None) -> bool:
        """Outside lab mode anyone; in it the owner of the corpus or an admin."""
        if not self.lab:
            return True
        return self.member is not None and (self.member.is_admin or self.member.id == owner_id)


def viewer_of(request: Request) -> Viewer:
    return request.state.viewer


def _same(expected: object, given: object) -> bool:
    """Constant-time equality of two non-empty strings (any other value: False)."""
    if not (isinstance(expected, str) and isinstance(given, str) and expected and given):
        return False
    return hmac.compare_digest(expected.encode(), given.encode())


# ------------------------------------------------------------------------------------------ the guard


def secret_key(settings: Settings) -> str:
    """``LEXIGROWTH_SECRET_KEY``, else the random key in ``<data_dir>/secret_key``, created with mode 0600.

    The file is written under another name and linked into place, so processes that start together all
    read the same complete key.
    """
    if settings.secret_key:
        return _long_enough(settings.secret_key, "LEXIGROWTH_SECRET_KEY")
    path = settings.data_dir / "secret_key"
    if not path.exists():
        scratch = path.with_name(f".secret_key.{os.getpid()}.{secrets.token_hex(4)}")
        descriptor = os.open(scratch, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(descriptor, "w") as out:
            out.write(secrets.token_urlsafe(48))
        try:
            os.link(scratch, path)
        except FileExistsError:
            pass
        finally:
            scratch.unlink()
    if path.stat().st_mode & 0o077:
        log.warning("%s could be read by other users: making it private (mode 0600)", path)
        path.chmod(0o600)
    return _long_enough(path.read_text(encoding="ascii").strip(), f"{path} (delete it to make a new one)")


def _long_enough(key: str, source: str) -> str:
    if len(key) < MIN_KEY_CHARS:
        raise RuntimeError(f"{source}: a session key needs at least {MIN_KEY_CHARS} characters")
    return key


def is_loopback(host: str) -> bool:
    """Whether a listening address is reachable from this machine only."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


class Guard:
    """Decides lab mode, identifies the viewer of a request and refuses what they may not see."""

    def __init__(self, settings: Settings, engine: Engine) -> None:
        self.engine = engine
        self.trust_proxy = settings.trust_proxy
        self._lab = settings.mode == "lab"
        self._serializer = URLSafeTimedSerializer(secret_key(settings), salt="lexigrowth-session")

    def lab_mode(self) -> bool:
        """Lab mode, once on, stays on: accounts are never deleted."""
        if not self._lab and accounts.any_account(self.engine):
            self._lab = True
        return self._lab

    def client_address(self, request: Request) -> str:
        """The client's address: the first X-Forwarded-For entry behind a trusted proxy."""
        forwarded = request.headers.get("x-forwarded-for", "").split(",")[0].strip()
        if self.trust_proxy and forwarded:
            return forwarded
        return request.client.host if request.client else "unknown address"

    def is_https(self, request: Request) -> bool:
        if request.url.scheme == "https":
            return True
        forwarded = request.headers.get("x-forwarded-proto", "").split(",")[0].strip().lower()
        return self.trust_proxy and forwarded == "https"

    def _session(self, cookie: str | None) -> dict[str, Any]:
        if not cookie:
            return {}
        try:
            data = self._serializer.loads(cookie, max_age=SESSION_MAX_AGE)
        except BadData:  # forged, damaged or expired
            return {}
        return data if isinstance(data, dict) else {}

    def identify(self, request: Request) -> Viewer:
        """The viewer from an API token (which must be valid when sent) or the session cookie."""
        if not self.lab_mode():
            return Viewer(lab=False)
        authorization = request.headers.get("authorization")
        if authorization is not None:
            scheme, _, token = authorization.partition(" ")
            token = token.strip()
            member = (
                accounts.member_by_token(self.engine, token) if scheme.lower() == "bearer" and token else None
            )
            return Viewer(lab=True, member=member, via_token=True, token_rejected=member is None)
        viewer = Viewer(lab=True, session=self._session(request.cookies.get(SESSION_COOKIE)))
        session_id = viewer.session.get("sid")
        if "sid" in viewer.session or "uid" in viewer.session:  # "uid": a cookie of an older version
            member = sessions.member_of(self.engine, session_id) if isinstance(session_id, str) else None
            if member is not None:
                viewer.member = member
            else:  # signed out, password changed or expired: forget the sign-in
                viewer.forget_session()
        return viewer

    def start_session(self, viewer: Viewer, member: Member) -> None:
        viewer.sign_in(member, sessions.start(self.engine, member.id, timedelta(seconds=SESSION_MAX_AGE)))

    def end_session(self, viewer: Viewer) -> None:
        session_id = viewer.session.get("sid")
        if isinstance(session_id, str):
            sessions.end(self.engine, session_id)
        viewer.forget_session()

    def refusal(self, viewer: Viewer, request: Request) -> Response | None:
        """None when the viewer may go on, else the 401 (API) or the redirect to the sign-in page."""
        if viewer.token_rejected:
            return _unauthorized("unknown or revoked API token")
        if not viewer.anonymous:
            return None
        path = request.scope["path"]
        if path in OPEN_PATHS or path.startswith(OPEN_PREFIXES):
            return None
        permalink = PUBLIC_PERMALINK.fullmatch(path)
        if (
            permalink
            and request.method in ("GET", "HEAD")
            and saved_comparisons.is_public(self.engine, permalink.group(1) or permalink.group(2))
        ):
            return None
        if path.startswith("/api/") or path == "/openapi.json":
            return _unauthorized("sign in, or send an API token (Authorization: Bearer ...)")
        target = path + (f"?{request.url.query}" if request.url.query else "")
        return RedirectResponse(f"/login?next={quote(target, safe='/')}", status_code=303)

    def check(self, request: Request) -> tuple[Viewer, Response | None]:
        viewer = self.identify(request)
        return viewer, self.refusal(viewer, request)

    def cookie(self, viewer: Viewer, https: bool) -> str:
        """The Set-Cookie value that stores (or, when empty, removes) the viewer's session."""
        attributes = "Path=/; HttpOnly; SameSite=Lax" + ("; Secure" if https else "")
        if not viewer.session:
            return f"{SESSION_COOKIE}=; Max-Age=0; {attributes}"
        value = self._serializer.dumps(viewer.session)
        return f"{SESSION_COOKIE}={value}; Max-Age={SESSION_MAX_AGE}; {attributes}"


def _unauthorized(detail: str) -> JSONResponse:
    return JSONResponse({"detail": detail}, status_code=401, headers={"WWW-Authenticate": "Bearer"})


class SecurityMiddleware:
    """Identifies the viewer (``request.state.viewer``), applies the sign-in gate, writes the session cookie
    and adds the security headers to every response (a response's own Content-Security-Policy is kept)."""

    def __init__(self, app: ASGIApp, guard: Guard) -> None:
        self.app = app
        self.guard = guard

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        viewer, refusal = await run_in_threadpool(self.guard.check, request)
        scope.setdefault("state", {})["viewer"] = viewer
        static = scope["path"].startswith(OPEN_PREFIXES)

        async def send_secured(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                for name, value in SECURITY_HEADERS.items():
                    if name not in headers:
                        headers[name] = value
                if viewer.lab and not static and "cache-control" not in headers:
                    headers["cache-control"] = "no-store"  # members' pages stay out of shared caches
                if viewer.session_changed:
                    headers.append("set-cookie", self.guard.cookie(viewer, self.guard.is_https(request)))
            await send(message)

        await (refusal or self.app)(scope, receive, send_secured)


# --------------------------------------------------------------------------------------------- CSRF


async def csrf_protect(request: Request) -> None:
    """Dependency of every route: a state-changing request made with the lab session cookie must carry the
    session's CSRF token (header or form field); 403 otherwise. Nothing is checked outside lab mode."""
    viewer = viewer_of(request)
    if request.method in SAFE_METHODS or not viewer.lab or viewer.via_token:
        return
    sent = request.headers.get(CSRF_HEADER)
    if sent is None and request.headers.get("content-type", "").startswith(FORM_TYPES):
        sent = (await request.form()).get(CSRF_FIELD)
    if not viewer.csrf_matches(sent if isinstance(sent, str) else None):
        raise HTTPException(
            status_code=403, detail="missing or wrong CSRF token: reload the page and try again"
        )


# ------------------------------------------------------------------------------------ sign in and out

router = APIRouter(include_in_schema=False)


def safe_next(target: str | None) -> str:
    """A local path to go to after signing in ("/" for anything else: no open redirect)."""
    if not target or not target.startswith("/") or target.startswith(("//", "/\\")) or "\\" in target:
        return "/"
    return "/" if target.split("?")[0] in ("/login", "/logout") else target


@router.get("/login", response_class=HTMLResponse)
def login_page(request: Request, next: str | None = None):
    if not viewer_of(request).lab:
        return RedirectResponse("/", status_code=303)  # personal mode: nobody signs in
    return render(request, "login.html", next=safe_next(next), member_name="", error=None, json_url=None)


@router.post("/login", response_class=HTMLResponse)
def login(
    request: Request,
    name: Annotated[str, Form(max_length=64)],
    password: Annotated[str, Form(max_length=accounts.MAX_PASSWORD)],
    next: Annotated[str, Form(max_length=2000)] = "/",
):
    viewer = viewer_of(request)
    if not viewer.lab:
        return RedirectResponse("/", status_code=303)
    guard: Guard = request.app.state.guard
    engine = request.app.state.engine
    address = guard.client_address(request)
    wait = signins.wait_seconds(engine, name, address, SIGN_IN_ALLOWANCE)
    if wait > 0:
        seconds = math.ceil(wait)
        after = (
            f"{seconds} second{'s' if seconds > 1 else ''}"
            if seconds < 120
            else f"{math.ceil(wait / 60)} minutes"
        )
        log.warning("sign-in refused after repeated failures from %s", address)
        refusal = render(
            request,
            "login.html",
            status_code=429,
            next=safe_next(next),
            member_name=name,
            error=f"Too many failed sign-ins from this address. Try again in {after}.",
            json_url=None,
        )
        refusal.headers["Retry-After"] = str(math.ceil(wait))
        return refusal
    member = accounts.authenticate(engine, name, password)
    if member is None:
        signins.failed(engine, name, address)
        log.info("failed sign-in from %s", address)
        return render(
            request,
            "login.html",
            status_code=401,
            next=safe_next(next),
            member_name=name,
            error="Wrong name or password.",
            json_url=None,
        )
    signins.succeeded(engine, name, address)
    guard.start_session(viewer, member)
    log.info("%s signed in", member.name)
    return RedirectResponse(safe_next(next), status_code=303)


@router.post("/logout")
def logout(request: Request) -> RedirectResponse:
    """Ends the session in the store (a copy of the cookie stops working too) and removes the cookie."""
    request.app.state.guard.end_session(viewer_of(request))
    return RedirectResponse("/login", status_code=303)


def _token_count(engine: Engine, member: Member) -> int:
    return next((n for m, n in accounts.list_accounts(engine) if m.id == member.id), 0)


def _password_page(request: Request, status_code: int = 200, **context: Any) -> HTMLResponse:
    viewer = viewer_of(request)
    tokens = _token_count(request.app.state.engine, viewer.member)
    context = {"done": None, "error": None} | context
    return render(request, "password.html", status_code=status_code, tokens=tokens, json_url=None, **context)


@router.get("/account/password", response_class=HTMLResponse)
def password_page(request: Request):
    if viewer_of(request).member is None:  # personal mode: there is no account
        return RedirectResponse("/", status_code=303)
    return _password_page(request)


@router.post("/account/password", response_class=HTMLResponse)
def change_password(
    request: Request,
    current: Annotated[str, Form(max_length=accounts.MAX_PASSWORD)],
    new: Annotated[str, Form(max_length=accounts.MAX_PASSWORD)],
    repeat: Annotated[str, Form(max_length=accounts.MAX_PASSWORD)],
    revoke_tokens: Annotated[bool, Form()] = False,
):
    """A member's own password change: the current password is checked (and counted like a sign-in when
    wrong); every session of the member ends and a new one starts for this browser; API tokens are revoked
    when asked. The page says what was done."""
    viewer = viewer_of(request)
    if viewer.member is None or viewer.via_token:
        return RedirectResponse("/", status_code=303)
    guard: Guard = request.app.state.guard
    engine = request.app.state.engine
    name, address = viewer.member.name, guard.client_address(request)
    if signins.wait_seconds(engine, name, address, SIGN_IN_ALLOWANCE) > 0:
        return _password_page(
            request, 429, error="Too many wrong passwords from this address: try again later."
        )
    if accounts.authenticate(engine, name, current) is None:
        signins.failed(engine, name, address)
        return _password_page(request, 401, error="The current password is wrong.")
    if new != repeat:
        return _password_page(request, 422, error="The two new passwords differ.")
    try:
        change = accounts.set_password(engine, name, new, revoke_tokens=revoke_tokens)
    except accounts.AccountError as exc:
        return _password_page(request, 422, error=str(exc))
    signins.succeeded(engine, name, address)
    guard.start_session(viewer, accounts.member_by_id(engine, viewer.member.id))
    log.info("%s changed their password", name)
    others = change.sessions_ended - 1
    done = f"Password changed. {others} other signed-in session{'s' if others != 1 else ''} ended."
    if change.tokens_revoked:
        done += f" {change.tokens_revoked} API token{'s' if change.tokens_revoked > 1 else ''} revoked."
    elif change.tokens_kept:
        done += (
            f" {change.tokens_kept} API token{'s' if change.tokens_kept > 1 else ''} kept: they still work."
        )
    return _password_page(request, done=done)


# ------------------------------------------------------------------------------- API documentation

# Swagger UI from the swagger-ui-bundle package, served by the app itself (``SWAGGER_ASSETS``, mounted in
# app.main); the page has no inline script: static/swagger-init.js starts it.
SWAGGER_ASSETS = "/static/vendor/swagger-ui"
DOCS_PAGE = f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>Lexigrowth API</title>
<link rel="stylesheet" href="{SWAGGER_ASSETS}/swagger-ui.css">
</head>
<body>
<div id="swagger-ui"></div>
<script src="{SWAGGER_ASSETS}/swagger-ui-bundle.js"></script>
<script src="/static/swagger-init.js"></script>
</body>
</html>
"""
# Scripts, styles and connections from the app only; Swagger UI sets style attributes and draws its
# icons as data: images, so those two are allowed on this page and nowhere else.
DOCS_POLICY = "; ".join(
    [
        "default-src 'none'",
        "script-src 'self'",
        "style-src 'self' 'unsafe-inline'",
        "img-src 'self' data:",
        "connect-src 'self'",
        "frame-ancestors 'none'",
        "base-uri 'none'",
        "form-action 'self'",
    ]
)


@router.get("/docs")
def swagger_ui() -> HTMLResponse:
    return HTMLResponse(DOCS_PAGE, headers={"content-security-policy": DOCS_POLICY})
