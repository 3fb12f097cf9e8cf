"""The paired comparison page and JSON on real nested CVs, checked with scipy.stats, baycomp and sklearn."""

from __future__ import annotations

import math

import baycomp
import numpy as np
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
from scipy import stats
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import RepeatedStratifiedKFold
from sklearn.naive_bayes import GaussianNB
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.runner.recorder import Recorder

# Every third row of the bundled breast-cancer data: 190 rows, so 3 folds hold 64, 63 and 63 test rows.
X, Y = load_breast_cancer(return_X_y=True)
X, Y = X[::3], Y[::3]
MARKED = X[:, 0].max()  # the row with the largest first feature: FailsWithoutMarkedRow needs it to train


class FailsWithoutMarkedRow(GaussianNB):
    """Fails on an outer refit (more than 100 rows) whose training set lacks the marked row: one outer fold
    per repeat, while every inner fit succeeds."""

    def fit(self, X, y, sample_weight=None):
        if len(X) > 100 and X[:, 0].max() < MARKED:
            raise ValueError("this test family cannot train without the marked row")
        return super().fit(X, y, sample_weight=sample_weight)


def _splitter():
    return RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)


def _space(third: str = "bayes"):
    estimator = GaussianNB() if third == "bayes" else FailsWithoutMarkedRow()
    return {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(solver="liblinear")),
                     {"logisticregression__C": [0.1, 1.0]}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]}),
        third: (estimator, {"var_smoothing": [1e-9, 1e-3]}),
    }


@pytest.fixture(scope="module")
def repeated():
    return foldwise.nested_cv(_space(), X, Y, outer=_splitter(), inner=3, scoring=["roc_auc", "accuracy"],
                              n_jobs=1, progress=False, name="paired: three families, 2 × 3 outer")


@pytest.fixture(scope="module")
def flaky():
    with pytest.warns(RuntimeWarning, match="fits failed"):
        return foldwise.nested_cv(_space("flaky"), X, Y, outer=_splitter(), inner=3, scoring=["roc_auc"],
                                  n_jobs=1, progress=False, name="paired: a family that fails")


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _fold_sizes():
    # Reference: a plain loop over the splitter, in (repeat, outer_fold) order.
    sizes = [(len(train), len(test)) for train, test in _splitter().split(X, Y)]
    return np.array([s[0] for s in sizes], float), np.array([s[1] for s in sizes], float)


def _family_winner_scores(assessment, family: str, metric: str) -> np.ndarray:
    """Outer score of the family's configuration with the best mean inner score (selection metric), per
    outer fold; ties go to the first in grid order, as GridSearchCV's best_index_ does (scikit-learn)."""
    inner, outer = assessment.inner_scores, assessment.outer_scores
    selecting = assessment.selection_metric
    scores = []
    for repeat in range(2):
        for fold in range(3):
            mine = inner[(inner["repeat"] == repeat) & (inner["outer_fold"] == fold)
                         & (inner["family"] == family) & (inner["metric"] == selecting)]
            means = {config: rows["score"].to_numpy().mean()
                     for config, rows in mine.groupby("config", sort=False)}
            best = max(means, key=lambda config: (means[config], -list(means).index(config)))
            chosen = outer[(outer["repeat"] == repeat) & (outer["outer_fold"] == fold)
                           & (outer["config"] == best) & (outer["metric"] == metric)]
            scores.append(float(chosen["score"].iloc[0]))
    return np.array(scores)


def _corrected_ttest(a, b, n_train, n_test):
    # Reference: Nadeau and Bengio (2003), Machine Learning 52: t = mean(d) / sqrt((1/J + n_test/n_train) s²),
    # df = J - 1, with the mean fold sizes; p two-sided from scipy.stats.t.
    d = a - b
    j = d.size
    t = d.mean() / math.sqrt((1 / j + n_test.mean() / n_train.mean()) * d.var(ddof=1))
    return t, 2 * stats.t.sf(abs(t), j - 1)


