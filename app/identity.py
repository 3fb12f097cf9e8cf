"""What makes two pushes of one uuid the same assessment: the digest of their content.

A uuid names one assessment. Pushing a stored uuid again with the same content is a harmless retry
(answered 200, ``created: false``); with different content it is a conflict (409), never a silent
drop of the new content. "The same content" is decided by :func:`content_digest`, which the store
keeps beside the assessment (``assessments.content_digest``).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from foldwise.payload import AssessmentPayload, Prediction

# Not content: when the document was made (a sender that leaves it out gets the time of arrival, so a
# retry would differ) and which encoding it used (lists or packed columns).
OUTSIDE_THE_DIGEST = frozenset({"created_at", "schema_version"})
_HASHED_APART = frozenset({"inner_scores", "outer_scores", "predictions"})  # as arrays and raw bytes
_PREDICTION_FIELDS = [name for name in Prediction.model_fields if name != "data"]


def content_digest(payload: AssessmentPayload) -> str:
    """sha256 (hex) of the assessment's content, equal for the JSON and the packed form of one payload.

    The canonical form: every field except those in ``OUTSIDE_THE_DIGEST``, as validated (so ``0.80``
    and ``0.8``, ``1`` and ``1.0`` in a score column, or a list and a packed column, are the same), as
    JSON with sorted keys and no spaces, the predictions' fields other than their bytes as one list per
    field; then each score column by name as little-endian int64 or float64 (one NaN bit pattern for every
    failed fit); then the prediction blocks' raw bytes in payload order. Winners left out and computed by
    the validator are part of it, as they are of what is stored. Rows keep their order: it is stored too.
    """
    header = payload.model_dump(mode="json", exclude=set(OUTSIDE_THE_DIGEST | _HASHED_APART))
    if not header["design"].get("trusted"):  # added later: a document without trust keeps the digest it had
        header["design"].pop("trusted", None)
    predictions = payload.predictions
    header["predictions"] = {name: [getattr(p, name) for p in predictions] for name in _PREDICTION_FIELDS}
    text = json.dumps(header, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    digest = hashlib.sha256(text.encode("utf-8"))
    for block in ("inner_scores", "outer_scores"):
        columns = getattr(payload, block)
        for name in sorted(type(columns).model_fields):
            values = getattr(columns, name)
            if values.dtype.kind == "f":  # one NaN for every failed fit, whatever bits a sender's NaN had
                values = np.where(np.isnan(values), np.nan, values)
            values = values.astype("<f8" if values.dtype.kind == "f" else "<i8", copy=False)
            digest.update(f"{block}.{name}:{len(values)}".encode())
            digest.update(values.tobytes())
    digest.update(f"predictions:{sum(len(p.data) for p in predictions)}".encode())
    for prediction in predictions:
        digest.update(prediction.data)
    return digest.hexdigest()
