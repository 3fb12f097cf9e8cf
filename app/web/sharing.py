"""Share links: the page's full URL plus a read key, which the server trades for a cookie on arrival."""

from __future__ import annotations

from urllib.parse import urlsplit

from fastapi import APIRouter, Request
from pydantic import BaseModel, Field

from foldwise.keys import KeyFile
from foldwise.web.answers import ShareLink
from foldwise.web.errors import error_responses, refusal

router = APIRouter(prefix="/api")


class ShareRequest(BaseModel):
    path: str = Field(min_length=1, max_length=4_000, description="the page and its query, e.g. /assessments/…")


def share_link(keys: KeyFile, base_url: str, path: str) -> str:
    """A link to ``path`` carrying a read key (created for sharing at the first use)."""
    parts = urlsplit(path)
    if parts.scheme or parts.netloc or not path.startswith("/"):
        raise ValueError(f"share a page of this dashboard by its path, such as /assessments/…; got {path!r}")
    readers = [key for key in keys.active("read") if key.label == "share links"]
    key = readers[0] if readers else keys.create("read", label="share links")
    joiner = "&" if parts.query else "?"
    return f"{base_url.rstrip('/')}{path}{joiner}key={key.secret}"


@router.post("/share-links", name="share_links", response_model=ShareLink, responses=error_responses(422))
def create_share_link(request: Request, body: ShareRequest):
    """A link for a teammate: opening it once sets their read-key cookie and shows the same view."""
    try:
        url = share_link(request.app.state.keys, str(request.base_url), body.path)
    except ValueError as error:
        raise refusal(422, str(error), loc=["body", "path"]) from None
    return {"url": url}
