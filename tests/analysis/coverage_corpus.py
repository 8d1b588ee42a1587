"""A small corpus generator with a known population value, for measuring interval coverage.

Documents are sentences of Zipf-distributed filler words; some sentences pair a target
word with an attribute word: an x word goes with an a word with probability
(1 + s) / 2 (else with a b word), a y word the other way round. Each document has its
own strength s, drawn uniformly from [0, 2 * STRENGTH], so documents differ the way
real documents do and the document bootstrap has something to resample. The
population value of a figure is its value on a corpus POPULATION_FACTOR times larger
from the same generator.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from tracer.core.association import AssociationTest
from tracer.core.counting import CountSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.corpus.ingest import ingest
from tracer.corpus.workspace import Workspace

SYLLABLES = ["ka", "lo", "mi", "ren", "tu", "vos", "pel", "dar", "shi", "no", "bex", "qua", "zil", "fo", "gru"]
STRENGTH = 0.35
PAIR_SHARE = 0.5          # share of sentences that pair a target with an attribute
SENTENCE = 9              # filler words per sentence
POPULATION_FACTOR = 20
COUNTS = CountSettings(window=4, min_count=3)
SVD = PpmiSvdSettings(dim=20)


def _word(k: int, prefix: str) -> str:
    s = prefix
    while True:
        s += SYLLABLES[k % len(SYLLABLES)]
        k //= len(SYLLABLES)
        if k == 0:
            return s


X = [_word(k, "ax") for k in range(5)]
Y = [_word(k, "ey") for k in range(5)]
A = [_word(k, "ob") for k in range(5)]
B = [_word(k, "uc") for k in range(5)]
FILLER = [_word(k, "") for k in range(300)]
TEST = AssociationTest("planted", tuple(X), tuple(Y), tuple(A), tuple(B), tuple(zip(A, B)))


def documents(seed: int, n_docs: int, sentences: int = 12) -> list[dict]:
    """``n_docs`` documents of ``sentences`` sentences each, from ``seed``."""
    rng = np.random.default_rng(seed)
    zipf = 1.0 / np.arange(1, len(FILLER) + 1)
    zipf /= zipf.sum()
    out = []
    for d in range(n_docs):
        s = rng.uniform(0, 2 * STRENGTH)
        words = []
        for _ in range(sentences):
            sent = list(rng.choice(FILLER, SENTENCE, p=zipf))
            if rng.random() < PAIR_SHARE:
                x_side = rng.random() < 0.5
                target = rng.choice(X if x_side else Y)
                towards_a = (rng.random() < (1 + s) / 2) == x_side
                attr = rng.choice(A if towards_a else B)
                sent[rng.integers(0, SENTENCE)] = target
                sent[rng.integers(0, SENTENCE)] = attr
            words.extend(sent)
        out.append({"id": f"d{d}", "source": "Src", "time": 2000, "text": " ".join(words)})
    return out


def workspace(folder: Path, seed: int, n_docs: int) -> Workspace:
    """A workspace of ``n_docs`` generated documents in ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "docs.jsonl"
    with open(path, "w", encoding="utf-8") as f:
        f.writelines(json.dumps(d) + "\n" for d in documents(seed, n_docs))
    ingest(folder / "ws", [path])
    return Workspace(folder / "ws")
