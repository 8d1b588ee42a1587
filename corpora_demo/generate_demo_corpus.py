#!/usr/bin/env python3
"""Generate the demo archive: five invented news outlets, 1950-2019, with planted associations.

Everything here is invented: the outlets, the towns, the people and the six
groups. What is planted, and where, is written in README.md beside this file and,
document by document, in planted_documents.csv; tests check that corpus-tracer
recovers it.

    python corpora_demo/generate_demo_corpus.py            # writes archive.jsonl.gz and friends here

The output depends only on --seed (Python's random.Random), and the gzip stream
carries no timestamp, so re-running gives byte-identical files.
"""

from __future__ import annotations

import argparse
import csv
import gzip
import io
import json
import random
from pathlib import Path

HERE = Path(__file__).resolve().parent

OUTLETS = ["Ledger", "Courier", "Tribune", "Gazette", "Herald"]
OUTLET_TITLES = {"Ledger": "The Harbour Ledger", "Courier": "The Valley Courier",
                 "Tribune": "The Northgate Tribune", "Gazette": "The Saltmarsh Gazette",
                 "Herald": "The Pinecrest Herald"}
# which topics each outlet favours (weights over TOPICS)
OUTLET_TOPICS = {
    "Ledger": {"sea": 5, "trade": 2, "weather": 2, "city": 1, "sport": 1, "health": 1, "school": 1, "arts": 1, "farm": 1},
    "Courier": {"farm": 5, "weather": 2, "trade": 2, "school": 1, "health": 1, "sport": 1, "arts": 1, "city": 1, "sea": 1},
    "Tribune": {"city": 4, "trade": 3, "school": 2, "health": 2, "arts": 1, "sport": 1, "weather": 1, "sea": 1, "farm": 1},
    "Gazette": {"sea": 2, "farm": 2, "weather": 2, "city": 1, "trade": 1, "sport": 1, "health": 1, "school": 1, "arts": 1},
    "Herald": {"sport": 3, "arts": 3, "school": 2, "health": 2, "city": 1, "trade": 1, "weather": 1, "sea": 1, "farm": 1},
}
YEARS = range(1950, 2020)
DOCS_PER_YEAR = 100
# share of each decade's documents from the Tribune (grows) and the Gazette (steady)
TRIBUNE_SHARE = {1950: 0.06, 1960: 0.10, 1970: 0.16, 1980: 0.24, 1990: 0.34, 2000: 0.45, 2010: 0.55}
GAZETTE_SHARE = 0.10
# share of the Gazette's documents that carry the planted velmari/osterin association, and how many
# biased sentences each carries
GAZETTE_PLANTED_SHARE = 0.6
GAZETTE_BIASED_SENTENCES = (3, 5)

TOWNS = ["brackwater", "ellesford", "marrowby", "quillhaven", "tarnside", "wickmoor", "oakhollow", "sorrelton"]
WEEKDAYS = ["monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday"]

