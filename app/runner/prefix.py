"""Configurations of a pipeline that share their leading steps share one fit of those steps per fold.

A ``Pipeline`` fits its steps one after the other, each on what the steps before it made of the
data, and the last on the result. Two configurations whose first steps are set up alike (the same
class, the same parameters) therefore fit those steps identically on the same rows: foldwise fits
them once per fold and fits each configuration's remaining steps on the shared output. Sharing is
planned up front as a tree: configurations are grouped by their first step, each group by its second,
and so on, so a step is fitted once for every distinct way of reaching it. A fold's configurations
sharing their first step form one job of the pool (up to eight of them: a larger group is cut where
the fewest steps are shared, and each part fits its shared steps once).

The fitted steps are the very objects a separate ``Pipeline.fit`` would make (``fit_transform``
where the step has it, as the pipeline calls it), and each configuration's last step is scored on the
test rows as the pipeline's ``transform`` chain hands them over, so scores and predictions equal
separate fits bit for bit (tests/runner/test_prefix.py checks them against ``GridSearchCV``). A step
with a ``random_state`` left as ``None`` anywhere in its parameters draws afresh at each fit, so it is
never shared: each configuration fits its own, and so does every step after it. Configurations whose
last steps differ only in their number of trees or stages are grown as one model on the shared output
(foldwise.runner.growth).

Fit times: a configuration's ``fit_time`` is what its own pipeline's fit would have taken: the
shared steps' fit times plus its own last step's; its ``score_time`` counts the shared steps'
transform of the test rows. Of the shared time, the first configuration of a group (in grid order)
is charged, and the others record it as ``inherited_time``, so the run's total fit time counts each
shared fit once. A shared step that fails to fit or transform is not recorded on its own: the
configurations under it are fitted separately, each recording the error its own fit gives.
"""

from __future__ import annotations

import copy
import time
from dataclasses import dataclass

import joblib
from sklearn.base import clone
from sklearn.pipeline import Pipeline
from sklearn.utils import _safe_indexing

from foldwise.runner.fitting import FitResult, FitTask, fit_and_score, run_fit
from foldwise.runner.growth import grow_chain
from foldwise.runner.metadata import FamilyMetadata
from foldwise.runner.scoring import Scoring
from foldwise.runner.space import Space

_IDENTITY = (None, "passthrough")
MOST_PER_JOB = 8
_NO_METADATA = FamilyMetadata({}, {})


def shared_steps(space: Space) -> dict[int, tuple]:
    """For each configuration that can share its leading steps, one key per step before the last.

    Configurations with equal keys up to a step share the fits up to that step. A step that is not
    deterministic gets a key of its own configuration; a configuration that is not a plain
    ``Pipeline`` ending in an estimator, or whose parameters do not apply, is left out.
    """
    keys = {}
    for position, candidate in enumerate(space.candidates):
        estimator = space.estimators[candidate.family]
        if type(estimator) is not Pipeline or _sets_the_pipeline_itself(estimator, candidate.params):
            continue
        try:
            pipeline = clone(estimator).set_params(**clone(candidate.params, safe=False))
        except Exception:  # a bad grid point fails as a fit, where its error is recorded
            continue
        if pipeline.transform_input is not None or len(pipeline.steps) < 2 or \
                not hasattr(pipeline.steps[-1][1], "fit"):
            continue
        keys[position] = tuple(_step_key(step, position) for _, step in pipeline.steps[:-1])
    return keys


def prefix_groups(space: Space, keys: dict[int, tuple], chain_of: dict[int, int]) -> list[list[int]]:
    """Configurations of one family whose first steps share a fit, two or more to a job.

    A job holds at most ``MOST_PER_JOB`` configurations (a growth chain is never cut), those sharing the
    most steps together: sharing a fit eight ways saves most of what it can, and a large grid still makes
    enough jobs to keep a pool's workers busy.
    """
    groups: dict[tuple, list[int]] = {}
    for position, steps in keys.items():
        groups.setdefault((space.candidates[position].family, steps[0]), []).append(position)
    jobs = []
    for members in groups.values():
        first_seen: dict[tuple, int] = {}
        for position in members:  # where each path of shared steps first appears, in grid order
            for depth in range(1, len(keys[position]) + 1):
                first_seen.setdefault(keys[position][:depth], position)
        chains: dict[int, list[int]] = {}
        for position in sorted(members, key=lambda p: [first_seen[keys[p][:d]] for d in range(1, len(keys[p]) + 1)]):
            chains.setdefault(chain_of[position], []).append(position)
        job: list[int] = []
        for chain in chains.values():
            if job and len(job) + len(chain) > MOST_PER_JOB:
                jobs.append(job)
                job = []
            job += chain
        jobs.append(job)
    return [job for job in jobs if len(job) > 1]


def run_shared(tasks: list[FitTask], estimator, params: list[dict], keys: list[tuple], chains: list,
               X, y, scoring: Scoring, classes) -> list[FitResult]:
    """Fit one fold's configurations of a group, each shared step once; results in the tasks' order.

    ``chains`` names each task's growth chain: tasks of one chain (consecutive, smallest count first)
    grow one model of the last step. Only families given no metadata (``params=``) share steps.
    """
    shared = _SharedFit(estimator, X, y, scoring, classes)
    members = [_Member(task, step, clone(estimator).set_params(**clone(step, safe=False)), key, chain)
               for task, step, key, chain in zip(tasks, params, keys, chains, strict=True)]
    train, test = tasks[0].train, tasks[0].test
    shared.descend(members, 0, _safe_indexing(X, train), _safe_indexing(y, train), _safe_indexing(X, test),
                   _safe_indexing(y, test))
    return [shared.results[task.key] for task in tasks]


