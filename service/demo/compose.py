"""Writing one demo article from templates: the cast, the slots, the paragraphs.

Each article is written from its own ``random.Random(seed)``, so the archive does not
depend on the order in which articles are written. A correction re-runs a written
report with one figure changed. For ``tidemap demo`` only.
"""

from __future__ import annotations

import calendar
import random
import re
import string
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from service.demo.vocabulary import (
    CORRECTION_NOTES,
    COUNCILLOR_LINES,
    COUNCILLOR_ROLES,
    FEATURE_KICKERS,
    FEATURE_LINKS,
    FIRST_NAMES,
    FIRST_YEAR,
    GENERIC_SENTENCES,
    LAST_YEAR,
    PAPER,
    QUOTE_AGAIN,
    QUOTE_FORMS,
    REGION,
    RESIDENT_VOICES,
    STREETS,
    SURNAMES,
    TOWNS,
    BridgeSpec,
    TopicSpec,
)

Context = dict[str, str]

_WORDS = ("two", "three", "four", "five", "six")
_ORDINALS = ("first", "second", "third", "fourth", "fifth", "sixth", "seventh", "eighth")
_WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday")
_MONTHS = tuple(calendar.month_name[1:])

_FORMATTER = string.Formatter()
# A figure in running text: not part of a name ("X7") or a score ("2-1").
_NUMBER = re.compile(r"(?<![\w-])\d+(?:,\d{3})*(?:\.\d+)?(?![\w-])")
_YEAR = re.compile(r"(?:19|20)\d\d")

# Figures drawn per article (headline and lead) and again per body sentence.
_FIGURES: dict[str, Callable[[random.Random], str]] = {
    "n": lambda r: str(r.randint(12, 95)),
    "n_big": lambda r: str(r.randint(120, 980)),
    "pct": lambda r: str(r.randint(4, 45)),
    "pct_small": lambda r: f"{r.randint(19, 49) / 10:.1f}",
    "money": lambda r: f"£{r.randint(12, 98) / 10:.1f} million",
    "money2": lambda r: f"£{r.randint(12, 98) / 10:.1f} million",
    "money_k": lambda r: f"£{r.randint(8, 95)},000",
    "n_small": lambda r: r.choice(_WORDS),
}

# Context keys of each kind of speaker: full name, surname, role.
_SPEAKERS: dict[str, tuple[str, str, str]] = {
    "person": ("person", "surname", "role"),
    "person2": ("person2", "surname2", "role2"),
    "cllr": ("cllr", "cllr_surname", "cllr_role"),
    "resident": ("resident", "resident_surname", "resident_role"),
}


@dataclass(frozen=True)
class Rendered:
    """A written article before it gets its id: headline, paragraphs, time, kind."""

    title: str
    paragraphs: tuple[str, ...]
    published_at: datetime
    kind: str


def random_time(rng: random.Random, months: Sequence[float]) -> datetime:
    """A UTC time in the archive's years, the month drawn from seasonal weights."""
    year = rng.randint(FIRST_YEAR, LAST_YEAR)
    month = rng.choices(range(1, 13), weights=months)[0]
    day = rng.randint(1, calendar.monthrange(year, month)[1])
    return datetime(year, month, day, rng.randint(6, 21), rng.randrange(0, 60, 5), tzinfo=UTC)


def render_single(topic: TopicSpec, kind: str, seed: int) -> Rendered:
    """Write a brief, report or feature of one topic from its own seed."""
    if kind not in ("brief", "report", "feature"):
        raise ValueError(f"kind must be brief, report or feature, got {kind!r}")
    rng = random.Random(seed)
    when = random_time(rng, topic.months)
    cast = _cast(rng)
    ctx = _topic_context(rng, _common_context(rng, when), topic, cast[0], cast[1])
    _add_voices(rng, ctx, cast)
    headline, lead = rng.choice(topic.stories)
    title = _fill(headline, ctx)
    if kind == "brief":
        paragraph = _fill(lead, ctx)
        if rng.random() < 0.5:
            paragraph += " " + _fill(rng.choice(topic.body), ctx, rng)
        return Rendered(title, (paragraph,), when, kind)

    # Councillors and the paper's general lines belong to public-affairs stories only.
    generic_pool = GENERIC_SENTENCES if topic.public_affairs else ()
    others = ["person2", "cllr", "resident"] if topic.public_affairs else ["person2", "resident"]
    if kind == "report":
        body = rng.sample(topic.body, min(len(topic.body), rng.randint(4, 12)))
        generic = rng.sample(generic_pool, min(len(generic_pool), rng.randint(0, 2)))
        speakers = ["person", *rng.sample(others, rng.randint(0, 2))]
    else:
        body = rng.sample(topic.body, len(topic.body))
        generic = rng.sample(generic_pool, min(len(generic_pool), 4))
        speakers = ["person", *others, "person", "person2"]
        title = rng.choice(FEATURE_KICKERS) + title
    sentences = [_fill(s, ctx, rng) for s in (*body, *generic)]
    rng.shuffle(sentences)
    quotes = _quotes(rng, ctx, speakers, topic)
    paragraphs = _arrange(rng, _fill(lead, ctx), sentences, quotes)
    if kind == "feature":
        # Looking back: two earlier stories of the topic, each introduced by a link.
        others = [story for story in topic.stories if story[1] != lead]
        links = rng.sample(FEATURE_LINKS, 2)
        for link, (_, earlier) in zip(links, rng.sample(others, 2), strict=True):
            at = rng.randint(3, len(paragraphs))
            paragraphs = (*paragraphs[:at], f"{link} {_fill(earlier, ctx, rng)}", *paragraphs[at:])
    return Rendered(title, paragraphs, when, kind)


