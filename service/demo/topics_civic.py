"""Demo vocabulary, civic topics: council budget and local tax, housing and planning, transport.

Invented for ``tidemap demo`` only. Templates use ``{slot}`` names filled by
:mod:`service.demo.archive`; see :class:`service.demo.vocabulary.TopicSpec`.
"""

from __future__ import annotations

from service.demo.vocabulary import TopicSpec

COUNCIL = TopicSpec(
    key="council",
    section="Politics",
    weight=0.17,
    # Budgets are set in late winter; the autumn brings the first warnings.
    months=(1.6, 2.4, 2.0, 0.9, 0.7, 0.6, 0.6, 0.4, 0.8, 1.0, 1.2, 1.0),
    roles=(
        "leader of Harrowvale District Council",
        "the council's cabinet member for finance",
        "leader of the opposition group on the council",
        "the council's chief executive",
        "chair of the council's scrutiny panel",
    ),
    stories=(
        ("Council tax to rise by {pct_small} per cent across {region}",
         "Households in {region} will pay {pct_small} per cent more in council tax from April "
         "after councillors approved the budget at a meeting in {town} on {weekday} night."),
        ("Council faces {money} gap as reserves run low",
         "Harrowvale District Council must find savings of {money} over the next two years, "
         "according to a report that will go before {committee} next week."),
        ("Cuts to {service} proposed in draft budget",
         "Cuts to {service} are among the savings proposed in the draft budget published by "
         "Harrowvale District Council on {weekday}."),
        ("Opposition calls for inquiry into sale of {building}",
         "Opposition councillors have called for an independent inquiry into the sale of "
         "{building}, which they say was sold for {money_k} less than it was worth."),
        ("Councillors approve {money} spending plan",
         "A spending plan worth {money} was approved by {committee} on {weekday}, despite "
         "objections from members of {party}."),
        ("Band D bill to pass {band_d} after budget vote",
         "The council tax bill for a Band D home in {region} will pass {band_d} for the first "
         "time after the district council voted through its budget for {next_year}."),
        ("Council leader defends cuts to {service}",
         "The leader of Harrowvale District Council has defended plans to cut {service}, "
         "saying the authority has no choice if it is to balance its books."),
        ("{party} demand vote on {service}",
         "Councillors from {party} have forced a vote on the future of {service} after "
         "a petition signed by {n_big} residents of {town} was handed in at {building}."),
        ("Council to spend {money_k} on repairs at {building}",
         "Harrowvale District Council is to spend {money_k} on urgent repairs to {building}, "
         "where water has been coming through the roof since {month}."),
        ("Auditors warn council could run out of reserves in {n_small} years",
         "External auditors have warned that Harrowvale District Council could run out of "
         "reserves within {n_small} years unless it makes deeper savings."),
    ),
    body=(
        "The council's own figures show spending on {service} has fallen by {pct} per cent "
        "since {last_year}.",
        "The proposals will be debated by {committee} before a final vote in {next_month}.",
        "Councillors from {party} said the cuts would fall hardest on {town2}.",
        "Rising energy bills and the cost of adult social care have added {money2} to the "
        "council's costs this year.",
        "The authority has already closed {n_small} public buildings and shared staff with "
        "neighbouring districts.",
        "Members of {party2} walked out of the meeting before the vote was taken.",
        "The council tax precept for {town} will also rise, by a further {money_k} in total.",
        "A public consultation on the budget received {n_big} responses, most of them opposed "
        "to the cuts to {service2}.",
        "Officers said the savings would be found partly by leaving {n} vacant posts unfilled.",
        "The budget papers describe the council's reserves as being at their lowest level "
        "for a decade.",
        "Council staff were told of the proposals at a briefing held at {building2}.",
        "Opposition members proposed an amendment to protect {service2}, which was defeated by "
        "{n_small} votes.",
        "The district receives less government grant per head than any of its neighbours, "
        "the council says.",
        "Campaigners gathered outside {building} before the meeting, holding placards.",
        "A final decision on {service} is expected when {committee} meets in {next_month}.",
        "Harrowvale District Council employs about {n_big} people, a third fewer than in "
        "{early_year}.",
        "The council has promised to publish a full list of the savings before the vote.",
        "Parish councils in {town} and {town2} have also been asked to cover some of the cost.",
    ),
    quotes=(
        "Nobody goes into local government to cut services, but the money simply is not there",
        "This budget protects the things residents care about most",
        "The administration has run down the reserves and now residents are paying the price",
        "We have asked for a fair settlement year after year and we have not had one",
        "We will keep every library open, and I want to be clear about that",
        "The numbers do not add up, and the auditors have said as much",
    ),
    voices=(
        "People in {town2} will look at this and ask what they get for their council tax",
        "Every year we pay more and every year we get less",
        "I used the library every week, and now I do not know where I will go",
    ),
    slots=(
        ("committee", ("the finance committee", "the cabinet", "the scrutiny panel",
                       "the full council")),
        ("service", ("library opening hours", "street cleaning", "public toilets",
                     "grass cutting on verges", "the mobile library", "youth clubs",
                     "leisure centre subsidies", "garden waste collections")),
        ("party", ("the Vale Independents", "the Coastal Alliance",
                   "the Harrowvale Progressives")),
        ("building", ("the Guildhall in Tollgarth", "the old council offices on Bridge Street",
                      "the Corn Exchange in Sallowby", "the former magistrates' court")),
        ("band_d", ("£1,842", "£1,907", "£1,966", "£2,014", "£2,083")),
    ),
)  # fmt: skip

