"""Vocabulary selection and TF-IDF weighting of raw term counts.

The input everywhere is a sparse matrix of raw integer term counts, shape
``(n_docs, n_terms)``: row ``i`` is a document, column ``j`` a term of the
collection in a fixed order chosen by the caller (it maps its stable term ids to
columns). The output is a CSR matrix whose rows are unit vectors, so that a dot
product of two rows is their cosine similarity.

Functions
---------
select_vocabulary
    The kept columns, chosen by document frequency.
fit_tfidf
    Vocabulary, idf and the weighted, L2-normalised matrix of a collection.
transform_counts
    The same weighting applied to new documents (a draft, a document added after
    the last build), with the collection's vocabulary and idf.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from service.geometry.types import FloatArray, IntArray

__all__ = ["TfidfResult", "fit_tfidf", "select_vocabulary", "transform_counts", "weight_row"]


@dataclass(frozen=True)
class TfidfResult:
    """The weighting of one collection.

    Attributes
    ----------
    vocabulary : IntArray, shape (n_kept,)
        Sorted original column indices of the kept terms; column ``c`` of
        `matrix` is original column ``vocabulary[c]``.
    idf : FloatArray, shape (n_kept,)
        Smoothed inverse document frequency of each kept term,
        ``ln((1 + n_docs) / (1 + df)) + 1``.
    matrix : scipy.sparse.csr_matrix of float32, shape (n_docs, n_kept)
        Sublinear tf times idf, rows L2-normalised; canonical format (sorted
        indices, no duplicates, no explicit zeros).
    empty_rows : IntArray, shape (n_empty,)
        Sorted indices of the documents with no kept term (all-zero rows).
    """

    vocabulary: IntArray
    idf: FloatArray
    matrix: sp.csr_matrix
    empty_rows: IntArray


def select_vocabulary(
    document_frequency: IntArray,
    n_docs: int,
    *,
    min_df: int,
    max_df: float,
    vocab_size: int,
) -> IntArray:
    """Choose the working vocabulary by document frequency.

    Parameters
    ----------
    document_frequency : IntArray, shape (n_terms,)
        Number of documents containing each term (column).
    n_docs : int
        Number of documents in the collection, ``>= 1``.
    min_df : int
        Keep a term only if it occurs in at least `min_df` documents (``>= 1``).
    max_df : float
        Keep a term only if it occurs in at most ``max_df * n_docs`` documents,
        ``0 < max_df <= 1``. Terms in most documents carry little information
        and dominate the cost of the similarity product.
    vocab_size : int
        Keep at most this many terms (``>= 1``), those with the highest
        document frequency.

    Returns
    -------
    IntArray, shape (n_kept,)
        Sorted column indices of the kept terms.

    Notes
    -----
    When more than `vocab_size` terms pass the frequency bounds, terms are
    ranked by decreasing document frequency and ties are broken by increasing
    column index, so the selection is a deterministic function of the inputs.

    Examples
    --------
    >>> import numpy as np
    >>> df = np.array([5, 1, 3, 3, 10, 3])
    >>> select_vocabulary(df, 10, min_df=2, max_df=0.5, vocab_size=3).tolist()
    [0, 2, 3]
    """
    df = np.asarray(document_frequency)
    if df.ndim != 1:
        raise ValueError(f"document_frequency must be 1-D, got shape {df.shape}")
    if n_docs < 1:
        raise ValueError(f"n_docs must be >= 1, got {n_docs}")
    if min_df < 1:
        raise ValueError(f"min_df must be >= 1, got {min_df}")
    if not 0.0 < max_df <= 1.0:
        raise ValueError(f"max_df must be in (0, 1], got {max_df}")
    if vocab_size < 1:
        raise ValueError(f"vocab_size must be >= 1, got {vocab_size}")
    if df.size and (df.min() < 0 or df.max() > n_docs):
        raise ValueError(
            f"document frequencies must lie in [0, n_docs={n_docs}], "
            f"got range [{df.min()}, {df.max()}]"
        )
    keep = np.flatnonzero((df >= min_df) & (df <= max_df * n_docs))
    if keep.size > vocab_size:
        # lexsort sorts by the last key first: -df descending, then index ascending.
        order = np.lexsort((keep, -df[keep]))
        keep = np.sort(keep[order[:vocab_size]])
    return keep.astype(np.int64)


def fit_tfidf(
    counts: sp.spmatrix | sp.sparray,
    *,
    min_df: int = 2,
    max_df: float = 0.5,
    vocab_size: int = 50_000,
) -> TfidfResult:
    r"""Select the vocabulary of a collection and weight its documents.

    Parameters
    ----------
    counts : sparse matrix of integers, shape (n_docs, n_terms)
        Raw term counts, non-negative. Any scipy sparse format; duplicate
        entries are summed.
    min_df, max_df, vocab_size
        Vocabulary bounds, see `select_vocabulary`. Defaults 2, 0.5, 50,000.

    Returns
    -------
    TfidfResult
        Vocabulary, idf, the weighted matrix and the all-zero rows.

    Notes
    -----
    With ``n`` documents, ``df_t`` the number of documents containing term
    ``t`` and ``tf_{dt}`` the count of ``t`` in ``d``:

    .. math::

        \mathrm{idf}_t = \ln\frac{1 + n}{1 + \mathrm{df}_t} + 1, \qquad
        w_{dt} = (1 + \ln \mathrm{tf}_{dt})\,\mathrm{idf}_t \ (\mathrm{tf}_{dt} > 0),

    and each row ``w_d`` is divided by its Euclidean norm. The sublinear tf and
    the idf factor follow Salton & Buckley (1988); the smoothing (one added to
    ``n`` and ``df`` as if one extra document contained every term, and one
    added to the logarithm so no kept term gets weight zero) is the convention
    of scikit-learn's ``TfidfTransformer(smooth_idf=True, sublinear_tf=True)``.
    Document frequencies are counted over all documents, including those that
    end up with no kept term. The weights are computed in float64 and stored as
    float32, which halves the memory of the similarity products.

    References
    ----------
    G. Salton and C. Buckley, "Term-weighting approaches in automatic text
    retrieval", Information Processing & Management 24(5), 513-523, 1988.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> counts = sp.csr_matrix(np.array([[2, 1, 0], [1, 0, 0], [0, 1, 3], [0, 0, 1]]))
    >>> result = fit_tfidf(counts, min_df=2, max_df=0.5)
    >>> result.vocabulary.tolist(), result.empty_rows.tolist()
    ([0, 1, 2], [])
    >>> np.round(result.idf, 4).tolist()
    [1.5108, 1.5108, 1.5108]
    >>> np.allclose(np.sqrt(result.matrix.multiply(result.matrix).sum(axis=1)), 1.0)
    True
    """
    csr = _as_count_csr(counts)
    n_docs = csr.shape[0]
    if n_docs < 1:
        raise ValueError(f"counts must have at least one row, got shape {csr.shape}")
    df = np.bincount(csr.indices, minlength=csr.shape[1]).astype(np.int64)
    vocabulary = select_vocabulary(df, n_docs, min_df=min_df, max_df=max_df, vocab_size=vocab_size)
    idf = np.log((1.0 + n_docs) / (1.0 + df[vocabulary])) + 1.0
    matrix = _weight(csr, vocabulary, idf)
    empty_rows = np.flatnonzero(np.diff(matrix.indptr) == 0).astype(np.int64)
    return TfidfResult(vocabulary=vocabulary, idf=idf, matrix=matrix, empty_rows=empty_rows)


def transform_counts(
    model: TfidfResult | tuple[IntArray, FloatArray],
    counts: sp.spmatrix | sp.sparray,
) -> sp.csr_matrix:
    """Weight new documents with a collection's vocabulary and idf.

    Parameters
    ----------
    model : TfidfResult or (vocabulary, idf)
        The result of `fit_tfidf`, or its two arrays as stored with an index
        version.
    counts : sparse matrix of integers, shape (n_new, n_terms)
        Raw term counts in the collection's column order. ``n_terms`` must be
        greater than the largest vocabulary column; wider matrices are fine
        (terms added after the build simply do not count).

    Returns
    -------
    scipy.sparse.csr_matrix of float32, shape (n_new, n_kept)
        Rows weighted exactly as `fit_tfidf` weights the collection; a row with
        no known term is all zero.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> counts = sp.csr_matrix(np.array([[2, 1, 0], [1, 0, 0], [0, 1, 3], [0, 0, 1]]))
    >>> result = fit_tfidf(counts)
    >>> again = transform_counts((result.vocabulary, result.idf), counts)
    >>> np.array_equal(again.toarray(), result.matrix.toarray())
    True
    """
    if isinstance(model, TfidfResult):
        vocabulary, idf = model.vocabulary, model.idf
    else:
        vocabulary, idf = model
    vocabulary = np.asarray(vocabulary, dtype=np.int64)
    idf = np.asarray(idf, dtype=np.float64)
    if vocabulary.ndim != 1 or vocabulary.shape != idf.shape:
        raise ValueError(
            f"vocabulary and idf must be 1-D of equal length, got shapes "
            f"{vocabulary.shape} and {idf.shape}"
        )
    if vocabulary.size and np.any(np.diff(vocabulary) <= 0):
        raise ValueError("vocabulary must be strictly increasing column indices")
    csr = _as_count_csr(counts)
    if vocabulary.size and csr.shape[1] <= vocabulary[-1]:
        raise ValueError(
            f"counts has {csr.shape[1]} columns but the vocabulary refers to "
            f"column {vocabulary[-1]}"
        )
    return _weight(csr, vocabulary, idf)


def weight_row(columns: IntArray, counts: IntArray, idf: FloatArray) -> sp.csr_matrix:
    """One new document's row, weighted as `transform_counts` weights it, from its counts
    already in vocabulary positions (repeated columns are summed; counts positive).

    The per-request path of drafts: `transform_counts` re-checks and re-maps the whole
    vocabulary on every call, which costs more than the row itself.
    """
    cols, inverse = np.unique(np.asarray(columns, dtype=np.int64), return_inverse=True)
    summed = np.bincount(inverse, weights=np.asarray(counts, dtype=np.float64))
    weights = (1.0 + np.log(summed)) * np.asarray(idf, dtype=np.float64)[cols]
    if cols.size:
        weights /= np.sqrt(np.dot(weights, weights))
    out = sp.csr_matrix(
        (weights.astype(np.float32), cols, np.array([0, cols.size], dtype=np.int64)),
        shape=(1, len(idf)),
    )
    out.has_sorted_indices = True
    return out


def _as_count_csr(counts: sp.spmatrix | sp.sparray) -> sp.csr_matrix:
    """Validate raw counts and return a canonical CSR copy."""
    if not sp.issparse(counts):
        raise ValueError(f"counts must be a scipy sparse matrix, got {type(counts).__name__}")
    if counts.ndim != 2:
        raise ValueError(f"counts must be 2-D, got shape {counts.shape}")
    if not np.issubdtype(counts.dtype, np.integer):
        raise ValueError(f"counts must hold integers, got dtype {counts.dtype}")
    csr = sp.csr_matrix(counts, dtype=np.int64, copy=True)
    csr.sum_duplicates()
    if csr.data.size and csr.data.min() < 0:
        raise ValueError(f"counts must be non-negative, found {csr.data.min()}")
    csr.eliminate_zeros()
    return csr


def _weight(csr: sp.csr_matrix, vocabulary: IntArray, idf: FloatArray) -> sp.csr_matrix:
    """Sublinear tf x idf on the kept columns, rows L2-normalised, as float32.

    Trusts its caller: `csr` canonical with positive integer data, `vocabulary`
    sorted and in range.
    """
    n_docs, n_terms = csr.shape
    # Map original columns to kept positions (-1 for dropped) and filter the
    # entries directly: cheaper than fancy column indexing and, because the
    # vocabulary is sorted, it keeps every row's indices sorted.
    position = np.full(n_terms, -1, dtype=np.int64)
    position[vocabulary] = np.arange(vocabulary.size)
    new_col = position[csr.indices]
    keep = new_col >= 0
    rows = np.repeat(np.arange(n_docs), np.diff(csr.indptr))[keep]
    cols = new_col[keep]
    weights = (1.0 + np.log(csr.data[keep].astype(np.float64))) * idf[cols]
    norms = np.sqrt(np.bincount(rows, weights=weights * weights, minlength=n_docs))
    weights /= norms[rows]  # rows in `rows` always have a positive norm
    indptr = np.zeros(n_docs + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=n_docs), out=indptr[1:])
    out = sp.csr_matrix((weights.astype(np.float32), cols, indptr), shape=(n_docs, vocabulary.size))
    out.has_sorted_indices = True
    return out