def test_two_families_match_scipy_and_baycomp(client, repeated):
    _push(client, repeated)
    body = client.get(f"/api/assessments/{repeated.uuid}/compare",
                      params={"a": "logistic", "b": "tree", "metric": "roc_auc", "rope": 0.01}).json()
    a = _family_winner_scores(repeated, "logistic", "roc_auc")
    b = _family_winner_scores(repeated, "tree", "roc_auc")
    n_train, n_test = _fold_sizes()
    assert len(set(n_test)) > 1  # 190 rows in 3 folds: unequal fold sizes
    folds = [(f["repeat"], f["outer_fold"]) for f in body["folds"]]
    assert folds == [(r, o) for r in range(2) for o in range(3)]
    np.testing.assert_allclose([f["a"] for f in body["folds"]], a, rtol=0, atol=1e-12)
    np.testing.assert_allclose([f["b"] for f in body["folds"]], b, rtol=0, atol=1e-12)
    np.testing.assert_allclose([f["diff"] for f in body["folds"]], a - b, rtol=0, atol=1e-12)
    assert (body["n"], body["n_missing"], body["df"], body["a"], body["b"]) == (6, 0, 5, "logistic", "tree")
    assert body["mean_diff"] == pytest.approx((a - b).mean(), abs=1e-12)
    assert body["sd_diff"] == pytest.approx((a - b).std(ddof=1), abs=1e-12)
    t, p = _corrected_ttest(a, b, n_train, n_test)
    assert body["corrected_t"] == pytest.approx(t, rel=1e-9)
    assert body["corrected_p"] == pytest.approx(p, rel=1e-9)
    # Reference: baycomp.CorrelatedTTest (Corani and Benavoli, 2015). baycomp takes diff = y - x and
    # rho/(1-rho) = 1/(n_folds - 1) with n_folds = len / runs; it returns (P(x better), P(rope),
    # P(y better)).
    # Here rho = mean n_test / (mean n_train + mean n_test) = (190/3) / 190 = 1/3, the same.
    expected = baycomp.CorrelatedTTest.probs(a, b, rope=0.01, runs=2)
    assert (body["bayes_a"], body["bayes_rope"], body["bayes_b"]) == pytest.approx(expected, abs=1e-9)
    # Reference: the Student posterior by hand with scipy.stats.t.cdf (Benavoli et al., 2017, JMLR 18).
    scale = math.sqrt((1 / 6 + 0.5) * (a - b).var(ddof=1))
    assert body["posterior_scale"] == pytest.approx(scale, rel=1e-9)
    posterior = stats.t(5, loc=(a - b).mean(), scale=scale)
    assert body["bayes_b"] == pytest.approx(posterior.cdf(-0.01), abs=1e-9)
    assert body["bayes_a"] == pytest.approx(1 - posterior.cdf(0.01), abs=1e-9)
    # Reference: scipy.stats.wilcoxon (Wilcoxon, 1945) on the same pairs.
    reference = stats.wilcoxon(a, b)
    assert body["wilcoxon_stat"] == pytest.approx(reference.statistic)
    assert body["wilcoxon_p"] == pytest.approx(reference.pvalue, rel=1e-12)
    assert body["verdict"] and body["rope"] == 0.01 and body["metric"] == "roc_auc"


