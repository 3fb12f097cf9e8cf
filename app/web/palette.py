"""One colour and one marker shape per family, the same on every page and chart of an assessment."""

from __future__ import annotations

# Chosen for this project: distinguishable on white, and in pairs for the common colour-vision deficiencies.
_COLOURS = ["#1b6f8a", "#c2571a", "#5a8f29", "#8e3b8f", "#b8912a", "#3f4fa8", "#a33a3a", "#2c8c74",
            "#6b6b6b", "#d0779b"]


def family_colours(families: list[str]) -> dict[str, str]:
    """Colours by the families' order in the assessment, so a family keeps its colour on every page."""
    return {family: _COLOURS[i % len(_COLOURS)] for i, family in enumerate(families)}

# A marker shape per family as well, so that no chart depends on colour alone (plotly's symbol names).
_SYMBOLS = ["circle", "square", "diamond", "triangle-up", "cross", "triangle-down", "x", "star", "hexagon",
            "pentagon"]


def family_symbols(families: list[str]) -> dict[str, str]:
    """Marker shapes by the families' order, like their colours: a family keeps its shape on every chart."""
    return {family: _SYMBOLS[i % len(_SYMBOLS)] for i, family in enumerate(families)}
