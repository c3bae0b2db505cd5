"""The map page: one self-contained HTML page that draws a collection's map in the browser.

The page needs no key to load. Its script reads the key from the URL fragment
(``#key=...``, which browsers never send with the page request), the collection from
``?collection=``, and calls the JSON API with ``Authorization: Bearer <key>``. The HTML
lives in ``service/api/static/map.html`` (package data) and is read once per process.
"""

from __future__ import annotations

import base64
import hashlib
import re
from functools import cache
from importlib.resources import files

from fastapi import APIRouter
from fastapi.responses import HTMLResponse

router = APIRouter(tags=["ui"])

PAGE = ("static", "map.html")
_BLOCK = {tag: re.compile(rf"<{tag}>(.*?)</{tag}>", re.DOTALL) for tag in ("script", "style")}


def _hashes(html: str, tag: str) -> str:
    """CSP source list allowing exactly the page's own inline blocks of ``tag``."""
    digests = (
        base64.b64encode(hashlib.sha256(block.encode("utf-8")).digest()).decode("ascii")
        for block in _BLOCK[tag].findall(html)
    )
    return " ".join(f"'sha256-{d}'" for d in digests) or "'none'"


@cache
def map_page() -> tuple[str, dict[str, str]]:
    """The page and its response headers (read from the installed package once)."""
    resource = files("service.api")
    for part in PAGE:
        resource = resource / part
    html = resource.read_text(encoding="utf-8")
    # The policy is the "no external assets" rule enforced by the browser: only the
    # page's own script and style run, and it may talk to this origin only.
    policy = "; ".join(
        [
            "default-src 'none'",
            f"script-src {_hashes(html, 'script')}",
            f"style-src {_hashes(html, 'style')}",
            "connect-src 'self'",
            "img-src data:",
            "base-uri 'none'",
            "form-action 'none'",
            "frame-ancestors 'none'",
        ]
    )
    headers = {
        "Content-Security-Policy": policy,
        "Referrer-Policy": "no-referrer",
        "X-Content-Type-Options": "nosniff",
        "Cache-Control": "no-cache",
    }
    return html, headers


# Not in the OpenAPI schema: a page for people, not part of the JSON API (and the
# auth walker of tests/api/test_auth.py covers the schema's routes, all keyed).
@router.get("/ui/map", include_in_schema=False, response_class=HTMLResponse)
def get_map_page() -> HTMLResponse:
    """The map page of a collection: ``/ui/map?collection=NAME#key=KEY``."""
    html, headers = map_page()
    return HTMLResponse(html, headers=headers)
