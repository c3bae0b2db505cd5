"""Demo vocabulary, public services: schools and exam results, hospital and health services.

Invented for ``tidemap demo`` only. Templates use ``{slot}`` names filled by
:mod:`service.demo.archive`; see :class:`service.demo.vocabulary.TopicSpec`.
"""

from __future__ import annotations

from service.demo.vocabulary import TopicSpec

SCHOOLS = TopicSpec(
    key="schools",
    section="Education",
    weight=0.11,
    # Results in August, new term in September, inspections through the school year.
    months=(0.9, 0.9, 1.0, 0.9, 0.8, 1.0, 0.6, 2.4, 1.6, 1.0, 0.9, 0.7),
    roles=(
        "headteacher of {school}",
        "chair of governors at {school}",
        "the council's cabinet member for children and education",
        "deputy headteacher at {school}",
        "regional secretary of the teachers' union",
    ),
    stories=(
        ("Record exam results at {school}",
         "Students at {school} celebrated their best exam results on record on {weekday}, "
         "with {pct} per cent achieving top grades."),
        ("Inspectors praise {school} after turnaround",
         "{school}, which was placed in special measures {n_small} years ago, has been rated "
         "good by inspectors in a report published this week."),
        ("Parents protest over plan to close {school}",
         "Parents have launched a campaign against proposals to close {school}, which has "
         "{pupils} pupils on its roll."),
        ("{school} to get new science block",
         "{school} is to get a new science block worth {money} after the funding was "
         "confirmed on {weekday}."),
        ("{n} teaching posts unfilled as {region} schools return",
         "Schools across {region} began the term with {n} teaching posts unfilled, according "
         "to figures seen by {paper}."),
        ("Pupils at {school} raise {money_k} for charity",
         "Pupils at {school} have raised {money_k} for charity through a sponsored walk along "
         "the Wendle from {town} to {town2}."),
        ("Falling rolls threaten village schools around {town}",
         "Small village schools around {town} face an uncertain future as the number of "
         "children starting primary school in {region} falls for the {ordinal} year running."),
    ),
    body=(
        "{school} has {pupils} pupils, many of whom travel in from the surrounding villages.",
        "The headteacher said the results reflected years of hard work by staff and pupils.",
        "Inspectors said behaviour in lessons was good and pupils felt safe.",
        "The proportion of pupils passing English and maths rose to {pct} per cent.",
        "Parents said they had not been consulted before the proposals were published.",
        "The school's roof leaks in several classrooms and the heating system dates from the "
        "{decade}.",
        "Among the top performers this year was {student}, who achieved top grades in "
        "{subject} and {subject2}.",
        "Teachers at {school} have had to cover lessons in {subject} for most of the year.",
        "The nearest alternative school is {n_small} miles away in {town2}.",
        "The governors will make a final decision on the future of the school in {next_month}.",
        "Funding per pupil in {region} is below the national average, the council says.",
        "{school2} reported similarly strong results this summer.",
        "The breakfast club at the school now feeds {n} children every morning.",
        "Many of the pupils hope to go on to study {subject} at college or university.",
        "Staff were told about the changes at a meeting after school on {weekday}.",
        "Uniform costs and school trips have become a real worry for families, the school says.",
    ),
    quotes=(
        "I could not be prouder of our students and our staff",
        "A village without a school is a village without a future",
        "We cannot recruit teachers when they cannot afford to live here",
        "The inspectors saw what we see every day, which is a school on the way up",
        "Our children deserve classrooms that are warm and dry",
        "The results are a credit to every teacher in the building",
    ),
    voices=(
        "My daughter has been so happy there, and I do not want her to move",
        "We chose the village school because every teacher knows every child",
        "My son was so nervous opening the envelope, but it was worth it",
    ),
    slots=(
        ("school", ("Kelderby Academy", "Sallowby High School", "Wendlemouth Community College",
                    "Tollgarth Primary School", "Brindlecombe Primary School",
                    "Fennick Cross Junior School")),
        ("subject", ("maths", "history", "chemistry", "art", "music", "computing", "biology")),
        ("student", ("Maren Istwick", "Jory Fallowfield", "Cerys Hallowell",
                     "Nye Coppinger")),
        ("pupils", ("140", "212", "486", "903", "1,150")),
        ("decade", ("1960s", "1970s")),
    ),
)  # fmt: skip

