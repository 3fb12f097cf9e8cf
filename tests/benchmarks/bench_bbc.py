"""BBC-CV's bootstrap (foldwise.stats.intervals.bbc_interval) at the size the issue names.

B = 1,000 bootstrap samples of 5,000 rows × 300 configurations of invented binary predictions (seeded):
accuracy from predicted labels and the Brier score from probabilities, target ≤ 2 s each (the
fastest of three rounds, so other work on a shared machine counts less); ROC AUC, which needs one
sort and cumulative sum per configuration and bootstrap, is timed and printed without a target.
The process's CPU time is printed beside the wall time.
"""

from __future__ import annotations

import sys
import time

import numpy as np
from _common import Targets

from foldwise.stats.intervals import bbc_interval

ROUNDS = 3


def _timed(predictions, y, metric: str, rounds: int) -> tuple[float, float]:
    best_wall, best_cpu = np.inf, np.inf
    for _ in range(rounds):
        wall, cpu = time.perf_counter(), time.process_time()
        bbc_interval(predictions, y, metric=metric, n_bootstrap=1000, random_state=0)
        best_wall, best_cpu = min(best_wall, time.perf_counter() - wall), min(best_cpu, time.process_time() - cpu)
    return best_wall, best_cpu


def main() -> int:
    targets = Targets("BBC-CV: 1,000 bootstraps of 5,000 rows × 300 configurations")
    rng = np.random.default_rng(0)
    y = rng.integers(0, 2, size=5000)
    proba = np.clip(0.5 + (y[:, None] - 0.5) * rng.uniform(0.1, 0.6, (5000, 300))
                    + rng.normal(0, 0.25, (5000, 300)), 0, 1)
    for metric, predictions, rounds in (("accuracy", (proba > 0.5).astype(int), ROUNDS),
                                        ("neg_brier_score", proba, ROUNDS), ("roc_auc", proba, 1)):
        wall, cpu = _timed(predictions, y, metric, rounds)
        targets.figure(f"{metric}: CPU time", cpu, "s")
        if metric == "roc_auc":
            targets.figure(f"{metric}: wall time", wall, "s")
        else:
            targets.at_most(f"{metric}: wall time", wall, 2.0, "s")
    return targets.finish()


if __name__ == "__main__":
    sys.exit(main())
