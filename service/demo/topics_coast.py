"""Demo vocabulary, the coast and the valley: harbour and fishing, flooding, farming.

Invented for ``tidemap demo`` only. Templates use ``{slot}`` names filled by
:mod:`service.demo.archive`; see :class:`service.demo.vocabulary.TopicSpec`.
"""

from __future__ import annotations

from service.demo.vocabulary import TopicSpec

HARBOUR = TopicSpec(
    key="harbour",
    section="Business",
    weight=0.08,
    months=(1.1, 1.0, 1.0, 1.0, 1.0, 1.1, 1.0, 0.9, 0.9, 1.0, 1.1, 1.0),
    roles=(
        "the harbour master at Wendlemouth",
        "chair of the Wendlemouth Fishermen's Cooperative",
        "skipper of {vessel}",
        "chief executive of the Wendlemouth Harbour Board",
        "coxswain of the Gullstone Point lifeboat",
    ),
    stories=(
        ("Wendlemouth fish market to close for {n_small} months",
         "The fish market on the North Quay at Wendlemouth will close for {n_small} months "
         "while it is rebuilt, the Wendlemouth Harbour Board has announced."),
        ("{catch} prices slump as buyers stay away",
         "Fishermen landing {catch} at Wendlemouth say prices have fallen by {pct} per cent "
         "since the start of the season."),
        ("Harbour Board approves {money} dredging plan",
         "The Wendlemouth Harbour Board has approved a {money} plan to dredge the harbour "
         "mouth, which has silted up so badly that larger boats can only enter at high tide."),
        ("Lifeboat rescues crew of {vessel} off Gullstone Point",
         "The Gullstone Point lifeboat rescued {n_small} crew from {vessel} after the fishing "
         "boat lost power in heavy seas on {weekday} night."),
        ("Young skippers wanted as Wendlemouth fleet shrinks to {fleet} boats",
         "The average age of a skipper in the Wendlemouth fleet of {fleet} boats is now over "
         "sixty, and the fishermen's cooperative is looking for young people to take over."),
        ("{n} new berths for visiting yachts at Wendlemouth",
         "Visiting yachts will be able to moor in the heart of Wendlemouth from {next_month} "
         "after the Harbour Board installed {n} new pontoon berths."),
        ("Harbour dues to rise by {pct} per cent for fishing boats",
         "Fishing boats using Wendlemouth harbour will pay {pct} per cent more in dues from "
         "April, angering the fishermen's cooperative."),
    ),
    body=(
        "About {fleet} boats still fish out of Wendlemouth, compared with more than a hundred "
        "in the {decade}.",
        "Most of the catch is {catch} and {catch2}, much of it sold to buyers abroad.",
        "The harbour mouth has been silting up since the storms of {early_year}.",
        "Skippers say fuel costs have risen by {pct} per cent in two years.",
        "The fishermen's cooperative runs the ice plant and the fish market on the North Quay.",
        "{vessel} has fished out of Wendlemouth for more than {n} years.",
        "The quay wall beside the lifeboat station needs repairs costing {money2}.",
        "Visitors to Wendlemouth often stop on the quay to watch the boats come in.",
        "The Harbour Board says income from moorings and visiting yachts helps keep dues down "
        "for fishermen.",
        "Crews land their catch in the early hours so it can reach the market by six.",
        "The lifeboat station at Gullstone Point is run entirely by volunteers.",
        "Quotas for {catch2} were cut again this year, the cooperative says.",
        "Several skippers have sold their boats and their licences in the past {n_small} years.",
        "The harbour employs {n} people directly and supports many more jobs in {town}.",
        "A fish and chip shop on the harbour front buys its {catch} straight off the boats.",
    ),
    quotes=(
        "The sea has always been hard, but the paperwork is harder",
        "If we lose the fish market we lose the harbour, and then we lose the town",
        "Without dredging the bigger boats will simply go elsewhere",
        "The crew did everything right, and thankfully everyone is safe",
        "There is a good living in fishing if young people are given a chance",
        "The harbour has to pay its way like everything else",
    ),
    voices=(
        "My father and grandfather fished out of this harbour, and I hope my son will too",
        "People come to Wendlemouth to see a working harbour, not a car park",
    ),
    slots=(
        ("vessel", ("the Morning Wren", "the Bright Tern", "the Kittiwake II",
                    "the Harvest Lass", "the Sea Sorrel", "the Gullstone Star")),
        ("catch", ("crab", "mackerel", "scallops", "lobster", "whelks", "sea bass")),
        ("fleet", ("thirty", "thirty-five", "forty")),
        ("decade", ("1970s", "1980s")),
    ),
)  # fmt: skip

