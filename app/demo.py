"""The demo: three real nested cross-validations on invented data, saved into a store."""

from __future__ import annotations

from sklearn.ensemble import GradientBoostingRegressor, HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import GroupKFold, KFold, RepeatedStratifiedKFold, StratifiedKFold
from sklearn.neighbors import KNeighborsRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from foldwise.demo_scenarios import assay_yield, turbine_fleet

FAULT_METRICS = ["roc_auc", "average_precision", "neg_brier_score"]
YIELD_METRICS = ["neg_root_mean_squared_error", "r2"]


def run_demo(target: str, *, n_jobs: int = 2, progress: bool = True) -> list[str]:
    """Run the three demo assessments, save each into ``target`` (a path or SQLAlchemy URL).

    Returns the assessments' uuids, in the order run: the fleet grouped by turbine, the fleet with
    repeated row-level folds that ignore turbines, and the assay.
    """
    from foldwise.runner.nested import nested_cv

    fleet, assay = turbine_fleet(), assay_yield()
    runs = [
        nested_cv(_fault_space(), fleet.X, fleet.y, outer=GroupKFold(n_splits=5),
                  inner=GroupKFold(n_splits=4), groups=fleet.groups, scoring=FAULT_METRICS, n_jobs=n_jobs,
                  progress=progress, final=True,
                  name="Gearbox faults, folds grouped by turbine (invented fleet)", dataset=fleet.name),
        # Row-level folds put months of one turbine on both sides of a split: shown for its 2 × 5
        # repeat grid and as the design to avoid, so groups are left out on purpose.
        nested_cv(_fault_space(small=True), fleet.X, fleet.y,
                  outer=RepeatedStratifiedKFold(n_splits=5, n_repeats=2, random_state=2024),
                  inner=StratifiedKFold(n_splits=4, shuffle=True, random_state=2025),
                  scoring=FAULT_METRICS, n_jobs=n_jobs, progress=progress,
                  name="Gearbox faults, repeated row folds ignoring turbines (invented fleet)",
                  dataset=fleet.name),
        nested_cv(_yield_space(), assay.X, assay.y, outer=KFold(n_splits=5, shuffle=True, random_state=2026),
                  inner=KFold(n_splits=4, shuffle=True, random_state=2027), scoring=YIELD_METRICS,
                  n_jobs=n_jobs, progress=progress, final=True, name="Assay yield (invented enzyme assay)",
                  dataset=assay.name),
    ]
    for assessment in runs:
        assessment.save(target)
    return [assessment.uuid for assessment in runs]


def _fault_space(*, small: bool = False) -> dict:
    logistic = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    forest = RandomForestClassifier(n_estimators=60, random_state=0)
    boosting = HistGradientBoostingClassifier(max_iter=100, random_state=0)
    if small:
        return {
            "logistic regression": (logistic, {"logisticregression__C": [0.1, 1.0]}),
            "random forest": (forest, {"min_samples_leaf": [3, 10]}),
            "gradient boosting": (boosting, {"learning_rate": [0.05, 0.1]}),
        }
    return {
        "logistic regression": (logistic, {"logisticregression__C": [0.01, 0.1, 1.0, 10.0]}),
        "random forest": (forest, {"min_samples_leaf": [3, 10], "max_features": ["sqrt", 0.6]}),
        "gradient boosting": (boosting, {"learning_rate": [0.05, 0.1], "max_depth": [2, 4]}),
    }


def _yield_space() -> dict:
    return {
        "ridge": (make_pipeline(StandardScaler(), PolynomialFeatures(), Ridge()),
                  {"polynomialfeatures__degree": [1, 2], "ridge__alpha": [0.1, 10.0]}),
        "k-nearest neighbours": (make_pipeline(StandardScaler(), KNeighborsRegressor()),
                                 {"kneighborsregressor__n_neighbors": [5, 15],
                                  "kneighborsregressor__weights": ["uniform", "distance"]}),
        "gradient boosting": (GradientBoostingRegressor(n_estimators=200, random_state=0),
                              {"learning_rate": [0.05, 0.1], "max_depth": [2, 3]}),
    }
