"""The ranking page and JSON: Friedman, mean ranks and Nemenyi's CD against scipy.stats on real nested CVs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.naive_bayes import GaussianNB
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise

X, Y = load_breast_cancer(return_X_y=True)
X, Y = X[::3], Y[::3]  # 190 rows: unequal outer folds of 64, 63 and 63
FAMILIES = ["logistic", "tree", "bayes"]
MARKED = X[:, 0].max()


class FailsWithoutMarkedRow(GaussianNB):
    """Fails on outer refits (more than 100 rows) that lack the marked row: one outer fold per repeat."""

    def fit(self, X, y, sample_weight=None):
        if len(X) > 100 and X[:, 0].max() < MARKED:
            raise ValueError("this test family cannot train without the marked row")
        return super().fit(X, y, sample_weight=sample_weight)


def _space(bayes=None):
    return {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(solver="liblinear")),
                     {"logisticregression__C": [0.1, 1.0]}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]}),
        "bayes": (bayes or GaussianNB(), {"var_smoothing": [1e-9, 1e-3]}),
    }


def _run(space, name, scoring=("roc_auc", "accuracy")):
    outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    return foldwise.nested_cv(space, X, Y, outer=outer, inner=3, scoring=list(scoring), n_jobs=1,
                              progress=False, name=name)


@pytest.fixture(scope="module")
def three():
    return _run(_space(), "ranking: three families")


@pytest.fixture(scope="module")
def flaky():
    with pytest.warns(RuntimeWarning, match="fits failed"):
        return _run(_space(FailsWithoutMarkedRow()), "ranking: bayes fails once per repeat",
                    scoring=["roc_auc"])


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _block_scores(assessment, metric: str, families=FAMILIES) -> np.ndarray:
    """Rows = (repeat, outer_fold) blocks, columns = families: the outer score of the family's configuration
    with the best mean inner score, ties to the first in grid order as GridSearchCV does (scikit-learn)."""
    inner, outer = assessment.inner_scores, assessment.outer_scores
    table = np.full((6, len(families)), np.nan)
    for row, (repeat, fold) in enumerate((r, o) for r in range(2) for o in range(3)):
        for column, family in enumerate(families):
            mine = inner[(inner["repeat"] == repeat) & (inner["outer_fold"] == fold)
                         & (inner["family"] == family) & (inner["metric"] == assessment.selection_metric)]
            means = {config: rows["score"].to_numpy().mean()
                     for config, rows in mine.groupby("config", sort=False)}
            best = max(means, key=lambda config: (means[config], -list(means).index(config)))
            chosen = outer[(outer["repeat"] == repeat) & (outer["outer_fold"] == fold)
                           & (outer["config"] == best) & (outer["metric"] == metric)]
            table[row, column] = chosen["score"].iloc[0]
    return table


def _critical_difference(k: int, n: int) -> float:
    # Reference: Demšar (2006), JMLR 7, CD = q_0.05 sqrt(k(k+1)/(6N)), with q_0.05 the studentized range
    # quantile (infinite df) over sqrt 2, from scipy.stats.studentized_range; Demšar's Table 5(a) prints it
    # to three decimals, hence the tolerance below.
    q = stats.studentized_range.ppf(0.95, k, np.inf) / math.sqrt(2)
    return q * math.sqrt(k * (k + 1) / (6 * n))


@pytest.mark.parametrize("metric", ["roc_auc", "accuracy"])
def test_friedman_and_mean_ranks_match_scipy(client, three, metric):
    _push(client, three)
    body = client.get(f"/api/assessments/{three.uuid}/ranking", params={"metric": metric}).json()
    scores = _block_scores(three, metric)
    # Reference: scipy.stats.friedmanchisquare (Friedman, 1937) over the six blocks.
    reference = stats.friedmanchisquare(*scores.T)
    assert body["friedman_stat"] == pytest.approx(reference.statistic, rel=1e-12)
    assert body["friedman_p"] == pytest.approx(reference.pvalue, rel=1e-12)
    # Reference: scipy.stats.rankdata within each block, 1 = best (greatest score), ties averaged.
    ranks = stats.rankdata(-scores, axis=1).mean(axis=0)
    assert body["mean_ranks"] == pytest.approx(dict(zip(FAMILIES, ranks, strict=True)), abs=1e-12)
    assert body["critical_difference"] == pytest.approx(_critical_difference(3, 6), rel=1e-3)
    assert (body["n_blocks"], body["n_missing"], body["note"], body["metric"]) == (6, 0, "", metric)
    order = [FAMILIES[i] for i in np.argsort(ranks, kind="stable")]
    assert [row["family"] for row in body["families"]] == order
    np.testing.assert_allclose([[block[f] for f in FAMILIES] for block in body["blocks"]], scores, atol=1e-12)


def test_blocks_with_a_failed_fit_are_left_out_and_counted(client, flaky):
    _push(client, flaky)
    body = client.get(f"/api/assessments/{flaky.uuid}/ranking").json()
    scores = _block_scores(flaky, "roc_auc")
    complete = ~np.isnan(scores).any(axis=1)
    assert complete.sum() == 4
    assert (body["n_blocks"], body["n_missing"]) == (4, 2)
    reference = stats.friedmanchisquare(*scores[complete].T)
    assert body["friedman_stat"] == pytest.approx(reference.statistic, rel=1e-12)
    ranks = stats.rankdata(-scores[complete], axis=1).mean(axis=0)
    assert list(body["mean_ranks"].values()) == pytest.approx(list(ranks), abs=1e-12)
    assert body["critical_difference"] == pytest.approx(_critical_difference(3, 4), rel=1e-3)
    page = client.get(f"/assessments/{flaky.uuid}/ranking").text
    assert "2 left out" in page


def test_two_families_get_ranks_and_a_note_but_no_friedman(client):
    space = _space()
    del space["bayes"]
    assessment = foldwise.nested_cv(space, X, Y, outer=3, inner=2, scoring=["roc_auc"], n_jobs=1,
                                    progress=False, name="ranking: two families")
    _push(client, assessment)
    body = client.get(f"/api/assessments/{assessment.uuid}/ranking").json()
    assert body["friedman_stat"] is None and body["friedman_p"] is None
    assert "three or more families" in body["note"]
    assert sum(body["mean_ranks"].values()) == pytest.approx(3.0)  # ranks 1 and 2 in every block
    page = client.get(f"/assessments/{assessment.uuid}/ranking").text
    assert 'id="ranking-note"' in page and "three or more families" in page
    # No Friedman, so no Nemenyi: the critical difference is neither stated nor drawn, and the verdict says why.
    assert body["critical_difference"] is None
    assert 'id="critical-difference"' not in page and "CD =" not in page
    assert "Friedman&#39;s test cannot run" in page.split('id="ranking-verdict">')[1].split("</p>")[0]
    assert body["verdict"].split("; ")[0] == (f"{body['families'][0]['family']} ranks best (mean rank "
                                              f"{body['families'][0]['mean_rank']:.2f} over 3 outer folds)")


def test_one_family_is_refused_with_a_message(client):
    # A hand-recorded assessment with one family; the scores are made up for this check.
    recorder = foldwise.Recorder("one family", task="classification", metrics=["roc_auc"], n_samples=10)
    for fold, test in enumerate(([0, 1, 2, 3, 4], [5, 6, 7, 8, 9])):
        recorder.outer_fold(0, fold, n_train=5, test=test)
        recorder.inner(0, fold, 0, family="only", params={}, scores={"roc_auc": 0.8})
        recorder.outer(0, fold, family="only", params={}, scores={"roc_auc": 0.7 + fold / 10})
    assessment = recorder.finish()
    _push(client, assessment)
    response = client.get(f"/api/assessments/{assessment.uuid}/ranking")
    assert response.status_code == 422
    detail = message(response)
    assert "['only']" in detail and "at least 2 family columns" in detail


def test_page_shows_the_chart_table_and_the_caveats(client, three):
    _push(client, three)
    page = client.get(f"/assessments/{three.uuid}/ranking", params={"metric": "accuracy"}).text
    body = client.get(f"/api/assessments/{three.uuid}/ranking", params={"metric": "accuracy"}).json()
    assert '<option value="accuracy" selected>' in page
    assert 'data-figure="ranks"' in page
    table = page.split('id="ranking-table"')[1].split("</table>")[0]
    order = [row["family"] for row in body["families"]]
    positions = [table.index(f"</span>{family}</td>") for family in order]
    assert positions == sorted(positions)
    for row in body["families"]:
        assert f"{row['mean_rank']:.2f}" in table
    assert "p-value is optimistic" in page and "it needs three or more families" in page
    assert f"{body['critical_difference']:.3f}" in page and "CD =" in page
    verdict = page.split('id="ranking-verdict">')[1].split("</p>")[0]
    assert verdict.endswith(".") and ". " not in verdict  # one sentence: its only full stop ends it
    # Reference: scipy.stats.friedmanchisquare decides which half of the sentence the page states.
    p = stats.friedmanchisquare(*_block_scores(three, "accuracy").T).pvalue
    said = "Friedman&#39;s test finds the ranks differ" if p < 0.05 else "does not find the families&#39; ranks"
    assert said in verdict and verdict.startswith(body["families"][0]["family"][:1].upper())
    assert client.get(f"/api/assessments/{three.uuid}/ranking", params={"metric": "f1"}).status_code == 422
