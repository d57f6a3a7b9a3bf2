"""Server-rendered pages: content, escaping, and assets served by the app itself."""

from __future__ import annotations

import json
import re

from tests.web.test_api import GETTYSBURG, upload


def test_library_upload_and_corpus_pages(client):
    assert "No corpora yet" in client.get("/").text
    cid = upload(client, "Speech <b>1863</b>", GETTYSBURG.encode(), labels="author=Lincoln").json()["id"]
    library = client.get("/").text
    assert f'href="/corpora/{cid}"' in library
    assert "Speech &lt;b&gt;1863&lt;/b&gt;" in library and "<b>1863</b>" not in library
    assert "author: Lincoln" in library
    assert client.get("/?label=author=Nobody").text.count("/corpora/") == 0

    page = client.get(f"/corpora/{cid}")
    assert page.status_code == 200
    html = page.text
    # the bundle is named with its content hash, so that it can be cached for a year
    assert re.search(r'<script src="/static/vendor/plotly-basic\.min\.js\?v=[0-9a-f]{12}">', html)
    figures = re.findall(r'<script type="application/json" id="([^"]+)-data">(.*?)</script>', html, re.S)
    assert {name for name, _ in figures} >= {"spectrum-plot", "growth-plot"}
    for _, body in figures:
        assert "<" not in body  # figure JSON is escaped for <script> context
        json.loads(body)
    assert "nation" in client.get(f"/corpora/{cid}?q=nat").text
    assert "Upload and count" in client.get("/upload").text


def test_pages_load_nothing_from_other_origins(client):
    upload(client, "x", GETTYSBURG.encode())
    for path in ("/", "/upload", "/corpora/1"):
        html = client.get(path).text
        for url in re.findall(r'(?:src|href)="([^"]+)"', html):
            assert not re.match(r"(https?:)?//", url), (path, url)
    js = client.get("/static/vendor/plotly-basic.min.js")
    assert js.status_code == 200 and len(js.content) > 1_000_000
