"""A run reporting live to a server, in a child process the test can kill, hold or wait for.

``python -c "import live_child; live_child.main()" URL NAME OUT`` runs a nested CV of a slow tree on part of
the bundled breast-cancer data with ``live=URL`` and writes the assessment's uuid to OUT. Its switches
come from the environment: ``FOLDWISE_TEST_FIT_PAUSE`` (seconds each fit sleeps) and
``FOLDWISE_TEST_GATE`` (a path: after ``FOLDWISE_TEST_GATE_AFTER`` fits, every fit waits until that file
exists, so the test can bring a server up while the run is held).
"""

from __future__ import annotations

import itertools
import os
import sys
import time
from pathlib import Path

from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.datasets import load_breast_cancer
from sklearn.tree import DecisionTreeClassifier

import foldwise

OUTER, INNER, DEPTHS = 3, 3, [1, 2, 3]
N_FITS = OUTER * len(DEPTHS) * (INNER + 1)
PAUSE, GATE, GATE_AFTER = "FOLDWISE_TEST_FIT_PAUSE", "FOLDWISE_TEST_GATE", "FOLDWISE_TEST_GATE_AFTER"
_fits = itertools.count()


class SlowTree(ClassifierMixin, BaseEstimator):
    """A decision tree whose fit takes a while (and may wait at the gate)."""

    def __init__(self, max_depth=1):
        self.max_depth = max_depth

    def fit(self, X, y):
        gate = os.environ.get(GATE)
        if gate and next(_fits) >= int(os.environ.get(GATE_AFTER, "0")):
            while not Path(gate).exists():
                time.sleep(0.05)
        time.sleep(float(os.environ.get(PAUSE, "0")))
        self.tree_ = DecisionTreeClassifier(max_depth=self.max_depth, random_state=0).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


def main() -> None:
    url, name, out = sys.argv[1:4]
    X, y = load_breast_cancer(return_X_y=True)
    assessment = foldwise.nested_cv({"slow tree": (SlowTree(), {"max_depth": DEPTHS})}, X[::2], y[::2], outer=OUTER,
                                    inner=INNER, scoring=["roc_auc", "accuracy"], n_jobs=1, progress=False, name=name,
                                    dataset="breast-cancer (scikit-learn bundled)", live=url, live_interval=0.3)
    Path(out).write_text(assessment.uuid)