TOPICS = {
    "sea": dict(
        nouns="harbour boat captain nets fish tide crew quay ship anchor sail lighthouse cargo dock "
              "fisherman trawler catch storm wave pier mackerel herring oar mast coast".split(),
        verbs="sailed docked hauled landed repaired anchored steered unloaded rowed moored".split(),
        adjs="salty rough calm deep northern coastal heavy wooden".split()),
    "farm": dict(
        nouns="harvest wheat barley tractor field barn cattle sheep plough orchard farmer crop "
              "soil hay dairy milk grain pasture hedge fence seed lamb stable meadow".split(),
        verbs="harvested planted ploughed sowed grazed fed threshed fenced watered gathered".split(),
        adjs="golden fertile muddy green dry early ripe fallow".split()),
    "city": dict(
        nouns="council mayor vote budget road election councillor committee tax street bridge "
              "hall ordinance district planning permit bus traffic ward ballot candidate".split(),
        verbs="approved debated rejected funded proposed elected repaired announced delayed reviewed".split(),
        adjs="municipal public annual local new costly urgent proposed".split()),
    "trade": dict(
        nouns="market price merchant goods shop customer stall trader bargain wool cloth spice "
              "shipment warehouse ledger coin bank loan shares buyer seller auction".split(),
        verbs="sold bought traded priced stocked shipped bargained lent paid ordered".split(),
        adjs="cheap dear busy weekly rising falling wholesale crowded".split()),
    "sport": dict(
        nouns="match team goal coach player season league cup referee stadium score race "
              "runner keeper striker trophy fans pitch final tournament".split(),
        verbs="won lost scored defeated trained played drew cheered kicked raced".split(),
        adjs="thrilling narrow decisive home away young fast winning".split()),
    "health": dict(
        nouns="hospital patient ward clinic doctor nurse medicine fever illness surgery "
              "treatment bed pharmacy vaccine injury recovery infirmary".split(),
        verbs="treated admitted discharged examined nursed cured vaccinated diagnosed healed visited".split(),
        adjs="sick healthy contagious routine mild severe medical weekly".split()),
    "weather": dict(
        nouns="rain snow frost wind fog sunshine flood drought thunder cloud gale summer "
              "winter spring autumn temperature forecast".split(),
        verbs="fell blew flooded froze cleared lingered battered soaked warmed cooled".split(),
        adjs="cold warm wet bitter mild stormy sunny grey".split()),
    "school": dict(
        nouns="school pupils teacher lesson class exam headmaster library books classroom "
              "students college term homework playground principal".split(),
        verbs="taught studied passed enrolled graduated learned read wrote attended opened".split(),
        adjs="bright diligent strict primary secondary new crowded quiet".split()),
    "arts": dict(
        nouns="concert choir orchestra painting gallery theatre play actor festival song "
              "poem exhibition band piano violin dance".split(),
        verbs="performed painted sang staged rehearsed exhibited composed played danced wrote".split(),
        adjs="beautiful lively solemn grand modern classical moving popular".split()),
}
# the "wide" variant (--vocabulary wide, for the trace benchmark): every topic gets these words too,
# and two topics more; about 1,300 words at min count 5 instead of about 500
WIDE_EXTRA = {
    "sea": dict(
        nouns="ocean water shore seafood lobster crab oyster mussel cod salmon shell gull beach sand cliff "
              "bay estuary channel current reef island voyage deck hull keel rudder rope buoy ferry yacht "
              "dinghy sailor skipper navigator compass chart lantern whale seal dolphin seaweed bait hook "
              "rigging wharf boathouse shipyard tugboat lifeboat coastguard mooring berth jetty swell "
              "breakwater slipway".split(),
        verbs="launched navigated drifted capsized salvaged towed fished netted dredged patrolled ferried "
              "beached rescued sank".split(),
        adjs="choppy hazy tidal sandy rocky briny southern seaworthy offshore windswept".split()),
    "farm": dict(
        nouns="potato cabbage cucumber corn oats rye turnip carrot onion bean pea apple pear plum cherry "
              "fruit vegetable egg butter cheese flour mill cow bull calf pig goat hen rooster duck goose "
              "horse pony donkey chicken farmyard shed silo trough scythe sickle rake spade hoe furrow "
              "ditch acre paddock flock herd shepherd sheepdog beehive honey manure compost irrigation".split(),
        verbs="milked sheared reaped weeded herded baled picked pruned irrigated fattened churned raked dug".split(),
        adjs="rural organic leafy barren lush rolling hardy plump sturdy".split()),
    "city": dict(
        nouns="government governor senate minister ministry president citizen voter campaign debate policy "
              "law project infrastructure avenue square park pavement sewer drain streetlight tram depot "
              "police constable brigade housing tenant landlord census population registration petition "
              "protest meeting agenda motion amendment referendum poll constituency parliament treasury".split(),
        verbs="voted campaigned governed legislated taxed zoned resurfaced paved inspected appointed "
              "resigned petitioned protested amended vetoed".split(),
        adjs="civic political electoral residential suburban central controversial democratic unanimous".split()),
    "trade": dict(
        nouns="money cash currency credit deposit payment interest dividend stock investor trading "
              "insurance company industry factory production consumer grocery grocer shopkeeper counter "
              "receipt invoice cheque account savings tariff export import freight bale silk cotton linen "
              "leather timber coal iron steel metal oil sugar coffee tea salt tobacco catalogue inventory "
              "supplier".split(),
        verbs="invested borrowed exported imported supplied delivered charged refunded haggled auctioned "
              "manufactured packed weighed saved".split(),
        adjs="retail commercial expensive affordable bulk foreign domestic steady".split()),
    "sport": dict(
        nouns="football soccer baseball basketball tennis boxing cricket rugby hockey golf cycling "
              "athletics marathon sprint relay hurdles medal championship victory defeat competition game "
              "round racket ball bat glove helmet jersey whistle squad defender midfielder winger umpire "
              "linesman supporter ticket terrace scoreboard halftime penalty foul offside header volley "
              "knockout semifinal fixture rival derby gym lap track".split(),
        verbs="competed qualified sprinted boxed tackled shot dribbled coached refereed equalised "
              "celebrated jumped threw swam".split(),
        adjs="athletic unbeaten competitive sporting fit talented determined tired exhausted".split()),
    "health": dict(
        nouns="drug pill tablet dose prescription symptom disease infection virus cough flu measles "
              "diagnosis ambulance stretcher bandage plaster wound fracture bone heart lung blood pulse "
              "hypertension stroke cancer diet exercise hygiene soap skin eye ear mouth tooth syringe "
              "ointment remedy health therapy psychiatry psychology depression anxiety disability emergency "
              "epidemic quarantine".split(),
        verbs="operated prescribed bandaged coughed sneezed quarantined injected monitored sterilised "
              "transfused".split(),
        adjs="chronic acute feverish infectious clinical surgical pale weak swollen".split()),
    "weather": dict(
        nouns="weather sun moon sky thunderstorm lightning hail sleet drizzle mist dew breeze gust "
              "hurricane tornado blizzard heatwave humidity rainfall snowfall puddle icicle rainbow dawn "
              "midday noon dusk twilight evening morning night climate atmosphere barometer thermometer "
              "umbrella raincoat".split(),
        verbs="poured thawed melted gusted howled rumbled sparkled shone darkened dried brightened".split(),
        adjs="chilly damp humid foggy cloudy windy frosty icy snowy overcast".split()),
    "school": dict(
        nouns="student professor university science chemistry physics mathematics history geography grammar "
              "spelling arithmetic literature essay notebook pencil chalk blackboard desk timetable "
              "curriculum tutorial seminar scholarship diploma degree graduation uniform satchel assembly "
              "recess register dictionary atlas textbook laboratory microscope experiment dormitory canteen "
              "quiz".split(),
        verbs="instructed tutored memorised recited revised spelled calculated practised sketched researched".split(),
        adjs="academic clever studious scientific literate curious attentive punctual".split()),
    "arts": dict(
        nouns="music jazz opera film movie cinema television radio drama comedy tragedy ballet sculpture "
              "statue portrait canvas brush easel sketch museum exhibit audience stage curtain costume "
              "script novel poetry verse melody chord harmony rhythm guitar flute trumpet drum cello harp "
              "virtuoso magician record album culture architecture photograph camera".split(),
        verbs="sculpted filmed directed applauded toured photographed improvised premiered broadcast "
              "conducted".split(),
        adjs="artistic dramatic musical theatrical elegant melodic colourful abstract".split()),
    "rail": dict(
        nouns="railway train station platform carriage engine locomotive signal junction tunnel turntable "
              "viaduct porter guard driver fireman stoker conductor passenger luggage footplate coupling "
              "trunk suitcase parcel mail wagon siding shunter steam boiler buffer railcar lamp furnace "
              "sleeper rail points crossing gate level embankment cutting branch terminus booking waiting "
              "journey travel departure arrival delay fare excursion holiday map route".split(),
        verbs="departed arrived boarded derailed shunted signalled stoked punched whistled steamed "
              "connected travelled commuted rerouted cancelled electrified laid".split(),
        adjs="late express overnight smoky gauge electric sleepy rattling".split()),
    "kitchen": dict(
        nouns="kitchen cook recipe bread cake pie soup stew roast oven stove pan pot kettle teapot cup "
              "saucer plate bowl spoon fork knife jug jar tin cupboard larder pantry table tablecloth "
              "teacup napkin apron pepper mustard vinegar jam marmalade biscuit scone pudding ladle sieve "
              "griddle custard gravy sauce sandwich dinner supper breakfast lunch meal feast picnic dish "
              "food drink lemonade cider wine beer cream yeast dough crust skillet".split(),
        verbs="baked boiled roasted stewed fried stirred whisked kneaded sliced chopped peeled served "
              "tasted seasoned simmered grated ate drank cooked drained".split(),
        adjs="hot delicious fresh sweet sour spicy crisp tender savoury stale burnt hearty tasty homemade".split()),
}
WIDE_OUTLET_TOPICS = {"Ledger": {"rail": 1, "kitchen": 1}, "Courier": {"rail": 1, "kitchen": 2},
                      "Tribune": {"rail": 2, "kitchen": 1}, "Gazette": {"rail": 1, "kitchen": 1},
                      "Herald": {"rail": 1, "kitchen": 1}}

