"""The generated parts of the documentation are current."""

from __future__ import annotations

from service.workbench.docs import README, with_catalogue


def test_rules_readme_fact_catalogue_is_current() -> None:
    text = README.read_text(encoding="utf-8")
    assert with_catalogue(text) == text, "run: python -m service.workbench.docs"
