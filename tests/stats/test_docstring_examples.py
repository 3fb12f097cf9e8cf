"""Every statistic's Examples section runs and shows what it claims (Python's doctest)."""

import doctest

import pytest

from foldwise.stats import agreement, intervals, paired, planner, ranking, summaries


@pytest.mark.parametrize("module", [summaries, paired, ranking, agreement, planner, intervals],
                         ids=lambda m: m.__name__)
def test_examples_run(module):
    results = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert results.attempted > 0
    assert results.failed == 0
