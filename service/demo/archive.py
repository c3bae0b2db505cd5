"""The demo archive: the invented back catalogue of the Harrowvale Herald.

For ``tidemap demo`` only; never a check of correctness. Articles are built from
sentence templates (see :mod:`service.demo.vocabulary` and the ``topics_*`` modules):
a headline paired with its lead sentence, body sentences of the topic, quotes from an
invented cast, and a little district colour. The mix is chosen so the demo map has
something to show: topics of very different sizes, bridge stories that belong to two
topics, one-sentence briefs, long features and a few corrected re-runs (near-duplicates).

Everything is driven by ``random.Random`` seeded with integers, never by ``hash()`` or
set order, so a seed gives the same archive on every platform.
"""

from __future__ import annotations

import json
import os
import random
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from service.demo.bridges import BRIDGES
from service.demo.compose import (
    Rendered,
    correctable,
    render_bridge,
    render_correction,
    render_single,
)
from service.demo.topics_civic import CIVIC_TOPICS
from service.demo.topics_coast import COAST_TOPICS
from service.demo.topics_leisure import LEISURE_TOPICS
from service.demo.topics_services import SERVICE_TOPICS
from service.demo.vocabulary import ID_PREFIX, REPORTERS, BridgeSpec, TopicSpec

TOPICS: tuple[TopicSpec, ...] = CIVIC_TOPICS + SERVICE_TOPICS + COAST_TOPICS + LEISURE_TOPICS

# Shares of the archive by kind of article. Bridges near 10% so the map shows them
# without blurring the groups; a handful of corrections to exercise near-duplicates.
BRIDGE_SHARE = 0.10
CORRECTION_SHARE = 0.015
BRIEF_SHARE = 0.10
FEATURE_SHARE = 0.07


@dataclass(frozen=True)
class DemoArticle:
    """One invented article: what the demo upserts into a collection."""

    id: str
    title: str
    text: str
    published_at: datetime
    section: str
    topics: tuple[str, ...]
    metadata: dict[str, Any]


@dataclass(frozen=True)
class _Plan:
    """What one article will be, before it is written."""

    kind: str  # "report", "brief", "feature" or "bridge"
    topic: TopicSpec | None
    bridge: BridgeSpec | None
    seed: int


def generate_archive(n_articles: int = 720, seed: int = 7) -> list[DemoArticle]:
    """Write the invented archive: ``n_articles`` articles, the same for the same seed.

    Articles come back sorted by publication time; ids are ``hv-<year>-<nnnn>``,
    numbered within each year.
    """
    if isinstance(n_articles, bool) or not isinstance(n_articles, int) or n_articles < 1:
        raise ValueError(f"n_articles must be a positive integer, got {n_articles!r}")
    if isinstance(seed, bool) or not isinstance(seed, int):
        raise ValueError(f"seed must be an integer, got {seed!r}")
    rng = random.Random(seed)
    plans = _plan(n_articles, rng)
    rendered = [_render_plan(plan) for plan in plans]

    n_corrections = round(CORRECTION_SHARE * n_articles)
    reports = [i for i, p in enumerate(plans) if p.kind == "report" and correctable(rendered[i])]
    originals = rng.sample(reports, min(n_corrections, len(reports)))
    corrections: list[tuple[int, Rendered]] = []
    for i in sorted(originals):
        corrections.append((i, render_correction(rendered[i], plans[i].seed + 1)))
    # Pad with reports if corrections were capped, so the count is always n_articles.
    while len(plans) + len(corrections) < n_articles:
        topic = TOPICS[len(plans) % len(TOPICS)]
        plans.append(_Plan("report", topic, None, rng.getrandbits(63)))
        rendered.append(_render_plan(plans[-1]))
    return _assemble(plans, rendered, corrections)


def articles_as_records(articles: Iterable[DemoArticle]) -> list[dict[str, Any]]:
    """The articles in the shape the API's document upsert takes (JSON-ready)."""
    return [
        {
            "id": article.id,
            "title": article.title,
            "text": article.text,
            "published_at": article.published_at.isoformat(),
            "metadata": {
                "section": article.section,
                "topics": list(article.topics),
                **article.metadata,
            },
        }
        for article in articles
    ]


