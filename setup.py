"""Build hook: the demo archive and the configs go into the package as tracer/app/demo_data.

In a source checkout they stay where they are (corpora_demo/, configs/) and tracer.app.demo
finds them there; a built wheel holds a copy, so ``pip install`` then ``tracer demo`` works.
The project's metadata is in pyproject.toml.
"""

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

HERE = Path(__file__).resolve().parent
DEMO_FILES = ["corpora_demo/archive.jsonl.gz", "corpora_demo/README.md", "configs/demo.toml",
              "configs/demo_tests.toml"]


class BuildWithDemoData(build_py):
    def run(self):
        super().run()
        target = Path(self.build_lib) / "tracer" / "app" / "demo_data"
        for name in DEMO_FILES:
            (target / name).parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(HERE / name, target / name)


setup(cmdclass={"build_py": BuildWithDemoData})
