"""A small typed Python client of the Tidemap HTTP API, for other applications.

It imports httpx and the standard library only: importing it loads none of the server's
code (no FastAPI, SQLAlchemy or numpy), so it is cheap to use from another application::

    from service.client import TidemapClient, NotFoundError

    with TidemapClient("http://127.0.0.1:8000", key) as tidemap:
        answer = tidemap.neighbors("archive", "article-17", k=5)

Modules: `_client` (TidemapClient), `_models` (collections, documents, builds, index),
`_queries` (related documents, distances, paths), `_groups` (groups, the map),
`_errors` (the error tree), `_http` (requests, pages, streaming).
"""

from service.client._client import TidemapClient
from service.client._errors import (
    AuthError,
    BuildFailedError,
    BuildTimeoutError,
    ConflictError,
    InvalidInputError,
    MalformedRequestError,
    NotFoundError,
    PayloadTooLargeError,
    PermissionDeniedError,
    ResponseShapeError,
    ServerError,
    TidemapApiError,
    TidemapClientError,
    UnavailableError,
)
from service.client._groups import (
    Cluster,
    ClusterList,
    ClusterMember,
    ClusterPage,
    LabelTerm,
    MapExport,
    MapGroup,
    MapPoint,
    MonthCount,
    Representative,
)
from service.client._models import (
    BatchItem,
    BatchResult,
    BuildStatus,
    Collection,
    Document,
    DocumentSummary,
    IndexSummary,
    Lease,
    Page,
    Staleness,
    UpsertResult,
)
from service.client._queries import (
    Distance,
    DistanceAnswer,
    Neighbor,
    NeighborsAnswer,
    PathAnswer,
    PathDocument,
    PathStep,
    QueryPoint,
    Search,
    SharedTerm,
    SimilarAnswer,
)

__all__ = [
    "AuthError",
    "BatchItem",
    "BatchResult",
    "BuildFailedError",
    "BuildStatus",
    "BuildTimeoutError",
    "Cluster",
    "ClusterList",
    "ClusterMember",
    "ClusterPage",
    "Collection",
    "ConflictError",
    "Distance",
    "DistanceAnswer",
    "Document",
    "DocumentSummary",
    "IndexSummary",
    "InvalidInputError",
    "LabelTerm",
    "Lease",
    "MalformedRequestError",
    "MapExport",
    "MapGroup",
    "MapPoint",
    "MonthCount",
    "Neighbor",
    "NeighborsAnswer",
    "NotFoundError",
    "Page",
    "PathAnswer",
    "PathDocument",
    "PathStep",
    "PayloadTooLargeError",
    "PermissionDeniedError",
    "QueryPoint",
    "Representative",
    "ResponseShapeError",
    "Search",
    "ServerError",
    "SharedTerm",
    "SimilarAnswer",
    "Staleness",
    "TidemapApiError",
    "TidemapClient",
    "TidemapClientError",
    "UnavailableError",
    "UpsertResult",
]
