"""Static assets served by the app itself: plotly.js (gzip-compressed once), the style sheet plotly.js would
otherwise inject inline, and cache headers for our own static files.

The plotly.js served is the "basic" partial bundle of the npm registry (package ``plotly.js-basic-dist-min``,
vendored as ``static/vendor/plotly-basic.min.js`` with its licence header): it carries the scatter and bar
traces, the only trace types our figures draw (app.web.figures, app.web.compare_figures), at 395 kB gzip-
compressed instead of the full bundle's 1.47 MB. Pages name it (and its style sheet) with the content's hash
in the query string (``versioned_url``), so both are cached for a year as immutable and a new bundle is
fetched under a new address.

plotly.js adds its style rules by filling a <style> element of its own (``addStyleRule``) and, when its map
module loads, a second <style> element with the map library's rules. The Content-Security-Policy allows style
sheets from the app only, so both would be refused and logged as violations. plotly.js skips the first when
the page already holds an element with id ``plotly.js-style-global`` and class ``no-inline-styles`` (the
switch it offers for strict policies), and the second when an element with the map style's id exists. We
serve the rules as ``/static/vendor/plotly.css`` under that id, read from the bundle that is served, so the
two cannot drift apart; the map rules are not needed (no maps are drawn).
"""

from __future__ import annotations

import gzip
import hashlib
import logging
import re
from dataclasses import dataclass
from functools import lru_cache

from fastapi import Request
from fastapi.responses import Response
from starlette.staticfiles import StaticFiles

from app.config import STATIC_DIR

PLOTLY_JS = STATIC_DIR / "vendor" / "plotly-basic.min.js"
PLOTLY_JS_URL = "/static/vendor/plotly-basic.min.js"
PLOTLY_CSS_URL = "/static/vendor/plotly.css"
VENDOR_CACHE_CONTROL = "public, max-age=31536000, immutable"  # a year: the address changes with the content
OWN_MAX_AGE = 3600  # our own scripts and style sheets: revalidated (by ETag) after an hour
log = logging.getLogger("lexigrowth")

_STRING = r"(\"(?:[^\"\\]|\\.)*\"|'(?:[^'\\]|\\.)*')"
_LOOP = re.compile(r"\}\s*;\s*for\s*\((\w+) in (\w+)\)\s*\w+\s*=\s*\1\.replace\(/\^,/")
_PAIR = re.compile(_STRING + ":" + _STRING)
_REPLACE = re.compile(r'\.replace\(/\^,/," ,"\)\.replace\(/X/g,"([^"]+)"\)\.replace\(/Y/g,"([^"]+)"\)')
_MAP_STYLE_ID = re.compile(
    r'document\.getElementById\("([0-9a-f]{64})"\)\)\{var \w+=document\.createElement\("style"\)'
)


@dataclass(frozen=True)
class Asset:
    body: bytes
    compressed: bytes
    etag: str
    media_type: str


def _asset(body: bytes, media_type: str) -> Asset:
    return Asset(
        body, gzip.compress(body, 9, mtime=0), f'"{hashlib.sha256(body).hexdigest()[:32]}"', media_type
    )


def plotly_css_from_bundle(bundle: str) -> str:
    """The rules plotly.js would insert with ``addStyleRule``, as a style sheet: its table of selector ->
    declarations, with the selector shorthands X and Y expanded as the bundle itself expands them."""
    loop = _LOOP.search(bundle)
    start = bundle.rfind(f"{loop.group(2)}={{", 0, loop.start()) if loop else -1
    names = _REPLACE.search(bundle, loop.end() - 20) if loop else None
    if loop is None or start < 0 or names is None:
        raise ValueError("plotly.js: the table of style rules was not found in the bundle")
    plot, notifier = names.groups()
    out = []
    for key, value in _PAIR.findall(bundle[start : loop.start() + 1]):
        selector = key[1:-1].replace("\\'", "'")
        selector = re.sub("^,", " ,", selector).replace("X", plot).replace("Y", notifier)
        out.append(f"{selector}{{{value[1:-1]}}}")
    return "\n".join(out) + "\n"


def map_style_id(bundle: str) -> str | None:
    """The id plotly.js looks for before it injects the map library's style element."""
    found = _MAP_STYLE_ID.search(bundle)
    return found.group(1) if found else None


@lru_cache(maxsize=1)
def plotly_assets() -> tuple[Asset, Asset, str | None]:
    """(plotly.min.js, plotly.css, the map style id), read and compressed once per process."""
    bundle = PLOTLY_JS.read_text(encoding="utf-8")
    try:
        css = plotly_css_from_bundle(bundle)
    except ValueError as exc:  # a plotly.js of another layout: pages still work, the console logs violations
        log.warning("%s", exc)
        css = ""
    return (
        _asset(bundle.encode("utf-8"), "text/javascript; charset=utf-8"),
        _asset(css.encode("utf-8"), "text/css; charset=utf-8"),
        map_style_id(bundle),
    )


def versioned_url(url: str, asset: Asset) -> str:
    """The asset's address with its content hash as the query string (a new bundle, a new address)."""
    return f"{url}?v={asset.etag[1:13]}"  # the tag is the quoted hash


def serve(asset: Asset, request: Request) -> Response:
    """The asset gzip-compressed when the browser accepts it, with an ETag; 304 when it already has it."""
    headers = {"ETag": asset.etag, "Cache-Control": VENDOR_CACHE_CONTROL, "Vary": "Accept-Encoding"}
    if request.headers.get("if-none-match") == asset.etag:
        return Response(status_code=304, headers=headers)
    if "gzip" in request.headers.get("accept-encoding", ""):
        return Response(
            asset.compressed, media_type=asset.media_type, headers=headers | {"Content-Encoding": "gzip"}
        )
    return Response(asset.body, media_type=asset.media_type, headers=headers)


class CachedStaticFiles(StaticFiles):
    """Our static files with a Cache-Control header (Starlette already sends ETag and Last-Modified)."""

    def file_response(self, *args, **kwargs) -> Response:
        response = super().file_response(*args, **kwargs)
        response.headers["Cache-Control"] = f"public, max-age={OWN_MAX_AGE}"
        return response
