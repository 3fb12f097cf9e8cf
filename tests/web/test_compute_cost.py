"""The compute cost page: fits and CPU seconds from the runner's frames, and the planner's projection.

The fit count of nested cross-validation, n outer × k inner × m configurations per repeat plus the
refits on each outer training set, is common practice; the projected wall time divides the CPU time
by the busy cores (an ideal pool). Both are written out again here, independently of foldwise.stats.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from refusals import message  # tests/web/refusals.py: pytest puts this folder on sys.path
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text


def _fits(assessment) -> tuple[pd.DataFrame, pd.DataFrame]:
    """One row per fit: every fit is recorded once per metric, with the same times."""
    metric = assessment.selection_metric
    inner, outer = assessment.inner_scores, assessment.outer_scores
    return inner[inner["metric"] == metric], outer[outer["metric"] == metric]


def _projection(mean_fit, *, outer, inner, repeats, configs, refits, cores) -> dict:
    fits = repeats * outer * inner * configs + repeats * outer * refits
    cpu = fits * mean_fit
    return {"n_inner_fits": repeats * outer * inner * configs, "n_outer_refits": repeats * outer * refits,
            "n_fits": fits, "cpu_seconds": cpu, "wall_seconds": cpu / min(cores, fits)}


def _assert_projection(served: dict, expected: dict) -> None:
    for name, value in expected.items():
        assert served[name] == pytest.approx(value, rel=1e-12), name


@pytest.fixture(scope="module")
def winners_only():
    X, y = load_breast_cancer(return_X_y=True)
    space = {"logistic": (make_pipeline(StandardScaler(), LogisticRegression()),
                          {"logisticregression__C": [0.01, 0.1, 1.0]}),
             "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 3]})}
    return foldwise.nested_cv(space, X[::4], y[::4], outer=3, inner=2, n_jobs=1, progress=False,
                              refit_all=False, name="winners only")


def test_fits_and_cpu_seconds_by_family_and_level(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/cost").json()
    inner, outer = _fits(small_assessment)
    assert len(inner) == 3 * 3 * 5 and len(outer) == 3 * 5
    assert body["fits"] == {"inner": len(inner), "outer": len(outer), "total": len(inner) + len(outer),
                            "inner_failed": 0, "outer_failed": 0}
    for row in body["by_family"]:
        mine_inner = inner[inner["family"] == row["family"]]
        mine_outer = outer[outer["family"] == row["family"]]
        inner_seconds = float(np.sum(mine_inner["fit_time"] + mine_inner["score_time"]))
        outer_seconds = float(np.sum(mine_outer["fit_time"] + mine_outer["score_time"]))
        assert row["n_fits"] == len(mine_inner) + len(mine_outer)
        assert row["inner_seconds"] == pytest.approx(inner_seconds, rel=1e-12)
        assert row["outer_seconds"] == pytest.approx(outer_seconds, rel=1e-12)
    all_inner = float(np.sum(inner["fit_time"] + inner["score_time"]))
    all_outer = float(np.sum(outer["fit_time"] + outer["score_time"]))
    assert body["by_level"]["inner_seconds"] == pytest.approx(all_inner, rel=1e-12)
    assert body["by_level"]["outer_seconds"] == pytest.approx(all_outer, rel=1e-12)
    mean_fit = (all_inner + all_outer) / (len(inner) + len(outer))
    assert body["mean_fit_seconds"] == pytest.approx(mean_fit, rel=1e-12)


def test_planner_defaults_to_the_own_design_on_two_cores(client, small_assessment):
    _push(client, small_assessment)
    body = client.get(f"/api/assessments/{small_assessment.uuid}/cost").json()
    own = {"outer": 3, "inner": 3, "repeats": 1, "configs": 5, "cores": 2}
    assert body["plan"] == {**own, "refits_per_fold": 5}
    expected = _projection(body["mean_fit_seconds"], **own, refits=5)
    _assert_projection(body["projection"], expected)
    _assert_projection(body["own_projection"], expected)
    assert body["projection"]["n_fits"] == body["fits"]["total"]  # the projection recounts this run's fits
    assert "ideal pool" in body["projection"]["note"]


def test_planner_projects_another_design(client, small_assessment):
    _push(client, small_assessment)
    query = {"outer": 10, "inner": 5, "repeats": 3, "configs": 20, "cores": 8}
    body = client.get(f"/api/assessments/{small_assessment.uuid}/cost", params=query).json()
    assert body["plan"] == {**query, "refits_per_fold": 20}
    _assert_projection(body["projection"], _projection(body["mean_fit_seconds"], outer=10, inner=5, repeats=3,
                                                       configs=20, refits=20, cores=8))
    assert body["own_projection"]["n_fits"] == 3 * 3 * 5 + 3 * 5
    page = client.get(f"/assessments/{small_assessment.uuid}/cost", params=query).text
    assert 'name="cores" min="1" value="8"' in page and 'name="configs" min="1" value="20"' in page
    assert "n × k × m" in page and "ideal pool" in page


def test_only_family_winners_refit_counts_one_refit_per_family(client, winners_only):
    _push(client, winners_only)
    body = client.get(f"/api/assessments/{winners_only.uuid}/cost").json()
    inner, outer = _fits(winners_only)
    assert body["fits"]["inner"] == len(inner) == 3 * 2 * 5
    assert body["fits"]["outer"] == len(outer) == 3 * 2  # one refit per family and outer fold
    assert body["plan"]["refits_per_fold"] == 2
    expected = _projection(body["mean_fit_seconds"], outer=3, inner=2, repeats=1, configs=5, refits=2,
                           cores=2)
    _assert_projection(body["projection"], expected)
    assert body["projection"]["n_fits"] == body["fits"]["total"]


@pytest.mark.parametrize(("name", "value"), [("cores", "0"), ("outer", "abc"), ("configs", "1000001")])
def test_bad_planner_input_names_the_field_and_what_works(client, small_assessment, name, value):
    _push(client, small_assessment)
    refused = client.get(f"/api/assessments/{small_assessment.uuid}/cost", params={name: value})
    assert refused.status_code == 422
    assert message(refused) == f"{name} must be a whole number from 1 to 100000; got {value!r}"


def test_an_emptied_planner_field_means_its_default(client, small_assessment):
    _push(client, small_assessment)
    url = f"/api/assessments/{small_assessment.uuid}/cost"
    body = client.get(url, params={"cores": "", "outer": "4"}).json()
    assert body["plan"]["cores"] == 2 and body["plan"]["outer"] == 4