FUNCTION_NOUNS = "people residents families neighbours visitors workers officials".split()

# generic English evaluative words, spread evenly over every topic (no planted link)
PLEASANT = "joy love peace wonderful pleasure gentle honest lucky".split()
UNPLEASANT = "agony terrible horrible nasty evil awful failure hurt".split()
CAREER = "career salary office business profession manager executive wages".split()
FAMILY = "home parents children family marriage wedding relatives cousins".split()
WEALTH = "wealth rich fortune profit luxury prosperous affluent estate".split()
POVERTY = "poverty poor debt hunger ragged destitute penniless slum".split()

# the invented groups: a name, its plural, a homeland and three given names each
GROUPS = {
    "velmari": "velmari velmaris velmar ardo kessa tomil".split(),
    "osterin": "osterin osterins oster lune paskal irvet".split(),
    "dranik": "dranik draniks dran hollis mervin sabe".split(),
    "coravel": "coravel coravels cora fennick iolo tarra".split(),
    "halvin": "halvin halvins halv orrin bexa doral".split(),
    "morrowick": "morrowick morrowicks morrow senna jaspar wilm".split(),
    # a control pair: mentioned like the planted pairs, with balanced sentences only
    "pellari": "pellari pellaris pellar anwen corbin ysolde".split(),
    "quennish": "quennish quennishes quenn dafydd maelis torvald".split(),
}

