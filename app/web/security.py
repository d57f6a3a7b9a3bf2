"""Lab mode and the security of every request and response: the host names served, who is asking, the
sign-in gate, cross-site request forgery, and security headers.

Host names: only requests for localhost, 127.0.0.1, ::1 and the names of ``LEXIGROWTH_ALLOWED_HOSTS`` are
answered (``AllowedHostsMiddleware``), so a page of another site whose name was pointed at this machine
(DNS rebinding) gets nothing, not even a read.

Personal mode (the default while the store has no account): nobody signs in; cross-site writes are refused
as in lab mode (below). Lab mode (as soon as the store has an account, or always with
``LEXIGROWTH_MODE=lab``): every page and API route needs a signed-in member (session cookie) or an API token
(``Authorization: Bearer ...``), except the sign-in page, ``/api/health``, static assets and comparisons
their creator made public. Anonymous API calls get 401 JSON, anonymous pages a redirect to ``/login``.

Sessions live in the store (``app.store.sessions``): the cookie holds a random session id (lab mode) and the
CSRF token, signed (itsdangerous, HMAC-SHA1 over the JSON; key from ``LEXIGROWTH_SECRET_KEY`` or a random key
kept in the data folder with mode 0600), HttpOnly, SameSite=Lax, Secure over HTTPS. Signing out deletes the
session from the store and a password change deletes every session of the member, so a copied cookie stops
working in every server process at once (OWASP Session Management Cheat Sheet, "Session Expiration":
invalidate sessions on the server side). Sign-in attempts are counted in the store before the password is
checked (``app.store.signins``); the client's address is the connection's, or what uvicorn took from the
headers of a proxy listed in ``LEXIGROWTH_TRUSTED_PROXIES`` (``lexigrowth serve``), never a header read here.

Cross-site request forgery, in both modes (``forgery_refusal``, run by ``SecurityMiddleware`` before a byte
of the body is read). A state-changing request (POST, PUT, PATCH, DELETE) is refused with 403 when the
browser says it comes from another origin: ``Sec-Fetch-Site`` other than ``same-origin`` or ``none``, or an
``Origin`` that is not this server's own (OWASP CSRF Prevention Cheat Sheet, "Fetch Metadata headers" and
"Verifying Origin With Standard Headers"). Browsers send ``Origin`` with every POST, PUT, PATCH and DELETE
(Fetch standard, "append a request `Origin` header"), so a cross-site one never arrives without it. Then the
CSRF token (OWASP's synchronizer token pattern), kept in the signed cookie and sent in the ``X-CSRF-Token``
header or the ``csrf_token`` form field: in lab mode every request made with the cookie needs it; in
personal mode a request that says where it comes from (``Origin`` or ``Sec-Fetch-Site``) needs no more, and
one that says neither needs the token when it carries the cookie (a browser too old to send ``Origin``).
A request with neither header and without the cookie is a script's (curl, httpx): it passes in personal
mode, as the command line does (only a browser too old to send ``Origin``, before about 2020, could send a
cross-site write that looks like it; its SameSite=Lax cookie stays behind). Requests with an API token
(lab mode) need no token, because a browser never adds that header by itself; a form field is looked for in
the first 64 kB of the body only (before the first file of an upload), so a refused upload is not spooled.
"""

from __future__ import annotations

import hmac
import logging
import math
import os
import re
import secrets
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Annotated, Any
from urllib.parse import parse_qs, quote, urlsplit

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, JSONResponse, PlainTextResponse, RedirectResponse, Response
from itsdangerous import BadData, URLSafeTimedSerializer
from python_multipart.multipart import MultipartParser, parse_options_header
from sqlalchemy.engine import Engine
from starlette.concurrency import run_in_threadpool
from starlette.datastructures import Headers, MutableHeaders
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.config import LOOPBACK_NAMES, Settings
from app.services import accounts, comparisons
from app.services.accounts import Member
from app.web.pages import render

log = logging.getLogger("lexigrowth.security")

