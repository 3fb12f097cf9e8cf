"""The packed body of a push (foldwise.wire): the same assessment as its JSON, and bad framing or bad
references into the tail refused with a 422 that says what is wrong, nothing stored."""

from __future__ import annotations

import json

import numpy as np
import pytest

from foldwise.payload import AssessmentPayload
from foldwise.store import load_payload
from foldwise.wire import CONTENT_TYPE, MAGIC, read_packed_body

PACKED = {"content-type": CONTENT_TYPE}


def _body(payload: AssessmentPayload, *, header: dict | None = None, tail: bytes | None = None) -> bytes:
    """A packed body written by hand from the payload: its packed JSON, predictions moved to the tail."""
    doc = json.loads(payload.packed_json()) if header is None else header
    if header is None:
        offset = 0
        for prediction, block in zip(doc["predictions"], payload.predictions, strict=True):
            prediction["data"] = {"offset": offset, "size": len(block.data)}
            offset += len(block.data)
    encoded = json.dumps(doc).encode()
    blocks = b"".join(p.data for p in payload.predictions) if tail is None else tail
    return MAGIC + len(encoded).to_bytes(8, "little") + encoded + blocks


def _split(body: bytes) -> tuple[bytes, dict, bytes]:
    size = int.from_bytes(body[8:16], "little")
    return body[:8], json.loads(body[16:16 + size]), body[16 + size:]


def test_the_library_writes_the_layout_its_docstring_gives(small_assessment):
    from foldwise.wire import packed_body

    # Read back by hand: magic, header length, header, tail; the header is the packed JSON but for
    # the blocks' references, the tail the blocks one after another.
    assert _split(b"".join(packed_body(small_assessment.payload))) == _split(_body(small_assessment.payload))


def test_a_packed_body_reads_back_as_the_same_assessment_and_is_stored_whole(client, db_path, small_assessment):
    payload = small_assessment.payload
    assert read_packed_body(_body(payload)) == payload
    response = client.post("/api/assessments", content=_body(payload), headers=PACKED)
    assert response.status_code == 201, response.text
    assert client.post("/api/assessments", content=_body(payload), headers=PACKED).status_code == 200
    stored = load_payload(client.app.state.engine, str(payload.uuid))
    assert stored == payload
    assert [np.frombuffer(p.data).tolist() for p in stored.predictions] == \
        [p.array().ravel().tolist() for p in payload.predictions]


def _framing_cases(payload: AssessmentPayload) -> dict[str, tuple[bytes, str]]:
    body = _body(payload)
    header_size = int.from_bytes(body[8:16], "little")
    doc = json.loads(body[16:16 + header_size])
    swapped = json.loads(json.dumps(doc))
    swapped["predictions"][0]["data"], swapped["predictions"][1]["data"] = \
        swapped["predictions"][1]["data"], swapped["predictions"][0]["data"]
    past = json.loads(json.dumps(doc))
    past["predictions"][-1]["data"]["size"] += 8
    return {
        "empty": (b"", "a packed body starts with FOLDWISE"),
        "another magic": (b"NOTFOLDW" + body[8:], "a packed body starts with FOLDWISE"),
        "a header longer than the body": (body[:16 + header_size - 1], "only"),
        "bytes left over": (body + b"\0" * 8, f"the tail holds {len(body) - 16 - header_size + 8} bytes"),
        "blocks out of order": (_body(payload, header=swapped), "predictions[0].data starts at byte"),
        "a block past the end": (_body(payload, header=past), "lie past the end of the body's tail"),
        "a header that is not JSON": (MAGIC + (3).to_bytes(8, "little") + b"{x}", "Invalid JSON"),
    }


@pytest.mark.parametrize("case", ["empty", "another magic", "a header longer than the body", "bytes left over",
                                  "blocks out of order", "a block past the end", "a header that is not JSON"])
def test_bad_framing_is_refused_saying_what_is_wrong_and_nothing_is_stored(client, small_assessment, case):
    body, message = _framing_cases(small_assessment.payload)[case]
    response = client.post("/api/assessments", content=body, headers=PACKED)
    assert response.status_code == 422, response.text
    detail = response.json()["detail"]
    assert any(message in entry["msg"] for entry in detail), detail
    assert all(entry["loc"][0] == "body" for entry in detail)
    assert client.get("/api/assessments").json() == []


def test_a_bad_field_in_the_header_is_named_by_its_path(client, small_assessment):
    body = _body(small_assessment.payload)
    header_size = int.from_bytes(body[8:16], "little")
    doc = json.loads(body[16:16 + header_size])
    doc["predictions"][2]["data"] = {"offset": 0, "size": -8}
    response = client.post("/api/assessments", content=_body(small_assessment.payload, header=doc), headers=PACKED)
    assert response.status_code == 422
    entry = response.json()["detail"][0]
    assert entry["loc"] == ["body", "predictions", 2, "data"]
    assert "whole numbers from 0" in entry["msg"]


def test_a_tail_reference_in_a_json_document_is_refused(client, small_assessment):
    doc = json.loads(small_assessment.payload.packed_json())
    doc["predictions"][0]["data"] = {"offset": 0, "size": 8}
    response = client.post("/api/assessments", content=json.dumps(doc), headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert "send the block as base64 text" in response.text
    assert client.get("/api/assessments").json() == []


def test_the_blocks_read_from_a_packed_body_are_read_only_views_of_it(small_assessment):
    body = _body(small_assessment.payload)
    payload = read_packed_body(body)
    block = payload.predictions[0].data
    assert isinstance(block, memoryview) and block.readonly and block.obj is body  # no copy of the block
    with pytest.raises(TypeError):
        block[0] = 0
    assert payload == small_assessment.payload


def test_a_packed_body_sent_in_pieces_or_without_its_length_is_stored_whole(client, small_assessment):
    payload = small_assessment.payload
    body = _body(payload)
    pieces = [body[start:start + 1000] for start in range(0, len(body), 1000)]
    response = client.post("/api/assessments", content=iter(pieces), headers=PACKED)  # chunked: no length
    assert response.status_code == 201, response.text
    assert load_payload(client.app.state.engine, str(payload.uuid)) == payload


def test_a_body_running_past_its_content_length_is_refused_by_the_push_route():
    import asyncio

    from fastapi.exceptions import RequestValidationError
    from starlette.requests import Request

    from foldwise.web.push import _body_in_one_buffer

    # An HTTP server holds the client to its Content-Length before the app sees the body; here the ASGI
    # messages are handed to the route's reader directly, as a server that did not would hand them.
    messages = iter([{"type": "http.request", "body": b"FOLD", "more_body": True},
                     {"type": "http.request", "body": b"WISE!", "more_body": False}])

    async def receive():
        return next(messages)

    request = Request({"type": "http", "method": "POST", "headers": [(b"content-length", b"8")]}, receive)
    with pytest.raises(RequestValidationError, match="runs past its Content-Length of 8 bytes"):
        asyncio.run(_body_in_one_buffer(request))