def test_configurations_compare_their_own_outer_scores_refit_with_sklearn(client, repeated):
    _push(client, repeated)
    configs = {c.id: c for c in repeated.payload.configurations}
    first = next(c for c in configs.values() if c.params == {"logisticregression__C": 1.0})
    second = next(c for c in configs.values() if c.params == {"max_depth": 3})
    body = client.get(f"/api/assessments/{repeated.uuid}/compare",
                      params={"a": first.id, "b": second.id, "metric": "roc_auc", "rope": 0.02}).json()
    assert (body["a_kind"], body["b_kind"]) == ("configuration", "configuration")
    # Reference: refit each configuration on every outer training set with scikit-learn and score it with
    # sklearn.metrics.roc_auc_score on the outer test set.
    space = _space()
    refit = {}
    for config in (first, second):
        estimator = clone(space[config.family][0]).set_params(**config.params)
        refit[config.id] = np.array([
            roc_auc_score(Y[test], estimator.fit(X[train], Y[train]).predict_proba(X[test])[:, 1])
            for train, test in _splitter().split(X, Y)])
    a, b = refit[first.id], refit[second.id]
    np.testing.assert_allclose([f["a"] for f in body["folds"]], a, rtol=0, atol=1e-12)
    np.testing.assert_allclose([f["b"] for f in body["folds"]], b, rtol=0, atol=1e-12)
    t, p = _corrected_ttest(a, b, *_fold_sizes())
    assert body["corrected_t"] == pytest.approx(t, rel=1e-9)
    assert body["corrected_p"] == pytest.approx(p, rel=1e-9)
    expected = baycomp.CorrelatedTTest.probs(a, b, rope=0.02, runs=2)
    assert (body["bayes_a"], body["bayes_rope"], body["bayes_b"]) == pytest.approx(expected, abs=1e-9)


def test_defaults_are_the_two_best_families_by_mean(client, repeated):
    _push(client, repeated)
    body = client.get(f"/api/assessments/{repeated.uuid}/compare").json()
    # Reference: the families' mean fold-winner outer score on the selection metric, best first.
    means = {family: _family_winner_scores(repeated, family, "roc_auc").mean()
             for family in ("logistic", "tree", "bayes")}
    ranked = sorted(means, key=means.get, reverse=True)
    assert (body["a"], body["b"], body["metric"], body["rope"]) == (ranked[0], ranked[1], "roc_auc", 0.01)


def test_identical_candidates_say_no_difference(client, repeated):
    _push(client, repeated)
    body = client.get(f"/api/assessments/{repeated.uuid}/compare", params={"a": "tree", "b": "tree"}).json()
    assert body["identical"] is True and body["n"] == 6
    numbers = (body["mean_diff"], body["corrected_p"], body["bayes_rope"], body["wilcoxon_p"])
    assert numbers == (0.0, 1.0, 1.0, 1.0)
    assert body["verdict"].startswith("no difference")
    page = client.get(f"/assessments/{repeated.uuid}/compare", params={"a": "tree", "b": "tree"})
    assert page.status_code == 200 and "no difference" in page.text


def _constant_gap():
    """Two one-configuration families whose outer scores differ by exactly 0.25 on each of 4 outer folds (exact in
    binary, so the differences have zero variance)."""
    rec = Recorder("constant gap", task="classification", metrics=["accuracy"], n_samples=40)
    for o, level in enumerate((0.5, 0.625, 0.5, 0.625)):
        rec.outer_fold(0, o, n_train=30, test=range(o * 10, o * 10 + 10))
        for family, gap in (("ahead", 0.25), ("behind", 0.0)):
            rec.inner(0, o, 0, family=family, params={}, scores={"accuracy": level + gap})
            rec.inner(0, o, 1, family=family, params={}, scores={"accuracy": level + gap})
            rec.outer(0, o, family=family, params={}, scores={"accuracy": level + gap})
    return rec.finish()


def test_constant_difference_reads_as_infinite_t_on_the_page_and_null_in_json(client):
    assessment = _constant_gap()
    _push(client, assessment)
    query = {"a": "ahead", "b": "behind"}
    body = client.get(f"/api/assessments/{assessment.uuid}/compare", params=query).json()
    # Reference: Nadeau and Bengio's t is d̄ / 0 here, +inf, which JSON carries as null; p is 0 (a convention
    # of compare_paired, stated in its docstring); the interval of a constant difference is the point 0.25.
    assert (body["n"], body["mean_diff"], body["sd_diff"]) == (4, 0.25, 0.0)
    assert body["corrected_t"] is None and body["corrected_p"] == 0.0
    assert body["diff_low"] == body["diff_high"] == 0.25
    page = client.get(f"/assessments/{assessment.uuid}/compare", params=query)
    assert page.status_code == 200
    assert "infinite (zero spread)" in page.text and "it excludes 0" in page.text
    assert ">inf<" not in page.text