HOUSING = TopicSpec(
    key="housing",
    section="News",
    weight=0.12,
    months=(0.9, 1.0, 1.1, 1.1, 1.0, 1.0, 0.9, 0.8, 1.0, 1.1, 1.1, 0.8),
    roles=(
        "the council's cabinet member for planning",
        "a director of Cressbrook Homes",
        "chair of the {town} Residents' Association",
        "chair of the planning committee",
        "a spokesperson for the Harrowvale Housing Partnership",
    ),
    stories=(
        ("Plans for {homes} homes at {site} go before planners",
         "Plans for {homes} new homes at {site}, on the edge of {town}, will be decided by the "
         "district council's planning committee on {weekday}."),
        ("Residents fight housing scheme at {site}",
         "More than {n_big} residents have objected to a scheme by {developer} to build "
         "{homes} houses at {site}."),
        ("Affordable homes promise cut from {site} scheme",
         "The number of affordable homes in the development at {site} has been cut from "
         "{n} to {n_small} after {developer} said the scheme would otherwise not be viable."),
        ("Waiting list for council homes reaches {n_big}",
         "The number of households on the housing waiting list in {region} has reached "
         "{n_big}, the highest figure the district has recorded."),
        ("Planners approve {homes} homes despite objections",
         "Councillors have approved plans for {homes} homes at {site} despite objections "
         "from residents and the parish council in {town}."),
        ("Local plan sets out sites for {local_plan_homes} new homes",
         "A draft local plan published on {weekday} sets out sites for {local_plan_homes} new "
         "homes across {region} over the next fifteen years."),
        ("Second homes blamed for rising rents in {town}",
         "Campaigners say second homes and holiday lets are pushing rents in {town} beyond "
         "the reach of young families."),
    ),
    body=(
        "The site at {site} is currently farmland and lies outside the village boundary.",
        "{developer} says {pct} per cent of the homes would be offered at below market rents.",
        "Objectors say the roads around {street} cannot cope with the extra traffic.",
        "The parish council in {town} has voted unanimously to oppose the application.",
        "The average house in {town} now sells for {house_price}, more than ten times the "
        "average local wage.",
        "Planning officers have recommended the scheme for approval, subject to conditions.",
        "The application includes a new play area, a footpath to {town2} and a small shop.",
        "Residents say the nearest primary school and GP surgery are already full.",
        "The district council must show it has land for {n_big} homes a year or risk losing "
        "control of where they are built.",
        "An earlier application for the same site was refused in {last_year}.",
        "Around {pct} per cent of properties in {town2} are now second homes or holiday lets.",
        "The developer has offered {money_k} towards improvements to the junction at {street}.",
        "Young people who grew up in {town} say they can no longer afford to live there.",
        "The planning committee visited the site at {site} before making its decision.",
        "Housing associations in {region} have {n} homes under construction this year.",
        "The drainage plans for the site have been questioned by neighbours on {street2}.",
    ),
    quotes=(
        "These are homes for local people, and we need them badly",
        "Nobody is against new homes, but this is the wrong place for them",
        "The roads, the schools and the surgery are already at breaking point",
        "We have listened to residents and changed the design a great deal",
        "The local plan gives us a say over where homes go, rather than leaving it to appeals",
    ),
    voices=(
        "My children will never be able to buy a house in the village they grew up in",
        "The lane outside my house is already a rat run at school time",
        "We need homes for young families, not more holiday lets",
    ),
    slots=(
        ("site", ("Orchard Fields", "the former gasworks site", "Kiln Meadow",
                  "Hollins Farm", "the old tannery yard", "Bramble Hill")),
        ("developer", ("Cressbrook Homes", "Valeview Developments", "Saltreach Estates")),
        ("homes", ("48", "72", "96", "120", "165", "240")),
        ("house_price", ("£284,000", "£312,500", "£347,000", "£365,000")),
        ("local_plan_homes", ("5,400", "6,150", "7,200")),
    ),
)  # fmt: skip

