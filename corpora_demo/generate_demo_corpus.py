#!/usr/bin/env python3
"""Generate the demo archive: five invented news outlets, 1950-2019, with planted associations.

Everything here is invented: the outlets, the towns, the people and the eight
groups. What is planted, and where, is written in README.md beside this file and,
document by document, in planted_documents.csv; tests check that corpus-tracer
recovers it. The topic words (ordinary English, sorted into topics by hand) are in
topic_words.txt beside this file.

    python corpora_demo/generate_demo_corpus.py            # writes archive.jsonl.gz and friends here

The output depends only on --seed (Python's random.Random), and the gzip stream
carries no timestamp, so re-running gives byte-identical files.
"""

from __future__ import annotations

import argparse
import configparser
import csv
import gzip
import io
import itertools
import json
import random
from pathlib import Path

HERE = Path(__file__).resolve().parent

OUTLETS = ["Ledger", "Courier", "Tribune", "Gazette", "Herald"]
OUTLET_TITLES = {"Ledger": "The Harbour Ledger", "Courier": "The Valley Courier",
                 "Tribune": "The Northgate Tribune", "Gazette": "The Saltmarsh Gazette",
                 "Herald": "The Pinecrest Herald"}
# which topics each outlet favours (weights over the topics of topic_words.txt; 1 for the rest)
OUTLET_FAVOURS = {
    "Ledger": {"sea": 6, "trade": 3, "weather": 2, "rail": 2},
    "Courier": {"farm": 6, "nature": 3, "weather": 2, "kitchen": 2},
    "Tribune": {"city": 6, "trade": 3, "law": 2, "school": 2, "media": 2, "building": 2},
    "Gazette": {"sea": 2, "farm": 2, "weather": 2, "nature": 2},
    "Herald": {"sport": 4, "arts": 4, "school": 2, "health": 2, "science": 2, "media": 2},
}
YEARS = range(1950, 2020)
DOCS_PER_YEAR = 130
TOPIC_SENTENCES = (4, 7)  # the fewest and most topic sentences of a document
# share of each decade's documents from the Tribune (grows) and the Gazette (steady)
TRIBUNE_SHARE = {1950: 0.20, 1960: 0.25, 1970: 0.31, 1980: 0.38, 1990: 0.45, 2000: 0.52, 2010: 0.60}
GAZETTE_SHARE = 0.10
# share of the Gazette's documents that carry the planted velmari/osterin association, and how many
# biased sentences each carries
GAZETTE_PLANTED_SHARE = 0.6
GAZETTE_BIASED_SENTENCES = (5, 8)
# share of the other documents with 1-2 balanced sentences about the same two groups
BALANCED_ELSEWHERE = 0.15
# the same for the Tribune's halvin/morrowick association
TRIBUNE_PLANTED_SHARE = 0.6
TRIBUNE_BIASED_SENTENCES = (2, 3)
# of the planted Tribune documents, this share are strongly slanted pieces with more biased sentences
TRIBUNE_STRONG_SHARE = 0.1
TRIBUNE_STRONG_SENTENCES = (7, 9)

TOWNS = ["brackwater", "ellesford", "marrowby", "quillhaven", "tarnside", "wickmoor", "oakhollow", "sorrelton"]
WEEKDAYS = ["monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday"]
PEOPLE = "people residents visitors workers officials neighbours families".split()

# generic English evaluative words, spread evenly over every topic (no planted link), in this share
# of the topic sentences
EVALUATIVE_SHARE = 0.125
PLEASANT = "joy love peace wonderful pleasure gentle honest lucky".split()
UNPLEASANT = "agony terrible horrible nasty evil awful failure hurt".split()
CAREER = "career salary office business profession manager executive wages".split()
FAMILY = "home parents children family marriage wedding relatives cousins".split()
WEALTH = "wealth rich fortune profit luxury prosperous affluent estate".split()
POVERTY = "poverty poor debt hunger ragged destitute penniless slum".split()
# each pronoun comes with its possessive and reflexive, as in English text: an occupation's
# sentences share these contexts with the pronoun, which is what an embedding can pick up
PRONOUNS = {"she": ("she", "her", "herself"), "he": ("he", "his", "himself")}

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

PROBE_WORDS = (set(itertools.chain(*GROUPS.values())) | set(PLEASANT + UNPLEASANT + CAREER + FAMILY + WEALTH + POVERTY)
               | set(OCCUPATIONS) | set(itertools.chain(*PRONOUNS.values())))


