"""The demo's invented scenarios; the generators live in the package, so installed copies have them too.

``python -m demo_data.scenarios`` prints a summary of each.
"""

from foldwise.demo_scenarios import Scenario, assay_yield, turbine_fleet

__all__ = ["Scenario", "assay_yield", "turbine_fleet"]


def _summary(scenario: Scenario) -> str:
    y = scenario.y
    target = (f"{int(y.sum())} positives ({y.mean():.1%})" if set(y.unique()) <= {0, 1}
              else f"{y.name} mean {y.mean():.1f}, sd {y.std():.1f}")
    groups = "no groups" if scenario.groups is None else f"{scenario.groups.nunique()} groups"
    return (f"{scenario.name}: {len(scenario.X)} rows, {scenario.X.shape[1]} features, {target}, {groups}\n"
            f"  {scenario.description}")


if __name__ == "__main__":
    for make in (turbine_fleet, assay_yield):
        print(_summary(make()))
