"""The package metadata uses the forms current setuptools reads without deprecation warnings.

setuptools 77 deprecated the ``license = { text = ... }`` table in favour of a plain SPDX
expression (PEP 639, "Improving License Clarity with Better Package Metadata", 2024), and
accepts the string form only from that version on (setuptools changelog, v77.0.0; from
memory). A license classifier beside an SPDX expression is an error there, so none may exist.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

PYPROJECT = Path(__file__).resolve().parents[1] / "pyproject.toml"


def _project() -> dict:
    return tomllib.loads(PYPROJECT.read_text(encoding="utf-8"))


def test_license_is_an_spdx_string_with_its_file() -> None:
    meta = _project()["project"]
    assert meta["license"] == "Apache-2.0"
    assert meta["license-files"] == ["LICENSE"]
    assert (PYPROJECT.parent / "LICENSE").is_file()
    assert not any(c.startswith("License ::") for c in meta.get("classifiers", []))


def test_build_requires_a_setuptools_that_reads_the_string_form() -> None:
    requires = _project()["build-system"]["requires"]
    (spec,) = [r for r in requires if r.startswith("setuptools")]
    found = re.fullmatch(r"setuptools>=(\d+)(?:\.\d+)*", spec.replace(" ", ""))
    assert found is not None, spec
    assert int(found.group(1)) >= 77
