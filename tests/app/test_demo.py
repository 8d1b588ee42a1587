"""The demo archive holds what corpora_demo/README.md says was planted, and the demo runs end to end."""

import csv
import importlib.util
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tracer.app.cli import cli
from tracer.core.counting import CountSettings
from tracer.provenance.counts import count_slice
from tracer.corpus.slices import slice_from_spec
from tracer.app.demo import run_demo
from tracer.provenance.models import load_embedding
from tracer.corpus.workspace import Workspace

DEMO = Path(__file__).resolve().parents[2] / "corpora_demo"
_spec = importlib.util.spec_from_file_location("gen", DEMO / "generate_demo_corpus.py")
gen = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(gen)


def block(counts, rows, cols):
    idx = counts.vocab.index
    r = [idx[w] for w in rows if w in idx]
    c = [idx[w] for w in cols if w in idx]
    return float(counts.matrix[np.ix_(r, c)].sum())


def ratio_of_weights(ws, weights, group_a, group_b, attr_a, attr_b):
    """(a with attr_a + b with attr_b) / (a with attr_b + b with attr_a): 1 means no association."""
    c = count_slice(ws, weights, CountSettings())
    aligned = block(c, gen.GROUPS[group_a], attr_a) + block(c, gen.GROUPS[group_b], attr_b)
    crossed = block(c, gen.GROUPS[group_a], attr_b) + block(c, gen.GROUPS[group_b], attr_a)
    return aligned / crossed


def ratio(ws, slice_spec, *groups_and_attrs):
    return ratio_of_weights(ws, slice_from_spec(ws, slice_spec).weights, *groups_and_attrs)


def test_outlet_only_association_is_in_the_gazette_only(demo_ws):
    assert ratio(demo_ws, "source=Gazette", "velmari", "osterin", gen.UNPLEASANT, gen.PLEASANT) > 5
    for outlet in ("Ledger", "Courier", "Tribune", "Herald"):
        assert 0.6 < ratio(demo_ws, f"source={outlet}", "velmari", "osterin", gen.UNPLEASANT, gen.PLEASANT) < 1.6


def test_rise_and_fall_peaks_in_the_1980s(demo_ws):
    r = {d: ratio(demo_ws, f"time={d}..{d + 9}", "dranik", "coravel", gen.CAREER, gen.FAMILY)
         for d in range(1950, 2020, 10)}
    assert max(r, key=r.get) in (1970, 1980)
    assert r[1980] > 5 and r[1950] < 1.6 and r[2010] < 1.6


def test_mix_only_change_is_constant_inside_the_tribune(demo_ws):
    docs = demo_ws.documents
    tribune = docs["source"].to_numpy() == "Tribune"
    years = docs["year"].to_numpy(dtype=float)
    early, late = (years < 1970), (years >= 2000)
    args = ("halvin", "morrowick", gen.WEALTH, gen.POVERTY)
    inside_early = ratio_of_weights(demo_ws, (tribune & early).astype(float), *args)
    inside_late = ratio_of_weights(demo_ws, (tribune & late).astype(float), *args)
    assert inside_early > 5 and inside_late > 5
    assert 0.5 < inside_late / inside_early < 2  # steady inside the outlet (planted at one rate)
    whole_early = ratio_of_weights(demo_ws, early.astype(float), *args)
    whole_late = ratio_of_weights(demo_ws, late.astype(float), *args)
    assert whole_late > whole_early * 1.5  # but growing in the archive as the Tribune's share grows


