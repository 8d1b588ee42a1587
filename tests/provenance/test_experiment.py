from pathlib import Path

import pytest

from tracer.provenance.experiment import experiment_summary, load_experiment
from tracer.errors import InputError

ROOT = Path(__file__).resolve().parents[2]
GOOD = """[corpus]
inputs = ["a.jsonl"]
workspace = "w"

[measure]
tests = "t.toml"
"""


def test_the_demo_experiment_reads():
    exp = load_experiment(ROOT / "configs" / "demo.toml")
    assert exp.inputs[0] == (ROOT / "corpora_demo" / "archive.jsonl.gz").resolve()
    assert exp.models == ("ppmi-svd",) and exp.trace_tests == ("gazette_outlet", "tribune_mix")
    assert exp.counts.window == 5 and exp.ppmi_svd.dim == 100


def test_defaults_fill_in(tmp_path):
    p = tmp_path / "e.toml"
    p.write_text(GOOD, encoding="utf-8")
    exp = load_experiment(p)
    assert exp.workspace == (tmp_path / "w").resolve() and exp.bootstrap == 20 and exp.measure_slices == ("all",)
    # case folding as ingest; the words known in every slice in measure and in drift (as the commands)
    assert exp.tokenizer.case_rule == "fold" and not exp.per_slice_words and not exp.drift_per_slice_words


def test_case_rule_and_per_slice_words_are_read_and_part_of_the_run_settings(tmp_path):
    p = tmp_path / "e.toml"
    p.write_text(GOOD.replace('workspace = "w"', 'workspace = "w"\ncase_rule = "turkish"')
                 + "per_slice_words = true\n[drift]\nper_slice_words = true\n", encoding="utf-8")
    exp = load_experiment(p)
    assert exp.tokenizer.case_rule == "turkish" and exp.per_slice_words and exp.drift_per_slice_words
    summary = experiment_summary(exp)  # the resolved settings the run key is made of
    assert summary["tokenizer"]["case_rule"] == "turkish"
    assert summary["per_slice_words"] is True and summary["drift_per_slice_words"] is True


# each bad file and the exact message it must produce ({p} is the file's path)
BAD = [
    (GOOD + "\n[counts]\nwindow = 5\nwindw = 3\n",
     "{p}, line 10: unknown key counts.windw (the keys of [counts] are window, min_count, weighting, max_vocab)"),
    (GOOD + "\n[counts]\nwindow = \"five\"\n", "{p}, line 9: counts.window must be a whole number, not 'five'"),
    (GOOD + "\n[report]\ntitle = \"x\"\n",
     "{p}, line 8: unknown section [report] (the sections are corpus, counts, models, measure, trace, drift, compute)"),
    (GOOD.replace('inputs = ["a.jsonl"]', 'inputs = "a.jsonl"'),
     "{p}, line 2: corpus.inputs must be a list of text, not 'a.jsonl'"),
    (GOOD.replace('workspace = "w"\n', ''), "{p}: missing corpus.workspace"),
    (GOOD + "\n[models]\nuse = [\"glove\"]\n",
     "{p}, line 9: models.use lists 'glove'; use ppmi-svd and/or word2vec"),
    (GOOD + "\n[models]\nppmi_svd = { dimension = 50 }\n",
     "{p}, line 9: unknown key models.ppmi_svd.dimension (the keys are dim, eig_power, alpha, shift, seed)"),
    (GOOD + "\n[counts]\nweighting = \"gauss\"\n",
     "{p}: weighting must be one of uniform, harmonic, linear; got 'gauss'"),
    (GOOD + "\n[counts]\nlowercase = true\n", "{p}, line 9: unknown key counts.lowercase"),
    ("[corpus\n", "{p}: not valid TOML"),
    (GOOD.replace('workspace = "w"', 'workspace = "w"\ncase_rule = "greek"'),
     "{p}, line 4: corpus.case_rule is 'greek'; use fold or turkish"),
    (GOOD.replace('workspace = "w"', 'workspace = "w"\ncase_rule = "lower"'),
     "{p}, line 4: corpus.case_rule is 'lower'; use fold or turkish"),
    (GOOD.replace('workspace = "w"', 'workspace = "w"\nlowercase = false\ncase_rule = "turkish"'),
     "{p}, line 5: corpus.case_rule applies only when words are lower-cased"),
    (GOOD + 'per_slice_words = "yes"\n', "{p}, line 7: measure.per_slice_words must be a true or false, not 'yes'"),
    (GOOD + "\n[drift]\nper_slice_words = 1\n", "{p}, line 9: drift.per_slice_words must be a true or false, not 1"),
]


@pytest.mark.parametrize("text, message", BAD)
def test_bad_experiment_files_give_exact_messages(tmp_path, text, message):
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as e:
        load_experiment(p)
    assert str(e.value).startswith(message.format(p=p))
