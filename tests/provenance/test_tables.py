import numpy as np
import pytest

from tests.conftest import write_jsonl
from tracer.corpus.ingest import ingest
from tracer.corpus.tokenize import TokenizerSettings
from tracer.corpus.workspace import Workspace
from tracer.errors import InputError
from tracer.provenance.tables import read_word_values


def _csv(tmp_path, text):
    path = tmp_path / "t.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_reads_words_and_values_in_file_order(tmp_path):
    got = read_word_values(_csv(tmp_path, "job,share,other\n Baker ,0.5,x\nsmith,1e-1,y\nweaver,-2,z\n"),
                           "job", "share")
    assert got.words == ["baker", "smith", "weaver"] and got.column == "share"
    np.testing.assert_array_equal(got.values, [0.5, 0.1, -2.0])


@pytest.mark.parametrize("text, message", [
    ("job,share\na,1\nb,2\n", r"at least 3 rows are needed to correlate; found 2"),
    ("job,value\na,1\nb,2\nc,3\n", r"no column 'share' \(the columns are job, value\)"),
    ("job,share\na,1\nb,many\nc,3\n", r"t.csv, line 3: share is not a number: 'many'"),
])
def test_errors_name_the_problem(tmp_path, text, message):
    with pytest.raises(InputError, match=message):
        read_word_values(_csv(tmp_path, text), "job", "share")
    with pytest.raises(InputError, match="no such file"):
        read_word_values(tmp_path / "missing.csv", "job", "share")


# Expected forms from the Unicode standard (values from memory): CaseFolding.txt folds U+00DF
# (ß) to "ss" (status F); the Turkic mappings take I to dotless ı (U+0131) and İ (U+0130) to i;
# NFKC composes e + U+0301 (combining acute, the NFD form) into é (U+00E9).
@pytest.mark.parametrize("typed, settings, word", [
    ("Straße", TokenizerSettings(), "strasse"),
    ("STRASSE", TokenizerSettings(), "strasse"),
    ("KIZ", TokenizerSettings(case_rule="turkish"), "k\u0131z"),
    ("İSTANBUL", TokenizerSettings(case_rule="turkish"), "istanbul"),
    ("KIZ", TokenizerSettings(), "kiz"),
    ("Cafe\u0301", TokenizerSettings(), "caf\u00e9"),
])
def test_table_words_are_normalised_like_the_corpus(tmp_path, typed, settings, word):
    got = read_word_values(_csv(tmp_path, f"job,share\n{typed},1\nb,2\nc,3\n"), "job", "share", settings)
    assert got.words[0] == word


def test_table_words_find_the_tokens_of_the_corpus(tmp_path):
    records = [{"id": "d1", "source": "Ost", "text": "Die Straße am Café. KIZ und İSTANBUL."},
               {"id": "d2", "source": "Ost", "text": "Der Hafen."}]
    ingest(tmp_path / "ws", [write_jsonl(tmp_path / "c.jsonl", records)],
           tokenizer=TokenizerSettings(case_rule="turkish"))
    ws = Workspace(tmp_path / "ws")
    table = "job,share\nSTRASSE,1\nCafe\u0301,2\nkiz,3\nİstanbul,4\nHAFEN,5\n"
    got = read_word_values(_csv(tmp_path, table), "job", "share", ws.tokenizer_settings)
    # "kiz" typed with a plain i is another word than the corpus's "kız" under the Turkish rule
    assert [w in ws.vocab.index for w in got.words] == [True, True, False, True, True]
    assert got.words == ws.normalize_words(["STRASSE", "Cafe\u0301", "kiz", "İstanbul", "HAFEN"])


def test_two_rows_of_one_word_after_normalisation_are_an_error(tmp_path):
    with pytest.raises(InputError, match=r"t.csv, line 4: 'STRASSE' is the word 'strasse', as is 'Straße' on "
                                         r"line 2 \(words are compared as the corpus normalises them\)"):
        read_word_values(_csv(tmp_path, "job,share\nStraße,1\nweg,2\nSTRASSE,3\n"), "job", "share")
