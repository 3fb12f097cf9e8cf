"""Opening a page in the real browser while collecting what its console and scripts complain about."""

from __future__ import annotations


def open_watched(owner, url):
    """A new page of a browser or context at ``url`` (asserting 200), and the list its errors land in."""
    page = owner.new_page()
    problems = []
    page.on("console", lambda message: problems.append(message.text) if message.type == "error" else None)
    page.on("pageerror", lambda error: problems.append(str(error)))
    response = page.goto(url, wait_until="load")
    assert response.status == 200, url
    return page, problems
