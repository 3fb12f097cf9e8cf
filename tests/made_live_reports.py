"""Live reports built by hand for the store and web tests: an invented run of two families, four
configurations, 2 repeats × 3 outer folds, two metrics, its scores from a seeded generator."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np

from foldwise.definitions import select_in_fold
from foldwise.live_payload import LiveConfiguration, LiveFold, LiveReport, LiveWinner

N_REPEATS, N_OUTER, N_INNER = 2, 3, 2
METRICS = ["accuracy", "neg_log_loss"]
CONFIGURATIONS = [LiveConfiguration(id='logistic:{"C":0.1}', family="logistic"),
                  LiveConfiguration(id='logistic:{"C":1.0}', family="logistic"),
                  LiveConfiguration(id='tree:{"max_depth":2}', family="tree"),
                  LiveConfiguration(id='tree:{"max_depth":4}', family="tree")]
FAMILIES = [[0, 1], [2, 3]]
STARTED = datetime(2026, 3, 4, 10, 0, tzinfo=UTC)


def made_fold(repeat: int, outer_fold: int, *, seed: int = 0) -> LiveFold:
    """A completed fold whose winners follow the selection rule (``definitions.select_in_fold``) from
    invented inner scores."""
    rng = np.random.default_rng([seed, repeat, outer_fold])
    inner = rng.uniform(0.6, 0.95, size=(len(CONFIGURATIONS), N_INNER))
    chosen = select_in_fold(inner, FAMILIES)
    winners = [LiveWinner(config=c, inner_mean=float(inner[c].mean()),
                          outer_scores=[float(rng.uniform(0.55, 0.95)), float(-rng.uniform(0.2, 0.7))])
               for c in chosen.family]
    return LiveFold(repeat=repeat, outer_fold=outer_fold, n_train=20, n_test=10, winners=winners,
                    overall=chosen.overall)


def made_report(n_folds_done: int = 2, *, fits_done: int | None = None, seconds: float = 0.0,
                state: str = "running", reason: str | None = None, name: str = "invented live run",
                **changes) -> LiveReport:
    """The run's report once ``n_folds_done`` folds (in repeat, outer fold order) have completed."""
    total = N_REPEATS * N_OUTER * len(CONFIGURATIONS) * (N_INNER + 1)
    folds = [made_fold(r, o) for r, o in np.ndindex(N_REPEATS, N_OUTER)][:n_folds_done]
    done = fits_done if fits_done is not None else n_folds_done * len(CONFIGURATIONS) * (N_INNER + 1)
    sent = STARTED + timedelta(seconds=seconds)
    fields = dict(name=name, dataset="invented coins", task="classification", metrics=METRICS, n_repeats=N_REPEATS,
                  n_outer_folds=N_OUTER, n_inner_folds=N_INNER, configurations=CONFIGURATIONS, started_at=STARTED,
                  sent_at=sent, state=state, reason=reason, fits_done=done, fits_total=total,
                  seconds_per_fit=0.5 if done else None, mean_fit_time=0.4 if done else None,
                  expected_end=sent + timedelta(seconds=0.5 * (total - done)) if done else None, folds=folds)
    return LiveReport(**(fields | changes))
