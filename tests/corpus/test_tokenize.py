import unicodedata

import pytest
from hypothesis import given
from hypothesis import strategies as st

from tests.conftest import lee_documents
from tracer.corpus.tokenize import (DEFAULT_PATTERN, LEGACY_PATTERN, Tokenizer, TokenizerSettings,
                                    normalize_text)
from tracer.errors import SettingError


@pytest.mark.parametrize("pattern", [DEFAULT_PATTERN, LEGACY_PATTERN])
def test_same_tokens_as_nltk_regexp_tokenizer_on_the_lee_corpus(pattern):
    # outside reference: NLTK's RegexpTokenizer with the same pattern, on the same normalised text
    from nltk.tokenize import RegexpTokenizer
    settings = TokenizerSettings(pattern=pattern)
    ours, ref = Tokenizer(settings), RegexpTokenizer(pattern)
    docs = [d for d in lee_documents() if d.strip()]
    assert len(docs) == 300
    for text in docs:
        assert ours.tokenize(text) == ref.tokenize(normalize_text(text, settings))
    mixed = "Das Mädchen café ﬁne naïve — don’t well‐known Straße İstanbul مدرسة كتاب שָׁלוֹם हिन्दी"
    assert ours.tokenize(mixed) == ref.tokenize(normalize_text(mixed, settings))


def test_no_wall_clock_limit_on_a_long_record(monkeypatch):
    # NLTK bounds each match by nltk.redos.DEFAULT_TIMEOUT; with it at zero NLTK's tokenizer fails at once,
    # and ours must not care (success may not depend on the machine's load)
    import nltk.redos
    from nltk.tokenize import RegexpTokenizer
    monkeypatch.setattr(nltk.redos, "DEFAULT_TIMEOUT", 1e-9)
    text = "word " * 200_000
    with pytest.raises(Exception):
        RegexpTokenizer(DEFAULT_PATTERN).tokenize(text)
    assert len(Tokenizer().tokenize(text)) == 200_000


@pytest.mark.parametrize("text, fold, turkish, lower", [
    ("Straße", "strasse", "strasse", "straße"),          # case folding: ß -> ss (Unicode CaseFolding.txt)
    ("MÄDCHEN", "mädchen", "mädchen", "mädchen"),
    ("İstanbul", "istanbul", "istanbul", "i̇stanbul"),   # str.lower gives i + U+0307
    ("ISTANBUL", "istanbul", "ıstanbul", "istanbul"),    # Turkish: capital I is dotless ı
    ("KIZ", "kiz", "kız", "kiz"),
    ("ΟΔΟΣ", "οδοσ", "οδοσ", "οδος"),                    # folding maps final sigma to sigma
])
def test_case_rules(text, fold, turkish, lower):
    got = [normalize_text(text, TokenizerSettings(case_rule=r)) for r in ("fold", "turkish", "lower")]
    assert got == [fold, turkish, lower]
    assert normalize_text(text, TokenizerSettings(lowercase=False)) == unicodedata.normalize("NFKC", text)


def test_nfd_input_and_compatibility_forms_become_one_word():
    nfd = unicodedata.normalize("NFD", "Élève")
    assert nfd != "Élève" and len(nfd) == 7
    tok = Tokenizer()
    assert tok.tokenize(nfd) == tok.tokenize("élève") == ["élève"]
    assert tok.tokenize("ﬁne") == ["fine"]                       # NFKC: the ligature is two letters
    assert tok.tokenize("ﻛﺘﺎﺏ") == tok.tokenize("كتاب") == ["كتاب"]  # Arabic presentation forms -> letters


def test_typographic_apostrophes_and_hyphens_stay_inside_words():
    tok = Tokenizer()
    # a leading apostrophe is not inside a word, so "‘tis" gives "tis" as "'tis" does
    assert tok.tokenize("don’t ‘tis well‐known non‑stop don't") == ["don't", "tis", "well-known", "non-stop", "don't"]
    old = Tokenizer(TokenizerSettings.from_dict({"lowercase": True, "normalization": "NFKC",
                                                 "pattern": LEGACY_PATTERN}))
    assert old.tokenize("don’t") == ["don", "t"]  # an old workspace keeps its old rule


def test_old_manifests_keep_their_rule_and_new_keys_are_recorded():
    old = TokenizerSettings.from_dict({"lowercase": True, "normalization": "NFKC", "pattern": LEGACY_PATTERN})
    assert (old.case_rule, old.typographic) == ("lower", False)
    assert normalize_text("Straße", old) == "straße"
    new = TokenizerSettings()
    assert TokenizerSettings.from_dict(new.to_dict()) == new
    assert set(new.to_dict()) == {"lowercase", "normalization", "pattern", "case_rule", "typographic"}
    with pytest.raises(SettingError, match="unknown tokenizer setting 'future'"):
        TokenizerSettings.from_dict({**new.to_dict(), "future": 1})
    with pytest.raises(SettingError, match="case rule must be one of"):
        TokenizerSettings(case_rule="klingon")
    with pytest.raises(SettingError, match="not a valid regular expression"):
        TokenizerSettings(pattern="(")


def test_spans_point_at_the_original_text():
    text = "Die STRASSE und die Straße; İstanbul, don’t"
    tok = Tokenizer()
    spans = tok.spans(text)
    assert [text[a:b] for a, b in spans] == ["Die", "STRASSE", "und", "die", "Straße", "İstanbul", "don’t"]
    assert tok.tokenize(text) == ["die", "strasse", "und", "die", "strasse", "istanbul", "don't"]


def test_both_engines_agree_on_every_ascii_word_character():
    # the ASCII fast path of the built-in patterns rests on this: for every ASCII character the
    # regex engine with NLTK's flags and the standard engine with re.ASCII agree on \w
    import re
    import regex
    for c in map(chr, range(128)):
        assert bool(regex.fullmatch(r"\w", c, regex.UNICODE | regex.MULTILINE | regex.DOTALL)) == bool(
            re.fullmatch(r"\w", c, re.ASCII)), repr(c)


@given(st.text(alphabet=st.characters(max_codepoint=127), max_size=200)
       | st.lists(st.sampled_from(["well-known", "o'brien", "a_b", "x--y", "-", "'", "9-5", " ", "\n", "q'"]))
       .map("".join))
@pytest.mark.parametrize("pattern", [DEFAULT_PATTERN, LEGACY_PATTERN])
def test_ascii_text_gives_the_tokens_of_nltks_tokenizer(pattern, text):
    # outside reference: NLTK's RegexpTokenizer on the normalised text, as above, for ASCII texts,
    # which the built-in patterns tokenize with the standard engine
    from nltk.tokenize import RegexpTokenizer
    settings = TokenizerSettings(pattern=pattern)
    assert Tokenizer(settings).tokenize(text) == RegexpTokenizer(pattern).tokenize(normalize_text(text, settings))


def test_text_that_is_not_ascii_keeps_the_regex_engine():
    # a combining accent is a word character for the regex engine, not for the standard one:
    # without normalisation "e" + U+0301 is one token, not "e" alone
    tok = Tokenizer(TokenizerSettings(normalization="none"))
    assert tok.tokenize("cafe\u0301 x") == ["cafe\u0301", "x"]
