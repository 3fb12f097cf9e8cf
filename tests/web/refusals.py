"""Reading a refusal: every 4xx has the one shape {"detail": [{"loc", "msg", "type"}]} (foldwise.web.errors)."""

from __future__ import annotations


def message(response) -> str:
    """The refusal's messages, one per line, after checking that the body has the one shape."""
    detail = response.json()["detail"]
    assert isinstance(detail, list) and detail, detail
    for entry in detail:
        assert set(entry) >= {"loc", "msg", "type"} and isinstance(entry["loc"], list), entry
    return "\n".join(entry["msg"] for entry in detail)