def test_unknown_candidate_is_named_with_what_exists(client, repeated):
    _push(client, repeated)
    response = client.get(f"/api/assessments/{repeated.uuid}/compare", params={"a": "forest", "b": "tree"})
    assert response.status_code == 422
    detail = message(response)
    assert "'forest'" in detail and "families logistic, tree, bayes" in detail
    assert 'tree:{"max_depth":3}' in detail  # refit_all: configuration ids are listed too
    bad_rope = client.get(f"/api/assessments/{repeated.uuid}/compare", params={"rope": -0.1})
    assert bad_rope.status_code == 422 and "rope must be a finite number >= 0" in message(bad_rope)
    bad_metric = client.get(f"/api/assessments/{repeated.uuid}/compare", params={"metric": "r2"})
    assert bad_metric.status_code == 422 and "'r2'" in message(bad_metric)


def test_configurations_need_every_configuration_refit(client):
    assessment = foldwise.nested_cv(_space(), X, Y, outer=3, inner=2, scoring=["roc_auc"], n_jobs=1,
                                    progress=False, refit_all=False, name="family winners refit only")
    _push(client, assessment)
    config = assessment.payload.configurations[0].id
    response = client.get(f"/api/assessments/{assessment.uuid}/compare", params={"a": config, "b": "tree"})
    assert response.status_code == 422
    assert "refit_all" in message(response) and "compare families" in message(response)
    assert client.get(f"/api/assessments/{assessment.uuid}/compare",
                      params={"a": "logistic", "b": "tree"}).status_code == 200


def test_failed_fits_are_left_out_and_counted(client, flaky):
    _push(client, flaky)
    body = client.get(f"/api/assessments/{flaky.uuid}/compare", params={"a": "flaky", "b": "logistic"}).json()
    a = _family_winner_scores(flaky, "flaky", "roc_auc")
    b = _family_winner_scores(flaky, "logistic", "roc_auc")
    keep = ~np.isnan(a)
    assert keep.sum() == 4  # the marked row is tested once per repeat, and there the family fails
    assert (body["n"], body["n_missing"], body["df"]) == (4, 2, 3)
    assert [f["diff"] is None for f in body["folds"]] == list(~keep)
    n_train, n_test = _fold_sizes()
    t, p = _corrected_ttest(a[keep], b[keep], n_train[keep], n_test[keep])
    assert body["corrected_t"] == pytest.approx(t, rel=1e-9)
    assert body["corrected_p"] == pytest.approx(p, rel=1e-9)
    # Reference: scipy.stats.t.cdf on the complete pairs, rho from their mean fold sizes (baycomp needs whole
    # repeats, which the dropped folds break).
    d = a[keep] - b[keep]
    rho = n_test[keep].mean() / (n_train[keep].mean() + n_test[keep].mean())
    scale = math.sqrt((1 / 4 + rho / (1 - rho)) * d.var(ddof=1))
    assert body["bayes_b"] == pytest.approx(stats.t.cdf(-0.01, 3, loc=d.mean(), scale=scale), abs=1e-9)
    assert body["wilcoxon_p"] == pytest.approx(stats.wilcoxon(a[keep], b[keep]).pvalue, rel=1e-12)
    page = client.get(f"/assessments/{flaky.uuid}/compare", params={"a": "flaky", "b": "logistic"}).text
    assert "2 left out because a score is missing" in page
    assert page.count(">missing</td>") == 2


