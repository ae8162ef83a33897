"""The documentation generated from the schema is current."""

from pathlib import Path

from gridpop.config import reference_markdown

ROOT = Path(__file__).resolve().parents[1]


def test_scenario_reference_is_current():
    """docs/scenario.md is generated from the section classes in gridpop/config/; regenerate
    it with `python -m gridpop.config > docs/scenario.md` after changing the schema."""
    text = (ROOT / "docs" / "scenario.md").read_text()
    assert text.strip() == reference_markdown().strip()


def test_readme_keeps_its_two_setup_commands():
    readme = (ROOT / "README.md").read_text()
    head = readme[: readme.index("## Usage")]
    assert "gridpop run scenarios/demo/base.toml" in head
    assert "python -m pytest" in head
    assert (ROOT / "scenarios" / "demo" / "base.toml").exists()
