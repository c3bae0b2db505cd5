"""The demo archive: deterministic, the right mix of articles, ready for the upsert API.

The archive is invented and only feeds ``tidemap demo``; these tests check its shape,
never the correctness of anything computed from it.
"""

from __future__ import annotations

import hashlib
import json
import random
import re
import statistics
from collections import Counter
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from service.demo import compose, vocabulary
from service.demo.archive import (
    TOPICS,
    DemoArticle,
    articles_as_records,
    generate_archive,
    write_jsonl,
)
from service.demo.bridges import BRIDGES

ID_PATTERN = re.compile(r"[A-Za-z0-9._:-]+")


@pytest.fixture(scope="module")
def archive() -> list[DemoArticle]:
    return generate_archive()


def _digest(articles: list[DemoArticle]) -> str:
    payload = json.dumps(articles_as_records(articles), sort_keys=True, ensure_ascii=False)
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def _topic_counts(articles: list[DemoArticle]) -> Counter[str]:
    return Counter(topic for article in articles for topic in article.topics)


def test_same_seed_gives_the_same_archive(archive: list[DemoArticle]) -> None:
    again = generate_archive()
    assert again == archive
    assert _digest(again) == _digest(archive)


def test_another_seed_gives_another_archive(archive: list[DemoArticle]) -> None:
    assert _digest(generate_archive(seed=8)) != _digest(archive)


def test_default_size_and_requested_sizes(archive: list[DemoArticle]) -> None:
    assert len(archive) >= 600
    for n in (1, 5, 37, 250):
        assert len(generate_archive(n_articles=n, seed=3)) == n


@pytest.mark.parametrize("bad", [0, -3, 2.5, True, "720"])
def test_bad_size_is_refused(bad: object) -> None:
    with pytest.raises(ValueError, match="n_articles"):
        generate_archive(n_articles=bad)  # type: ignore[arg-type]


def test_bad_seed_is_refused() -> None:
    with pytest.raises(ValueError, match="seed"):
        generate_archive(seed="seven")  # type: ignore[arg-type]


def test_at_least_eight_topics_with_skewed_sizes(archive: list[DemoArticle]) -> None:
    counts = _topic_counts(archive)
    assert len(counts) >= 8
    assert set(counts) == {topic.key for topic in TOPICS}
    assert max(counts.values()) >= 2.5 * min(counts.values())


def test_bridges_mix_exactly_two_topics(archive: list[DemoArticle]) -> None:
    bridges = [a for a in archive if a.metadata["kind"] == "bridge"]
    assert 0.08 <= len(bridges) / len(archive) <= 0.12
    for article in archive:
        if article.metadata["kind"] == "bridge":
            assert len(article.topics) == 2
            assert article.topics[0] != article.topics[1]
        else:
            assert len(article.topics) == 1
    # Bridges of every kind appear, so the map has links between several pairs of groups.
    assert len({a.topics for a in bridges}) >= len(BRIDGES) - 2


def test_dates_span_several_years_in_utc(archive: list[DemoArticle]) -> None:
    times = [a.published_at for a in archive]
    assert all(t.tzinfo is not None and t.utcoffset() == timedelta(0) for t in times)
    assert max(times) - min(times) >= timedelta(days=4 * 365)
    assert times == sorted(times)


def test_flood_stories_come_in_winter(archive: list[DemoArticle]) -> None:
    months = [a.published_at.month for a in archive if a.topics == ("flooding",)]
    winter = sum(m in (11, 12, 1, 2) for m in months)
    summer = sum(m in (5, 6, 7, 8) for m in months)
    assert winter > 2 * summer


def test_every_article_has_title_and_text_and_a_valid_unique_id(
    archive: list[DemoArticle],
) -> None:
    for article in archive:
        assert article.title.strip() and article.text.strip()
        assert ID_PATTERN.fullmatch(article.id), article.id
        assert article.id.startswith(f"hv-{article.published_at.year}-")
    assert len({a.id for a in archive}) == len(archive)


