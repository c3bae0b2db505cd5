"""Demo vocabulary, stories that belong to two topics at once.

A flood that closes the railway, a budget that cuts school buses: these "bridge" articles
sit between two topic groups on the map, which is what the demo should show. Invented
for ``tidemap demo`` only. A lead may use the slots of both of its topics.
"""

from __future__ import annotations

from service.demo.vocabulary import BridgeSpec

_WINTER = (2.4, 2.0, 1.2, 0.5, 0.3, 0.2, 0.3, 0.3, 0.5, 1.1, 2.0, 2.4)
_BUDGET = (1.6, 2.2, 1.8, 0.9, 0.7, 0.6, 0.6, 0.6, 0.9, 1.0, 1.2, 1.0)
_FLAT = (1.0,) * 12
_SUMMER = (0.4, 0.4, 0.6, 0.8, 1.2, 1.8, 2.4, 1.8, 1.0, 0.6, 0.4, 0.4)

BRIDGES: tuple[BridgeSpec, ...] = (
    BridgeSpec(("flooding", "transport"), _WINTER, (
        ("Floods close the Wendle Valley Line between {station} and {station2}",
         "Trains on the Wendle Valley Line were suspended between {station} and {station2} "
         "on {weekday} after the River Wendle flooded the track near {town}."),
        ("Coast Road shut as river floods the valley",
         "The Coast Road was closed between {town} and {town2} for {n_small} days after flood "
         "water from the Wendle covered the carriageway, and {route} was diverted."),
    )),
    BridgeSpec(("council", "schools"), _BUDGET, (
        ("Budget cuts to end free school buses for {n_big} pupils",
         "Free school buses for {n_big} pupils in {region} will end next year under budget "
         "cuts proposed by Harrowvale District Council, including the service to {school}."),
        ("Council tax rise to fund repairs at {school}",
         "Part of this year's council tax rise of {pct_small} per cent will pay for urgent "
         "repairs at {school}, councillors were told at a meeting of {committee}."),
    )),
    BridgeSpec(("housing", "flooding"), _FLAT, (
        ("Homes on the flood plain at {site} approved despite warnings",
         "Plans for {homes} homes at {site} have been approved, although the site flooded "
         "twice in the past decade and lies beside the River Wendle."),
        ("Developer told to pay for flood defences at {site}",
         "{developer} must pay for a new flood bank and storage pond before building homes at "
         "{site}, the planning committee has ruled."),
    )),
    BridgeSpec(("council", "arts"), _BUDGET, (
        ("Council cuts Lantern Festival grant by {pct} per cent",
         "Harrowvale District Council is to cut its grant to the Harrowvale Lantern Festival "
         "by {pct} per cent as part of savings of {money} in next year's budget."),
        ("Councillors vote to sell building used by the Old Ropeworks",
         "Councillors have voted to sell the council-owned building that houses the Old "
         "Ropeworks arts centre, as {committee} looks for ways to balance the budget."),
    )),
    BridgeSpec(("health", "transport"), _FLAT, (
        ("Bus cut leaves patients unable to reach Harrowvale General",
         "Patients from {town} say they can no longer reach Harrowvale General Hospital for "
         "appointments after Valelink Buses withdrew {route}."),
        ("Hospital shuttle bus to link valley villages",
         "A shuttle bus linking villages in the upper valley to Harrowvale General Hospital "
         "will start in {next_month}, paid for by the Harrowvale Health Trust."),
    )),
    BridgeSpec(("harbour", "flooding"), _WINTER, (
        ("Storm surge floods the quay at Wendlemouth",
         "A storm surge pushed the sea over the quay at Wendlemouth on {weekday} night, "
         "flooding the fish market and backing up the River Wendle as far as {town2}."),
        ("Tidal gates at Wendlemouth to be replaced",
         "The tidal gates that protect Wendlemouth harbour and the lower Wendle from the sea "
         "will be replaced at a cost of {money}, the Harbour Board and the Wendle Catchment "
         "Authority announced."),
    )),
    BridgeSpec(("farming", "flooding"), _WINTER, (
        ("Farmland at {farm} to store flood water for {town}",
         "Fields at {farm} will be allowed to flood in winter to protect homes downstream in "
         "{town}, under a scheme agreed with the Wendle Catchment Authority."),
        ("Flooded fields leave {crop} rotting on the Downs",
         "Farmers on the lower slopes of the Marrow Downs say {crop} has rotted in fields that "
         "have been under flood water from the Wendle since {month}."),
    )),
    BridgeSpec(("football", "housing"), _FLAT, (
        ("Athletic unveil plan to build homes at Quayside Park",
         "Wendlemouth Athletic want to build {homes} homes on part of Quayside Park and use "
         "the money to pay for a new stand, the club has told {paper}."),
        ("Planners reject homes on Herons' training pitch in {town2}",
         "Councillors have refused plans by {developer} to build homes on the training pitch "
         "used by Wendlemouth Athletic's youth teams in {town2}."),
    )),
    BridgeSpec(("schools", "health"), _FLAT, (
        ("Waiting lists grow for children's mental health service",
         "Pupils at {school} and other schools in {region} are waiting up to {n} weeks for "
         "mental health support, headteachers have told the Harrowvale Health Trust."),
        ("School nurses cut as health trust looks for savings",
         "The Harrowvale Health Trust is to reduce the number of school nurses in {region}, "
         "leaving {school} with a visit once a fortnight."),
    )),
    BridgeSpec(("harbour", "arts"), _SUMMER, (
        ("Lantern Festival moves its main stage to the North Quay",
         "The Harrowvale Lantern Festival will put its main stage on the North Quay at "
         "Wendlemouth this summer, beside the fish market and the working boats."),
        ("New play tells the story of the Wendlemouth fishing fleet",
         "{production}, a new play about the families of the Wendlemouth fishing fleet, opens "
         "at the Brindle Playhouse on {weekday}, with skippers from the harbour in the cast."),
    )),
    BridgeSpec(("transport", "housing"), _FLAT, (
        ("New station proposed for {homes} homes at {site}",
         "A new station on the Wendle Valley Line could serve {homes} homes planned at "
         "{site}, under proposals from {developer} and Saltreach Rail."),
        ("Housing estate at {site} left without a bus",
         "Residents of the new estate at {site} say they have been left without a bus, "
         "{n_small} years after {developer} promised one as part of the planning deal."),
    )),
)  # fmt: skip
