"""One colour per family, the same on every page and chart of an assessment."""

from __future__ import annotations

# Chosen for this project: distinguishable on white, and in pairs for the common colour-vision deficiencies.
_COLOURS = ["#1b6f8a", "#c2571a", "#5a8f29", "#8e3b8f", "#b8912a", "#3f4fa8", "#a33a3a", "#2c8c74",
            "#6b6b6b", "#d0779b"]


def family_colours(families: list[str]) -> dict[str, str]:
    """Colours by the families' order in the assessment, so a family keeps its colour on every page."""
    return {family: _COLOURS[i % len(_COLOURS)] for i, family in enumerate(families)}
