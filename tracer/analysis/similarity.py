"""Word-similarity evaluation: Spearman and Pearson correlation with human ratings."""

from __future__ import annotations

import dataclasses
from pathlib import Path

from scipy import stats

from tracer.errors import InputError
from tracer.core.embedding import Embedding
from tracer.corpus.tokenize import TokenizerSettings, normalize_text


@dataclasses.dataclass(frozen=True)
class SimilarityResult:
    spearman_rho: float
    pearson_r: float
    pairs_used: int
    pairs_total: int

    @property
    def oov_share(self) -> float:
        return 1 - self.pairs_used / self.pairs_total if self.pairs_total else 0.0


def read_pairs(path: str | Path) -> list[tuple[str, str, float]]:
    """Tab-separated ``word1, word2, score`` lines; lines starting with # are comments."""
    out = []
    with open(path, encoding="utf-8") as f:
        for n, line in enumerate(f, start=1):
            if not line.strip() or line.startswith("#"):
                continue
            parts = line.rstrip("\n").split("\t")
            try:
                out.append((parts[0], parts[1], float(parts[2])))
            except (IndexError, ValueError):
                raise InputError(f"{path}, line {n}: expected word1<TAB>word2<TAB>score") from None
    return out


def evaluate_similarity(emb: Embedding, pairs: list[tuple[str, str, float]],
                        settings: TokenizerSettings | None = None) -> SimilarityResult:
    """Cosine similarity against human scores over the pairs whose both words are known.

    The words of each pair are normalised as the corpus text was (``settings``: the workspace's
    tokenizer settings; default those of a new workspace).
    """
    settings = settings or TokenizerSettings()
    model, human = [], []
    for a, b, score in pairs:
        a, b = normalize_text(a.strip(), settings), normalize_text(b.strip(), settings)
        if a in emb and b in emb:
            model.append(emb.similarity(a, b))
            human.append(score)
    if len(model) < 3:
        return SimilarityResult(float("nan"), float("nan"), len(model), len(pairs))
    return SimilarityResult(float(stats.spearmanr(model, human).statistic),
                            float(stats.pearsonr(model, human).statistic), len(model), len(pairs))


def bundled_wordsim353() -> Path:
    """Path of WordSim-353 as shipped in gensim's test data."""
    from gensim.test.utils import datapath
    return Path(datapath("wordsim353.tsv"))
