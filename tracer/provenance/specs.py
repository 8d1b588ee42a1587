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
    words = tuple(w.strip().lower() for w in value)
    dup = sorted({w for w in words if words.count(w) > 1})
    if dup:
        raise InputError(f"{path}: test {name!r}: {key} lists {', '.join(dup)} more than once")
    return words


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
            pairs = tuple((p[0].lower(), p[1].lower()) for p in pairs)
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
