"""Every configuration's outer-test predictions of one repeat, pooled so that each row is predicted once.

What a bootstrap of the pooled out-of-sample predictions (BBC-CV, ``foldwise.stats.intervals.bbc_interval``)
resamples: an array of shape (n_rows, n_configs) — predicted values, or labels — or (n_rows, n_configs,
n_classes) of class probabilities, rows in the order of the repeat's outer test folds.
"""

from __future__ import annotations

import numpy as np

from foldwise.payload import AssessmentPayload


def pooled_predictions(payload: AssessmentPayload, *, repeat: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """(predictions, true targets) of ``repeat``; a configuration whose fit failed in a fold holds NaN there.

    Refused (``ValueError``, saying what would work) when the run did not keep every configuration's
    predictions, when the repeat's outer test folds are not a partition of the rows, or when the
    configurations predicted different kinds of values.
    """
    design = payload.design
    folds = sorted((f for f in payload.outer_folds if f.repeat == repeat), key=lambda f: f.outer_fold)
    if not folds:
        raise ValueError(f"the assessment has no repeat {repeat}; it has {design.n_repeats}")
    rows = np.concatenate([np.asarray(f.test_indices) for f in folds])
    if len(rows) != design.n_samples or len(np.unique(rows)) != len(rows):
        raise ValueError(f"the outer test folds of repeat {repeat} cover {len(np.unique(rows))} of "
                         f"{design.n_samples} rows, some more than once: pooling needs each row predicted once "
                         "(a k-fold outer splitter)")
    if any(f.y_true is None for f in folds):
        raise ValueError("the assessment kept no true targets of its outer folds, so its predictions cannot "
                         "be scored")
    blocks = {(p.outer_fold, p.config): p for p in payload.predictions if p.repeat == repeat}
    n_configs = len(payload.configurations)
    kinds = {p.kind for p in blocks.values()}
    if not blocks or len(kinds) != 1:
        raise ValueError("pooling needs every configuration's outer-test predictions of one kind: run with "
                         f"refit_all=True and keep_predictions=True (this run kept {len(blocks)} blocks of kinds "
                         f"{sorted(kinds)})")
    kind = kinds.pop()
    width = next(iter(blocks.values())).n_columns
    pooled = np.full((len(rows), n_configs, width), np.nan)
    start = 0
    for fold in folds:
        size = len(fold.test_indices)
        for config in range(n_configs):
            block = blocks.get((fold.outer_fold, config))
            if block is not None:
                pooled[start:start + size, config, :] = block.array()
        start += size
    y_true = np.concatenate([np.asarray(f.y_true, dtype=object) for f in folds])
    if design.classes is not None and kind == "predict":  # class positions back to the labels themselves
        labels = np.asarray(design.classes, dtype=object)
        positions = pooled[..., 0]
        values = np.full(positions.shape, None, dtype=object)
        known = ~np.isnan(positions)
        values[known] = labels[positions[known].astype(int)]
        return values, y_true
    if design.classes is None:
        y_true = y_true.astype(float)
    return (pooled[..., 0] if width == 1 else pooled), y_true
