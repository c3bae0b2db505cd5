"""The client's plumbing: one authenticated request, its answer read or its error raised,
cursor pages followed, a CSV answer streamed row by row."""

from __future__ import annotations

import csv
from collections.abc import Callable, Iterable, Iterator, Mapping
from datetime import date
from typing import Any, TypeVar
from urllib.parse import quote

import httpx

from service.client._errors import api_error, shape_error
from service.client._models import Json, Page

T = TypeVar("T")
Params = list[tuple[str, str | int | float]]


def segment(value: str | int) -> str:
    """One URL path segment; ids never hold ``/``, but quoting keeps a bad one a 404/422."""
    return quote(str(value), safe="")


def iso(value: Any) -> Any:
    """A date or datetime as ISO 8601 text; anything else as it is."""
    return value.isoformat() if isinstance(value, date) else value


def document_body(doc: Mapping[str, Any]) -> dict[str, Any]:
    """A document for the wire: ``published_at`` may be a date or datetime."""
    out = dict(doc)
    if "published_at" in out:
        out["published_at"] = iso(out["published_at"])
    return out


def page_params(cursor: str | None, limit: int) -> Params:
    return [("limit", limit)] + ([("cursor", cursor)] if cursor else [])


def every_item(fetch: Callable[[str | None], Page[T]]) -> Iterator[T]:
    """The items of page after page, from the first until ``next_cursor`` is None."""
    cursor: str | None = None
    while True:
        page = fetch(cursor)
        yield from page.items
        if page.next_cursor is None:
            return
        cursor = page.next_cursor


def lines_with_ends(chunks: Iterable[str]) -> Iterator[str]:
    """Split streamed text into lines at ``\\n``, keeping the ends: a quoted CSV field
    may hold line breaks, which csv.reader keeps only if it is given them (httpx's
    ``iter_lines`` drops them)."""
    rest = ""
    for chunk in chunks:
        rest += chunk
        *lines, rest = rest.split("\n")
        yield from (line + "\n" for line in lines)
    if rest:
        yield rest


class Connection:
    """Requests to one service with one key, through an owned or a given httpx.Client."""

    def __init__(self, base_url: str, key: str, timeout: float, http: httpx.Client | None) -> None:
        if not key:
            raise ValueError("an API key is needed (create one with `tidemap keys create`)")
        self.base_url = base_url.rstrip("/")
        self._auth = {"Authorization": f"Bearer {key}"}
        self._owned = http is None
        self._http = http if http is not None else httpx.Client(timeout=timeout)

    def close(self) -> None:
        if self._owned:  # a given client belongs to the caller
            self._http.close()

    def send(self, method: str, path: str, **kwargs: Any) -> httpx.Response:
        """The answer of a request; TidemapApiError for any 4xx or 5xx."""
        headers = self._auth | kwargs.pop("headers", {})
        response = self._http.request(method, self.base_url + path, headers=headers, **kwargs)
        if response.is_error:
            raise api_error(response)
        return response

    def call(self, parse: Callable[[Json], T], method: str, path: str, **kwargs: Any) -> T:
        """The JSON object of the answer, read by ``parse``; ResponseShapeError when the
        answer is not JSON or lacks what ``parse`` needs."""
        response = self.send(method, path, **kwargs)
        try:
            data = response.json()
            if not isinstance(data, Mapping):
                raise TypeError(f"expected a JSON object, got {type(data).__name__}")
            return parse(data)
        except (ValueError, KeyError, TypeError, AttributeError) as exc:
            raise shape_error(response, exc) from exc

    def csv_rows(self, path: str, params: Params) -> Iterator[list[str]]:
        """The rows of a streamed CSV answer; the request is sent when iteration starts."""
        url = self.base_url + path
        with self._http.stream("GET", url, params=params, headers=self._auth) as response:
            if response.is_error:
                response.read()
                raise api_error(response)
            yield from csv.reader(lines_with_ends(response.iter_text()))
