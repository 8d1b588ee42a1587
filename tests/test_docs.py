"""The README's commands and example stay true."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_ci_runs_the_readme_test_line():
    lines = [line.strip() for line in README.splitlines() if "pytest" in line and line.startswith("    python3 -m venv")]
    assert len(lines) == 1
    assert lines[0] in (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert any(line.strip().startswith("python3 -m venv") and "tracer demo" in line for line in README.splitlines())


def test_readme_states_the_cautions_and_conventions():
    for phrase in ("not proof of discrimination", "Word lists encode choices", "Small corpora",
                   "qualified reviewers and the applicable law", "population standard deviation (divide by n)",
                   "0.2 is small, 0.5 medium and 0.8"):
        assert phrase in " ".join(README.split())


def test_the_python_example_is_the_tested_one():
    # the README's Python section shows docs/python_example.py word for word; tests/app/test_api.py
    # runs that file on the demo workspace
    block = re.search(r"## Python\n\n.*?```python\n(.*?)```", README, re.S).group(1)
    assert block == (ROOT / "docs" / "python_example.py").read_text(encoding="utf-8")
