"""The progress bar of a run: a widget in a notebook that has ipywidgets, one updated text line elsewhere.

``tqdm.auto`` picks the widget bar in any notebook kernel and, where ipywidgets is missing, fails or falls
back with a warning; here the text bar is chosen outright in that case. Jupyter shows a text bar's
carriage returns as one line rewritten in place, so a run prints one line, not one per update.
"""

from __future__ import annotations

import sys

from tqdm.std import tqdm as text_bar


def progress_bar(**options):
    """A tqdm bar with ``options`` (total, unit, desc, disable), the widget kind where it can be drawn."""
    if _in_notebook() and _has_widgets():
        from tqdm.notebook import tqdm as widget_bar

        return widget_bar(**options)
    # In a notebook the text bar is redrawn at most twice a second: every redraw is a message to the browser.
    return text_bar(file=sys.stderr, mininterval=0.5 if _in_notebook() else 0.1, **options)


def _in_notebook() -> bool:
    shell = sys.modules.get("IPython")
    ipython = getattr(shell, "get_ipython", lambda: None)() if shell else None
    return ipython is not None and getattr(ipython, "kernel", None) is not None


def _has_widgets() -> bool:
    try:
        import ipywidgets  # noqa: F401
    except ImportError:
        return False
    return True