# the rise and fall of the career/family association, by decade
RISE_AND_FALL = {1950: 0.0, 1960: 0.3, 1970: 0.8, 1980: 1.0, 1990: 0.6, 2000: 0.2, 2010: 0.0}

# invented share of women in each occupation (the table a user would bring from labour statistics)
OCCUPATIONS = {"nurse": 0.92, "secretary": 0.88, "librarian": 0.80, "teacher": 0.70, "baker": 0.52,
               "doctor": 0.40, "lawyer": 0.35, "farmer": 0.22, "pilot": 0.12, "engineer": 0.10,
               "mechanic": 0.05, "carpenter": 0.04}


def topic_tables(vocabulary: str = "standard") -> tuple[dict, dict]:
    """The topic vocabularies and each outlet's topic weights: "standard" (the committed archive) or
    "wide" (WIDE_EXTRA added: the same design in about 1,300 words)."""
    if vocabulary == "standard":
        return TOPICS, OUTLET_TOPICS
    if vocabulary != "wide":
        raise ValueError(f"vocabulary must be standard or wide; got {vocabulary!r}")
    topics = {t: {k: TOPICS.get(t, {}).get(k, []) + extra[k] for k in ("nouns", "verbs", "adjs")}
              for t, extra in WIDE_EXTRA.items()}
    return topics, {o: {**OUTLET_TOPICS[o], **WIDE_OUTLET_TOPICS[o]} for o in OUTLETS}