FLOODING = TopicSpec(
    key="flooding",
    section="News",
    weight=0.07,
    # Floods come with winter storms and the spring thaw off the Downs.
    months=(2.6, 2.2, 1.2, 0.5, 0.3, 0.2, 0.3, 0.3, 0.5, 1.1, 2.0, 2.6),
    roles=(
        "chair of the Harrowvale Flood Partnership",
        "an engineer with the Wendle Catchment Authority",
        "a spokesperson for the fire and rescue service",
        "the council's emergency planning officer",
        "leader of the {town} flood action group",
    ),
    stories=(
        ("Homes flooded in {town} as the Wendle bursts its banks",
         "Dozens of homes in {town} were flooded on {weekday} night when the River Wendle "
         "burst its banks after {rain_days} days of heavy rain."),
        ("Flood wall at {defence} to be raised",
         "Work to raise {defence} by almost a metre will begin in {next_month}, the Wendle "
         "Catchment Authority has confirmed."),
        ("{street} residents evacuated as river reaches record level",
         "Residents of {street} in {town} were evacuated in the early hours of {weekday} as "
         "the River Wendle rose to its highest level on record."),
        ("{money} flood defence scheme for {town}",
         "A flood defence scheme worth {money} has been approved for {town}, where {n} homes "
         "were flooded in {last_year}."),
        ("Flood warnings from {town2} to Wendlemouth as more rain forecast",
         "Flood warnings are in force for the length of the Wendle valley, from {town2} down "
         "to Wendlemouth, as more heavy rain is forecast."),
        ("{town} flood victims still waiting for repairs",
         "Families whose homes were flooded in {town} last winter are still waiting for repairs "
         "to be finished, with some living upstairs or in caravans."),
        ("Sandbags handed out in {town} and {town2} as storm approaches",
         "The district council has opened sandbag stores in {town} and {town2} as a storm "
         "moving in from the sea threatens the low-lying streets of the valley."),
    ),
    body=(
        "The Wendle rose by more than {river_rise} metres in less than twelve hours.",
        "Water was knee deep on {street} by midnight, residents said.",
        "The Sallow Brook, which joins the Wendle at {town}, also overtopped its banks.",
        "{defence} held, but water came up through drains behind it.",
        "Firefighters used boats to reach elderly residents on {street2}.",
        "The Wendle Catchment Authority said {n} properties were affected across the valley.",
        "Rainfall on the Marrow Downs was {pct} per cent above the average for the month.",
        "Insurance premiums for homes near the river have doubled since {early_year}, "
        "residents say.",
        "The tidal gates at Wendlemouth were closed to stop the sea pushing up the river.",
        "A rest centre was opened at {town} leisure centre for people who had to leave home.",
        "The flood action group has its own river gauge and a phone tree to warn neighbours.",
        "The scheme includes a new embankment upstream of {town} and a pumping station.",
        "Engineers say the defences are designed for a flood expected once in a hundred "
        "years.",
        "Many residents have fitted flood doors and moved their sockets higher up the walls.",
        "Farmland upstream of {town2} has been turned into a storage area for flood water.",
        "The clean-up is expected to take {n_small} weeks.",
    ),
    quotes=(
        "The defences did their job, but the water found another way in",
        "Please do not drive through flood water, it is deeper and faster than it looks",
        "This scheme will protect hundreds of homes for generations",
        "We have been promised defences for years and we are still waiting",
        "Residents should sign up for flood warnings and keep a bag packed",
    ),
    voices=(
        "We watched the water come under the door and there was nothing we could do",
        "Every time it rains hard we lie awake listening to the river",
        "We lost the kitchen, the carpets and most of the photographs",
    ),
    slots=(
        ("defence", ("the Mill Quay flood wall", "the Tollgarth embankment",
                     "the flood wall on Ferry Road", "the Sallowby flood barrier")),
        ("rain_days", ("three", "four", "five")),
        ("river_rise", ("two", "three")),
    ),
)  # fmt: skip