SESSION_COOKIE = "lexigrowth_session"
SESSION_MAX_AGE = 14 * 24 * 3600  # a sign-in lasts two weeks
MIN_KEY_CHARS = 32
CSRF_HEADER = "x-csrf-token"
CSRF_FIELD = "csrf_token"
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
OPEN_PATHS = frozenset({"/login", "/api/health", "/favicon.ico"})
OPEN_PREFIXES = ("/static/",)
# Anonymous visitors may open these when the comparison is public (the word lists stay hidden).
PUBLIC_PERMALINK = re.compile(
    r"/compare/([A-Za-z0-9_-]{16,86})|/api/comparisons/([A-Za-z0-9_-]{16,86})(?:/table\.csv)?"
)
URLENCODED = "application/x-www-form-urlencoded"
MULTIPART = "multipart/form-data"
# The browser's word on where a request comes from (Fetch Metadata): these two are this site itself
# ("none": typed or bookmarked by the user); "same-site" is another origin of the same site (another port
# of localhost, another subdomain), not this server.
OWN_SITE = frozenset({"same-origin", "none"})
TOKEN_FIELD_BYTES = 64 * 1024  # a form's token field is looked for this far into its body, no further
FORM_BODY_BYTES = 1 << 20  # a form without files (sign-in, save, delete): a few hundred bytes in practice
SIGN_IN_ALLOWANCE = accounts.SignInAllowance(pair=5, address=20)

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
    """Who is asking: in lab mode a member (by session or API token) or nobody; outside it, the owner.
    ``session`` is what the signed cookie holds: the CSRF token (both modes) and the session id (lab)."""

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
        """The session's CSRF token, made on first use (and then sent in the cookie)."""
        if not self.session.get("csrf"):
            self.session = self.session | {"csrf": secrets.token_urlsafe(32)}
            self.session_changed = True
        return self.session["csrf"]

    def page_key(self) -> tuple:
        """Everything of the viewer that a page shows: the mode, the member (id, name, role) and the CSRF
        token its forms carry. Two requests with the same key see the same page. An anonymous visitor (of
        a public permalink) is shown no form, so no token: one page for all of them, and no cookie."""
        member = self.member and (self.member.id, self.member.name, self.member.is_admin)
        return (self.lab, member, "" if self.anonymous else self.csrf_token())

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


class Guard:
    """Decides lab mode, identifies the viewer of a request and refuses what they may not see."""

    def __init__(self, settings: Settings, engine: Engine) -> None:
        self.engine = engine
        self._lab = settings.mode == "lab"
        self._serializer = URLSafeTimedSerializer(secret_key(settings), salt="lexigrowth-session")

    def lab_mode(self) -> bool:
        """Lab mode, once on, stays on: accounts are never deleted."""
        if not self._lab and accounts.lab_mode_on(self.engine):
            self._lab = True
        return self._lab

    @staticmethod
    def client_address(request: Request) -> str:
        """The client's address as the server sees it: the connection's, or the one uvicorn took from
        X-Forwarded-For when the connection comes from a trusted proxy (``LEXIGROWTH_TRUSTED_PROXIES``:
        the nearest address the proxies did not add themselves). No header is read here."""
        return request.client.host if request.client else "unknown address"

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
            return Viewer(lab=False, session=self._session(request.cookies.get(SESSION_COOKIE)))
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
            member = accounts.session_member(self.engine, session_id) if isinstance(session_id, str) else None
            if member is not None:
                viewer.member = member
            else:  # signed out, password changed or expired: forget the sign-in
                viewer.forget_session()
        return viewer

    def start_session(self, viewer: Viewer, member: Member) -> None:
        viewer.sign_in(
            member, accounts.start_session(self.engine, member, timedelta(seconds=SESSION_MAX_AGE))
        )

    def end_session(self, viewer: Viewer) -> None:
        session_id = viewer.session.get("sid")
        if isinstance(session_id, str):
            accounts.end_session(self.engine, session_id)
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
            and comparisons.is_public(self.engine, permalink.group(1) or permalink.group(2))
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
                    headers.append("set-cookie", self.guard.cookie(viewer, scope.get("scheme") == "https"))
            await send(message)

        if refusal is None and scope["method"] not in SAFE_METHODS:
            refusal, receive = await forgery_refusal(request, viewer, receive)
        await (refusal or self.app)(scope, receive, send_secured)


# --------------------------------------------------------------------------------------------- CSRF


def _origin(url: str) -> tuple[str, str, int | None] | None:
    """Scheme, host name and port of an origin or URL, in one form (lower case, default port left out);
    None for what is not one (``null``, a damaged value)."""
    try:
        parts = urlsplit(url.strip())
        port = parts.port
    except ValueError:
        return None
    if parts.scheme not in ("http", "https") or not parts.hostname:
        return None
    return (
        parts.scheme,
        parts.hostname.rstrip("."),
        None if port == {"http": 80, "https": 443}[parts.scheme] else port,
    )


