"""Build step of the wheel: the service's top-level folders become package data of ``app``.

``templates/``, ``static/``, ``migrations/`` and ``alembic.ini`` stay at the top of the
repository; a built wheel carries copies under ``app/_bundled/``, where
``app.settings.resource_path`` finds them with importlib.resources. An editable install reads
them from the checkout instead. Everything else is declared in pyproject.toml.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py

HERE = Path(__file__).resolve().parent
BUNDLED = ("templates", "static", "migrations", "alembic.ini")


class BuildWithAssets(build_py):
    """build_py, then copy the top-level folders into the built ``app`` package."""

    def run(self) -> None:
        super().run()
        if getattr(self, "editable_mode", False):
            return
        target = Path(self.build_lib) / "app" / "_bundled"
        for name in BUNDLED:
            source = HERE / name
            if source.is_dir():
                shutil.copytree(
                    source,
                    target / name,
                    dirs_exist_ok=True,
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc"),
                )
            else:
                target.mkdir(parents=True, exist_ok=True)
                shutil.copy2(source, target / name)


setup(cmdclass={"build_py": BuildWithAssets})
