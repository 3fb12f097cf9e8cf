"""Estimators that write a line to a log file on every fit, for the journal's and shared steps' tests.

Importable by a child process (tests/runner on its PYTHONPATH), so a run killed from outside can be
counted. Their switches come from the environment, read at each fit, not from their parameters: a
run that resumes must have the very estimators (and so the journal's fingerprint) of the run it
resumes, while the test changes how long a fit takes or where it stops.

- ``FOLDWISE_TEST_FIT_LOG``: the file a line is appended to at the start of every fit;
- ``FOLDWISE_TEST_FIT_PAUSE``: seconds each ``CountedClassifier`` fit sleeps (so a run can be caught
  half way);
- ``FOLDWISE_TEST_INTERRUPT_AT``: the ``CountedClassifier`` fit, counted by the log's lines, that raises
  ``KeyboardInterrupt`` as a Ctrl-C would.
"""

from __future__ import annotations

import os
import pickle
import sys
import time

from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.datasets import load_breast_cancer
from sklearn.decomposition import PCA
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

LOG, PAUSE, INTERRUPT_AT = "FOLDWISE_TEST_FIT_LOG", "FOLDWISE_TEST_FIT_PAUSE", "FOLDWISE_TEST_INTERRUPT_AT"
OUTER, INNER, DEPTHS = 3, 3, [1, 2, 3, 4]
N_FITS = OUTER * len(DEPTHS) * (INNER + 1)  # every configuration refit on every outer fold


def _logged(what: str) -> int:
    """Append ``what`` to the log, if there is one; the number of lines it now has."""
    path = os.environ.get(LOG)
    if not path:
        return 0
    with open(path, "a") as log:  # one short appended line: written whole even by concurrent workers
        log.write(what + "\n")
    return count(path)


def count(path, what: str | None = None) -> int:
    if not os.path.exists(path):
        return 0
    with open(path) as log:
        return sum(1 for line in log if what is None or line.strip() == what)


class CountedClassifier(ClassifierMixin, BaseEstimator):
    """A decision tree (scikit-learn's, fixed seed) that logs its fits."""

    def __init__(self, max_depth=None):
        self.max_depth = max_depth

    def fit(self, X, y):
        fits = _logged("classifier")
        stop_at = os.environ.get(INTERRUPT_AT)
        if stop_at and fits >= int(stop_at):
            raise KeyboardInterrupt
        time.sleep(float(os.environ.get(PAUSE, "0")))
        self.tree_ = DecisionTreeClassifier(max_depth=self.max_depth, random_state=0).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


class CountedScaler(StandardScaler):
    def fit(self, X, y=None, sample_weight=None):
        _logged("scaler")
        return super().fit(X, y, sample_weight)


class CountedPCA(PCA):
    def fit_transform(self, X, y=None):  # what a pipeline calls (PCA.fit does not go through it)
        _logged("pca")
        return super().fit_transform(X, y)


def assess(**options):
    """The journal tests' run: four tree depths on the breast-cancer data (load_breast_cancer)."""
    from foldwise import nested_cv

    X, y = load_breast_cancer(return_X_y=True)
    space = {"counted": (CountedClassifier(), {"max_depth": DEPTHS})}
    return nested_cv(space, X, y, outer=OUTER, inner=INNER, scoring=["roc_auc", "accuracy"], progress=False,
                     **options)


def main() -> None:
    """``python -c 'import counted_fits; counted_fits.main()' JOURNAL OUT``: run with two workers and the
    journal at JOURNAL, and pickle the payload to OUT."""
    journal, out = sys.argv[1:3]
    assessment = assess(checkpoint=journal, n_jobs=2)
    with open(out, "wb") as file:
        pickle.dump(assessment.payload, file)
