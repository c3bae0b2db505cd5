"""The invented world of the demo archive: its newspaper, district, places and people.

Everything here is made up for ``tidemap demo``. The Harrowvale Herald is a fictional
weekly covering Harrowvale, an invented district that runs from the Marrow Downs down the
River Wendle to the sea at Wendlemouth. No name below is meant to refer to a real person,
place, institution or event.

The per-topic vocabularies live in :mod:`service.demo.topics_civic` and
:mod:`service.demo.topics_coast`; this module holds what they share and the
:class:`TopicSpec` record that describes one topic.
"""

from __future__ import annotations

from dataclasses import dataclass

PAPER = "the Harrowvale Herald"
REGION = "Harrowvale"
ID_PREFIX = "hv"
FIRST_YEAR = 2017
LAST_YEAR = 2024

# The district's towns, coast first, then up the valley to the hills.
TOWNS: tuple[str, ...] = (
    "Wendlemouth",
    "Gullstone",
    "Sallowby",
    "Tollgarth",
    "Brindlecombe",
    "Kelderby",
    "Fennick Cross",
    "Upper Quillham",
)

STREETS: tuple[str, ...] = (
    "Mill Lane",
    "Quay Street",
    "Chapel Row",
    "Ferry Road",
    "Tanners Walk",
    "Orchard Terrace",
    "Bridge Street",
    "Ropewalk",
    "Heron Close",
    "Weavers Yard",
)

FIRST_NAMES: tuple[str, ...] = (
    "Alys", "Bram", "Cerys", "Dorian", "Edwina", "Fenwick", "Greta", "Hollis",
    "Ines", "Jory", "Keziah", "Lorcan", "Maren", "Nye", "Odile", "Piran",
    "Quilla", "Rhodri", "Sabine", "Tamsin", "Ulric", "Verity", "Wystan", "Yelena",
    "Aurelia", "Casimir", "Delphine", "Emrys", "Florian", "Hester", "Isolde", "Lowen",
)  # fmt: skip

SURNAMES: tuple[str, ...] = (
    "Ashcroft-Venn", "Brackwell", "Carnoweth", "Dellamere", "Elderkin", "Farrowby",
    "Gethingly", "Hallowell", "Istwick", "Jessamy", "Kittering", "Larkspurr",
    "Mordenhale", "Nettlefold", "Orringham", "Pellowe", "Quarrendon", "Rookesby",
    "Saltonby", "Tregarrow", "Underhay", "Vellacott", "Wintersgill", "Yarrowby",
    "Ambrosine", "Brennick-Lowe", "Coppinger", "Drewsley", "Fallowfield", "Greenhallow",
)  # fmt: skip

# The Herald's reporters; the byline follows the topic's beat.
REPORTERS: dict[str, str] = {
    "council": "Hester Vellacott",
    "housing": "Hester Vellacott",
    "schools": "Emrys Nettlefold",
    "health": "Delphine Rookesby",
    "transport": "Lowen Pellowe",
    "harbour": "Piran Tregarrow",
    "flooding": "Lowen Pellowe",
    "farming": "Greta Farrowby",
    "arts": "Isolde Dellamere",
    "football": "Casimir Underhay",
}

# Councillors appear across topics: they vote on budgets, buses, schools and flood walls.
COUNCILLOR_ROLES: tuple[str, ...] = (
    "who represents {town} on the district council",
    "the council's cabinet member for the environment",
    "an opposition councillor for {town}",
)

RESIDENT_VOICES: tuple[str, ...] = (
    "I have lived here for {years} years and I have never seen anything like it",
    "Nobody asked the people who actually live here",
    "We just want someone to tell us what is going to happen",
    "It is the same every year and we are tired of waiting",
    "People are worried, and they have every right to be",
)

# Councillors speak in every topic, so their lines fit any story.
COUNCILLOR_LINES: tuple[str, ...] = (
    "I will be raising this at the next meeting of the full council",
    "People in {town} need to know what is happening and when",
    "I have written to the chief executive asking for a full explanation",
    "This matters a great deal to the people I represent",
)

