#!/usr/bin/env python3
"""A deterministic news-like corpus at realistic sizes, for the benchmarks.

    python tests/benchmarks/gen_realistic_corpus.py --outdir bench-data/real-20m --tokens 20000000

writes ``corpus.jsonl.gz`` (one document a line: ``id``, ``source``, ``time``, ``text``),
``tests.toml`` (the planted tests and a control with nothing planted) and ``meta.json``
(the parameters and what was planted where). Everything depends only on the parameters
and ``--seed``: re-running gives byte-identical files.

The design follows the demo's (``corpora_demo/generate_demo_corpus.py``) at other sizes:

- words are invented and pronounceable (syllables of the invented language below), with
  Zipf frequencies over ``--vocab`` types, so a 20M-token corpus has a 50k-word
  vocabulary at min count 5 like the archives users bring;
- each document draws most of its words from a background Zipf distribution and the
  rest from one of ``--topics`` topics (a few hundred words each), so the embedding has
  structure for the SVD to find;
- five invented outlets (Harbour Ledger, Valley Courier, Northgate Gazette, Riverside
  Tribune, Uplands Herald) publish over seven decades, 1950-2019, with shares that change
  over time (so a change in the mix of sources can look like drift);
- the 24 probe words (four sets of three for each test) are extra types outside the Zipf
  ranks; outside the planted documents each appears, in every source, at the rate of the
  Zipf word of rank ``--probe-rank`` (1000: mid-frequency, about 1,500 times in 20M tokens),
  next to random words; a probe word in every document would rank near 60, where PPMI
  carries little association (the first version of this generator did that);
- planted: in a share of the Gazette's documents the first target set sits next to the
  first attribute set and the second target set next to the second (``gazette_planted``);
  ``control`` uses other target and attribute words with nothing planted.
"""

from __future__ import annotations

import argparse
import gzip
import json
from pathlib import Path

import numpy as np

SOURCES = ["Harbour Ledger", "Valley Courier", "Northgate Gazette", "Riverside Tribune", "Uplands Herald"]
DECADES = [1950, 1960, 1970, 1980, 1990, 2000, 2010]
# rows: decades; columns: sources. Shares drift so the source mix changes over time.
SOURCE_SHARES = np.array([
    [0.40, 0.25, 0.15, 0.10, 0.10],
    [0.35, 0.25, 0.15, 0.15, 0.10],
    [0.30, 0.20, 0.20, 0.20, 0.10],
    [0.25, 0.20, 0.20, 0.25, 0.10],
    [0.20, 0.15, 0.20, 0.30, 0.15],
    [0.15, 0.15, 0.20, 0.35, 0.15],
    [0.10, 0.15, 0.20, 0.40, 0.15],
])
ONSETS = ["b", "d", "f", "g", "k", "l", "m", "n", "p", "r", "s", "t", "v", "z", "br", "dr", "kl", "st", "tr", "sk"]
VOWELS = ["a", "e", "i", "o", "u", "ai", "ou", "ea"]
CODAS = ["", "", "", "n", "r", "l", "s", "m", "th", "nd"]


def invented_words(n: int, rng: np.random.Generator) -> list[str]:
    """``n`` distinct pronounceable words of 1-4 syllables, shorter words first (as in real
    vocabularies, frequent words tend to be short)."""
    words, seen = [], set()
    syllables = [o + v + c for o in ONSETS for v in VOWELS for c in CODAS]
    n_syll = 1
    while len(words) < n:
        batch = rng.integers(0, len(syllables), size=(max(4 * n, 1000), n_syll))
        for row in batch:
            w = "".join(syllables[i] for i in row)
            if w not in seen:
                seen.add(w)
                words.append(w)
                if len(words) == n:
                    break
        n_syll = min(n_syll + 1, 4)
    return words


def zipf_cdf(n: int, s: float) -> np.ndarray:
    p = 1.0 / np.arange(1, n + 1, dtype=np.float64) ** s
    return np.cumsum(p / p.sum())


