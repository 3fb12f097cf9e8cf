"""rank_families against scipy.stats, the studentized range, and Demšar's (2006) worked example."""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from foldwise.stats.ranking import nemenyi_q, rank_families, ranking_verdict

# Demšar (2006), Table 5(a): two-tailed Nemenyi q_0.05 for k = 2..10 (from memory, as in the module).
DEMSAR_Q = [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]


def _scores(seed, n_blocks, families):
    rng = np.random.default_rng(seed)
    skill = np.linspace(0.0, 0.04, len(families))
    values = 0.8 + skill + rng.normal(0.0, 0.02, size=(n_blocks, len(families)))
    return pd.DataFrame(np.round(values, 2), columns=families)  # rounding makes some ties


def test_friedman_and_mean_ranks_match_scipy_with_incomplete_blocks_dropped():
    frame = _scores(0, 15, ["tree", "forest", "knn", "svm"])
    frame.iloc[3, 1] = np.nan
    frame.iloc[9, 0] = np.nan
    result = rank_families(frame)
    complete = frame.dropna()
    assert (result.n_blocks, result.n_missing, result.note) == (13, 2, "")
    # Reference: scipy.stats.friedmanchisquare on the complete blocks.
    reference = stats.friedmanchisquare(*complete.to_numpy().T)
    assert result.friedman_stat == pytest.approx(reference.statistic, rel=1e-12)
    assert result.friedman_p == pytest.approx(reference.pvalue, rel=1e-12)
    # Reference: scipy.stats.rankdata per block, 1 = best, ties averaged.
    ranks = np.array([stats.rankdata(-row, method="average") for row in complete.to_numpy()])
    assert list(result.mean_ranks) == ["tree", "forest", "knn", "svm"]
    assert list(result.mean_ranks.values()) == pytest.approx(list(ranks.mean(axis=0)), abs=1e-12)
    # Reference: Nemenyi's CD formula as given by Demšar (2006), with k = 4 from Table 5(a).
    assert result.critical_difference == pytest.approx(2.569 * math.sqrt(4 * 5 / (6 * 13)), rel=1e-12)


def test_ties_share_the_average_rank():
    frame = pd.DataFrame({"x": [0.9, 0.8, 0.7], "y": [0.9, 0.6, 0.7], "z": [0.5, 0.7, 0.7]})
    result = rank_families(frame)
    # Ranks worked out by hand: (1.5, 1.5, 3), (1, 3, 2), (2, 2, 2).
    assert result.mean_ranks == pytest.approx({"x": 4.5 / 3, "y": 6.5 / 3, "z": 7 / 3})


@pytest.mark.parametrize("k", range(2, 11))
def test_demsar_table_agrees_with_the_studentized_range(k):
    # Reference: scipy.stats.studentized_range, q_alpha = Q_0.95(k, inf) / sqrt(2) (Demšar, 2006).
    computed = stats.studentized_range.ppf(0.95, k, np.inf) / math.sqrt(2)
    assert DEMSAR_Q[k - 2] == pytest.approx(computed, abs=2e-3)
    assert nemenyi_q(k) == DEMSAR_Q[k - 2]


def test_more_than_ten_families_use_the_studentized_range():
    families = [f"f{i}" for i in range(12)]
    result = rank_families(_scores(1, 8, families))
    # Reference: scipy.stats.studentized_range.
    q = stats.studentized_range.ppf(0.95, 12, np.inf) / math.sqrt(2)
    assert result.critical_difference == pytest.approx(q * math.sqrt(12 * 13 / (6 * 8)), rel=1e-9)


def test_worked_example_of_demsar_2006():
    # Demšar (2006), Table 6: AUC of C4.5 with and without m-tuning and cf-tuning on 14 data sets, as
    # recalled from memory (the same values appear in public copies of the example). The paper prints
    # three decimals; its ranks put C4.5+cf ahead of C4.5+m+cf on "voting", where both print 0.975, so
    # the unrounded values differ there: we nudge C4.5+cf by 1e-4 to reproduce the published ranks.
    auc = [
        [0.763, 0.768, 0.771, 0.798], [0.599, 0.591, 0.590, 0.569], [0.954, 0.971, 0.968, 0.967],
        [0.628, 0.661, 0.654, 0.657], [0.882, 0.888, 0.886, 0.898], [0.936, 0.931, 0.916, 0.931],
        [0.661, 0.668, 0.609, 0.685], [0.583, 0.583, 0.563, 0.625], [0.775, 0.838, 0.866, 0.875],
        [1.000, 1.000, 1.000, 1.000], [0.940, 0.962, 0.965, 0.962], [0.619, 0.666, 0.614, 0.669],
        [0.972, 0.981, 0.9751, 0.975], [0.957, 0.978, 0.946, 0.970],
    ]
    frame = pd.DataFrame(auc, columns=["C4.5", "C4.5+m", "C4.5+cf", "C4.5+m+cf"])
    result = rank_families(frame)
    # Published average ranks (from memory): 3.143, 2.000, 2.893, 1.964.
    assert [round(r, 3) for r in result.mean_ranks.values()] == [3.143, 2.000, 2.893, 1.964]
    # Published chi2_F = 9.28 and F_F = 3.69 use the formula without scipy's tie correction (from memory).
    n, k = 14, 4
    ranks = np.array(list(result.mean_ranks.values()))
    chi2 = 12 * n / (k * (k + 1)) * (np.sum(ranks**2) - k * (k + 1) ** 2 / 4)
    assert round(chi2, 2) == 9.28
    assert round((n - 1) * chi2 / (n * (k - 1) - chi2), 2) == 3.69
    # The tie-corrected statistic is scipy.stats.friedmanchisquare's.
    assert result.friedman_stat == pytest.approx(stats.friedmanchisquare(*frame.to_numpy().T).statistic)
    # Published CD = 2.569 * sqrt(4 * 5 / (6 * 14)) = 1.25 (from memory).
    assert round(result.critical_difference, 2) == 1.25
    assert result.tested_critical_difference == result.critical_difference  # Friedman's test ran


