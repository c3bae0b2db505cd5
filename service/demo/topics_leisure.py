"""Demo vocabulary, leisure: the arts festival and theatre, the local football club.

Invented for ``tidemap demo`` only. Templates use ``{slot}`` names filled by
:mod:`service.demo.archive`; see :class:`service.demo.vocabulary.TopicSpec`.
"""

from __future__ import annotations

from service.demo.vocabulary import TopicSpec

ARTS = TopicSpec(
    key="arts",
    section="Arts",
    weight=0.06,
    # The Lantern Festival fills July; the theatre season runs autumn to spring.
    months=(0.6, 0.6, 0.8, 0.9, 1.2, 1.8, 2.6, 1.4, 0.8, 0.9, 0.9, 1.2),
    roles=(
        "director of the Harrowvale Lantern Festival",
        "artistic director of the Brindle Playhouse",
        "who manages the Old Ropeworks arts centre",
        "a member of the {town} Players",
        "chair of the Harrowvale Arts Trust",
    ),
    stories=(
        ("Lantern Festival returns with {n} events",
         "The Harrowvale Lantern Festival returns to {town} in {next_month} with {n} events "
         "over ten days, from street theatre to concerts on the quay."),
        ("Brindle Playhouse stages {production}",
         "The Brindle Playhouse in Brindlecombe opens its new season on {weekday} with "
         "{production}, directed by {artist}."),
        ("{crowd} turn out for the lantern parade in Wendlemouth",
         "An estimated {crowd} people lined the streets of Wendlemouth on {weekday} night for "
         "the lantern parade that closes the Harrowvale Lantern Festival."),
        ("Appeal raises {money_k} to save Old Ropeworks arts centre",
         "The Old Ropeworks arts centre in {town} has been saved from closure after a "
         "community appeal raised {money_k} in six weeks."),
        ("{town} Players win award for {production}",
         "The {town} Players have won a regional amateur drama award for their production of "
         "{production}, staged at the Brindle Playhouse last spring."),
        ("{n} artists open their studios across the valley",
         "More than {n} artists and makers across {region} will open their studios to the "
         "public over the coming fortnight."),
        ("{pct} per cent grant cut puts festival fringe at risk",
         "The fringe programme of the Harrowvale Lantern Festival could be scaled back after "
         "its grant from the Harrowvale Arts Trust was cut by {pct} per cent."),
    ),
    body=(
        "The festival began in {festival_year} as a single evening of music on the quay.",
        "Tickets for the main stage sold out within {n_small} days of going on sale.",
        "{production} runs at the Brindle Playhouse until the end of {next_month}.",
        "{artist} grew up in {town2} and trained at a drama school before returning home.",
        "The lanterns are made by schoolchildren and volunteers in workshops across the "
        "district.",
        "About {n_big} volunteers help to run the festival each year.",
        "The Brindle Playhouse seats {seats} and is run as a charity.",
        "The Old Ropeworks hosts exhibitions, a cinema club and classes for all ages.",
        "The festival brings an estimated {money2} into the local economy each summer.",
        "Reviewers praised the set, built by volunteers in a barn outside {town}.",
        "Many events are free, and the rest are priced to be affordable for families.",
        "The programme includes a new play about the fishing families of Wendlemouth.",
        "Local musicians will share the quayside stage with touring bands.",
        "The Harrowvale Arts Trust funds {n_small} venues and several small festivals.",
        "Work by {artist} will be on show at the Old Ropeworks through {next_month}.",
    ),
    quotes=(
        "The festival belongs to the people of the valley, not to us",
        "Theatre should be for everybody, whatever their budget",
        "We have been overwhelmed by the generosity of people in {town}",
        "Small venues like ours are where artists learn their trade",
        "It has been a huge amount of work, but the cast have been wonderful",
    ),
    voices=(
        "There is nothing like the sight of a thousand lanterns coming down the hill",
        "We bring the grandchildren every year, and they talk about it for months",
        "It is wonderful to have proper theatre on our doorstep",
    ),
    slots=(
        ("production", ("The Salt House", "A Winter on the Downs", "The Ferryman's Daughter",
                        "Lantern Night", "The Weir", "Nine Tides")),
        ("artist", ("Odile Carnoweth", "Rhodri Elderkin", "Sabine Jessamy",
                    "Wystan Greenhallow")),
        ("crowd", ("8,000", "11,000", "15,000")),
        ("seats", ("220", "260", "310")),
        ("festival_year", ("1987", "1992", "1998")),
    ),
    public_affairs=False,
)  # fmt: skip