TRANSPORT = TopicSpec(
    key="transport",
    section="News",
    weight=0.09,
    # Timetables change in May and December; winter brings cancellations.
    months=(1.2, 1.1, 1.0, 0.9, 1.3, 0.9, 0.9, 0.9, 1.0, 1.0, 1.0, 1.4),
    roles=(
        "managing director of Valelink Buses",
        "a spokesperson for Saltreach Rail",
        "chair of the Wendle Valley Line Users' Group",
        "the council's cabinet member for transport",
        "operations manager at Saltreach Rail",
    ),
    stories=(
        ("{route} bus service to be axed",
         "Valelink Buses is to withdraw {route} between {town} and {town2} from {next_month}, "
         "saying too few passengers use it."),
        ("{n} Wendle Valley Line trains cancelled as driver shortage bites",
         "Saltreach Rail cancelled {n} trains on the Wendle Valley Line last week because of "
         "a shortage of drivers."),
        ("New timetable brings more trains to {station}",
         "Passengers at {station} will get {n_small} extra trains a day when the new timetable "
         "starts in {next_month}."),
        ("Fares rise by {pct_small} per cent on valley buses",
         "Bus fares across {region} will rise by {pct_small} per cent from {next_month}, "
         "Valelink Buses has announced."),
        ("Campaign to reopen {closed_station} gathers pace",
         "A campaign to reopen {closed_station}, which closed to passengers in the {decade}, has "
         "won the support of {n} local businesses."),
        ("Roadworks on the Coast Road to last {n_small} months",
         "Drivers face {n_small} months of delays on the Coast Road between {town} and "
         "{town2} while the carriageway is rebuilt."),
        ("Level crossing at {station} to be replaced by bridge",
         "The level crossing beside {station} is to be replaced by a footbridge at a cost of "
         "{money}, Saltreach Rail said."),
    ),
    body=(
        "The {route} service carries about {n_big} passengers a week, many of them pensioners.",
        "Passengers complain that trains on the Wendle Valley Line are often late and crowded.",
        "The council has stopped subsidising {n_small} rural bus routes since {early_year}.",
        "The line between {station} and {station2} is single track for most of its length.",
        "The last bus from {town} now leaves at half past six in the evening.",
        "Saltreach Rail says {pct} per cent of trains arrived on time last year.",
        "Villagers in {town2} say they would be cut off without a bus.",
        "The rail users' group has collected {n_big} signatures on a petition.",
        "A replacement bus service will run while the work is carried out.",
        "Young people from {town} rely on {route} to get to college in {town2}.",
        "The station car park at {station} is full by eight o'clock most mornings.",
        "Valelink Buses says it has struggled to recruit drivers since {last_year}.",
        "The council is looking at whether a community minibus could replace the service.",
        "Journeys on the valley buses have not returned to the levels seen before {early_year}.",
        "The Coast Road is the only route into Wendlemouth for lorries serving the harbour.",
    ),
    quotes=(
        "We simply cannot run a service that nobody uses",
        "The valley deserves a railway that runs on time",
        "Every passenger we lose to the car is very hard to win back",
        "Reopening the station would bring the village back to life",
        "We apologise to passengers for the disruption and are doing all we can",
    ),
    voices=(
        "Without the bus I cannot get to the hospital or the shops",
        "Half the time the train is late and the other half it does not turn up",
        "I gave up my car when I retired, so the bus is my lifeline",
    ),
    slots=(
        ("route", ("the number 14", "the X7 coastal service", "the number 31",
                   "the number 9 hill route", "the Sunday market bus")),
        ("station", ("Tollgarth station", "Sallowby station", "Kelderby station",
                     "Wendlemouth station", "Brindlecombe Halt")),
        ("closed_station", ("Quillham Road station", "Marrowby Junction",
                            "Gullstone Sands station", "Kelderby Moor Halt")),
        ("decade", ("1960s", "1970s")),
    ),
)  # fmt: skip

CIVIC_TOPICS: tuple[TopicSpec, ...] = (COUNCIL, HOUSING, TRANSPORT)