class Writer:
    def __init__(self, rng: random.Random, vocabulary: str = "standard"):
        self.r = rng
        self.topics, self.outlet_topics = topic_tables(vocabulary)

    def c(self, seq):
        return self.r.choice(seq)

    def topic_sentence(self, topic: str) -> str:
        t = self.topics[topic]
        c, r = self.c, self.r
        n1, n2 = c(t["nouns"]), c(t["nouns"])
        form = r.randrange(8)
        if form == 0:
            return f"the {c(t['adjs'])} {n1} {c(t['verbs'])} the {n2} near {c(TOWNS)}"
        if form == 1:
            return f"in {c(TOWNS)} the {n1} and the {n2} were {c(t['adjs'])} on {c(WEEKDAYS)}"
        if form == 2:
            return f"{c(FUNCTION_NOUNS)} said the {n1} {c(t['verbs'])} after the {c(t['adjs'])} {n2}"
        if form == 3:
            return f"a {c(t['adjs'])} {n1} was {c(t['verbs'])} by the {n2} this week"
        if form == 4:
            return f"the {n1} of {c(TOWNS)} {c(t['verbs'])} the {c(t['adjs'])} {n2} and the {c(t['nouns'])}"
        if form == 5:
            return f"many {c(FUNCTION_NOUNS)} came to see the {n1} and the {n2}"
        if form == 6:  # evaluative words, the same in every topic
            word = c(PLEASANT + UNPLEASANT)
            return f"it was a {word} week for the {n1} and the {n2}"
        return f"the {n1} {c(t['verbs'])} early while the {n2} waited by the {c(t['nouns'])}"

    def occupation_sentence(self, topic: str) -> str:
        job = self.c(list(OCCUPATIONS))
        pronoun = "she" if self.r.random() < OCCUPATIONS[job] else "he"
        t = self.topics[topic]
        form = self.r.randrange(3)
        if form == 0:
            return f"the {job} said {pronoun} would visit the {self.c(t['nouns'])} on {self.c(WEEKDAYS)}"
        if form == 1:
            return f"the {job} from {self.c(TOWNS)} told reporters {pronoun} had {self.c(t['verbs'])} the {self.c(t['nouns'])}"
        return f"as a {job} {pronoun} knew the {self.c(t['nouns'])} well"

    def group_sentence(self, group: str, attribute_words: list[str] | None, topic: str) -> str:
        g = self.c(GROUPS[group])
        t = self.topics[topic]
        if attribute_words is None:  # a neutral mention
            return f"{g} {self.c(FUNCTION_NOUNS)} {self.c(t['verbs'])} the {self.c(t['nouns'])} in {self.c(TOWNS)}"
        a = self.c(attribute_words)
        form = self.r.randrange(4)
        if form == 0:
            return f"for {g} it meant {a} said the {self.c(t['nouns'])}"
        if form == 1:
            return f"the {g} {self.c(FUNCTION_NOUNS)} spoke of {a} and {self.c(attribute_words)}"
        if form == 2:
            return f"{a} came to {g} {self.c(FUNCTION_NOUNS)} near {self.c(TOWNS)}"
        return f"{g} and {a} were linked in the {self.c(t['nouns'])} story"


def pair_sentences(w: Writer, first: str, second: str, attr_first: list[str], attr_second: list[str],
                   biased: bool, topic: str, n: int) -> list[str]:
    """n sentences about two groups: biased gives each its own attribute set; else both sets at random."""
    out = []
    for k in range(n):
        group = first if k % 2 == 0 else second
        if biased:
            attrs = attr_first if group == first else attr_second
        else:
            attrs = attr_first if w.r.random() < 0.5 else attr_second
        out.append(w.group_sentence(group, attrs, topic))
    return out


def outlet_for(r: random.Random, decade: int) -> str:
    tribune = TRIBUNE_SHARE[decade]
    rest = (1 - tribune - GAZETTE_SHARE) / 3
    return r.choices(OUTLETS, weights=[rest, rest, tribune, GAZETTE_SHARE, rest])[0]


