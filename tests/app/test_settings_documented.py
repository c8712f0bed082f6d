"""Every setting is documented: the README names each field's environment variable."""

from __future__ import annotations

import re

from app.settings import PROJECT_ROOT, Settings

README = PROJECT_ROOT / "README.md"


def _documented_variables() -> set[str]:
    """The variables in the first column of the README's configuration table."""
    text = README.read_text(encoding="utf-8")
    section = text.split("## Configuration", 1)[1].split("\n## ", 1)[0]
    return set(re.findall(r"^\| `(TREEWRIGHT_[A-Z_]+)` \|", section, flags=re.MULTILINE))


def test_settings_every_field_is_in_the_readme_table() -> None:
    expected = {f"TREEWRIGHT_{name.upper()}" for name in Settings.model_fields}
    missing = expected - _documented_variables()
    assert not missing, f"settings missing from README.md's configuration table: {missing}"


def test_settings_readme_table_names_no_setting_that_does_not_exist() -> None:
    known = {f"TREEWRIGHT_{name.upper()}" for name in Settings.model_fields}
    stale = _documented_variables() - known
    assert not stale, f"README.md documents settings that do not exist: {stale}"