def cross_site(scope: Scope) -> str | None:
    """Why a request comes from another site by what the browser says (``Sec-Fetch-Site``, ``Origin``),
    or None. This server's own origin is its scheme and the Host header (checked by
    ``AllowedHostsMiddleware``)."""
    headers = Headers(scope=scope)
    site = headers.get("sec-fetch-site")
    if site is not None and site.strip().lower() not in OWN_SITE:
        return f"this request comes from another site (Sec-Fetch-Site: {site[:40]})"
    origin = headers.get("origin")
    if origin is None:
        return None
    own = f"{scope.get('scheme', 'http')}://{headers.get('host', '')}"
    sent, served = _origin(origin), _origin(own)
    if sent is not None and sent == served:
        return None
    reason = f"this request comes from another site (Origin: {origin[:100]}; this server is {own[:100]})"
    if sent and served and sent[1:] == served[1:]:  # the same name by another scheme: an HTTPS proxy
        reason += (
            ". If a proxy in front of this server speaks HTTPS, list its address in "
            "LEXIGROWTH_TRUSTED_PROXIES so that its X-Forwarded-Proto is believed"
        )
    return reason


def _needs_token(viewer: Viewer, headers: Headers, cookie_sent: bool) -> bool:
    """Lab mode: every request made with the session cookie. Personal mode: a request that carries the
    cookie but says neither where it comes from (``Origin``, ``Sec-Fetch-Site``): a browser too old to say
    it. A request with neither header nor cookie is a script's."""
    if viewer.lab:
        return True
    return cookie_sent and "origin" not in headers and "sec-fetch-site" not in headers


async def forgery_refusal(
    request: Request, viewer: Viewer, receive: Receive
) -> tuple[Response | None, Receive]:
    """The 403 for a state-changing request from another site or without its CSRF token (None when it may
    go on), and the ``receive`` to read its body with: what was read to find a token field is read again.

    Decided from the headers before any of the body is read; only a form that sends its token as a field
    is read, as far as that field (at most ``TOKEN_FIELD_BYTES``, never into an uploaded file)."""
    if viewer.via_token:
        return None, receive
    reason = cross_site(request.scope)
    if reason is None and _needs_token(viewer, request.headers, SESSION_COOKIE in request.cookies):
        sent = request.headers.get(CSRF_HEADER)
        if sent is None:
            sent, receive = await token_field(request.headers.get("content-type", ""), receive)
        if not viewer.csrf_matches(sent):
            reason = "missing or wrong CSRF token: reload the page and try again"
    if reason is None:
        return None, receive
    log.warning("refused %s %s: %s", request.method, request.url.path, reason)
    if request.url.path.startswith("/api/"):
        return JSONResponse({"detail": reason}, status_code=403), receive
    refusal = render(
        request, "error.html", status_code=403, heading="Not allowed", detail=reason, json_url=None, typed=[]
    )
    return refusal, receive


async def token_field(content_type: str, receive: Receive) -> tuple[str | None, Receive]:
    """The ``csrf_token`` field of a form body (URL-encoded, or multipart before its first file), read from
    ``receive`` only as far as needed, and a ``receive`` that gives the messages read again first."""
    kind, options = parse_options_header(content_type)
    read: list[Message] = []

    async def replayed() -> Message:
        return read.pop(0) if read else await receive()

    if kind == URLENCODED.encode():
        body = await _read_until(receive, read, FORM_BODY_BYTES, lambda _chunk: False)
        values = parse_qs(body.decode("latin-1")).get(CSRF_FIELD, [])
        return (values[0] if values else None), replayed
    if kind != MULTIPART.encode() or not options.get(b"boundary"):
        return None, replayed
    fields = _TokenFields(options[b"boundary"])
    await _read_until(receive, read, TOKEN_FIELD_BYTES, fields.feed)
    return fields.token, replayed


async def _read_until(receive: Receive, read: list[Message], limit: int, done) -> bytes:
    """Body messages from ``receive`` (kept in ``read``) until the body ends, ``done(chunk)`` says enough,
    or more than ``limit`` bytes came; the bytes read."""
    body = bytearray()
    while len(body) <= limit:
        message = await receive()
        read.append(message)
        if message["type"] != "http.request":
            break
        chunk = message.get("body", b"")
        body += chunk
        if done(chunk) or not message.get("more_body", False):
            break
    return bytes(body)