def render_bridge(bridge: BridgeSpec, first: TopicSpec, second: TopicSpec, seed: int) -> Rendered:
    """Write a report that belongs to two topics: sentences and voices from both."""
    if (first.key, second.key) != bridge.topics:
        raise ValueError(f"topics {first.key!r}, {second.key!r} do not match {bridge.topics}")
    rng = random.Random(seed)
    when = random_time(rng, bridge.months)
    cast = _cast(rng)
    common = _common_context(rng, when)
    ctx_a = _topic_context(rng, common, first, cast[0], cast[1])
    ctx_b = _topic_context(rng, common, second, cast[2], cast[3])
    merged = {**ctx_b, **ctx_a}
    headline, lead = rng.choice(bridge.stories)
    sentences = [_fill(s, ctx_a, rng) for s in rng.sample(first.body, rng.randint(3, 6))]
    sentences += [_fill(s, ctx_b, rng) for s in rng.sample(second.body, rng.randint(3, 6))]
    rng.shuffle(sentences)
    quotes = _quotes(rng, ctx_a, ["person"], first) + _quotes(rng, ctx_b, ["person"], second)
    paragraphs = _arrange(rng, _fill(lead, merged), sentences, quotes)
    return Rendered(_fill(headline, merged), paragraphs, when, "bridge")


def render_correction(original: Rendered, seed: int) -> Rendered:
    """Re-run a report a few days later with one figure in one paragraph corrected.

    The figure is the first number (not a year) of a randomly chosen paragraph after
    the lead; a note saying what changed closes the article. Headline and every other
    paragraph are kept, so the pair is a near-duplicate.
    """
    if not correctable(original):
        raise ValueError(f"no figure after the lead to correct in {original.title!r}")
    rng = random.Random(seed)
    paragraphs = list(original.paragraphs)
    which = rng.choice([i for i in range(1, len(paragraphs)) if _first_figure(paragraphs[i])])
    match = _first_figure(paragraphs[which])
    assert match is not None
    figure = _other_figure(rng, match.group())
    paragraphs[which] = (
        paragraphs[which][: match.start()] + figure + paragraphs[which][match.end() :]
    )
    when = original.published_at + timedelta(days=rng.randint(1, 3), hours=rng.randint(0, 5))
    if when.year > LAST_YEAR:  # keep the archive inside its years: correct the same day
        when = original.published_at + timedelta(minutes=30)
    date = f"{when.day} {_MONTHS[when.month - 1]} {when.year}"
    note = rng.choice(CORRECTION_NOTES).format(date=date, ordinal=_ORDINALS[min(which, 7)])
    return Rendered(original.title, (*paragraphs, note), when, "correction")


def correctable(article: Rendered) -> bool:
    """Whether a paragraph after the lead holds a figure a correction could change."""
    return any(_first_figure(p) is not None for p in article.paragraphs[1:])


def _first_figure(text: str) -> re.Match[str] | None:
    """The first number in ``text`` that is not a year, or None."""
    for match in _NUMBER.finditer(text):
        if not _YEAR.fullmatch(match.group()):
            return match
    return None


def _other_figure(rng: random.Random, figure: str) -> str:
    """A different number written the same way (thousands commas, decimals, round zeros)."""
    decimals = len(figure.split(".")[1]) if "." in figure else 0
    value = float(figure.replace(",", ""))
    # Keep the figure's precision: "58,000" stays a round thousand, "2.4" one decimal.
    digits = figure.replace(",", "").split(".")[0]
    unit = 10.0 ** (len(digits) - len(digits.rstrip("0"))) if decimals == 0 else 10.0**-decimals
    new = round(value * rng.uniform(0.6, 1.4) / unit) * unit
    text = f"{new:,.{decimals}f}"
    if new <= 0 or text.replace(",", "") == figure.replace(",", ""):
        text = f"{value + unit * rng.randint(1, 3):,.{decimals}f}"
    return text


def _cast(rng: random.Random) -> list[tuple[str, str]]:
    """Six different invented people (first name, surname) for one article."""
    firsts = rng.sample(FIRST_NAMES, 6)
    surnames = rng.sample(SURNAMES, 6)
    return list(zip(firsts, surnames, strict=True))


