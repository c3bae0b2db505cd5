"""Invented term-count matrices shaped like a text archive, for benchmarks only.

Never a check of correctness: the data only has to stress the graph code the way
real text does (a Zipfian vocabulary, topics of very different sizes, documents
mixing a topic with general vocabulary, near-duplicates and exact duplicates).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from service.geometry.types import RngLike, as_generator

__all__ = ["synthetic_counts"]


def synthetic_counts(
    n_docs: int,
    *,
    n_terms: int = 60_000,
    n_topics: int = 300,
    mean_tokens: float = 150.0,
    near_duplicate_fraction: float = 0.05,
    exact_duplicate_fraction: float = 0.01,
    rng: RngLike = 0,
) -> tuple[sp.csr_matrix, np.ndarray]:
    """Generate raw term counts of ``n_docs`` invented documents.

    Parameters
    ----------
    n_docs : int
        Number of documents.
    n_terms : int, default 60,000
        Size of the generating vocabulary (Zipf-Mandelbrot background
        frequencies, exponent 1.05, offset 2.7).
    n_topics : int, default 300
        Number of topics; topic sizes follow a power law (exponent 0.9), so a
        few topics hold many documents and many hold few.
    mean_tokens : float, default 150
        Typical document length in tokens (log-normal, sigma 0.5, clipped to
        [20, 2000]).
    near_duplicate_fraction : float, default 0.05
        Fraction of documents that copy another document of the same topic
        with about 10 % of the tokens redrawn.
    exact_duplicate_fraction : float, default 0.01
        Fraction of documents that are exact copies of another.
    rng : int or numpy.random.Generator, default 0
        Seed or generator.

    Returns
    -------
    counts : scipy.sparse.csr_matrix of int64, shape (n_docs, n_terms)
    topic : ndarray of int64, shape (n_docs,)
        The generating topic of every document.
    """
    gen = as_generator(rng)
    ranks = np.arange(n_terms, dtype=np.float64)
    background = 1.0 / (ranks + 2.7) ** 1.05
    background /= background.sum()

    size_weights = 1.0 / np.arange(1, n_topics + 1) ** 0.9
    topic = gen.choice(n_topics, size=n_docs, p=size_weights / size_weights.sum())
    lengths = np.clip(gen.lognormal(np.log(mean_tokens), 0.5, size=n_docs), 20, 2000)
    lengths = lengths.astype(np.int64)
    # Share of each document's tokens drawn from its topic rather than the
    # background: varies per document like focus varies between texts.
    focus = gen.beta(4.0, 5.0, size=n_docs)

    doc_of_token = np.repeat(np.arange(n_docs), lengths)
    token_topic = topic[doc_of_token]
    from_topic = gen.random(doc_of_token.size) < focus[doc_of_token]
    terms = np.empty(doc_of_token.size, dtype=np.int64)
    n_background = int((~from_topic).sum())
    terms[~from_topic] = gen.choice(n_terms, size=n_background, p=background)
    for t in range(n_topics):
        mask = from_topic & (token_topic == t)
        n_mask = int(mask.sum())
        if n_mask == 0:
            continue
        # A topic's own vocabulary: 400 terms favouring the middle of the
        # frequency range, with Zipfian weights among themselves.
        vocab = np.sort(gen.choice(n_terms, size=400, replace=False, p=_mid_bias(n_terms)))
        weights = 1.0 / np.arange(1, 401) ** 0.8
        gen.shuffle(weights)
        terms[mask] = vocab[gen.choice(400, size=n_mask, p=weights / weights.sum())]

    counts = sp.csr_matrix(
        (np.ones(terms.size, dtype=np.int64), (doc_of_token, terms)), shape=(n_docs, n_terms)
    )
    counts.sum_duplicates()
    counts = _add_duplicates(counts, topic, near_duplicate_fraction, exact_duplicate_fraction, gen)
    return counts, topic.astype(np.int64)


def _mid_bias(n_terms: int) -> np.ndarray:
    """Selection weights for topic vocabularies: few very common or very rare terms."""
    ranks = np.arange(n_terms, dtype=np.float64)
    weights = np.exp(-0.5 * ((np.log1p(ranks) - np.log(3000.0)) / 1.2) ** 2)
    return weights / weights.sum()


def _add_duplicates(
    counts: sp.csr_matrix,
    topic: np.ndarray,
    near_fraction: float,
    exact_fraction: float,
    gen: np.random.Generator,
) -> sp.csr_matrix:
    """Overwrite some rows with (near-)copies of other rows of the same topic."""
    n_docs = counts.shape[0]
    lil = counts.tolil()
    n_near = int(near_fraction * n_docs)
    n_exact = int(exact_fraction * n_docs)
    targets = gen.choice(n_docs, size=n_near + n_exact, replace=False)
    for pos, target in enumerate(targets):
        same = np.flatnonzero(topic == topic[target])
        source = int(same[gen.integers(same.size)])
        if source == target:
            continue
        row = counts.getrow(source)
        cols, vals = row.indices.copy(), row.data.copy()
        if pos < n_near:
            # Redraw about 10 % of the tokens: drop some entries, add a few new terms.
            drop = gen.random(cols.size) < 0.1
            cols, vals = cols[~drop], vals[~drop]
            extra = gen.integers(counts.shape[1], size=max(1, int(0.1 * vals.sum())))
            cols = np.concatenate([cols, extra])
            vals = np.concatenate([vals, np.ones(extra.size, dtype=vals.dtype)])
        lil.rows[target] = []
        lil.data[target] = []
        merged = sp.csr_matrix(
            (vals, (np.zeros(cols.size, dtype=np.int64), cols)), shape=(1, counts.shape[1])
        )
        merged.sum_duplicates()
        lil.rows[target] = merged.indices.tolist()
        lil.data[target] = merged.data.tolist()
        topic[target] = topic[source]
    return sp.csr_matrix(lil)