FARMING = TopicSpec(
    key="farming",
    section="Country",
    weight=0.05,
    # Lambing in spring, the agricultural show in August, harvest into the autumn.
    months=(0.6, 0.8, 1.5, 1.6, 1.0, 0.9, 1.1, 1.9, 1.4, 1.0, 0.6, 0.5),
    roles=(
        "who farms {livestock} at {farm}",
        "chair of the Vale Growers' Union",
        "secretary of the Harrowvale Agricultural Show",
        "a contractor from {town}",
        "who runs the farm shop at {farm}",
    ),
    stories=(
        ("Wettest spring in {n} years leaves {crop} unplanted",
         "Farmers across {region} say they have been unable to plant {crop} after the wettest "
         "spring in {n} years left fields waterlogged."),
        ("{show_crowd} flock to Harrowvale Agricultural Show",
         "More than {show_crowd} people visited the Harrowvale Agricultural Show at {farm} on "
         "{weekday}, the biggest crowd in the show's history."),
        ("Dry summer hits {crop} harvest",
         "Yields of {crop} on the Marrow Downs are down by {pct} per cent after a long dry "
         "summer, the Vale Growers' Union says."),
        ("{n} sheep killed or injured in dog attacks on the Downs",
         "Farmers on the Marrow Downs have urged dog walkers to keep their pets on leads after "
         "{n} sheep were killed or injured in {n_small} attacks."),
        ("Late frost hits orchards and {crop} in the valley",
         "A late frost has damaged blossom in orchards and young {crop} across the Wendle "
         "valley, threatening this year's harvest."),
        ("Young farmers take over family land at {farm}",
         "A brother and sister in their twenties have taken over {farm}, where their family "
         "has farmed {livestock} for four generations."),
    ),
    body=(
        "{farm} covers about {acres} acres on the slopes of the Marrow Downs.",
        "Lambing on the hill farms usually begins in {lambing_month}.",
        "Feed and fertiliser prices have risen by {pct} per cent since {last_year}.",
        "The Vale Growers' Union represents about {n_big} farms across {region}.",
        "Many farmers now sell {crop} and meat directly through farm shops and markets.",
        "The ground was too wet for tractors until well into {month}.",
        "Rainfall on the Downs was {pct} per cent above the average for the season.",
        "Cider makers in the valley buy most of the apples grown around {town}.",
        "The show's {livestock} classes drew entries from as far away as {town2}.",
        "Farmers say the weather has become harder to predict from one year to the next.",
        "Some hill farms have planted hedges and trees to slow the water running off the "
        "slopes.",
        "Young people are leaving farming because they cannot afford land, the union says.",
        "The farm employs {n_small} people full time and takes on seasonal workers at harvest.",
        "Prices at the Kelderby livestock market held steady this month.",
    ),
    quotes=(
        "You cannot farm against the weather, you just have to take what comes",
        "Every year it seems to be either too wet or too dry",
        "The show is the one day of the year the whole valley comes together",
        "Keep your dog on a lead near sheep, it really is that simple",
        "We want to farm this land for another four generations",
        "Prices for what we grow have not kept up with what it costs to grow it",
    ),
    voices=(
        "We walk on the Downs every day, and we always keep the dog on a lead",
        "The farm shop is the first place I go on a Saturday morning",
    ),
    slots=(
        ("farm", ("Hollowmere Farm", "Downsend Farm", "Cold Harbour Farm",
                  "Brackenlea Farm", "Quillham Manor Farm")),
        ("crop", ("barley", "potatoes", "cider apples", "wheat", "oilseed rape")),
        ("livestock", ("sheep", "beef cattle", "dairy cows")),
        ("acres", ("300", "450", "620", "900")),
        ("show_crowd", ("12,000", "14,500", "17,000")),
        ("lambing_month", ("March", "April")),
    ),
)  # fmt: skip

COAST_TOPICS: tuple[TopicSpec, ...] = (HARBOUR, FLOODING, FARMING)
