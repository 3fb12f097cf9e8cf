"""Where templates, static files and the bundled plotly.js live, installed or in a checkout."""

from __future__ import annotations

from importlib.resources import files
from pathlib import Path

_PACKAGE = Path(__file__).resolve().parent.parent


def _shipped(name: str) -> Path:
    # A wheel installs templates/ and static/ inside the package; a checkout keeps them beside app/.
    for candidate in (_PACKAGE / name, _PACKAGE.parent / name):
        if candidate.is_dir() and any(candidate.iterdir()):
            return candidate
    raise FileNotFoundError(f"foldwise cannot find its {name}/ folder next to {_PACKAGE}")


def templates_dir() -> Path:
    return _shipped("templates")


def static_dir() -> Path:
    return _shipped("static")


def plotly_js() -> Path:
    """The plotly.js that ships inside the installed plotly package: no CDN, works offline."""
    return Path(str(files("plotly") / "package_data" / "plotly.min.js"))
