"""The assessment overview's headline and "What to ship", against plain loops, scipy.stats and scikit-learn, and
against the report and the JSON API that show the same numbers."""

from __future__ import annotations

import html
import math
import re

import httpx
import numpy as np
import pytest
import skops.io
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, RepeatedStratifiedKFold, StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier
from watching import open_watched  # tests/web/watching.py: pytest puts this folder on sys.path

import foldwise
from foldwise.client import save
from foldwise.ensemble import load_skops
from foldwise.web.report import report_html
from foldwise.web.shipping import UNSTABLE, final_summary

X, Y = load_breast_cancer(return_X_y=True)  # bundled open data
X, Y = X[::2], Y[::2]


def _space():
    return {"logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                         {"logisticregression__C": [0.01, 1.0]}),
            "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}


@pytest.fixture(scope="module")
def shipped():
    """3 outer × 3 inner folds with a final selection on all rows and every fold winner kept."""
    return foldwise.nested_cv(_space(), X, Y, outer=3, inner=3, scoring=["roc_auc", "accuracy"], n_jobs=1,
                              progress=False, final=True, keep_models=True, name="overview: what to ship")


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _text(page: str, element_id: str) -> str:
    found = re.search(rf'<(\w+)[^>]*id="{element_id}"[^>]*>(.*?)</\1>', page, flags=re.S)
    assert found, element_id
    return html.unescape(" ".join(re.sub(r"<[^>]+>", "", found.group(2)).split()))


def _fold_winners(assessment, metric):
    """Per outer fold, by a plain loop: the configuration with the best mean inner score on the selection metric
    (ties to the first in grid order, as GridSearchCV's best_index_), its inner mean and outer score on
    ``metric``."""
    inner, outer = assessment.inner_scores, assessment.outer_scores
    rows = []
    for fold in range(3):
        mine = inner[(inner["outer_fold"] == fold) & (inner["metric"] == assessment.selection_metric)]
        means = {config: group["score"].mean() for config, group in mine.groupby("config", sort=False)}
        best = max(means, key=lambda config: (means[config], -list(means).index(config)))
        chosen = inner[(inner["outer_fold"] == fold) & (inner["config"] == best) & (inner["metric"] == metric)]
        score = outer[(outer["outer_fold"] == fold) & (outer["config"] == best) & (outer["metric"] == metric)]
        rows.append((best, chosen["score"].mean(), float(score["score"].iloc[0])))
    return rows


def _sizes():
    # Reference: scikit-learn's splitter for outer=3 on a classifier, fold by fold.
    folds = list(StratifiedKFold(3).split(X, Y))
    return np.mean([len(train) for train, _ in folds]), np.mean([len(test) for _, test in folds])


@pytest.mark.parametrize("metric", ["roc_auc", "accuracy"])
def test_the_headline_puts_the_nested_estimate_beside_the_best_inner_score(client, shipped, metric):
    _push(client, shipped)
    page = client.get(f"/assessments/{shipped.uuid}", params={"metric": metric}).text
    body = client.get(f"/api/assessments/{shipped.uuid}", params={"metric": metric}).json()["headline"]
    winners = _fold_winners(shipped, metric)
    outer = np.array([score for _, _, score in winners])
    inner = np.array([mean for _, mean, _ in winners])
    n_train, n_test = _sizes()
    # Reference: Nadeau and Bengio's (2003) corrected t interval with scipy.stats.t, J − 1 = 2 df.
    half = stats.t.ppf(0.975, 2) * math.sqrt((1 / 3 + n_test / n_train) * outer.var(ddof=1))
    assert body["estimate"]["mean"] == pytest.approx(outer.mean(), abs=1e-12)
    assert (body["interval"]["low"], body["interval"]["high"]) == pytest.approx(
        (outer.mean() - half, outer.mean() + half), abs=1e-12)
    assert body["interval"]["method"] == "corrected_t" and body["interval"]["level"] == 0.95
    assert body["inner_best"]["mean"] == pytest.approx(inner.mean(), abs=1e-12)
    assert body["optimism"]["mean"] == pytest.approx((inner - outer).mean(), abs=1e-12)
    assert _text(page, "nested-estimate") == f"{outer.mean():.3f}"
    assert _text(page, "headline-interval").startswith(
        f"95% interval {outer.mean() - half:.3f} to {outer.mean() + half:.3f}, by the corrected resampled t method")
    assert 'href="http://testserver/methods/interval"' in page.split('id="headline-interval"')[1].split("</p>")[0]
    assert _text(page, "inner-best") == f"{inner.mean():.3f}"
    assert _text(page, "optimism-mean").lstrip("+") == f"{(inner - outer).mean():.3f}"


def test_the_final_selections_best_inner_score_is_gridsearchcvs(client, shipped):
    _push(client, shipped)
    body = client.get(f"/api/assessments/{shipped.uuid}").json()["headline"]
    # Reference: scikit-learn's GridSearchCV on all rows with the same inner splitter, one per family; the final
    # selection takes the best family winner, so its best inner score is the greatest best_score_.
    best = max(GridSearchCV(estimator, grid, cv=StratifiedKFold(3), scoring="roc_auc").fit(X, Y).best_score_
               for estimator, grid in _space().values())
    assert body["final_inner_best"] == pytest.approx(best, abs=1e-12)
    page = client.get(f"/assessments/{shipped.uuid}").text
    assert _text(page, "final-inner-best") == f"{best:.3f}"


def test_the_family_table_reads_in_one_line_with_the_first_two_families_comparison(client, shipped):
    _push(client, shipped)
    page = client.get(f"/assessments/{shipped.uuid}").text
    api = client.get(f"/api/assessments/{shipped.uuid}").json()
    first, second = api["family_summary"][:2]
    reading = _text(page, "family-reading")
    assert reading.startswith(f"{first['family']} has the best mean outer score ({first['mean']:.3f}, over 3 outer "
                              f"folds), {first['mean'] - second['mean']:.3f} ahead of {second['family']}")
    link = re.search(r'href="([^"]+)" id="compare-first-two"', page).group(1)
    assert html.unescape(link).endswith(f"/compare?a={first['family']}&b={second['family']}&metric=roc_auc")
    # The verdict quoted is the comparison page's, on the same families, metric and ROPE.
    compared = client.get(html.unescape(link).replace("/compare", "/compare").replace(
        "http://testserver/assessments", "/api/assessments")).json()
    assert compared["verdict"] in reading


def test_few_outer_folds_say_how_much_repeats_would_narrow_the_interval(client, shipped):
    _push(client, shipped)
    page = client.get(f"/assessments/{shipped.uuid}").text
    body = client.get(f"/api/assessments/{shipped.uuid}").json()["headline"]
    n_train, n_test = _sizes()

    def width(j):  # reference: the corrected t half-width per unit sd, scipy.stats.t quantiles
        return stats.t.ppf(0.975, j - 1) * math.sqrt(1 / j + n_test / n_train)

    three = next(option for option in body["repeats"] if option["n_repeats"] == 3)
    assert three["narrower_by"] == pytest.approx(1 - width(9) / width(3), abs=1e-12)
    assert body["repeats_limit"] == pytest.approx(1 - stats.norm.ppf(0.975) * math.sqrt(n_test / n_train) / width(3),
                                                  abs=1e-12)
    said = _text(page, "repeat-narrowing")
    assert f"3 repeats (9 outer folds, 3× the fits) by about {round(100 * three['narrower_by'])}%" in said
    assert "foldwise does not correct this bias" in _text(page, "size-bias")
    assert f"{round(n_train)} of the {len(Y)} rows" in _text(page, "size-bias")


def test_a_repeated_design_with_many_folds_proposes_no_repeats(client):
    outer = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    assessment = foldwise.nested_cv(_space(), X[::2], Y[::2], outer=outer, inner=2, n_jobs=1, progress=False,
                                    name="overview: repeated")
    _push(client, assessment)
    page = client.get(f"/assessments/{assessment.uuid}").text
    assert client.get(f"/api/assessments/{assessment.uuid}").json()["headline"]["repeats"] == []
    assert 'id="repeat-narrowing"' not in page
    assert "corrected resampled t" in _text(page, "headline-interval")


def test_what_to_ship_agrees_with_the_report_the_api_and_a_plain_count(client, shipped):
    _push(client, shipped)
    page = client.get(f"/assessments/{shipped.uuid}").text
    api = client.get(f"/api/assessments/{shipped.uuid}").json()["shipping"]
    assert client.get(f"/api/assessments/{shipped.uuid}/what-to-ship").json()["final"] == api["final"]
    report = client.get(f"/assessments/{shipped.uuid}/report").text
    choice = shipped.final_choice
    winners = _fold_winners(shipped, shipped.selection_metric)
    configs = {config.id: config for config in shipped.payload.configurations}
    # Reference: a plain count over the fold winners found by the loop above.
    same_config = sum(config == choice.config for config, _, _ in winners)
    same_family = sum(configs[config].family == choice.family for config, _, _ in winners)
    assert (api["final"]["same_config"], api["final"]["same_family"], api["final"]["n_folds"]) == (
        same_config, same_family, 3)
    agreement = f"{same_config} of 3 outer folds chose this same configuration and {same_family} the same family."
    assert _text(page, "final-agreement") == agreement
    assert agreement in " ".join(re.sub(r"<[^>]+>", "", report).split())
    assert _text(page, "final-choice").startswith(f"On all rows the procedure chose {choice.family} with")
    assert _text(report, "final-choice").startswith(f"On all rows the procedure chose {choice.family}")
    said = html.unescape(" ".join(re.sub(r"<[^>]+>", "", page).split()))
    for parameter in api["final"]["parameters"]:
        assert f"{parameter['name']} = {parameter['value']}: chosen in {parameter['same']} of 3 outer folds" in said
    assert api["final"]["unstable"] == (same_config * 2 < 3)
    assert ('id="instability"' in page) == ('id="instability"' in report) == api["final"]["unstable"]
    assert "not this one fitted model" in _text(page, "ship-estimate")


def test_the_fold_winners_ensemble_is_compared_with_the_selection_on_the_same_folds(client, shipped):
    _push(client, shipped)
    api = client.get(f"/api/assessments/{shipped.uuid}/what-to-ship").json()["ensemble"]
    winners = _fold_winners(shipped, shipped.selection_metric)
    assert api["members"] == list(dict.fromkeys(config for config, _, _ in winners))
    estimate = api["estimate"]
    # The builder's own preview of "all overall winners" gives the same numbers.
    preview = client.post(f"/api/assessments/{shipped.uuid}/ensembles/preview",
                          json={"members": api["members"]}).json()
    assert (estimate["mean"], estimate["comparison"]["mean_diff"]) == (preview["mean"],
                                                                       preview["comparison"]["mean_diff"])
    ensemble = np.array([fold["ensemble"] for fold in estimate["folds"]])
    selection = np.array([fold["selection"] for fold in estimate["folds"]])
    np.testing.assert_allclose(selection, [score for _, _, score in winners], atol=1e-12)
    d = ensemble - selection
    n_train, n_test = _sizes()
    half = stats.t.ppf(0.975, 2) * math.sqrt((1 / 3 + n_test / n_train) * d.var(ddof=1))  # scipy.stats.t, 2 df
    comparison = estimate["comparison"]
    assert comparison["mean_diff"] == pytest.approx(d.mean(), abs=1e-12)
    assert (comparison["diff_low"], comparison["diff_high"]) == pytest.approx((d.mean() - half, d.mean() + half),
                                                                              abs=1e-12)
    fragment = client.get(f"/assessments/{shipped.uuid}/what-to-ship/ensemble").text
    said = _text(fragment, "ensemble-comparison")
    assert f"95% interval {d.mean() - half:.4f} to {d.mean() + half:.4f}" in said and comparison["verdict"] in said


def test_both_models_download_and_predict_as_the_run_made_them(client, shipped):
    _push(client, shipped)
    final = client.get(f"/api/assessments/{shipped.uuid}/final/model")
    assert final.status_code == 200 and final.headers["content-type"] == "application/octet-stream"
    model = load_skops(final.content, allowed=[f.estimator_class for f in shipped.payload.families])
    np.testing.assert_array_equal(model.predict_proba(X), shipped.final_model.predict_proba(X))
    ensemble = client.get(f"/api/assessments/{shipped.uuid}/fold-winners/model")
    assert ensemble.status_code == 200
    combined = skops.io.loads(ensemble.content, trusted=skops.io.get_untrusted_types(data=ensemble.content))
    # Reference: each member's kept fold models' probabilities averaged, members weighed alike (soft voting).
    members = list(dict.fromkeys(config for config, _, _ in _fold_winners(shipped, shipped.selection_metric)))
    positions = {config.id: i for i, config in enumerate(shipped.payload.configurations)}
    per_member = []
    for member in members:
        kept = [load_skops(__import__("base64").b64decode(m.skops),
                           allowed=[f.estimator_class for f in shipped.payload.families])
                for m in shipped.payload.models if m.config == positions[member]]
        per_member.append(np.mean([fitted.predict_proba(X) for fitted in kept], axis=0))
    np.testing.assert_allclose(combined.predict_proba(X), np.mean(per_member, axis=0), atol=1e-12)
    page = client.get(f"/assessments/{shipped.uuid}").text
    assert "/final/model" in page.split('id="final-download"')[1].split("</ul>")[0]
    fragment = client.get(f"/assessments/{shipped.uuid}/what-to-ship/ensemble").text
    assert "/fold-winners/model" in fragment.split('id="ship-downloads"')[1].split("</ul>")[0]


def test_without_a_final_selection_the_page_says_so_and_the_model_is_refused(client, small_assessment):
    _push(client, small_assessment)
    page = client.get(f"/assessments/{small_assessment.uuid}").text
    assert "nested_cv(..., final=True) makes one" in _text(page, "final-note")
    assert 'id="final-choice"' not in page and "/final/model" not in page
    refused = client.get(f"/api/assessments/{small_assessment.uuid}/final/model")
    assert refused.status_code == 409 and "final=True" in refused.text
    assert client.get("/api/assessments/00000000-0000-0000-0000-000000000000/final/model").status_code == 404
    # No fitted fold winners were kept: no ensemble model file, and the route says why.
    fragment = client.get(f"/assessments/{small_assessment.uuid}/what-to-ship/ensemble").text
    assert "keep_models=True" in fragment.split('id="ship-downloads"')[1].split("</ul>")[0]
    assert client.get(f"/api/assessments/{small_assessment.uuid}/what-to-ship").json()["final"] is None
    assert client.get(f"/api/assessments/{small_assessment.uuid}/fold-winners/model").status_code == 409


def test_the_instability_sentence_follows_the_fold_winners():
    import pandas as pd

    winners = pd.DataFrame({"family": ["tree", "tree", "logistic", "logistic"],
                            "config": ["t1", "t3", "l1", "l2"],
                            "params": [{"max_depth": 1}, {"max_depth": 3}, {"C": 1}, {"C": 2}]})
    summary = final_summary("tree", "t1", {"max_depth": 1}, winners)
    assert (summary.same_config, summary.same_family, summary.parameters[0].same) == (1, 2, 1)
    assert summary.instability == UNSTABLE
    assert final_summary("tree", "t1", {"max_depth": 1}, winners.iloc[[0, 0, 1]]).instability is None


@pytest.mark.browser
def test_the_overview_reads_in_a_browser_and_leads_to_the_comparison(browser, live_server, shipped):
    save(shipped.payload, str(live_server.db_path))
    page, problems = open_watched(browser, f"{live_server.url}/assessments/{shipped.uuid}")
    assert page.locator("#nested-estimate").is_visible() and page.locator("#inner-best").is_visible()
    assert page.locator("#what-to-ship #final-choice").is_visible()
    page.wait_for_selector("#ship-ensemble[data-state=ready] #ensemble-comparison")
    expected = httpx.get(f"{live_server.url}/api/assessments/{shipped.uuid}/what-to-ship").json()["ensemble"]
    assert f"{expected['estimate']['mean']:.3f}" in page.locator("#ensemble-alternative").inner_text()
    reading = page.locator("#family-reading").inner_text()
    page.click("#compare-first-two")
    page.wait_for_url("**/compare?**")
    assert page.locator("#verdict").inner_text() in reading
    assert problems == []
    report = report_html(shipped)
    assert _text(report, "final-choice").startswith("On all rows the procedure chose")
    page.close()


def test_an_interval_past_the_best_score_possible_says_so(client, shipped):
    _push(client, shipped)
    body = client.get(f"/api/assessments/{shipped.uuid}").json()["headline"]
    page = client.get(f"/assessments/{shipped.uuid}").text
    # roc_auc cannot pass 1 (scikit-learn's roc_auc_score is an area under a curve in the unit square); on these
    # folds (no shuffling, so always the same) the symmetric interval does.
    assert body["interval"]["high"] > 1
    assert (body["interval"]["past_bound"], body["interval"]["past_side"]) == (1.0, "best")
    assert "passes 1, the best score roc_auc can reach" in _text(page, "interval-bound")
    accuracy = client.get(f"/api/assessments/{shipped.uuid}", params={"metric": "accuracy"}).json()["headline"]
    assert (accuracy["interval"]["high"] > 1) == (accuracy["interval"]["past_bound"] == 1.0)
