import numpy as np
import pytest

from tracer.core.counting import CountSettings
from tracer.corpus.slices import slice_from_spec
from tracer.provenance.models import train_embedding
from tracer.core.word2vec import Word2VecSettings
from tracer.errors import SettingError


def test_vectors_equal_a_direct_gensim_run(lee_ws):
    """Reference: gensim.models.Word2Vec on the same documents' tokens, same settings and seed, one worker."""
    from gensim.models import Word2Vec

    words = lee_ws.vocab.words
    sentences = [[words[i] for i in lee_ws.document_tokens(d)] for d in range(lee_ws.n_documents)]
    direct = Word2Vec(sentences, vector_size=32, window=5, min_count=5, sg=1, negative=5, epochs=3, seed=11,
                      workers=1)
    ours = train_embedding(lee_ws, slice_from_spec(lee_ws, "all"), "word2vec", CountSettings(window=5, min_count=5),
                           Word2VecSettings(dim=32, epochs=3, seed=11, workers=1), save=False)
    assert set(ours.words) == set(direct.wv.index_to_key)
    rows = [direct.wv.key_to_index[w] for w in ours.words]
    np.testing.assert_allclose(ours.vectors, direct.wv.vectors[rows], rtol=0, atol=1e-6)


def test_fractional_weights_are_refused(lee_ws):
    sl = slice_from_spec(lee_ws, "all")
    with pytest.raises(SettingError, match="whole-number document weights"):
        train_embedding(lee_ws, sl, "word2vec", CountSettings(), Word2VecSettings(dim=8, epochs=1),
                        weights=np.full(lee_ws.n_documents, 0.5), save=False)
