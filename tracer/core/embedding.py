"""One Embedding type for every model (storage: :mod:`tracer.provenance.vectors_io`)."""

from __future__ import annotations

import dataclasses
from functools import cached_property

import numpy as np

from tracer.errors import WordNotInVocabulary


@dataclasses.dataclass(frozen=True)
class Embedding:
    """Word vectors with their provenance.

    Attributes
    ----------
    words : list of str, length n_words
    vectors : numpy.ndarray of float32, shape (n_words, dim)
    card : dict
        How it was made (JSON-serialisable).
    extras : dict of str to numpy.ndarray
        Arrays a model keeps for later use (never pickled).
    """

    words: list[str]
    vectors: np.ndarray
    card: dict
    extras: dict = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        if self.vectors.shape[0] != len(self.words):
            raise ValueError(f"{len(self.words)} words but {self.vectors.shape[0]} vectors")

    @cached_property
    def index(self) -> dict[str, int]:
        return {w: i for i, w in enumerate(self.words)}

    @property
    def dim(self) -> int:
        return int(self.vectors.shape[1])

    def __contains__(self, word: str) -> bool:
        return word in self.index

    def row(self, word: str) -> int:
        """Row of ``word``; raises :class:`WordNotInVocabulary` naming the model and slice."""
        try:
            return self.index[word]
        except KeyError:
            raise WordNotInVocabulary(
                f"the word {word!r} is not in the vocabulary of {self.card.get('model', 'the model')} "
                f"slice {self.card.get('slice', '?')}"
            ) from None

    def vector(self, word: str) -> np.ndarray:
        return self.vectors[self.row(word)]

    @cached_property
    def unit_vectors(self) -> np.ndarray:
        norms = np.linalg.norm(self.vectors, axis=1, keepdims=True)
        return self.vectors / np.where(norms > 0, norms, 1.0)

    def similarity(self, a: str, b: str) -> float:
        """Cosine similarity of two words."""
        return float(self.unit_vectors[self.row(a)] @ self.unit_vectors[self.row(b)])

    def neighbours(self, word: str, n: int = 10) -> list[tuple[str, float]]:
        """The ``n`` nearest words by cosine similarity."""
        i = self.row(word)
        sims = self.unit_vectors @ self.unit_vectors[i]
        sims[i] = -np.inf
        top = np.argsort(-sims, kind="stable")[:n]
        return [(self.words[j], float(sims[j])) for j in top]
