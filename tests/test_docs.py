"""The README's commands and example stay true."""

import os
import re
import subprocess
import sys
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


def test_the_python_example_runs(tmp_path):
    block = re.search(r"## Python\n\n.*?```python\n(.*?)```", README, re.S).group(1)
    for name in ("corpora_demo", "configs"):
        os.symlink(ROOT / name, tmp_path / name)
    res = subprocess.run([sys.executable, "-c", block], cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-2000:]
    assert (tmp_path / "work" / "CURRENT").is_file()