def test_a_single_outer_fold_is_refused_with_the_reason(client):
    # A hand-recorded assessment with one outer fold; the scores are made up for this check.
    recorder = foldwise.Recorder("one outer fold", task="classification", metrics=["roc_auc"], n_samples=10)
    recorder.outer_fold(0, 0, n_train=7, test=[7, 8, 9])
    for family, inner, outer in (("first", 0.8, 0.75), ("second", 0.7, 0.72)):
        for fold in range(2):
            recorder.inner(0, 0, fold, family=family, params={}, scores={"roc_auc": inner})
        recorder.outer(0, 0, family=family, params={}, scores={"roc_auc": outer})
    assessment = recorder.finish()
    _push(client, assessment)
    response = client.get(f"/api/assessments/{assessment.uuid}/compare")
    assert response.status_code == 422
    assert "needs at least 2 paired outer folds, got 1" in message(response)
    page = client.get(f"/assessments/{assessment.uuid}/compare", headers={"accept": "text/html"})
    assert page.status_code == 422 and "needs at least 2 paired outer folds" in page.text


def test_page_keeps_its_state_in_a_get_form_and_cites_each_method(client, repeated):
    _push(client, repeated)
    query = {"a": "bayes", "b": "logistic", "metric": "accuracy", "rope": 0.005}
    page = client.get(f"/assessments/{repeated.uuid}/compare", params=query).text
    body = client.get(f"/api/assessments/{repeated.uuid}/compare", params=query).json()
    form = page.split('id="paired-form"')[1].split("</form>")[0]
    assert form.startswith(' method="get"')
    first, second = form.split('name="b"')
    assert '<option value="bayes" selected>' in first and '<option value="logistic" selected>' in second
    assert '<option value="accuracy" selected>' in form and 'name="rope" value="0.005"' in form
    assert '<option value="tree:{&#34;max_depth&#34;:3}" >' in form  # configurations, as refit_all
    verdict = page.split('id="verdict">')[1].split("</p>")[0]
    assert verdict == body["verdict"]
    for reference in ("Nadeau and Bengio (2003)", "Bouckaert and Frank (2004)", "Corani and Benavoli (2015)",
                      "Benavoli et al. (2017)", "Demšar (2006)", "Ignores the overlap of the training sets"):
        assert reference in page
    assert 'data-figure="fold-differences"' in page and 'data-figure="posterior"' in page


def test_the_interval_of_the_mean_difference_and_the_verdict_read_as_the_cards(client, repeated):
    _push(client, repeated)
    query = {"a": "logistic", "b": "tree", "metric": "roc_auc", "rope": 0.01}
    body = client.get(f"/api/assessments/{repeated.uuid}/compare", params=query).json()
    page = client.get(f"/assessments/{repeated.uuid}/compare", params=query).text
    d = _family_winner_scores(repeated, "logistic", "roc_auc") - _family_winner_scores(repeated, "tree", "roc_auc")
    n_train, n_test = _fold_sizes()
    # Reference: Nadeau and Bengio's (2003) corrected variance with scipy.stats.t, J - 1 = 5 df, mean fold sizes.
    half = stats.t.ppf(0.975, 5) * math.sqrt((1 / 6 + n_test.mean() / n_train.mean()) * d.var(ddof=1))
    assert body["diff_low"] == pytest.approx(d.mean() - half, rel=1e-9)
    assert body["diff_high"] == pytest.approx(d.mean() + half, rel=1e-9)
    assert body["diff_level"] == 0.95
    shown = page.split('id="difference-interval">')[1].split("</p>")[0]
    assert f"{body['diff_low']:.4f} to {body['diff_high']:.4f}" in shown and "5 df" in shown
    # Every probability the verdict names is written as its card writes it.
    cards = page.split('id="bayes-ttest"')[1].split("</dl>")[0]
    numbers = [value.split("</dd>")[0] for value in cards.split("<dd>")[1:]]
    for number in numbers:
        assert number in ("0", "1", "&gt; 0.999", "&lt; 0.001") or len(number.split(".")[1]) == 3
    verdict = page.split('id="verdict">')[1].split("</p>")[0]
    probabilities = [number.replace("&gt;", ">").replace("&lt;", "<") for number in numbers]
    assert any(shown_p in verdict.replace("&gt;", ">").replace("&lt;", "<") for shown_p in probabilities)