def write_jsonl(path: str | os.PathLike[str], articles: Iterable[DemoArticle]) -> None:
    """Write the articles as records, one JSON object per line (UTF-8)."""
    with open(path, "w", encoding="utf-8", newline="\n") as handle:
        for record in articles_as_records(articles):
            handle.write(json.dumps(record, ensure_ascii=False, sort_keys=True))
            handle.write("\n")


def _plan(n_articles: int, rng: random.Random) -> list[_Plan]:
    """Decide the kind and topic of every article (corrections are added later)."""
    n_bridges = round(BRIDGE_SHARE * n_articles)
    n_single = n_articles - n_bridges - round(CORRECTION_SHARE * n_articles)
    counts = _allocate(n_single, [topic.weight for topic in TOPICS])
    plans: list[_Plan] = []
    for topic, count in zip(TOPICS, counts, strict=True):
        n_brief = round(BRIEF_SHARE * count)
        n_feature = round(FEATURE_SHARE * count)
        kinds = ["brief"] * n_brief + ["feature"] * n_feature
        kinds += ["report"] * (count - n_brief - n_feature)
        plans.extend(_Plan(kind, topic, None, rng.getrandbits(63)) for kind in kinds)
    for _ in range(n_bridges):
        plans.append(_Plan("bridge", None, rng.choice(BRIDGES), rng.getrandbits(63)))
    return plans


def _allocate(total: int, weights: Sequence[float]) -> list[int]:
    """Split ``total`` in proportion to ``weights`` (largest remainder, ties by order)."""
    scale = total / sum(weights)
    exact = [w * scale for w in weights]
    counts = [int(x) for x in exact]
    by_remainder = sorted(range(len(weights)), key=lambda i: (counts[i] - exact[i], i))
    for i in by_remainder[: total - sum(counts)]:
        counts[i] += 1
    return counts


def _render_plan(plan: _Plan) -> Rendered:
    if plan.bridge is not None:
        first, second = (_by_key(key) for key in plan.bridge.topics)
        return render_bridge(plan.bridge, first, second, plan.seed)
    assert plan.topic is not None
    return render_single(plan.topic, plan.kind, plan.seed)


def _assemble(
    plans: list[_Plan], rendered: list[Rendered], corrections: list[tuple[int, Rendered]]
) -> list[DemoArticle]:
    """Sort by time, number the ids within each year, link corrections to originals."""
    rows: list[tuple[datetime, int, _Plan, Rendered, int | None]] = [
        (r.published_at, i, plan, r, None)
        for i, (plan, r) in enumerate(zip(plans, rendered, strict=True))
    ]
    for j, (original, correction) in enumerate(corrections):
        rows.append(
            (correction.published_at, len(plans) + j, plans[original], correction, original)
        )
    rows.sort(key=lambda row: (row[0], row[1]))

    ids: dict[int, str] = {}
    per_year: dict[int, int] = {}
    for when, key, *_ in rows:
        per_year[when.year] = per_year.get(when.year, 0) + 1
        ids[key] = f"{ID_PREFIX}-{when.year}-{per_year[when.year]:04d}"
    corrected_by = {original: len(plans) + j for j, (original, _) in enumerate(corrections)}

    articles = []
    for when, key, plan, r, original in rows:
        topics = plan.bridge.topics if plan.bridge is not None else (_topic(plan).key,)
        text = "\n\n".join(r.paragraphs)
        metadata: dict[str, Any] = {
            "kind": r.kind,
            "byline": REPORTERS[topics[0]],
            "word_count": len(text.split()),
        }
        if original is not None:
            metadata["corrects"] = ids[original]
        if key in corrected_by:
            metadata["corrected_by"] = ids[corrected_by[key]]
        section = _by_key(topics[0]).section
        articles.append(DemoArticle(ids[key], r.title, text, when, section, topics, metadata))
    return articles


def _topic(plan: _Plan) -> TopicSpec:
    assert plan.topic is not None
    return plan.topic


def _by_key(key: str) -> TopicSpec:
    return next(topic for topic in TOPICS if topic.key == key)