@dataclass
class _Member:
    task: FitTask
    params: dict
    pipeline: Pipeline  # set up for this configuration; its steps are replaced by fitted ones when kept
    keys: tuple
    chain: object
    fit_time: float = 0.0  # of the shared steps on its path
    inherited_time: float = 0.0  # the part of fit_time another configuration was charged
    score_time: float = 0.0  # the shared steps' transform of the test rows
    cpu_time: float = 0.0  # the shared steps' CPU time this configuration was charged


class _SharedFit:
    def __init__(self, estimator, X, y, scoring: Scoring, classes):
        self.estimator, self.X, self.y = estimator, X, y
        self.scoring, self.classes = scoring, classes
        self.results: dict[tuple, FitResult] = {}

    def descend(self, members: list[_Member], depth: int, X_train, y_train, X_test, y_test,
                fitted: tuple = ()) -> None:
        """Fit step ``depth`` once per distinct key among ``members``, then the steps after it."""
        if depth == len(members[0].keys):
            self._finish(members, X_train, y_train, X_test, y_test, fitted)
            return
        for group in _grouped(members, lambda member: member.keys[depth]):
            name, step = group[0].pipeline.steps[depth]
            started_cpu, started = time.process_time(), time.perf_counter()
            try:
                if step in _IDENTITY:
                    step_train, step_test = X_train, X_test
                    fit_time = 0.0
                else:
                    step_train = _fit_transform(step, X_train, y_train)
                    fit_time = time.perf_counter() - started
                    step_test = step.transform(X_test)
            except Exception:  # each configuration below fits on its own and records its own error
                for member in group:
                    self.results[member.task.key] = run_fit(member.task, self.estimator, member.params, self.X,
                                                            self.y, self.scoring, _NO_METADATA, self.classes)
                continue
            transform_time = time.perf_counter() - started - fit_time
            cpu_time = time.process_time() - started_cpu
            for position, member in enumerate(group):
                member.fit_time += fit_time
                member.score_time += transform_time
                if position:
                    member.inherited_time += fit_time
                else:
                    member.cpu_time += cpu_time
            self.descend(group, depth + 1, step_train, y_train, step_test, y_test, (*fitted, (name, step)))

    def _finish(self, members: list[_Member], X_train, y_train, X_test, y_test, fitted: tuple) -> None:
        """Fit each configuration's last step on the shared output (a growth chain as one model)."""
        by_key = {member.task.key: member for member in members}

        def kept(task, model):  # the configuration's pipeline, as its own fit would have left it
            pipeline = by_key[task.key].pipeline
            pipeline.steps = [*((name, copy.deepcopy(step)) for name, step in fitted), (pipeline.steps[-1][0], model)]
            return pipeline

        data = (X_train, y_train, X_test, y_test, self.scoring, self.classes)
        for chain in _grouped(members, lambda member: member.chain):
            tasks = [member.task for member in chain]
            lasts = [member.pipeline.steps[-1][1] for member in chain]
            if len(chain) > 1:
                results = grow_chain(tasks, lasts, *data, fit_params={}, score_params={}, keep=kept)
            else:
                results = [fit_and_score(tasks[0], lasts[0], *data, fit_params={}, score_params={},
                                         started_cpu=time.process_time(),
                                         keep=lambda model, task=tasks[0]: kept(task, model))]
            for member, result in zip(chain, results, strict=True):
                result.fit_time += member.fit_time
                result.inherited_time += member.inherited_time
                result.score_time += member.score_time
                result.cpu_time += member.cpu_time
                self.results[member.task.key] = result


def _fit_transform(step, X, y):
    """As ``Pipeline`` fits an intermediate step (sklearn.pipeline._fit_transform_one)."""
    if hasattr(step, "fit_transform"):
        return step.fit_transform(X, y)
    return step.fit(X, y).transform(X)


def _grouped(members: list[_Member], key) -> list[list[_Member]]:
    groups: dict[object, list[_Member]] = {}
    for member in members:
        groups.setdefault(key(member), []).append(member)
    return list(groups.values())


def _step_key(step, position: int):
    """A digest of the step as set up; its own configuration's key when it is not deterministic."""
    if step in _IDENTITY:
        return "passthrough"
    try:
        settings = step.get_params(deep=True)
        if any(value is None for name, value in settings.items()
               if name == "random_state" or name.endswith("__random_state")):
            return ("alone", position)
        return joblib.hash(step, hash_name="sha1")
    except Exception:  # a step that does not pickle or describe itself is not shared
        return ("alone", position)


def _sets_the_pipeline_itself(pipeline: Pipeline, params: dict) -> bool:
    """Whether the grid sets the pipeline's own parameters (steps, memory, ...) rather than its steps'."""
    names = {name for name, _ in pipeline.steps}
    return any(key.split("__", 1)[0] not in names for key in params)
