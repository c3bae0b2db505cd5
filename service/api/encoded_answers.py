"""Encoded answers kept per `Live` state, for the large reads that a dashboard repeats.

A `Live` object is immutable (one index version with one set of deletions and
provisional documents), so an answer computed from it, plus whatever else the answer
read (``key``), can be sent again as the same bytes until either changes. The group
list of a 100,000-document collection is 141 kB of JSON whose building and encoding
cost 5 ms per request; sent from here it costs the look-up. Entries go with their
`Live` (weak keys), so a superseded state's answers are freed with it.
"""

from __future__ import annotations

import threading
import weakref
from collections.abc import Callable, Hashable

from service.pipeline.live_index import Live

__all__ = ["EncodedAnswers"]


class EncodedAnswers:
    """Bytes by (Live, key): one answer per Live, the latest key kept."""

    def __init__(self) -> None:
        self._entries: weakref.WeakKeyDictionary[Live, tuple[Hashable, bytes]] = (
            weakref.WeakKeyDictionary()
        )
        self._lock = threading.Lock()

    def get_or_make(self, live: Live, key: Hashable, make: Callable[[], bytes]) -> bytes:
        with self._lock:
            found = self._entries.get(live)
        if found is not None and found[0] == key:
            return found[1]
        body = make()  # outside the lock: two requests may both make it, same bytes
        with self._lock:
            self._entries[live] = (key, body)
        return body