FOOTBALL = TopicSpec(
    key="football",
    section="Sport",
    weight=0.15,
    # The season runs August to May; June and July are quiet except for signings.
    months=(1.3, 1.3, 1.4, 1.4, 0.9, 0.2, 0.4, 1.2, 1.3, 1.3, 1.3, 1.3),
    roles=(
        "manager of Wendlemouth Athletic",
        "captain of Wendlemouth Athletic",
        "chair of Wendlemouth Athletic",
        "secretary of the Herons Supporters' Trust",
        "manager of {opponent}",
    ),
    stories=(
        ("Herons beat {opponent} {score_win} at Quayside Park",
         "Wendlemouth Athletic beat {opponent} {score_win} at Quayside Park on {weekday}, "
         "with {player} scoring twice in the second half."),
        ("Athletic slip to {score_loss} defeat at {opponent}",
         "Wendlemouth Athletic lost {score_loss} away at {opponent} on {weekday}, their "
         "{ordinal} defeat in a row in the Saltreach League."),
        ("Late equaliser earns Herons a point against {opponent}",
         "A goal in stoppage time from {player} earned Wendlemouth Athletic a 1-1 draw "
         "against {opponent} at Quayside Park."),
        ("Wendlemouth Athletic sign striker {player}",
         "Wendlemouth Athletic have signed {player} on a two-year contract ahead of the new "
         "Saltreach League season."),
        ("Herons beat {opponent} to reach county cup final",
         "Wendlemouth Athletic are through to the county cup final after beating {opponent} "
         "{score_win} in the semi-final on {weekday}."),
        ("Supporters' trust raises {money_k} for new stand",
         "The Herons Supporters' Trust has raised {money_k} towards a covered stand at "
         "Quayside Park, the home of Wendlemouth Athletic."),
        ("Manager leaves Athletic after {n_small} years",
         "The manager of Wendlemouth Athletic has left the club after {n_small} years in "
         "charge, with the Herons {position} in the Saltreach League."),
    ),
    body=(
        "The Herons are {position} in the Saltreach League with {n_small} games to play.",
        "A crowd of {attendance} watched the match at Quayside Park.",
        "{player} opened the scoring with a header from a corner after twenty minutes.",
        "{opponent} had the better of the first half and hit the post twice.",
        "{player2} was sent off midway through the second half for a second yellow card.",
        "The goalkeeper made a string of fine saves to keep the Herons in the game.",
        "Athletic's next match is at home to {opponent2} on Saturday.",
        "The club has been promoted {promotions} times in its history.",
        "Quayside Park sits beside the harbour, and the wind off the sea often decides matches.",
        "The manager made {n_small} changes to the side that lost last week.",
        "{player2} came off the bench to set up the winning goal.",
        "The club's youth teams train at {town2} on Tuesday and Thursday evenings.",
        "The supporters' trust owns a share of the club and has a seat on the board.",
        "Ticket prices at Quayside Park have been frozen for the season.",
        "The pitch was heavy after a week of rain and the ball stuck in the puddles.",
        "The Herons have kept {n_small} clean sheets in their last ten matches.",
        "Floodlights at Quayside Park were replaced last summer at a cost of {money_k}.",
    ),
    quotes=(
        "I thought the lads gave everything today, and that is all I can ask",
        "We were second best for an hour and you cannot do that in this league",
        "The supporters were brilliant, they carried us through the last twenty minutes",
        "There is a lot of football left and we will not give up",
        "This club means everything to the town",
        "We need to be more clinical in front of goal, simple as that",
        "Every game in this league is hard, and today was no different",
    ),
    voices=(
        "I have watched the Herons since I was six and I have never been prouder",
        "The wind off the sea at Quayside Park is worth a goal to us",
        "I have had a season ticket for thirty years and I will not stop now",
    ),
    slots=(
        ("opponent", ("Kelderby Rovers", "Fennick Cross United", "Saltreach Town",
                      "Marrowby Rangers", "Otterbrook Vale", "Dunholt Albion",
                      "Scarrow Wanderers")),
        ("player", ("Jory Elderkin", "Lorcan Pellowe", "Bram Yarrowby", "Ulric Hallowell",
                    "Nye Farrowby", "Piran Kittering")),
        ("score_win", ("2-1", "3-1", "1-0", "2-0", "4-2")),
        ("score_loss", ("2-1", "3-0", "1-0", "2-0")),
        ("position", ("third", "fifth", "eighth", "twelfth", "second from bottom")),
        ("attendance", ("412", "586", "731", "1,042")),
        ("promotions", ("three", "four")),
    ),
    public_affairs=False,
)  # fmt: skip

LEISURE_TOPICS: tuple[TopicSpec, ...] = (ARTS, FOOTBALL)