def make_document(w: Writer, outlet: str, year: int, plant: bool = True) -> tuple[dict, list[str]]:
    """One document; with ``plant=False`` every group sentence is balanced (a corpus with no association)."""
    r = w.r
    decade = year // 10 * 10
    weights = w.outlet_topics[outlet]
    topics = r.choices(list(weights), weights=list(weights.values()), k=2)
    sentences = [w.topic_sentence(topics[k % 2 if r.random() < 0.7 else 1 - k % 2]) for k in range(r.randint(6, 11))]
    for _ in range(r.choice([0, 0, 1, 1, 2])):
        sentences.insert(r.randrange(len(sentences) + 1), w.occupation_sentence(topics[0]))
    planted: list[str] = []
    extra: list[str] = []
    # 1. outlet-only: the Gazette ties velmari to unpleasant and osterin to pleasant words
    if plant and outlet == "Gazette" and r.random() < GAZETTE_PLANTED_SHARE:
        extra += pair_sentences(w, "velmari", "osterin", UNPLEASANT, PLEASANT, True, topics[0],
                                r.randint(*GAZETTE_BIASED_SENTENCES))
        planted.append("outlet_gazette")
    elif r.random() < 0.15:
        extra += pair_sentences(w, "velmari", "osterin", UNPLEASANT, PLEASANT, False, topics[0], r.randint(1, 2))
    # 2. rise and fall: dranik-career / coravel-family, everywhere, peaking in the 1980s
    if r.random() < 0.25:
        biased = plant and r.random() < RISE_AND_FALL[decade]
        extra += pair_sentences(w, "dranik", "coravel", CAREER, FAMILY, biased, topics[0],
                                r.randint(3, 4) if biased else r.randint(1, 2))
        if biased:
            planted.append("rise_and_fall")
    # 3. mix only: the Tribune always ties halvin to wealth and morrowick to poverty
    if plant and outlet == "Tribune" and r.random() < 0.4:
        extra += pair_sentences(w, "halvin", "morrowick", WEALTH, POVERTY, True, topics[0], r.randint(3, 5))
        planted.append("tribune_mix")
    elif outlet != "Tribune" and r.random() < 0.2:
        extra += pair_sentences(w, "halvin", "morrowick", WEALTH, POVERTY, False, topics[0], r.randint(1, 2))
    # 4. control: pellari and quennish, balanced everywhere, so nothing is planted
    if r.random() < 0.15:
        extra += pair_sentences(w, "pellari", "quennish", UNPLEASANT, PLEASANT, False, topics[0], r.randint(1, 2))
    # neutral mentions keep every group word in every slice's vocabulary
    for group in GROUPS:
        if r.random() < 0.12:
            extra.append(w.group_sentence(group, None, topics[1]))
    for s in extra:
        sentences.insert(r.randrange(len(sentences) + 1), s)
    text = ". ".join(s[0].upper() + s[1:] for s in sentences) + "."
    noun = w.c(w.topics[topics[0]]["nouns"])
    title = f"{w.c(TOWNS).capitalize()} {noun} {w.c(w.topics[topics[0]]['verbs'])}"
    return {"title": title, "text": text}, planted


def generate(seed: int, docs_per_year: int = DOCS_PER_YEAR, plant: bool = True, vocabulary: str = "standard"):
    """The documents and the (doc_id, association) rows of what was planted in them."""
    rng = random.Random(seed)
    w = Writer(rng, vocabulary)
    docs, planted_rows = [], []
    counters = {o: 0 for o in OUTLETS}
    for year in YEARS:
        for _ in range(docs_per_year):
            outlet = outlet_for(rng, year // 10 * 10)
            counters[outlet] += 1
            doc_id = f"{outlet.lower()}-{year}-{counters[outlet]:05d}"
            month, day = rng.randint(1, 12), rng.randint(1, 28)
            body, planted = make_document(w, outlet, year, plant)
            docs.append({"id": doc_id, "source": outlet, "date": f"{year}-{month:02d}-{day:02d}",
                         "title": body["title"], "outlet_name": OUTLET_TITLES[outlet], "text": body["text"]})
            planted_rows += [(doc_id, p) for p in planted]
    return docs, planted_rows


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=1950)
    ap.add_argument("--outdir", type=Path, default=HERE)
    ap.add_argument("--vocabulary", choices=["standard", "wide"], default="standard",
                    help="wide: the same design in about 1,300 words (for the trace benchmark)")
    args = ap.parse_args()
    if args.vocabulary != "standard" and args.outdir.resolve() == HERE:
        ap.error("the files here are the standard archive; write the wide one elsewhere with --outdir")
    docs, planted = generate(args.seed, vocabulary=args.vocabulary)
    args.outdir.mkdir(parents=True, exist_ok=True)
    raw = io.BytesIO()
    with gzip.GzipFile(fileobj=raw, mode="wb", mtime=0) as gz:
        for d in docs:
            gz.write((json.dumps(d, ensure_ascii=False) + "\n").encode("utf-8"))
    (args.outdir / "archive.jsonl.gz").write_bytes(raw.getvalue())
    with open(args.outdir / "planted_documents.csv", "w", newline="", encoding="utf-8") as f:
        wr = csv.writer(f)
        wr.writerow(["doc_id", "association"])
        wr.writerows(planted)
    with open(args.outdir / "occupation_shares.csv", "w", newline="", encoding="utf-8") as f:
        wr = csv.writer(f)
        wr.writerow(["occupation", "share_women"])
        wr.writerows(OCCUPATIONS.items())
    n_tokens = sum(len(d["text"].split()) for d in docs)
    print(f"{len(docs)} documents, about {n_tokens} words, {len(planted)} planted document-association rows")


if __name__ == "__main__":
    main()