def _common_context(rng: random.Random, when: datetime) -> Context:
    """Places, dates and figures shared by every sentence of an article."""
    town, town2 = rng.sample(TOWNS, 2)
    street, street2 = rng.sample(STREETS, 2)
    ctx: Context = {
        "paper": PAPER,
        "region": REGION,
        "town": town,
        "town2": town2,
        "street": street,
        "street2": street2,
        "weekday": rng.choice(_WEEKDAYS),
        "month": _MONTHS[when.month - 1],
        "next_month": _MONTHS[when.month % 12],
        "year": str(when.year),
        "last_year": str(when.year - 1),
        "next_year": str(when.year + 1),
        "early_year": str(rng.randint(2008, 2014)),
        "years": str(rng.randint(12, 60)),
        "population": rng.choice(("84,000", "86,000", "88,000")),
        "ordinal": rng.choice(_ORDINALS[2:6]),
    }
    for name, draw in _FIGURES.items():
        ctx[name] = draw(rng)
    return ctx


def _topic_context(
    rng: random.Random,
    common: Context,
    topic: TopicSpec,
    main: tuple[str, str],
    other: tuple[str, str],
) -> Context:
    """The common context plus the topic's slots and its two main speakers."""
    ctx = dict(common)
    for name, values in topic.slots:
        first, second = rng.sample(values, 2) if len(values) > 1 else (values[0], values[0])
        ctx[name], ctx[f"{name}2"] = first, second
    role, role2 = rng.sample(topic.roles, 2)
    for suffix, person, r in (("", main, role), ("2", other, role2)):
        ctx[f"person{suffix}"] = " ".join(person)
        ctx[f"surname{suffix}"] = person[1]
        ctx[f"role{suffix}"] = _fill(r, ctx, capitalise=False)
    return ctx


def _add_voices(rng: random.Random, ctx: Context, cast: list[tuple[str, str]]) -> None:
    """A councillor and a resident, who can speak in any topic."""
    ctx["cllr"] = "Councillor " + " ".join(cast[4])
    ctx["cllr_surname"] = cast[4][1]
    ctx["cllr_role"] = _fill(rng.choice(COUNCILLOR_ROLES), ctx, capitalise=False)
    ctx["resident"] = " ".join(cast[5])
    ctx["resident_surname"] = cast[5][1]
    where = rng.choice((f"who lives on {ctx['street']}", f"from {ctx['town2']}"))
    ctx["resident_role"] = f"{rng.randint(24, 86)}, {where}"


def _quotes(rng: random.Random, ctx: Context, speakers: list[str], topic: TopicSpec) -> list[str]:
    """One quoted paragraph per speaker; a speaker heard before is quoted by surname.

    The topic's officials speak its ``quotes``, residents its ``voices`` (or a line
    anyone might say, in public-affairs stories), councillors lines that fit any story.
    """
    voices = topic.voices + (RESIDENT_VOICES if topic.public_affairs else ())
    pools = {
        "person": rng.sample(topic.quotes, len(topic.quotes)),
        "cllr": rng.sample(COUNCILLOR_LINES, len(COUNCILLOR_LINES)),
        "resident": rng.sample(voices, len(voices)),
    }
    pools["person2"] = pools["person"]  # the two officials share lines, never repeat one
    heard: set[str] = set()
    quotes = []
    for speaker in speakers:
        quote = _fill(pools[speaker].pop(), ctx).rstrip(".")
        name_key, surname_key, role_key = _SPEAKERS[speaker]
        if speaker in heard:
            quotes.append(QUOTE_AGAIN.format(quote=quote, surname=ctx[surname_key]))
            continue
        heard.add(speaker)
        form = rng.choice(QUOTE_FORMS)
        quotes.append(form.format(quote=quote, name=ctx[name_key], role=ctx[role_key]))
    return quotes


def _arrange(
    rng: random.Random, lead: str, sentences: list[str], quotes: list[str]
) -> tuple[str, ...]:
    """Lead first, then body sentences in paragraphs of one to three, quotes between."""
    body: list[str] = []
    i = 0
    while i < len(sentences):
        size = rng.randint(1, 3)
        body.append(" ".join(sentences[i : i + size]))
        i += size
    # The first quote comes early, as in a news report; the rest later, in order, so a
    # speaker is always introduced before being quoted again by surname.
    gaps = [min(1, len(body))]
    gaps += sorted(rng.randint(gaps[0], len(body)) for _ in quotes[1:])
    arranged: list[str] = []
    k = 0
    for gap in range(len(body) + 1):
        while k < len(quotes) and gaps[k] == gap:
            arranged.append(quotes[k])
            k += 1
        if gap < len(body):
            arranged.append(body[gap])
    return (lead, *arranged)


def _fill(
    template: str, ctx: Context, fresh: random.Random | None = None, capitalise: bool = True
) -> str:
    """Fill a template's slots and start it with a capital letter.

    With ``fresh``, every figure in the template gets a new draw, so body sentences do
    not all repeat the same number; headlines and leads keep the article's figures so
    the two always agree.
    """
    values = ctx
    if fresh is not None:
        names = [field for _, field, _, _ in _FORMATTER.parse(template) if field in _FIGURES]
        if names:
            values = {**ctx, **{name: _FIGURES[name](fresh) for name in names}}
    text = template.format_map(values)
    if not capitalise:
        return text
    for i, char in enumerate(text):
        if char.isalpha():
            return text[:i] + char.upper() + text[i + 1 :]
    return text
