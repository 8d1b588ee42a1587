"""word2vec through gensim, on the same tokens and vocabulary as the counts.

gensim is handed the documents' raw token strings and our vocabulary (built by
:func:`tracer.core.counting.build_vocab` with the same min-count rule), so a word
outside the vocabulary is skipped inside gensim exactly as in a direct
``Word2Vec(sentences, min_count=...)`` run, and the learning-rate schedule
sees the same sentences. Whole-number document weights repeat a document.
"""

from __future__ import annotations

import dataclasses
import logging

import numpy as np

from tracer.core.counting import ModelVocab
from tracer.errors import SettingError

# gensim truncates longer sentences; documents are cut into pieces of this size
MAX_SENTENCE = 10_000


@dataclasses.dataclass(frozen=True)
class Word2VecSettings:
    """gensim Word2Vec settings (window and min-count come from the count settings)."""

    dim: int = 100
    skip_gram: bool = True
    negative: int = 5
    epochs: int = 5
    seed: int = 1
    workers: int = 1
    sample: float = 1e-3
    learning_rate: float = 0.025
    min_learning_rate: float = 0.0001

    def __post_init__(self):
        for name in ("dim", "negative", "epochs", "workers"):
            v = getattr(self, name)
            if not isinstance(v, int) or v < (0 if name == "negative" else 1):
                raise SettingError(f"word2vec {name} must be a whole number >= 1; got {v!r}")

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


class DocumentSentences:
    """Re-iterable sentences: each selected document's token strings, cut at MAX_SENTENCE.

    Reads from the token array on every pass, so memory does not grow with the corpus.
    """

    def __init__(self, tokens: np.ndarray, doc_offsets: np.ndarray, repeats: np.ndarray, words: list[str]):
        self.tokens, self.doc_offsets, self.repeats, self.words = tokens, doc_offsets, repeats, words
        self.docs = np.flatnonzero(repeats > 0)

    def __iter__(self):
        words = self.words
        for d in self.docs:
            a, b = int(self.doc_offsets[d]), int(self.doc_offsets[d + 1])
            strings = [words[i] for i in self.tokens[a:b]]
            pieces = [strings[k:k + MAX_SENTENCE] for k in range(0, len(strings), MAX_SENTENCE)]
            for _ in range(int(self.repeats[d])):
                yield from pieces

    def counts(self) -> tuple[int, int]:
        """(sentences, raw tokens) per pass."""
        lengths = (self.doc_offsets[self.docs + 1] - self.doc_offsets[self.docs])
        pieces = np.maximum(1, -(-lengths // MAX_SENTENCE))
        rep = self.repeats[self.docs]
        return int((pieces * rep).sum()), int((lengths * rep).sum())


def whole_number_weights(doc_weights: np.ndarray) -> np.ndarray:
    w = np.asarray(doc_weights, dtype=np.float64)
    r = np.rint(w)
    if np.any(np.abs(w - r) > 1e-9):
        raise SettingError("word2vec takes whole-number document weights (slices, bootstrap counts); "
                           "fractional weights apply to PPMI-SVD only")
    return r.astype(np.int64)


def word2vec_vectors(tokens: np.ndarray, doc_offsets: np.ndarray, doc_weights: np.ndarray,
                     vocab: ModelVocab, words: list[str], window: int,
                     settings: Word2VecSettings) -> np.ndarray:
    """Train gensim Word2Vec; return vectors in the row order of ``vocab``, shape (len(vocab), dim)."""
    from gensim.models import Word2Vec

    sentences = DocumentSentences(tokens, doc_offsets, whole_number_weights(doc_weights), words)
    n_sentences, n_raw = sentences.counts()
    model = Word2Vec(vector_size=settings.dim, window=window, min_count=1, sg=int(settings.skip_gram),
                     negative=settings.negative, epochs=settings.epochs, seed=settings.seed,
                     workers=settings.workers, sample=settings.sample, alpha=settings.learning_rate,
                     min_alpha=settings.min_learning_rate)
    # handing gensim the frequencies in first-appearance order gives its vocabulary
    # the same order (and so the same initial vectors) as a direct run over the sentences
    first_seen = np.argsort(vocab.ids, kind="stable")
    freqs = {vocab.words[i]: int(vocab.counts[i]) for i in first_seen}
    logging.getLogger("gensim").setLevel(logging.WARNING)
    model.build_vocab_from_freq(freqs, corpus_count=n_sentences)
    model.train(sentences, total_examples=n_sentences, total_words=n_raw, epochs=settings.epochs)
    rows = np.array([model.wv.key_to_index[w] for w in vocab.words], dtype=np.int64)
    return np.asarray(model.wv.vectors[rows], dtype=np.float32)
