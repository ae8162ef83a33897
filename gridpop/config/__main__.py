"""Print the scenario reference: ``python -m gridpop.config > docs/scenario.md``."""

from .docs import reference_markdown

print(reference_markdown(), end="")
