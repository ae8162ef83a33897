"""Figures (:mod:`.plots`) and the self-contained HTML report (:mod:`.html`)."""
