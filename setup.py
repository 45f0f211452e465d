"""Build step that ships the top-level ``templates/`` folder inside the wheel as
``budget/templates/`` (the report renderer looks there first, then beside the package).

Everything else about the build is in pyproject.toml.
"""

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py


class BuildWithTemplates(build_py):
    """build_py, plus a copy of ``templates/`` into the built package (not for editable
    installs: those read the top-level folder directly)."""

    def run(self):
        super().run()
        if getattr(self, "editable_mode", False):
            return
        src = Path(__file__).resolve().parent / "templates"
        dst = Path(self.build_lib) / "budget" / "templates"
        dst.mkdir(parents=True, exist_ok=True)
        for f in sorted(src.iterdir()):
            if f.is_file():
                shutil.copy2(f, dst / f.name)


setup(cmdclass={"build_py": BuildWithTemplates})
