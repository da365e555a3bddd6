"""Build step beside pyproject.toml: the demo's chain files and clip go into the package.

They live in ``configs/`` and ``clips/`` of the checkout, where the README's commands name
them; a wheel carries a copy in ``livecurve/_demo`` so that ``livecurve demo`` (and
``livecurve.outputs.demo.chain_path``) work from a plain, non-editable install too.  An
editable install reads them from the checkout and copies nothing.
"""

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

HERE = Path(__file__).resolve().parent
DEMO_FILES = (("configs", "*.toml"), ("clips", "demo.mp4"), ("clips", "make_demo_clip.py"))


class BuildWithDemo(build_py):
    def run(self):
        super().run()
        if getattr(self, "editable_mode", False):
            return
        dest = Path(self.build_lib) / "livecurve" / "_demo"
        dest.mkdir(parents=True, exist_ok=True)
        for folder, pattern in DEMO_FILES:
            for f in sorted((HERE / folder).glob(pattern)):
                shutil.copy2(f, dest / f.name)


setup(cmdclass={"build_py": BuildWithDemo})