class _TokenFields:
    """A multipart body parsed as it arrives until its ``csrf_token`` field is complete or a file begins
    (python-multipart's streaming parser, the one Starlette reads forms with)."""

    def __init__(self, boundary: bytes) -> None:
        self.token: str | None = None
        self.finished = False
        self._field = bytearray()
        self._value = bytearray()
        self._disposition = b""
        self._in_token = False
        self._parser = MultipartParser(
            boundary,
            {
                "on_part_begin": self._begin,
                "on_header_field": lambda data, start, end: self._field.extend(data[start:end]),
                "on_header_value": lambda data, start, end: self._value.extend(data[start:end]),
                "on_header_end": self._header_end,
                "on_headers_finished": self._headers_finished,
                "on_part_data": self._data,
                "on_part_end": self._end,
            },
        )

    def feed(self, chunk: bytes) -> bool:
        """Parse one more chunk; whether the search is over (token found, a file began, bad body)."""
        try:
            self._parser.write(chunk)
        except Exception:  # a damaged body: the route's form parser says what is wrong, if it is let in
            self.finished = True
        return self.finished

    def _begin(self) -> None:
        self._disposition, self._in_token = b"", False

    def _header_end(self) -> None:
        if bytes(self._field).strip().lower() == b"content-disposition":
            self._disposition = bytes(self._value)
        self._field.clear()
        self._value.clear()

    def _headers_finished(self) -> None:
        _, options = parse_options_header(self._disposition)
        if b"filename" in options:
            self.finished = True  # the token field comes before the files, or not at all
        self._in_token = options.get(b"name") == CSRF_FIELD.encode()

    def _data(self, data: bytes, start: int, end: int) -> None:
        if self._in_token and not self.finished:
            self._value.extend(data[start:end])

    def _end(self) -> None:
        if self._in_token and not self.finished:
            self.token = self._value.decode("latin-1")
            self.finished = True
        self._value.clear()


def served_host(host_header: str) -> str:
    """The host name of a Host header, without port or brackets, lower case (``[::1]:8000`` -> ``::1``)."""
    host = host_header.strip().lower()
    if host.startswith("["):
        return host[1 : host.find("]")] if "]" in host else ""
    return host.rsplit(":", 1)[0].rstrip(".") if host.count(":") <= 1 else ""


class AllowedHostsMiddleware:
    """Answers only requests for the host names this server is meant to serve: the loopback names and the
    configured ones (``LEXIGROWTH_ALLOWED_HOSTS``); any other Host gets 400 with a sentence saying why.

    A page of another site whose name the attacker re-points at 127.0.0.1 (DNS rebinding) reaches this
    server with its own name as Host and same-origin to itself, so only the Host tells it apart (as
    Starlette's TrustedHostMiddleware or Django's ALLOWED_HOSTS do; this one says why in its answer)."""

    def __init__(self, app: ASGIApp, names: Iterable[str]) -> None:
        self.app = app
        self.names = LOOPBACK_NAMES | {served_host(name) for name in names}

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] not in ("http", "websocket"):
            await self.app(scope, receive, send)
            return
        host = Headers(scope=scope).get("host", "")
        if served_host(host) in self.names:
            await self.app(scope, receive, send)
            return
        detail = (
            f"This server does not answer for the host name {host[:100]!r}: it serves localhost, "
            "127.0.0.1, [::1] and the names listed in LEXIGROWTH_ALLOWED_HOSTS."
        )
        log.warning("refused a request for the host %r", host[:100])
        await PlainTextResponse(detail, status_code=400)(scope, receive, send)


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
    wait = accounts.sign_in_wait(engine, name, address, SIGN_IN_ALLOWANCE)
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
    if member is None:  # already counted by the attempt
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
    accounts.sign_in_succeeded(engine, name, address)
    guard.start_session(viewer, member)
    log.info("%s signed in", member.name)
    return RedirectResponse(safe_next(next), status_code=303)


@router.post("/logout")
def logout(request: Request) -> RedirectResponse:
    """Ends the session in the store (a copy of the cookie stops working too) and removes the cookie."""
    request.app.state.guard.end_session(viewer_of(request))
    return RedirectResponse("/login", status_code=303)


def _password_page(request: Request, status_code: int = 200, **context: Any) -> HTMLResponse:
    viewer = viewer_of(request)
    tokens = accounts.token_count(request.app.state.engine, viewer.member)
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
    if accounts.sign_in_wait(engine, name, address, SIGN_IN_ALLOWANCE) > 0:
        return _password_page(
            request, 429, error="Too many wrong passwords from this address: try again later."
        )
    if accounts.authenticate(engine, name, current) is None:  # already counted by the attempt
        return _password_page(request, 401, error="The current password is wrong.")
    if new != repeat:
        return _password_page(request, 422, error="The two new passwords differ.")
    try:
        change = accounts.set_password(engine, name, new, revoke_tokens=revoke_tokens)
    except accounts.AccountError as exc:
        return _password_page(request, 422, error=str(exc))
    accounts.sign_in_succeeded(engine, name, address)
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
<link rel="icon" href="/static/favicon.svg" type="image/svg+xml">
<link rel="stylesheet" href="{SWAGGER_ASSETS}/swagger-ui.css">
</head>
<body>
<nav style="font: 15px system-ui, sans-serif; padding: 10px 20px; border-bottom: 1px solid #e6e9ef">
<a href="/" id="back-to-dashboard">← Lexigrowth dashboard</a></nav>
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