class Words:
    """A word list drawn with Zipf-like weights: the word of rank r (from 0) has weight 1 / (r + 2)."""

    def __init__(self, words: list[str]):
        self.words = list(dict.fromkeys(words))
        self.cum = list(itertools.accumulate(1.0 / (r + 2) for r in range(len(self.words))))

    def draw(self, r: random.Random) -> str:
        return r.choices(self.words, cum_weights=self.cum)[0]


def read_topic_words(path: Path = HERE / "topic_words.txt") -> dict[str, dict[str, Words]]:
    """{topic: {"nouns"|"verbs"|"adjs": Words}} from topic_words.txt; [general] is a topic too."""
    cp = configparser.ConfigParser(comment_prefixes=("#",), interpolation=None)
    cp.read(path, encoding="utf-8")
    topics = {t: {k: Words(cp[t][k].split()) for k in ("nouns", "verbs", "adjs")} for t in cp.sections()}
    used = {w for t in topics.values() for ws in t.values() for w in ws.words}
    clash = sorted(used & PROBE_WORDS)
    if clash:  # a test word in a topic would plant an association nobody wrote down
        raise ValueError(f"{path.name} holds words of the association tests: {', '.join(clash)}")
    return topics


class Writer:
    def __init__(self, rng: random.Random):
        self.r = rng
        self.topics = read_topic_words()
        self.general = self.topics.pop("general")
        self.outlet_topics = {o: {t: OUTLET_FAVOURS[o].get(t, 1) for t in self.topics} for o in OUTLETS}

    def c(self, seq):
        return self.r.choice(seq)

    def n(self, topic: str) -> str:
        return self.topics[topic]["nouns"].draw(self.r)

    def v(self, topic: str) -> str:
        return self.topics[topic]["verbs"].draw(self.r)

    def a(self, topic: str) -> str:
        return self.topics[topic]["adjs"].draw(self.r)

    def g(self, kind: str) -> str:
        return self.general[kind].draw(self.r)

    def topic_sentence(self, t: str) -> str:
        c, r, n, v, a, g = self.c, self.r, self.n, self.v, self.a, self.g
        if r.random() < EVALUATIVE_SHARE:  # evaluative words, the same in every topic
            return f"it was a {c(PLEASANT + UNPLEASANT)} {g('nouns')} for the {n(t)} and the {n(t)}"
        form = r.randrange(12)
        if form == 0:
            return f"the {a(t)} {n(t)} {v(t)} the {n(t)} near {c(TOWNS)}"
        if form == 1:
            return f"in {c(TOWNS)} the {n(t)} and the {n(t)} were {a(t)} on {c(WEEKDAYS)}"
        if form == 2:
            return f"{c(PEOPLE)} {g('verbs')} the {n(t)} {v(t)} after the {a(t)} {n(t)}"
        if form == 3:
            return f"a {a(t)} {n(t)} was {v(t)} by the {n(t)} this {g('nouns')}"
        if form == 4:
            return f"the {n(t)} of {c(TOWNS)} {v(t)} the {a(t)} {n(t)} and the {n(t)}"
        if form == 5:
            return f"many {c(PEOPLE)} came to see the {n(t)} and the {g('adjs')} {n(t)}"
        if form == 6:
            return f"the {n(t)} {v(t)} {c(['early', 'late', 'again', 'twice'])} while the {n(t)} waited by the {n(t)}"
        if form == 7:
            return f"{c(PEOPLE)} {g('verbs')} that the {g('adjs')} {n(t)} would be {v(t)} next {g('nouns')}"
        if form == 8:
            return f"there was {g('adjs')} {g('nouns')} about the {n(t)} and the {a(t)} {n(t)} in {c(TOWNS)}"
        if form == 9:
            return f"for the {g('nouns')} of the {n(t)} the {a(t)} {n(t)} {v(t)} the {n(t)}"
        if form == 10:
            return f"according to the {n(t)} the {g('nouns')} of the {n(t)} was {a(t)}"
        return f"last {g('nouns')} the {n(t)} at {c(TOWNS)} {g('verbs')} more {n(t)} than the {g('adjs')} {n(t)}"

    def occupation_sentence(self, t: str) -> str:
        job = self.c(list(OCCUPATIONS))
        p, pos, refl = PRONOUNS["she" if self.r.random() < OCCUPATIONS[job] else "he"]
        form = self.r.randrange(4)
        if form == 0:
            return f"the {job} said {p} would take {pos} {self.n(t)} to {self.c(TOWNS)} on {self.c(WEEKDAYS)}"
        if form == 1:
            return f"the {job} from {self.c(TOWNS)} told reporters {p} had {self.v(t)} the {self.n(t)} {refl}"
        if form == 2:
            return f"as a {job} {p} knew the {self.n(t)} well and {pos} {self.c(PEOPLE)} {self.g('verbs')} it"
        return f"the {job} and {pos} {self.c(PEOPLE)} {self.v(t)} the {self.n(t)} {p} said"

    def group_sentence(self, group: str, attribute_words: list[str] | None, topic: str) -> str:
        g = self.c(GROUPS[group])
        if attribute_words is None:  # a neutral mention
            return f"{g} {self.c(PEOPLE)} {self.v(topic)} the {self.n(topic)} in {self.c(TOWNS)}"
        a = self.c(attribute_words)
        form = self.r.randrange(4)
        if form == 0:
            return f"for {g} it meant {a} said the {self.n(topic)}"
        if form == 1:
            return f"the {g} {self.c(PEOPLE)} spoke of {a} and {self.c(attribute_words)}"
        if form == 2:
            return f"{a} came to {g} {self.c(PEOPLE)} near {self.c(TOWNS)}"
        return f"{g} and {a} were linked in the {self.n(topic)} story"


