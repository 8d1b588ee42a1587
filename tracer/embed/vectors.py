"""One Embedding type for every model, and its storage.

On disk an embedding is a folder::

    vectors.npy     float32, shape (n_words, dim), saved with allow_pickle=False
    words.txt       one word a line, in row order
    card.json       how it was made: model, settings, slice, corpus hash, seed, versions
    extra-NAME.npy  optional arrays a model keeps (PPMI-SVD: singular values, context vectors)
"""

from __future__ import annotations

import dataclasses
import json
import os
from functools import cached_property
from pathlib import Path

import numpy as np

from ..errors import InputError, WordNotInVocabulary
from ..corpus.workspace import write_atomic


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

    # ---- storage --------------------------------------------------------------------------
    def save(self, folder: str | os.PathLike) -> Path:
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        for name, arr in {"vectors": self.vectors, **{f"extra-{k}": v for k, v in self.extras.items()}}.items():
            tmp = folder / f"{name}.tmp.npy"
            np.save(tmp, np.asarray(arr), allow_pickle=False)
            os.replace(tmp, folder / f"{name}.npy")
        write_atomic(folder / "words.txt", "".join(w + "\n" for w in self.words))
        # the card is written last: a folder with a card is complete
        write_atomic(folder / "card.json", json.dumps(self.card, indent=1, sort_keys=True))
        return folder

    @classmethod
    def load(cls, folder: str | os.PathLike) -> "Embedding":
        folder = Path(folder)
        card = json.loads((folder / "card.json").read_text(encoding="utf-8"))
        vectors = np.load(folder / "vectors.npy", allow_pickle=False)
        words = (folder / "words.txt").read_text(encoding="utf-8").split("\n")[:-1]
        extras = {p.stem[len("extra-"):]: np.load(p, allow_pickle=False) for p in sorted(folder.glob("extra-*.npy"))}
        return cls(words, vectors, card, extras)

    def save_word2vec_format(self, path: str | os.PathLike, binary: bool = False) -> None:
        """Write the word2vec text (or binary) format that gensim's loader reads."""
        from gensim.models import KeyedVectors
        kv = KeyedVectors(self.dim)
        kv.add_vectors(self.words, self.vectors.astype(np.float32))
        # gensim orders by a "count" attribute; descending pseudo-counts keep our row order
        kv.expandos["count"] = np.arange(len(self.words), 0, -1, dtype=np.int64)
        tmp = Path(str(path) + ".tmp")
        kv.save_word2vec_format(str(tmp), binary=binary)
        os.replace(tmp, path)

    @classmethod
    def from_word2vec_format(cls, path: str | os.PathLike, binary: bool | None = None) -> "Embedding":
        """Read vectors someone else trained (word2vec text or binary format)."""
        from gensim.models import KeyedVectors
        path = Path(path)
        if not path.is_file():
            raise InputError(f"{path}: no such file")
        if binary is None:
            binary = path.suffix.lower() == ".bin"
        try:
            kv = KeyedVectors.load_word2vec_format(str(path), binary=binary)
        except (ValueError, UnicodeDecodeError, EOFError) as e:
            raise InputError(f"{path}: not a word2vec {'binary' if binary else 'text'} file ({e})") from None
        return cls(list(kv.index_to_key), np.asarray(kv.vectors, dtype=np.float32),
                   {"model": "external", "source_file": str(path), "slice": "external"})
