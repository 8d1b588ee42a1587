import numpy as np
import pytest

from tracer.core.counting import CountSettings
from tracer.corpus.slices import slice_from_spec
from tracer.analysis.similarity import bundled_wordsim353, evaluate_similarity, read_pairs
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.provenance.models import load_embedding, train_embedding
from tracer.core.embedding import Embedding
from tracer.errors import InputError, ModelNotFound, WordNotInVocabulary
from tracer.provenance.vectors_io import read_word2vec_format, write_word2vec_format


@pytest.fixture(scope="module")
def lee_model(lee_ws):
    return train_embedding(lee_ws, slice_from_spec(lee_ws, "all"), "ppmi-svd", CountSettings(min_count=3),
                           PpmiSvdSettings(dim=60))


def test_wordsim_spearman_equals_gensim(lee_model, tmp_path):
    """Reference: gensim KeyedVectors.evaluate_word_pairs on WordSim-353 as shipped in gensim's test data."""
    from gensim.models import KeyedVectors

    path = tmp_path / "lee.txt"
    write_word2vec_format(lee_model, path)
    kv = KeyedVectors.load_word2vec_format(str(path))
    pearson, spearman, oov = kv.evaluate_word_pairs(str(bundled_wordsim353()))
    ours = evaluate_similarity(lee_model, read_pairs(bundled_wordsim353()))
    assert ours.pairs_used > 20
    assert ours.spearman_rho == pytest.approx(spearman.statistic, abs=1e-6)
    assert ours.pearson_r == pytest.approx(pearson.statistic, abs=1e-6)
    assert ours.oov_share * 100 == pytest.approx(oov, abs=1e-9)


def test_storage_round_trips_and_gensim_reads_the_export(lee_ws, lee_model, tmp_path):
    loaded = load_embedding(lee_ws, "ppmi-svd", "all")
    assert loaded.words == lee_model.words
    np.testing.assert_array_equal(loaded.vectors, lee_model.vectors)
    np.testing.assert_array_equal(loaded.extras["singular_values"], lee_model.extras["singular_values"])
    for binary, name in ((False, "v.txt"), (True, "v.bin")):
        write_word2vec_format(lee_model, tmp_path / name, binary=binary)
        back = read_word2vec_format(tmp_path / name)
        assert back.words == lee_model.words
        np.testing.assert_allclose(back.vectors, lee_model.vectors, atol=1e-5 if not binary else 0)


def test_neighbours_and_unknown_words(lee_model):
    near = [w for w, _ in lee_model.neighbours("police", 10)]
    assert "police" not in near and len(near) == 10
    with pytest.raises(WordNotInVocabulary, match="'zzqx' is not in the vocabulary of ppmi-svd slice all"):
        lee_model.vector("zzqx")


def test_missing_model_and_bad_vector_file(lee_ws, tmp_path):
    with pytest.raises(ModelNotFound, match="no word2vec model for slice source=Ashford Post"):
        load_embedding(lee_ws, "word2vec", "source=Ashford Post")
    (tmp_path / "junk.txt").write_text("not a vector file\n", encoding="utf-8")
    with pytest.raises(InputError, match="not a word2vec text file"):
        read_word2vec_format(tmp_path / "junk.txt")


def test_similarity_pairs_are_normalised_like_the_corpus(tmp_path):
    from scipy import stats
    from tracer.corpus.tokenize import TokenizerSettings
    rng = np.random.default_rng(3)
    words = ["strasse", "k\u0131z", "caf\u00e9", "weg", "haus", "kind"]  # forms the corpus's tokens take
    emb = Embedding(words, rng.normal(size=(6, 5)).astype(np.float32), {})
    pairs_file = tmp_path / "pairs.tsv"
    # typed as a person writes them: German capitals (ß folds to ss), Turkish capital I, NFD é
    pairs_file.write_text("STRASSE\tWeg\t7.5\nStraße\tHaus\t6\nKIZ\tKind\t8\nCafe\u0301\tHaus\t2\n",
                          encoding="utf-8")
    pairs = read_pairs(pairs_file)
    got = evaluate_similarity(emb, pairs, TokenizerSettings(case_rule="turkish"))
    assert (got.pairs_used, got.pairs_total) == (4, 4)
    # reference: scipy.stats.spearmanr on the cosines of the four pairs, computed here with numpy
    unit = emb.vectors / np.linalg.norm(emb.vectors, axis=1, keepdims=True)
    idx = {w: i for i, w in enumerate(words)}
    cos = [float(unit[idx[a]] @ unit[idx[b]]) for a, b in
           [("strasse", "weg"), ("strasse", "haus"), ("k\u0131z", "kind"), ("caf\u00e9", "haus")]]
    assert got.spearman_rho == pytest.approx(stats.spearmanr(cos, [7.5, 6, 8, 2]).statistic, abs=1e-6)
    # under plain case folding "KIZ" is "kiz", another word than the corpus's "kız"
    assert evaluate_similarity(emb, pairs, TokenizerSettings()).pairs_used == 3