def test_two_families_give_ranks_and_cd_but_no_friedman():
    result = rank_families(_scores(2, 10, ["tree", "forest"]))
    assert math.isnan(result.friedman_stat) and math.isnan(result.friedman_p)
    assert "needs three or more families, got 2" in result.note
    assert result.critical_difference == pytest.approx(1.960 * math.sqrt(2 * 3 / (6 * 10)))
    assert math.isnan(result.tested_critical_difference)  # no Friedman test, no Nemenyi comparison
    assert sum(result.mean_ranks.values()) == pytest.approx(3.0)  # ranks 1 and 2 in every block


def test_every_block_tied_gives_nan_with_a_note_and_no_warning():
    frame = pd.DataFrame({"x": [0.5, 0.7], "y": [0.5, 0.7], "z": [0.5, 0.7]})
    result = rank_families(frame)
    assert math.isnan(result.friedman_stat) and "undefined" in result.note
    assert result.mean_ranks == {"x": 2.0, "y": 2.0, "z": 2.0}


@pytest.mark.parametrize(
    ("scores", "message"),
    [
        (np.ones((3, 3)), "must be a pandas DataFrame"),
        (pd.DataFrame({"x": [0.5, 0.6]}), "at least 2 family columns"),
        (pd.DataFrame([[0.5, 0.6], [0.7, 0.8]], columns=["x", "x"]), r"repeated family columns \['x'\]"),
        (pd.DataFrame({"x": [0.5, np.inf], "y": [0.5, 0.6]}), "infinite values"),
        (pd.DataFrame({"x": ["a", "b"], "y": [0.5, 0.6]}), "must hold numbers"),
        (pd.DataFrame({"x": [0.5, np.nan, 0.7], "y": [0.5, 0.6, np.nan]}),
         r"needs at least 2 complete blocks .*, got 1 \(2 dropped"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(scores, message):
    with pytest.raises(ValueError, match=message):
        rank_families(scores)


def test_nemenyi_q_refuses_fewer_than_two_families():
    with pytest.raises(ValueError, match="at least 2; got 1"):
        nemenyi_q(1)


def _blocks(seed, n, shifts):
    rng = np.random.default_rng(seed)
    base = rng.uniform(0.7, 0.8, size=n)
    return pd.DataFrame({name: base + shift + rng.normal(0, 0.01, size=n) for name, shift in shifts.items()})


def test_the_verdict_names_who_nemenyi_tells_apart_after_friedman_rejects():
    result = rank_families(_blocks(0, 12, {"forest": 0.05, "knn": 0.045, "tree": 0.0, "stump": -0.05}))
    # Reference: scipy.stats.friedmanchisquare rejects at 0.05, as the sentence says.
    assert stats.friedmanchisquare(*_blocks(0, 12, {"forest": 0.05, "knn": 0.045, "tree": 0.0,
                                                     "stump": -0.05}).to_numpy().T).pvalue < 0.05
    verdict = ranking_verdict(result)
    best = min(result.mean_ranks, key=result.mean_ranks.get)
    behind = sorted(family for family, rank in result.mean_ranks.items()
                    if rank - result.mean_ranks[best] >= result.critical_difference)
    assert verdict.startswith(f"{best} ranks best (mean rank {result.mean_ranks[best]:.2f} over 12 outer folds)")
    assert "Friedman's test finds the ranks differ" in verdict
    assert behind and all(family in verdict.split("ahead of ")[1] for family in behind)


def test_the_verdict_says_when_friedman_does_not_reject():
    result = rank_families(_blocks(1, 6, {"a": 0.0, "b": 0.0, "c": 0.0}))
    assert result.friedman_p >= 0.05
    assert "does not find the families' ranks different" in ranking_verdict(result)
    assert "critical difference" not in ranking_verdict(result)


def test_the_verdict_says_why_friedman_cannot_run_with_two_families():
    result = rank_families(_blocks(2, 6, {"a": 0.02, "b": 0.0}))
    verdict = ranking_verdict(result)
    assert "Friedman's test cannot run: Friedman's test needs three or more families, got 2" in verdict
    assert "critical difference" not in verdict