def generate(outdir: Path, *, tokens: int, vocab: int, topics: int, mean_doc_len: int, seed: int,
             planted_share: float, probe_rank: int = 1000, zipf_s: float = 1.07) -> dict:
    rng = np.random.default_rng(seed)
    words = invented_words(vocab + 24, rng)
    probe = words[vocab:]          # rare-by-construction probe words, outside the Zipf ranks
    words = np.array(words[:vocab], dtype=object)
    x, y, a, b = probe[0:3], probe[3:6], probe[6:9], probe[9:12]
    cx, cy, ca, cb = probe[12:15], probe[15:18], probe[18:21], probe[21:24]
    background = zipf_cdf(vocab, zipf_s)
    # each probe word's background rate is that of the Zipf word of rank ``probe_rank``
    group_rate = 3 * float(background[probe_rank - 1] - background[probe_rank - 2])
    # a topic is a few hundred mid-frequency words, drawn with a flatter Zipf law
    topic_words = [rng.choice(np.arange(200, vocab), size=300, replace=False) for _ in range(topics)]
    topic_cdf = zipf_cdf(300, 0.8)
    lengths = np.clip(rng.gamma(2.0, mean_doc_len / 2.0, size=tokens // 20 + 10).astype(np.int64), 20, 5000)
    n_docs = int(np.searchsorted(np.cumsum(lengths), tokens)) + 1
    lengths = lengths[:n_docs]
    lengths[-1] -= int(lengths.sum() - tokens)
    decade = rng.integers(0, len(DECADES), size=n_docs)
    source = np.array([rng.choice(len(SOURCES), p=SOURCE_SHARES[d]) for d in decade])
    topic = rng.integers(0, topics, size=n_docs)
    planted = (source == SOURCES.index("Northgate Gazette")) & (rng.random(n_docs) < planted_share)
    outdir.mkdir(parents=True, exist_ok=True)
    n_planted_pairs = 0
    with gzip.open(outdir / "corpus.jsonl.gz", "wt", encoding="utf-8", compresslevel=3) as f:
        for d in range(n_docs):
            n = int(lengths[d])
            ids = np.searchsorted(background, rng.random(n))
            from_topic = rng.random(n) < 0.3
            ids[from_topic] = topic_words[topic[d]][np.searchsorted(topic_cdf, rng.random(int(from_topic.sum())))]
            text = list(words[np.minimum(ids, vocab - 1)])
            # probe words appear in every source at the rate of a mid-frequency word, next to random words
            for group in (x, y, a, b, cx, cy, ca, cb):
                for pos in rng.integers(0, n, size=rng.poisson(n * group_rate)):
                    text[pos] = group[rng.integers(0, 3)]
            if planted[d]:
                k = max(2, n // 150)
                for pos in rng.integers(0, max(1, n - 3), size=k):
                    first = rng.random() < 0.5
                    text[pos] = (x if first else y)[rng.integers(0, 3)]
                    text[min(pos + 2, n - 1)] = (a if first else b)[rng.integers(0, 3)]
                n_planted_pairs += k
            year = DECADES[decade[d]] + int(rng.integers(0, 10))
            f.write(json.dumps({"id": f"doc{d:07d}", "source": SOURCES[source[d]], "time": year,
                                "text": " ".join(text)}, ensure_ascii=False) + "\n")
    toml = "".join(
        f'[tests.{name}]\nabout = "{about}"\ntargets_x = {json.dumps(tx)}\ntargets_y = {json.dumps(ty)}\n'
        f'attributes_a = {json.dumps(ta)}\nattributes_b = {json.dumps(tb)}\n\n'
        for name, about, tx, ty, ta, tb in [
            ("gazette_planted", "planted in a share of the Northgate Gazette's documents", x, y, a, b),
            ("control", "nothing planted", cx, cy, ca, cb)])
    (outdir / "tests.toml").write_text(toml, encoding="utf-8")
    meta = {"tokens": tokens, "documents": n_docs, "vocab": vocab, "topics": topics, "seed": seed,
            "mean_doc_len": mean_doc_len, "zipf_s": zipf_s, "planted_share": planted_share,
            "probe_rank": probe_rank,
            "planted_documents": int(planted.sum()), "planted_pairs": n_planted_pairs,
            "sources": SOURCES, "decades": DECADES}
    (outdir / "meta.json").write_text(json.dumps(meta, indent=1), encoding="utf-8")
    return meta


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--outdir", type=Path, required=True)
    ap.add_argument("--tokens", type=int, default=20_000_000)
    ap.add_argument("--vocab", type=int, default=80_000,
                    help="Zipf types (about 50k reach min count 5 at 20M tokens)")
    ap.add_argument("--topics", type=int, default=40)
    ap.add_argument("--mean-doc-len", type=int, default=330)
    ap.add_argument("--planted-share", type=float, default=0.2)
    ap.add_argument("--probe-rank", type=int, default=1000,
                    help="the Zipf rank whose frequency each probe word has outside the planted documents")
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    meta = generate(args.outdir, tokens=args.tokens, vocab=args.vocab, topics=args.topics,
                    mean_doc_len=args.mean_doc_len, seed=args.seed, planted_share=args.planted_share,
                    probe_rank=args.probe_rank)
    print(json.dumps(meta))


if __name__ == "__main__":
    main()