HEALTH = TopicSpec(
    key="health",
    section="Health",
    weight=0.10,
    # Winter pressure stories dominate December to February.
    months=(2.0, 1.6, 1.1, 0.9, 0.8, 0.7, 0.7, 0.7, 0.8, 1.0, 1.3, 1.8),
    roles=(
        "chief executive of the Harrowvale Health Trust",
        "a consultant at Harrowvale General Hospital",
        "chair of the Harrowvale patients' forum",
        "a GP in {town}",
        "the trust's director of nursing",
    ),
    stories=(
        ("Emergency patients wait {hours} hours at Harrowvale General",
         "Patients at the emergency department of Harrowvale General Hospital waited an "
         "average of {hours} hours to be seen last month, the longest on record."),
        ("Fears for {unit} at Fennick Cross",
         "Campaigners fear {unit} at Fennick Cross Community Hospital could be moved to "
         "Harrowvale General as part of a review of services."),
        ("GP surgery in {town} to close its doors",
         "The only GP surgery in {town} is to close, leaving {patients} patients to register "
         "elsewhere, the Harrowvale Health Trust has confirmed."),
        ("Harrowvale General declares critical incident as {n} wait for beds",
         "Harrowvale General Hospital declared a critical incident on {weekday} after every "
         "bed in the hospital was occupied and {n} patients were waiting for one."),
        ("New {unit} opens at Harrowvale General",
         "A new {unit} worth {money} has opened at Harrowvale General Hospital, the Harrowvale "
         "Health Trust said on {weekday}."),
        ("Ambulance waits around {town} among longest in the region",
         "People in the villages around {town} are waiting longer for an ambulance than almost "
         "anywhere else in the region, figures show."),
        ("{n} nurses recruited from overseas for Harrowvale General",
         "Harrowvale General Hospital has recruited {n} nurses from overseas to fill "
         "vacancies on its wards."),
    ),
    body=(
        "The Harrowvale Health Trust said demand had risen sharply over the past {n_small} "
        "weeks.",
        "More than {n} patients were waiting for a bed on {weekday} morning.",
        "The trust has {vacancies} nursing vacancies and relies heavily on agency staff.",
        "The waiting list for planned operations has grown to {n_big} people.",
        "Patients in {town} face a round trip of more than an hour to reach Harrowvale General.",
        "The trust is urging people to use pharmacies and the advice line for minor "
        "illnesses.",
        "Ambulances were queuing outside the emergency department for much of the evening.",
        "The review of services at Fennick Cross Community Hospital will report in "
        "{next_month}.",
        "Staff sickness rates have risen to {pct_small} per cent, the highest in the region.",
        "A petition to protect {unit} has gathered {n_big} signatures.",
        "The trust said no decision had been made and that patients would be consulted.",
        "The GP practice in {town2} has agreed to take on some of the patients.",
        "Hospital managers say {pct} per cent of patients who are fit to leave cannot go home "
        "because care is not available.",
        "{unit2} at the hospital has been closed to new admissions twice this year.",
        "Volunteers from the League of Friends run the hospital shop and a patient transport "
        "service.",
    ),
    quotes=(
        "Our staff are working incredibly hard under enormous pressure",
        "Please only come to the emergency department if it is a genuine emergency",
        "This unit means families in {region} will no longer have to travel for treatment",
        "The review has not decided anything yet, and patients will be heard",
    ),
    voices=(
        "People should not have to travel an hour to see a doctor",
        "We were told our local hospital was safe, and now we are not so sure",
        "My mother waited on a trolley in a corridor for most of the night",
    ),
    slots=(
        ("unit", ("the maternity unit", "the minor injuries unit", "the stroke unit",
                  "the children's ward", "the cancer day unit", "the dialysis unit")),
        ("hours", ("five", "six", "seven", "nine")),
        ("patients", ("3,400", "4,800", "6,100")),
        ("vacancies", ("64", "88", "112", "140")),
    ),
)  # fmt: skip

SERVICE_TOPICS: tuple[TopicSpec, ...] = (SCHOOLS, HEALTH)