def pair_sentences(w: Writer, first: str, second: str, attr_first: list[str], attr_second: list[str],
                   biased: bool, topic: str, n: int) -> list[str]:
    """n sentences about two groups: biased gives each its own attribute set; else both sets at random."""
    out = []
    start = w.r.randrange(2)  # either group may come first, so one-sentence mentions are balanced too
    for k in range(n):
        group = first if (k + start) % 2 == 0 else second
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
    sentences = [w.topic_sentence(topics[k % 2 if r.random() < 0.7 else 1 - k % 2]) for k in range(r.randint(*TOPIC_SENTENCES))]
    for _ in range(r.choice([0, 1, 1, 2, 2, 3])):
        sentences.insert(r.randrange(len(sentences) + 1), w.occupation_sentence(topics[0]))
    planted: list[str] = []
    extra: list[str] = []
    # 1. outlet-only: the Gazette ties velmari to unpleasant and osterin to pleasant words
    if plant and outlet == "Gazette" and r.random() < GAZETTE_PLANTED_SHARE:
        extra += pair_sentences(w, "velmari", "osterin", UNPLEASANT, PLEASANT, True, topics[0],
                                r.randint(*GAZETTE_BIASED_SENTENCES))
        planted.append("outlet_gazette")
    elif r.random() < BALANCED_ELSEWHERE:
        extra += pair_sentences(w, "velmari", "osterin", UNPLEASANT, PLEASANT, False, topics[0], r.randint(1, 2))
    # 2. rise and fall: dranik-career / coravel-family, everywhere, peaking in the 1980s
    if r.random() < 0.25:
        biased = plant and r.random() < RISE_AND_FALL[decade]
        extra += pair_sentences(w, "dranik", "coravel", CAREER, FAMILY, biased, topics[0],
                                r.randint(3, 4) if biased else r.randint(1, 2))
        if biased:
            planted.append("rise_and_fall")
    # 3. mix only: the Tribune always ties halvin to wealth and morrowick to poverty
    if plant and outlet == "Tribune" and r.random() < TRIBUNE_PLANTED_SHARE:
        strong = r.random() < TRIBUNE_STRONG_SHARE
        n = r.randint(*(TRIBUNE_STRONG_SENTENCES if strong else TRIBUNE_BIASED_SENTENCES))
        extra += pair_sentences(w, "halvin", "morrowick", WEALTH, POVERTY, True, topics[0], n)
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
    title = f"{w.c(TOWNS).capitalize()} {w.n(topics[0])} {w.v(topics[0])}"
    return {"title": title, "text": text}, planted


def generate(seed: int, docs_per_year: int = DOCS_PER_YEAR, plant: bool = True):
    """The documents and the (doc_id, association) rows of what was planted in them."""
    rng = random.Random(seed)
    w = Writer(rng)
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
    args = ap.parse_args()
    docs, planted = generate(args.seed)
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
