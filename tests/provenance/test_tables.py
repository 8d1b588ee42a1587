import numpy as np
import pytest

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
