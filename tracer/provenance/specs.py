"""Association tests written by the user in a TOML file.

    [tests.gazette]
    about = "velmari with unpleasant, osterin with pleasant words (planted in the Gazette)"
    targets_x = ["velmari", "velmaris", "velmar"]        # first target set
    targets_y = ["osterin", "osterins", "oster"]         # second target set; leave out for a one-target test
    attributes_a = ["agony", "terrible", "evil"]         # first attribute set
    attributes_b = ["joy", "love", "peace"]              # second attribute set
    attribute_pairs = [["agony", "joy"], ["evil", "love"]]   # optional, for RIPA; default: a_i with b_i

A two-target test (``targets_y`` given) is the WEAT design of Caliskan, Bryson
and Narayanan (2017); a one-target test scores each target word.

Words are kept as written (only stripped of spaces) when the file is read; they
take the form of the corpus tokens where a test meets a workspace, through
:func:`normalized_test` and the workspace's own rule (normal form, typographic
marks, case rule: see :mod:`tracer.corpus.tokenize`). A word in NFD, in capitals
or with a curly apostrophe thus matches the corpus word it stands for.
"""

from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path

from tracer.core.association import AssociationTest
from tracer.errors import InputError

_KEYS = {"about", "targets_x", "targets_y", "attributes_a", "attributes_b", "attribute_pairs"}


def _word_list(path: Path, name: str, key: str, value) -> tuple[str, ...]:
    if not isinstance(value, list) or not value or not all(isinstance(w, str) and w.strip() for w in value):
        raise InputError(f"{path}: test {name!r}: {key} must be a non-empty list of words")
    words = tuple(w.strip() for w in value)
    _no_duplicates(path, name, key, [w.casefold() for w in words])
    return words


def _no_duplicates(path, name: str, key: str, words: list[str]) -> None:
    dup = sorted({w for w in words if words.count(w) > 1})
    if dup:
        raise InputError(f"{path}: test {name!r}: {key} lists {', '.join(dup)} more than once")


def normalized_test(test: AssociationTest, ws) -> AssociationTest:
    """``test`` with every word in the form of the corpus tokens of workspace ``ws``.

    Normalising twice gives the same words, so an entry point may call it on a
    test that another already normalised. Two words that become one (``"Straße"``
    and ``"strasse"`` under case folding) are an error, not a silent merge.
    """
    def norm(key, words):
        if words is None:
            return None
        out = tuple(ws.normalize_words(words))
        _no_duplicates("tests", test.name, key + " (after normalisation)", list(out))
        return out
    pairs = tuple(tuple(ws.normalize_words(p)) for p in test.attribute_pairs)
    return dataclasses.replace(test, targets_x=norm("targets_x", test.targets_x),
                               targets_y=norm("targets_y", test.targets_y),
                               attributes_a=norm("attributes_a", test.attributes_a),
                               attributes_b=norm("attributes_b", test.attributes_b), attribute_pairs=pairs)


def normalized_tests(tests: dict[str, AssociationTest], ws) -> dict[str, AssociationTest]:
    """:func:`normalized_test` of every test, by name."""
    return {name: normalized_test(t, ws) for name, t in tests.items()}


def load_tests(path: str | Path) -> dict[str, AssociationTest]:
    """Read every test of a TOML file; errors name the file, the test and the key."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such test file")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{path}: not valid TOML: {e}") from None
    except UnicodeDecodeError:
        raise InputError(f"{path}: not valid UTF-8") from None
    unknown_top = set(data) - {"tests"}
    if unknown_top:
        raise InputError(f"{path}: unknown top-level key {sorted(unknown_top)[0]!r}; tests go under [tests.NAME]")
    tables = data.get("tests")
    if not isinstance(tables, dict) or not tables:
        raise InputError(f"{path}: no tests; write each as a table [tests.NAME]")
    out = {}
    for name, t in tables.items():
        if not isinstance(t, dict):
            raise InputError(f"{path}: tests.{name} must be a table")
        unknown = set(t) - _KEYS
        if unknown:
            raise InputError(f"{path}: test {name!r}: unknown key {sorted(unknown)[0]!r} "
                             f"(the keys are {', '.join(sorted(_KEYS))})")
        for key in ("targets_x", "attributes_a", "attributes_b"):
            if key not in t:
                raise InputError(f"{path}: test {name!r}: missing {key}")
        x = _word_list(path, name, "targets_x", t["targets_x"])
        y = _word_list(path, name, "targets_y", t["targets_y"]) if "targets_y" in t else None
        a = _word_list(path, name, "attributes_a", t["attributes_a"])
        b = _word_list(path, name, "attributes_b", t["attributes_b"])
        if "attribute_pairs" in t:
            pairs = t["attribute_pairs"]
            if not isinstance(pairs, list) or not all(isinstance(p, list) and len(p) == 2 and
                                                      all(isinstance(w, str) for w in p) for p in pairs):
                raise InputError(f"{path}: test {name!r}: attribute_pairs must be a list of [word, word] pairs")
            pairs = tuple((p[0].strip(), p[1].strip()) for p in pairs)
        else:
            pairs = tuple(zip(a, b))
        about = t.get("about", "")
        if not isinstance(about, str):
            raise InputError(f"{path}: test {name!r}: about must be text")
        out[name] = AssociationTest(name, x, y, a, b, pairs, about)
    return out


def select_tests(tests: dict[str, AssociationTest], names, path) -> dict[str, AssociationTest]:
    """The named tests (all when ``names`` is empty); an unknown name says which tests there are."""
    unknown = [n for n in names if n not in tests]
    if unknown:
        raise InputError(f"{path}: no test named {unknown[0]!r}; the tests are {', '.join(tests)}")
    return {n: tests[n] for n in names} if names else dict(tests)
