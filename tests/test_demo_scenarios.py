"""The invented demo scenarios: deterministic per seed, the stated sizes, intact groups, a real signal."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import chi2_contingency
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.model_selection import GroupKFold, KFold, cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from foldwise.demo_scenarios import assay_yield, turbine_fleet

REPO = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("make", [turbine_fleet, assay_yield])
def test_a_seed_gives_the_same_frames_and_another_seed_different_ones(make):
    first, again, other = make(), make(), make(seed=123)
    pd.testing.assert_frame_equal(first.X, again.X)
    pd.testing.assert_series_equal(first.y, again.y)
    if first.groups is not None:
        pd.testing.assert_series_equal(first.groups, again.groups)
    assert not first.X.iloc[:50].equals(other.X.iloc[:50])
    assert not first.y.equals(other.y)


@pytest.mark.parametrize("make", [turbine_fleet, assay_yield])
def test_scenarios_say_they_are_invented(make):
    scenario = make()
    assert "(invented)" in scenario.name
    assert "invented" in scenario.description and "synthetic" in scenario.description


@pytest.mark.parametrize("seed", [7, 8, 9])
def test_turbine_fleet_has_the_stated_size_and_prevalence(seed):
    fleet = turbine_fleet(seed=seed)
    # Docstring: 60 turbines, up to 24 months each, about 3% of months lost, about 15% positives.
    assert 1330 <= len(fleet.X) <= 1440
    assert fleet.groups.nunique() == 60
    assert fleet.groups.value_counts().max() <= 24
    assert set(fleet.y.unique()) == {0, 1}
    assert 0.11 <= fleet.y.mean() <= 0.19
    assert fleet.X.shape[1] == 8 and np.isfinite(fleet.X.to_numpy()).all()


def test_each_group_is_one_turbine_month_by_month():
    fleet = turbine_fleet()
    assert fleet.X.index.equals(fleet.y.index) and fleet.X.index.equals(fleet.groups.index)
    # Rows are ordered by turbine: each label appears in one unbroken run.
    runs = (fleet.groups != fleet.groups.shift()).sum()
    assert runs == fleet.groups.nunique()
    for _, age in fleet.X.groupby(fleet.groups, sort=False)["turbine_age_years"]:
        months = np.diff(age.to_numpy()) * 12
        assert (months > 0.5).all()  # one machine ageing, never two interleaved
        np.testing.assert_allclose(months, np.round(months), atol=1e-9)


def test_turbines_differ_in_fault_rate_more_than_chance():
    # Pearson's chi-squared test of homogeneity (scipy.stats.chi2_contingency) over the turbine ×
    # fault table: the per-turbine random effect and hidden wear must show as unequal fault rates.
    fleet = turbine_fleet()
    table = pd.crosstab(fleet.groups, fleet.y)
    assert chi2_contingency(table).pvalue < 1e-4


def test_turbine_faults_are_learnable_across_turbines():
    # A scaled logistic regression scored with scikit-learn's cross_val_score over GroupKFold: well
    # above the chance AUC of 0.5 on turbines it never saw.
    fleet = turbine_fleet()
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    auc = cross_val_score(model, fleet.X, fleet.y, groups=fleet.groups, cv=GroupKFold(5), scoring="roc_auc")
    assert auc.mean() > 0.7


def test_assay_yield_has_the_stated_size_and_ranges():
    assay = assay_yield()
    assert assay.X.shape == (600, 4) and assay.groups is None
    assert assay.X["temperature_c"].between(20, 65).all() and assay.X["ph"].between(5, 9.5).all()
    assert assay.X["substrate_mm"].between(0.5, 50).all() and assay.X["incubation_min"].between(10, 240).all()
    assert assay.y.between(0, 100).all() and assay.y.std() > 10


def test_assay_yield_is_nonlinear_in_its_inputs():
    # scikit-learn's cross_val_score: the interactions leave most of the variance to a flexible model
    # and much of it unexplained by a straight line.
    assay = assay_yield()
    cv = KFold(5, shuffle=True, random_state=0)
    linear = cross_val_score(LinearRegression(), assay.X, assay.y, cv=cv, scoring="r2").mean()
    boosted = cross_val_score(HistGradientBoostingRegressor(random_state=0), assay.X, assay.y, cv=cv,
                              scoring="r2").mean()
    assert linear < 0.5 < 0.8 < boosted


def test_demo_data_module_prints_each_scenario():
    fleet, assay = turbine_fleet(), assay_yield()
    shown = subprocess.run([sys.executable, "-m", "demo_data.scenarios"], cwd=REPO, capture_output=True,
                           text=True, check=True).stdout
    assert f"{fleet.name}: {len(fleet.X)} rows" in shown and f"{int(fleet.y.sum())} positives" in shown
    assert f"{fleet.groups.nunique()} groups" in shown
    assert f"{assay.name}: {len(assay.X)} rows" in shown and "no groups" in shown
