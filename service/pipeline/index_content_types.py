"""What a build's geometry step receives and returns (the contract between the build
machinery of service.pipeline.build_run and ``compute_index`` of
service.pipeline.index_content).

Array names the machinery itself relies on
------------------------------------------
``doc_ids``          int64 (n_docs,): the snapshot's documents.id per row. Added by the
                     machinery when the compute function leaves it out; if given, it must
                     equal ``Snapshot.doc_ids``.
``excluded_doc_ids`` int64 (n_excluded,): documents of the snapshot left out of the matrix
                     (no terms). Added by the machinery; used for exact staleness.
``stable_group``     int64 (n_docs,): the stable group id of each row, -1 for none. Read
                     back from the active version as ``PreviousGroups`` by the next build.

Statistics keys ``GET /v1/collections/{c}/index`` reports (missing ones are shown as
null): ``vocabulary_size`` (int), ``edges`` (int, undirected), ``components`` (int),
``isolated`` (int, documents left out of the map), ``eigenvalues`` (list of float),
``coordinates`` (int, coordinates kept).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:
    from service.pipeline.collection_settings import CollectionSettings
    from service.pipeline.snapshot import Snapshot

DOC_IDS = "doc_ids"
EXCLUDED_DOC_IDS = "excluded_doc_ids"
STABLE_GROUP = "stable_group"
SUMMARY_KEYS = ("vocabulary_size", "edges", "components", "isolated", "eigenvalues", "coordinates")

# (stage name, fraction of that stage done in [0, 1]); may raise BuildCancelled.
ProgressFn = Callable[[str, float], None]


class BuildStopped(Exception):  # noqa: N818 - a control-flow signal, not an error
    """Base of the signals that stop a build at a stage boundary (control flow, not errors;
    a build that cannot succeed raises service.errors.BuildFailedError instead)."""


class BuildCancelled(BuildStopped):
    """Someone cancelled the build (DELETE .../builds/{b}); raised by the progress callback."""


class BuildInterrupted(BuildStopped):
    """The worker is shutting down (SIGTERM): the job goes back to the queue."""


class LeaseLost(BuildStopped):
    """The job is no longer this worker's (its lease ran out and it was re-queued, or the
    collection was deleted): stop without touching the job."""


@dataclass(frozen=True)
class PreviousGroups:
    """The active version's groups, so that a rebuild can keep their stable ids."""

    doc_ids: NDArray[np.int64]
    stable_group: NDArray[np.int64]  # -1 = none
    next_group_id: int

    @classmethod
    def none(cls, next_group_id: int = 0) -> PreviousGroups:
        empty = np.zeros(0, dtype=np.int64)
        return cls(doc_ids=empty, stable_group=empty.copy(), next_group_id=next_group_id)


@dataclass(frozen=True)
class GroupRecord:
    stable_id: int
    size: int
    label_terms: list[dict[str, Any]]  # [{"term": str, "score": float, "count": int}]
    representatives: list[int]  # internal document ids


@dataclass(frozen=True)
class IndexContent:
    arrays: dict[str, np.ndarray]  # everything queries and the Nystrom extension need
    groups: list[GroupRecord]
    statistics: dict[str, Any] = field(default_factory=dict)  # JSON-able
    next_group_id: int = 0


class ComputeFn(Protocol):
    def __call__(
        self,
        snapshot: Snapshot,
        settings: CollectionSettings,
        previous_groups: PreviousGroups,
        progress: ProgressFn,
    ) -> IndexContent: ...