def test_planted_documents_file_matches_the_archive(demo_ws):
    with open(DEMO / "planted_documents.csv", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    ids = set(demo_ws.documents["doc_id"])
    assert all(r["doc_id"] in ids for r in rows)
    gazette = {r["doc_id"] for r in rows if r["association"] == "outlet_gazette"}
    assert len(gazette) == 509 and all(d.startswith("gazette-") for d in gazette)


def test_generator_is_deterministic(tmp_path):
    gen_a, _ = gen.generate(1950)
    import gzip
    import json
    stored = [json.loads(line) for line in gzip.open(DEMO / "archive.jsonl.gz", "rt", encoding="utf-8")]
    assert gen_a == stored


def test_demo_runs_end_to_end_and_leaves_a_usable_workspace(tmp_path):
    result = run_demo(tmp_path / "demo")
    assert "Demo archive: 9100 documents" in result.text
    assert f"Wrote the workspace to {tmp_path / 'demo'}" in result.text
    assert "not proof of discrimination" in result.text
    assert "Trace of gazette_outlet: the source that carries it most is Gazette" in result.text
    assert (result.run_folder / "report.html").is_file()
    ws = Workspace(tmp_path / "demo")
    sea = set(gen.read_topic_words()["sea"]["nouns"].words)
    for model in ("ppmi-svd", "word2vec"):
        emb = load_embedding(ws, model, "all")
        near = [w for w, _ in emb.neighbours("harbour", 6)]
        assert len(sea.intersection(near)) >= 4, (model, near)  # topic words neighbour topic words
    info = CliRunner().invoke(cli, ["info", "-w", str(tmp_path / "demo"), "--format", "json"])
    assert info.exit_code == 0 and '"documents": 9100' in info.stdout


def test_topic_words_hold_no_test_word_and_the_generator_refuses_one(tmp_path):
    # a group, attribute, occupation or pronoun word inside a topic would plant an association
    # nobody wrote down
    probe = set(sum(gen.GROUPS.values(), [])) | set(gen.PLEASANT + gen.UNPLEASANT + gen.CAREER + gen.FAMILY
                                                    + gen.WEALTH + gen.POVERTY) | set(gen.OCCUPATIONS)
    probe |= {"she", "her", "herself", "he", "his", "himself"}
    topics = gen.read_topic_words()
    words = {w for table in topics.values() for ws in table.values() for w in ws.words}
    assert not words & probe and len(words) > 2500
    bad = tmp_path / "topic_words.txt"
    bad.write_text("[sea]\nnouns = harbour nurse\nverbs = sailed\nadjs = salty\n", encoding="utf-8")
    with pytest.raises(ValueError, match="holds words of the association tests: nurse"):
        gen.read_topic_words(bad)


def test_topic_words_are_drawn_with_falling_frequencies():
    """Zipf-like: the word of rank r is drawn with weight 1 / (r + 2); against a direct count of draws
    (numpy.bincount) over 20,000 draws, the first word comes about 1 / 2 / H times (H the sum of weights)."""
    import random
    words = gen.Words([f"w{k}" for k in range(100)])
    r = random.Random(0)
    counts = np.bincount([int(words.draw(r)[1:]) for _ in range(20_000)], minlength=100)
    share = 1 / 2 / sum(1 / (k + 2) for k in range(100))
    assert abs(counts[0] / 20_000 - share) < 0.01
    assert counts[0] > counts[9] > counts[99] and counts[:10].sum() > counts[50:].sum()


def test_the_demo_vocabulary_covers_wordsim_353(demo_ws):
    """At least 100 WordSim-353 pairs (the file gensim ships) have both words in the archive's vocabulary."""
    from tracer.analysis.similarity import bundled_wordsim353, read_pairs
    known = set(demo_ws.vocab.index)
    pairs = read_pairs(bundled_wordsim353())
    assert sum(a.lower() in known and b.lower() in known for a, b, _ in pairs) >= 100


def test_the_demos_word2vec_is_the_same_on_every_run(demo_ws):
    # gensim gives the same vectors for a seed only with one worker thread (gensim's documentation of
    # Word2Vec: workers, seed and PYTHONHASHSEED). The demo's settings on one decade of the archive
    # (the whole archive takes half a minute a model): enough words for several of gensim's jobs per
    # epoch, so two workers would interleave them and give other vectors.
    from tracer.app.demo import DEMO_EXPERIMENT, demo_word2vec
    from tracer.provenance.experiment import load_experiment
    counts = load_experiment(DEMO_EXPERIMENT).counts
    first = demo_word2vec(demo_ws, counts, slice_spec="time=1980..1989", save=False)
    second = demo_word2vec(demo_ws, counts, slice_spec="time=1980..1989", save=False)
    assert first.words == second.words
    np.testing.assert_array_equal(first.vectors, second.vectors)