# Sentences that fit any story; they give reports the texture of a local paper.
GENERIC_SENTENCES: tuple[str, ...] = (
    "{paper} understands the matter will return to the full council in {next_month}.",
    "The issue has been raised repeatedly at community meetings in {town} and {town2}.",
    "Harrowvale has a population of about {population}, most of it in the valley towns.",
    "A public meeting is planned at {town} village hall on {weekday} evening.",
    "Readers can share their views by writing to the letters page of {paper}.",
    "Similar concerns were raised in {last_year}, when the subject last came before councillors.",
    "A spokesperson for Harrowvale District Council said it would respond in due course.",
    "Campaigners in {town2} say they will keep up the pressure until they get answers.",
    "The figures were obtained by {paper} through a freedom of information request.",
    "Local businesses in {town} say they are watching the situation closely.",
)

CORRECTION_NOTES: tuple[str, ...] = (
    "Correction: this article was amended on {date} to correct a figure in the "
    "{ordinal} paragraph.",
    "This story was updated on {date}. An earlier version gave an incorrect figure.",
    "Amended on {date}: a number in an earlier version of this report was wrong "
    "and has been corrected.",
)

FEATURE_KICKERS: tuple[str, ...] = ("The big read: ", "In depth: ", "Special report: ")

# A feature looks back at related stories; these sentences introduce them.
FEATURE_LINKS: tuple[str, ...] = (
    "It is not the first time the subject has made the news.",
    "The story has been building for some time.",
    "Other developments in recent months point the same way.",
    "Those who follow these things closely will remember what came before.",
)

QUOTE_FORMS: tuple[str, ...] = (
    '"{quote}," said {name}, {role}.',
    '{name}, {role}, said: "{quote}."',
    '"{quote}," according to {name}, {role}.',
)
QUOTE_AGAIN = '"{quote}," {surname} added.'


@dataclass(frozen=True)
class TopicSpec:
    """One topic of the invented archive: its size, season and its words.

    ``stories`` pairs a headline with the lead sentence that opens the article, so
    the title and the first paragraph always agree. ``body`` sentences fit any story
    of the topic. ``quotes`` are lines for the people in ``roles`` and ``voices``
    lines for residents, both without closing punctuation. ``slots``
    name the per-topic word lists that templates use as ``{name}`` and ``{name2}``
    (two different picks per article). ``months`` weights January..December.
    ``public_affairs`` says whether councillors, residents' complaints and the
    paper's general lines (``GENERIC_SENTENCES``) fit its stories; not for sport.
    """

    key: str
    section: str
    weight: float
    months: tuple[float, ...]
    roles: tuple[str, ...]
    stories: tuple[tuple[str, str], ...]
    body: tuple[str, ...]
    quotes: tuple[str, ...]
    voices: tuple[str, ...]
    slots: tuple[tuple[str, tuple[str, ...]], ...]
    public_affairs: bool = True

    def __post_init__(self) -> None:
        if len(self.months) != 12:
            raise ValueError(f"topic {self.key!r}: months needs 12 weights, got {self.months}")
        if self.weight <= 0:
            raise ValueError(f"topic {self.key!r}: weight must be positive, got {self.weight}")
        if not (self.stories and self.body and self.quotes and self.voices and self.roles):
            raise ValueError(
                f"topic {self.key!r}: stories, body, quotes, voices and roles are all required"
            )


@dataclass(frozen=True)
class BridgeSpec:
    """A kind of story that genuinely belongs to two topics at once.

    The lead may use the slots of both topics; the body mixes sentences of both.
    """

    topics: tuple[str, str]
    months: tuple[float, ...]
    stories: tuple[tuple[str, str], ...]

    def __post_init__(self) -> None:
        if len(self.months) != 12:
            raise ValueError(f"bridge {self.topics}: months needs 12 weights, got {self.months}")
        if self.topics[0] == self.topics[1]:
            raise ValueError(f"bridge must join two different topics, got {self.topics}")
