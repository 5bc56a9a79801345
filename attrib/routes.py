"""Route templates derived from concrete request paths, for logs that record a path but no route.

``/orders/9051/loaves/`` and ``/orders/77/loaves/`` are one route; ranking by path would scatter a route's
time over thousands of rows. :func:`derive_route` replaces the path segments that are obviously values:

============================================  ===============  ===========================
segment                                       placeholder      example
============================================  ===============  ===========================
decimal digits                                ``{id}``         ``9051``
UUID (8-4-4-4-12 hex, any case)               ``{uuid}``       ``3f9a1c27-d45e-...``
calendar date ``YYYY-MM-DD``                  ``{date}``       ``2024-03-05``
16 or more hex digits, at least one digit     ``{hex}``        ``5f0c9a3e7b2d41c8``
e-mail address (also percent-encoded)         ``{email}``      ``ann%40example.org``
20+ chars of ``[A-Za-z0-9_-]`` with a run     ``{token}``      ``dGhpcyBpcyBhIHRva2Vu``
of 16+ letters and digits mixed (base64url)
============================================  ===============  ===========================

A segment ``<value>.<ext>`` with a short alphabetic extension keeps it (``9051.json`` → ``{id}.json``).
Words, slugs (``rye-sourdough-2024``: no long run) and version markers (``v2``) are kept. The query string and fragment are dropped (they carry
customer data), runs of ``/`` are collapsed, a trailing ``/`` is kept. The thresholds are common
practice, no source: 16 hex digits is a 64-bit id, 20 base64 characters is 120 bits.
"""

from __future__ import annotations

import re
from functools import lru_cache
from urllib.parse import unquote

_UUID = re.compile(r"[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}\Z")
_DATE = re.compile(r"(?:19|20|21)\d\d-(?:0[1-9]|1[0-2])-(?:0[1-9]|[12]\d|3[01])\Z")
_HEX = re.compile(r"(?=[a-fA-F]*\d)[0-9a-fA-F]{16,}\Z")
_EMAIL = re.compile(r"[^@\s/]+@[^@\s/]+\.[A-Za-z]{2,}\Z")
_TOKEN = re.compile(r"[A-Za-z0-9_-]{20,}={0,2}\Z")
_TOKEN_RUN = re.compile(r"(?=[A-Za-z]*\d)(?=\d*[A-Za-z])[A-Za-z0-9]{16,}")
_EXT = re.compile(r"(.+)(\.[A-Za-z][A-Za-z0-9]{0,4})\Z")
_SCHEME = re.compile(r"[A-Za-z][A-Za-z0-9+.-]*://[^/?#]*")


def url_path(target: str) -> str:
    """Return the path of a request target: no scheme, host, query string or fragment.

    >>> url_path("/orders/9051?coupon=ANN-42#top")
    '/orders/9051'
    >>> url_path("https://shop.example/loaves?page=2")
    '/loaves'
    """
    end = len(target)
    for mark in "?#":
        cut = target.find(mark)
        if 0 <= cut < end:
            end = cut
    path = target[:end]
    if not path.startswith("/"):
        match = _SCHEME.match(path)
        if match is not None:
            path = path[match.end() :] or "/"
    return path


def derive_route(path: str) -> str:
    """Return the route template of a concrete path.

    Args:
        path: a request path or target; a query string or fragment is dropped.

    Returns:
        The path with value-like segments replaced by placeholders, starting with ``/``.

    >>> derive_route("/orders/9051/loaves//3f9a1c27-d45e-4b08-a6c2-e19b7d05f3a1?x=1")
    '/orders/{id}/loaves/{uuid}'
    """
    if not path.startswith("/") or "?" in path or "#" in path:
        path = url_path(path)
    return _derive(path)


@lru_cache(maxsize=65536)
def _derive(path: str) -> str:
    parts = [_segment(part) for part in path.split("/") if part]
    route = "/" + "/".join(parts)
    if path.endswith("/") and parts:
        route += "/"
    return route


def _segment(part: str) -> str:
    placeholder = _placeholder(part)
    if placeholder is not None:
        return placeholder
    match = _EXT.match(part)
    if match is not None:
        placeholder = _placeholder(match.group(1))
        if placeholder is not None:
            return placeholder + match.group(2)
    return part


def _placeholder(part: str) -> str | None:
    if part.isdigit() and part.isascii():
        return "{id}"
    if "%" in part:
        part = unquote(part)
    if _UUID.match(part):
        return "{uuid}"
    if _DATE.match(part):
        return "{date}"
    if _HEX.match(part):
        return "{hex}"
    if "@" in part and _EMAIL.match(part):
        return "{email}"
    if _TOKEN.match(part) and _TOKEN_RUN.search(part):
        return "{token}"
    return None