def test_no_template_slot_is_left_unfilled(archive: list[DemoArticle]) -> None:
    for article in archive:
        assert "{" not in article.title + article.text, article.id
        assert "}" not in article.title + article.text, article.id
        for paragraph in article.text.split("\n\n"):
            assert paragraph[0].isupper() or paragraph[0] == '"', (article.id, paragraph)
            assert paragraph.endswith((".", '."')), (article.id, paragraph)


def test_every_template_fills_from_its_context() -> None:
    # The default archive may not draw every template; fill them all once here.
    rng = random.Random(0)
    when = datetime(2020, 3, 1, tzinfo=UTC)
    common = compose._common_context(rng, when)
    cast = compose._cast(rng)
    contexts = {}
    for topic in TOPICS:
        ctx = compose._topic_context(rng, common, topic, cast[0], cast[1])
        compose._add_voices(rng, ctx, cast)
        contexts[topic.key] = ctx
        shared = (*vocabulary.GENERIC_SENTENCES, *vocabulary.COUNCILLOR_LINES)
        voices = (*topic.voices, *vocabulary.RESIDENT_VOICES)
        for template in (*topic.body, *topic.quotes, *voices, *topic.roles, *shared):
            assert "{" not in compose._fill(template, ctx, rng)
        for headline, lead in topic.stories:
            assert "{" not in compose._fill(headline, ctx) + compose._fill(lead, ctx)
    for bridge in BRIDGES:
        first, second = bridge.topics
        merged = {**contexts[second], **contexts[first]}
        for headline, lead in bridge.stories:
            assert "{" not in compose._fill(headline, merged) + compose._fill(lead, merged)


def test_briefs_reports_and_features_differ_in_length(archive: list[DemoArticle]) -> None:
    words: dict[str, list[int]] = {}
    for article in archive:
        words.setdefault(article.metadata["kind"], []).append(len(article.text.split()))
    assert {"brief", "report", "feature", "bridge", "correction"} <= set(words)
    brief, report, feature = (statistics.median(words[k]) for k in ("brief", "report", "feature"))
    assert brief < 80 < report < feature
    assert max(words["feature"]) > 400
    everything = [n for lengths in words.values() for n in lengths]
    assert sum(80 <= n <= 600 for n in everything) >= 0.8 * len(everything)


def test_corrections_rerun_a_story_with_one_paragraph_changed(
    archive: list[DemoArticle],
) -> None:
    by_id = {a.id: a for a in archive}
    corrections = [a for a in archive if a.metadata["kind"] == "correction"]
    assert corrections
    for correction in corrections:
        original = by_id[correction.metadata["corrects"]]
        assert original.metadata["corrected_by"] == correction.id
        assert correction.title == original.title
        assert correction.topics == original.topics
        assert correction.published_at > original.published_at
        before = original.text.split("\n\n")
        after = correction.text.split("\n\n")
        assert len(after) == len(before) + 1  # the correction note at the end
        changed = [i for i, (a, b) in enumerate(zip(before, after, strict=False)) if a != b]
        assert len(changed) == 1 and changed[0] >= 1


def test_records_round_trip_through_json(archive: list[DemoArticle]) -> None:
    records = articles_as_records(archive)
    assert json.loads(json.dumps(records)) == records
    for article, record in zip(archive, records, strict=True):
        assert set(record) == {"id", "title", "text", "published_at", "metadata"}
        assert record["id"] == article.id
        assert datetime.fromisoformat(record["published_at"]) == article.published_at
        assert record["metadata"]["section"] == article.section
        assert tuple(record["metadata"]["topics"]) == article.topics


def test_write_jsonl_writes_one_record_per_line(archive: list[DemoArticle], tmp_path: Path) -> None:
    path = tmp_path / "archive.jsonl"
    write_jsonl(path, archive[:25])
    lines = path.read_text(encoding="utf-8").splitlines()
    assert [json.loads(line) for line in lines] == articles_as_records(archive[:25])
