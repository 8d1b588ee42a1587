"""Embeddings on disk.

An embedding is a folder::

    vectors.npy     float32, shape (n_words, dim), saved with allow_pickle=False
    words.txt       one word a line, in row order
    card.json       how it was made: model, settings, slice, corpus hash, seed, versions
    extra-NAME.npy  optional arrays a model keeps (PPMI-SVD: singular values, context vectors)

and vectors from elsewhere come in word2vec's text or binary format.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from tracer.core.embedding import Embedding
from tracer.errors import InputError
from tracer.files import write_atomic


def save_embedding(emb: Embedding, folder: str | os.PathLike) -> Path:
    """Store an embedding as a folder (the card last: a folder with a card is complete)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name, arr in {"vectors": emb.vectors, **{f"extra-{k}": v for k, v in emb.extras.items()}}.items():
        tmp = folder / f"{name}.tmp.npy"
        np.save(tmp, np.asarray(arr), allow_pickle=False)
        os.replace(tmp, folder / f"{name}.npy")
    write_atomic(folder / "words.txt", "".join(w + "\n" for w in emb.words))
    # the card is written last: a folder with a card is complete
    write_atomic(folder / "card.json", json.dumps(emb.card, indent=1, sort_keys=True))
    return folder


def load_embedding_folder(folder: str | os.PathLike) -> Embedding:
    """Read an embedding folder written by :func:`save_embedding`."""
    folder = Path(folder)
    card = json.loads((folder / "card.json").read_text(encoding="utf-8"))
    vectors = np.load(folder / "vectors.npy", allow_pickle=False)
    words = (folder / "words.txt").read_text(encoding="utf-8").split("\n")[:-1]
    extras = {p.stem[len("extra-"):]: np.load(p, allow_pickle=False) for p in sorted(folder.glob("extra-*.npy"))}
    return Embedding(words, vectors, card, extras)


def write_word2vec_format(emb: Embedding, path: str | os.PathLike, binary: bool = False) -> None:
    """Write the word2vec text (or binary) format that gensim's loader reads."""
    from gensim.models import KeyedVectors
    kv = KeyedVectors(emb.dim)
    kv.add_vectors(emb.words, emb.vectors.astype(np.float32))
    # gensim orders by a "count" attribute; descending pseudo-counts keep our row order
    kv.expandos["count"] = np.arange(len(emb.words), 0, -1, dtype=np.int64)
    tmp = Path(str(path) + ".tmp")
    kv.save_word2vec_format(str(tmp), binary=binary)
    os.replace(tmp, path)


def read_word2vec_format(path: str | os.PathLike, binary: bool | None = None) -> Embedding:
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
    return Embedding(list(kv.index_to_key), np.asarray(kv.vectors, dtype=np.float32),
                     {"model": "external", "source_file": str(path), "slice": "external"})
