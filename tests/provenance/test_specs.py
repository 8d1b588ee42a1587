import pytest

from tracer.errors import InputError
from tracer.provenance.specs import load_tests

GOOD = """
[tests.one]
about = "x"
targets_x = ["A", "b", "c"]
targets_y = ["d", "e", "f"]
attributes_a = ["g"]
attributes_b = ["h"]

[tests.single]
targets_x = ["a", "b", "c"]
attributes_a = ["g", "i"]
attributes_b = ["h", "j"]
attribute_pairs = [["g", "h"]]
"""


def test_reads_two_and_one_target_tests(tmp_path):
    p = tmp_path / "t.toml"
    p.write_text(GOOD, encoding="utf-8")
    tests = load_tests(p)
    assert tests["one"].two_target and tests["one"].targets_x == ("A", "b", "c")  # as written: the workspace's rule applies later
    assert not tests["single"].two_target and tests["single"].attribute_pairs == (("g", "h"),)
    assert tests["one"].attribute_pairs == (("g", "h"),)  # default: a_i with b_i


def test_the_demo_test_file_reads():
    from pathlib import Path
    tests = load_tests(Path(__file__).resolve().parents[2] / "configs" / "demo_tests.toml")
    assert {"gazette_outlet", "rise_and_fall", "tribune_mix", "control_groups", "occupations"} <= set(tests)


@pytest.mark.parametrize("text, message", [
    ("[tests.t]\ntargets_x = [\"a\"]\n", "test 't': missing attributes_a"),
    ("[tests.t]\ntargets_x = []\nattributes_a = [\"a\"]\nattributes_b = [\"b\"]\n",
     "test 't': targets_x must be a non-empty list of words"),
    ("[tests.t]\ntargets_x = [\"a\", \"A\"]\nattributes_a = [\"a\"]\nattributes_b = [\"b\"]\n",
     "test 't': targets_x lists a more than once"),
    ("[tests.t]\ntargets = [\"a\"]\n", "test 't': unknown key 'targets'"),
    ("[test.t]\ntargets_x = [\"a\"]\n", "unknown top-level key 'test'; tests go under"),
    ("", "no tests; write each as a table"),
    ("[tests.t\n", "not valid TOML"),
    ("[tests.t]\ntargets_x = [\"a\"]\nattributes_a = [\"a\"]\nattributes_b = [\"b\"]\nattribute_pairs = [[\"a\"]]\n",
     "attribute_pairs must be a list of"),
])
def test_bad_test_files_say_what_is_wrong(tmp_path, text, message):
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=message):
        load_tests(p)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="no such test file"):
        load_tests(tmp_path / "none.toml")
