"""Nested cross-validation with every fit of every outer fold in one parallel pool."""

from __future__ import annotations

import sys
import warnings
from collections import Counter
from collections.abc import Iterable
from uuid import UUID, uuid4

import joblib
import numpy as np
from sklearn.base import is_classifier
from sklearn.model_selection import check_cv
from sklearn.utils.metadata_routing import _routing_enabled
from sklearn.utils.parallel import Parallel, delayed  # carries sklearn's config into the workers
from sklearn.utils.validation import _num_samples

from foldwise.assessment import Assessment
from foldwise.definitions import select_in_fold
from foldwise.runner.building import build_payload
from foldwise.runner.cluster import data_for_workers
from foldwise.runner.final import final_selection, final_splits, final_tasks
from foldwise.runner.fitting import FitResult, FitTask, run_fit
from foldwise.runner.growth import growth_chains, run_chain
from foldwise.runner.journal import MODES, Journal, fingerprint
from foldwise.runner.keeping import check_trusted, keepable_families
from foldwise.runner.live import DEFAULT_INTERVAL, LiveReporter
from foldwise.runner.metadata import Routed, route
from foldwise.runner.prefix import prefix_groups, run_shared, shared_steps
from foldwise.runner.progress import progress_bar
from foldwise.runner.scoring import Scoring, resolve_scoring
from foldwise.runner.searches import search_in, search_settings
from foldwise.runner.space import EXPANDABLE, Space, space_from
from foldwise.runner.splits import Layout, lay_out
from foldwise.runner.whole_search import nested_whole_search


def nested_cv(space, X, y, *, outer=5, inner=None, scoring=None, groups=None, params=None, error_score=np.nan,
              n_jobs=None, progress=True, name=None, dataset=None, refit_all=True, keep_predictions=True,
              keep_models=False, trusted=None, grow=True, final=False, share_prefixes=True, checkpoint=None,
              checkpoint_mode="resume", live=None, live_token=None, live_interval=DEFAULT_INTERVAL) -> Assessment:
    """Run a nested cross-validation and keep every score.

    Parameters
    ----------
    space : dict or search object
        ``{family: (estimator, param_grid)}`` with grids as ``ParameterGrid`` takes them;
        ``{family: (estimator, distributions, n_iter, random_state)}`` for random search (``n_iter``
        candidates drawn once by ``ParameterSampler`` from lists and ``scipy.stats`` distributions, the
        same in every outer fold, recorded as the configurations; ``random_state`` may be left out, and
        then they are drawn afresh on each call); see ``foldwise.runner.space``. Or a search object, bare
        or as ``{family: search}``: a ``GridSearchCV`` / ``RandomizedSearchCV`` is expanded into its
        candidates and run in the one pool, any other ``BaseSearchCV`` or one with a callable ``refit``
        is fitted whole on each outer training set. A search object's ``cv``, ``scoring`` and ``refit``
        are used as they are (``foldwise.runner.searches``).
    outer : int or splitter
        Resolved with ``check_cv``: stratified for classifiers.
    inner : int, splitter or None
        As ``outer``; None is 5 folds, or a search object's own ``cv``. Beside a search object an
        ``inner`` other than its ``cv`` is refused (the search's setting wins; change it there).
    scoring : str, list of str, dict, scorer object or callable, optional
        As ``GridSearchCV`` takes it: a scorer name, a list of names, a dict ``{name: scorer}``, a
        scorer object (``make_scorer(fbeta_score, beta=2)``) or a callable ``(estimator, X, y)``, named
        "score". The first metric (or a search object's ``refit`` metric) selects. Defaults to
        accuracy (classifiers) or r2, or a search object's own scoring; beside a search object, a
        ``scoring`` whose first metric is not the one the search selects by is refused.
    groups : array-like, optional
        Group labels, passed to the outer splitter and, restricted to the outer training rows, to
        the inner one (an int ``inner`` resolves to an ungrouped splitter: pass e.g. ``GroupKFold``
        to keep groups apart inside too).
    params : dict, optional
        Fit parameters and other metadata (``{"sample_weight": w}``), as ``cross_validate(...,
        params=...)`` takes them: indexed per split at both levels and routed to the families' ``fit``,
        the scorers and the splitters as scikit-learn routes them (see ``foldwise.runner.metadata``).
        A family given any is fitted step by step as its own pipeline would be, without sharing steps.
    error_score : np.nan or "raise"
        np.nan (default): a fit that raises is kept with NaN for every metric, a scorer that raises
        with NaN for its metric alone, each with its message in ``Assessment.failures``; a fold in
        which every configuration failed has no fold winner and counts as failed. "raise": stop at the
        first failure with the original exception, for debugging.
    n_jobs : int, optional
        Workers of the one joblib pool; ``joblib.parallel_config(backend=...)`` picks where they run.
    refit_all : bool
        Refit every configuration on every outer training set (default), or only the family winners.
    keep_predictions : bool
        Keep each outer fit's test predictions (float64).
    keep_models : bool
        Keep every family winner as fitted on its outer training set (skops files in the payload), so
        an ensemble of fold winners can be downloaded ready to predict. The outer refits then wait
        for the inner folds' choices, so that only the winners' models are held. Only models the store's
        loader reads back are kept: each family's estimator is checked at the start and each fitted
        model at the end (``foldwise.runner.keeping``); a warning names those left out, whose ensembles
        ``build_ensemble`` refits instead.
    trusted : list of str, optional
        Libraries (top-level module names, e.g. ``["xgboost"]``) whose own classes the loader may read
        back from this assessment's kept models, recorded as ``design.trusted``. Never trusted by default:
        loading a class can run its code.
    final : bool
        Also run the final selection (``foldwise.runner.final``): the inner splitter over every row, every
        configuration scored on each of its folds, the winner chosen by the outer folds' rule and refit on
        every row — the model the nested estimate describes (``assessment.final_model``).
    grow : bool
        Fit a forest, bagging or boosting family's configurations that differ only in their number of
        trees or stages (``n_estimators``, ``max_iter``) as one model grown with ``warm_start``, once
        per fold: the same models as separate fits (see ``foldwise.runner.growth``), at the cost of
        the largest alone. Each configuration's fit time counts the growing it inherited.
    share_prefixes : bool
        Fit a ``Pipeline`` family's leading steps once per fold for all its configurations that set
        them up alike (see ``foldwise.runner.prefix``): the same models as separate fits. Each
        configuration's fit time is its shared steps' time plus its own.
    checkpoint : path, optional
        An SQLite file where each finished fit is written as it arrives (see
        ``foldwise.runner.journal``). Run the same call again after a crash or a Ctrl-C and the fits
        found there are not run again; the assessment is the one an uninterrupted run returns. A
        journal of a different run (data, grid, scorer, splits, versions or options) is refused.
    checkpoint_mode : {"resume", "overwrite"}
        Resume from the journal at ``checkpoint`` (default), or start it afresh.
    live : str, optional
        The URL of a foldwise server to watch the run on (see ``foldwise.runner.live``): it is told that the
        run started, then every ``live_interval`` seconds how many fits are done of how many, the time per
        fit and the projected end, and each outer fold's winners and outer scores as the fold completes. At
        the end the assessment is pushed there (``foldwise.push``; spooled if the server cannot be reached)
        and replaces the live view. A server that cannot be reached never stops the run; the next report
        catches it up. With ``checkpoint``, a resumed run goes on under its first uuid.
    live_token : str, optional
        The write key for ``live``, as ``push`` takes it (else ``$FOLDWISE_KEY``, else this machine's key file).
    live_interval : float
        Seconds between two reports to ``live`` (default 5).
    """
    _check_lengths(X, y, groups)
    trusted = check_trusted(trusted)
    if checkpoint_mode not in MODES:
        raise ValueError(f"checkpoint_mode must be one of {MODES}, got {checkpoint_mode!r}")
    search, family = search_in(space)
    if search is not None:
        inner, scoring = search_settings(search, inner, scoring)
        space = {family: search}
    if search is not None and (not isinstance(search, EXPANDABLE) or callable(search.refit)):
        kind = type(search).__name__
        if keep_models:
            raise ValueError(f"keep_models=True needs a space foldwise expands into configurations; a "
                             f"{kind} is fitted whole on each outer fold, so pass a dict "
                             f"{{family: (estimator, grid)}} or a GridSearchCV / RandomizedSearchCV")
        if checkpoint is not None or live is not None:
            raise ValueError(f"{'checkpoint' if checkpoint is not None else 'live'} needs a space foldwise expands "
                             f"into configurations; a {kind} is fitted whole on each outer fold")
        if params or not (isinstance(error_score, float) and np.isnan(error_score)):
            raise ValueError(f"params= and error_score= are not passed into a {kind} fitted whole; "
                             f"set error_score on the search itself, or pass a dict space or a GridSearchCV")
        return nested_whole_search(search, X, y, family=family, outer=outer, scoring=scoring, groups=groups,
                                   n_jobs=n_jobs, progress=progress, name=name, dataset=dataset,
                                   keep_predictions=keep_predictions)
    resolved = space_from(space)
    classifier = _task_of(resolved)
    keepable = keepable_families(resolved.estimators, trusted) if keep_models else set()
    scorers = resolve_scoring(scoring, next(iter(resolved.estimators.values())), classifier=classifier,
                              error_score=error_score)
    metrics = scorers.metrics
    routed = route(params, groups, estimators=resolved.estimators, scoring=scorers,
                   outer_cv=check_cv(outer, y, classifier=classifier),
                   inner_cv=check_cv(inner, y, classifier=classifier))
    layout = lay_out(X, y, routed.outer_groups, outer=outer, inner=inner, classifier=classifier,
                     inner_groups=routed.inner_groups)
    classes = np.unique(np.asarray(y)).tolist() if classifier else None
    chains = growth_chains(resolved, n_samples=_num_samples(X)) if grow else \
        [[c] for c in range(len(resolved.candidates))]
    journal = None if checkpoint is None else Journal(checkpoint, fingerprint(
        X=X, y=y, groups=groups, space=resolved, layout=layout, classes=classes,
        metrics=[f"{name} = {scorers.custom[name]}" if name in scorers.custom else name for name in metrics],
        options={"refit_all": refit_all, "keep_predictions": keep_predictions, "keep_models": keep_models,
                 "trusted": trusted,
                 "grow": grow, "share_prefixes": share_prefixes, "final": final,
                 "error_score": str(error_score), "routing": _routing_enabled(),
                 "params": None if not params else joblib.hash(params, hash_name="sha1")}), mode=checkpoint_mode)
    shared = shared_steps(resolved) if share_prefixes else {}
    shared = {c: key for c, key in shared.items() if routed.families[resolved.candidates[c].family].is_empty}
    # A resumed run goes on reporting under its first uuid; a run that finished leaves the next one a new uuid.
    run_uuid = journal.run_uuid(str(uuid4())) if journal is not None and live is not None else str(uuid4())
    reporter = None if live is None else LiveReporter(
        live, run_uuid, token=live_token, interval=live_interval, name=name or "nested cross-validation",
        dataset=dataset, task="classification" if classifier else "regression", metrics=metrics, space=resolved,
        layout=layout, refit_all=refit_all)
    runner = _Runner(resolved, chains, shared, *data_for_workers(X, y), scorers, routed, classes, journal, reporter)

    n_configs = len(resolved.candidates)
    n_fits = len(layout.splits) * n_configs * (layout.n_inner_folds + (1 if refit_all else 0))
    if reporter is not None:
        reporter.start(n_fits)
    try:
        results, choices, chosen = _run_all(runner, layout, resolved, metrics, n_fits, n_jobs=n_jobs,
                                            progress=progress, name=name, journal=journal, refit_all=refit_all,
                                            keep_models=keep_models, keepable=keepable,
                                            keep_predictions=keep_predictions,
                                            final=final, X=X, y=y, inner=inner, classifier=classifier,
                                            routed=routed, scorers=scorers)
    except BaseException as error:
        if reporter is not None:
            reporter.end("stopped", reason="interrupted (Ctrl-C)" if isinstance(error, KeyboardInterrupt)
                         else f"{type(error).__name__}: {error}")
        raise
    if journal is not None:
        journal.forget_run_uuid()
        journal.close()
    _warn_failures(list(results.values()), _failed_folds(layout, choices))
    for key in [key for key in results if key[0] == "final"]:
        del results[key]  # kept in the payload's own part, not among the outer folds
    payload = build_payload(
        name=name or "nested cross-validation", dataset=dataset, space=resolved, layout=layout, y=y,
        metrics=metrics, classes=classes, classifier=classifier, results=results, choices=choices,
        refit_all=refit_all, n_features=_n_features(X),
        grouped=routed.outer_groups is not None or routed.inner_groups is not None, scorers=scorers.custom,
        trusted=trusted)
    payload = payload.model_copy(update={"uuid": UUID(run_uuid), **({"final": chosen} if final else {})})
    if reporter is not None:
        reporter.end("done")
        _push_finished(payload, live, live_token)
    return Assessment(payload)


def _run_all(runner, layout, resolved, metrics, n_fits, *, n_jobs, progress, name, journal, refit_all, keep_models,
             keepable, keep_predictions, final, X, y, inner, classifier, routed, scorers):
    """Every fit of the run in the one pool: the inner folds (with the outer refits when they need not wait),
    the fold winners, the outer refits that waited for them, and the final selection."""
    n_configs, chosen = len(resolved.candidates), None
    with progress_bar(total=n_fits, unit="fit", desc=name or "nested cv", disable=not progress) as bar, \
            Parallel(n_jobs=n_jobs, return_as="generator_unordered",
                     # With a journal, one job per dispatch: a job's fits are journaled as soon as it ends,
                     # not when a batch of quick jobs does, so a killed run loses only what was running.
                     batch_size=1 if journal is not None else "auto") as pool:
        first = [*_inner_tasks(layout, n_configs)]
        outer_at_once = refit_all and not keep_models
        if outer_at_once:  # fold by fold, so that outer folds complete one after another, not all at the end
            outer = _outer_tasks(layout, range(n_configs), keep_predictions)
            first = sorted(first + outer, key=lambda task: task.key[1])
        results = runner.run(pool, first, bar)
        choices = _select(layout, resolved, results, metrics[0])
        if not outer_at_once:
            wanted = {(s, c) for s, (winners, _) in enumerate(choices) for c in winners if c is not None}
            kept = {(s, c) for s, c in wanted if resolved.candidates[c].family in keepable}
            pairs = [(s, c) for s in range(len(layout.splits)) for c in range(n_configs)] if refit_all \
                else sorted(wanted)
            bar.total = len(first) + len(pairs)
            bar.refresh()
            runner.total(bar.total)
            results.update(runner.run(pool, _outer_tasks_for(layout, pairs, keep_predictions, kept), bar))

        if final:
            splits, inner_splitter = final_splits(X, y, routed.inner_groups, inner=inner, classifier=classifier)
            tasks = final_tasks(splits, n_configs)
            bar.total += len(tasks)
            bar.refresh()
            runner.total(bar.total)
            ran = runner.run(pool, tasks, bar)
            chosen = final_selection(resolved, splits, inner_splitter, ran, metrics, X, y,
                                     fit_params={family: routed.families[family].fit for family in resolved.estimators},
                                     raises=scorers.raises)
            results.update(ran)
    return results, choices, chosen


def _push_finished(payload, url: str, token: str | None) -> None:
    """Push the finished assessment to the live server, where it replaces the live view; a refusal is warned
    about, never raised: the assessment is returned all the same, to push or save again."""
    from foldwise.client import PushRejected, push

    try:
        push(payload, url, token=token)
    except PushRejected as error:
        warnings.warn(f"{error}; the assessment is returned all the same: push or save it again", RuntimeWarning,
                      stacklevel=3)


class _Runner:
    """Hands the pool one job per fold and group of configurations that share work (a growth chain, or
    a pipeline's shared leading steps), and journals each job's results as they arrive."""

    def __init__(self, space: Space, chains: list[list[int]], shared: dict[int, tuple], X, y, scoring: Scoring,
                 routed: Routed, classes, journal: Journal | None = None, reporter: LiveReporter | None = None):
        self.space, self.X, self.y = space, X, y
        self.scoring, self.routed, self.classes = scoring, routed, classes
        self.chain_of = {c: n for n, chain in enumerate(chains) for c in chain}
        self.step_of = {c: step for chain in chains for step, c in enumerate(chain)}
        self.shared = shared
        self.group_of = {c: ("chain", n) for c, n in self.chain_of.items()}
        self.group_of.update((c, ("prefix", n)) for n, group in enumerate(prefix_groups(space, shared, self.chain_of))
                             for c in group)
        self.journal, self.reporter = journal, reporter

    def total(self, n_fits: int) -> None:
        if self.reporter is not None:
            self.reporter.fits_total = n_fits

    def run(self, pool: Parallel, tasks: list[FitTask], bar) -> dict[tuple, FitResult]:
        results = {}
        if self.journal is not None:
            results = {task.key: found for task in tasks if (found := self.journal.result_for(task)) is not None}
            tasks = [task for task in tasks if task.key not in results]
            bar.update(len(results))
            if self.reporter is not None and results:
                self.reporter.arrived(list(results.values()), resumed=True)
        try:
            for done in pool(self._job(job) for job in self._jobs(tasks)):
                done = done if isinstance(done, list) else [done]  # a job's results, or one fit's
                if self.journal is not None:
                    self.journal.record(done)
                results.update((result.key, result) for result in done)
                bar.update(len(done))
                if self.reporter is not None:
                    self.reporter.arrived(done)
        except KeyboardInterrupt:  # the pool stops its workers as the exception leaves it
            if self.journal is not None:
                print(f"\nInterrupted: {self.journal.count()} finished fits are kept in the journal "
                      f"{self.journal.path}. Run the same nested_cv call (checkpoint={str(self.journal.path)!r}) "
                      f"to resume from them.", file=sys.stderr)
                self.journal.close()
            raise
        return results

    def _jobs(self, tasks: list[FitTask]) -> list[list[FitTask]]:
        """The tasks of one fold whose configurations share work become one job, chains smallest first."""
        jobs: dict[tuple, list[FitTask]] = {}
        for task in tasks:
            jobs.setdefault((task.key[:-1], self.group_of[task.config]), []).append(task)
        return [sorted(job, key=self._order) for job in jobs.values()]

    def _order(self, task: FitTask) -> tuple[int, int]:
        return self.chain_of[task.config], self.step_of[task.config]

    def _job(self, job: list[FitTask]):
        candidates = self.space.candidates
        family = candidates[job[0].config].family
        estimator = self.space.estimators[family]
        params = [candidates[task.config].params for task in job]
        data = (self.X, self.y, self.scoring, self.routed.families[family], self.classes)
        if self.group_of[job[0].config][0] == "prefix":  # only families without metadata share steps
            return delayed(run_shared)(job, estimator, params, [self.shared[task.config] for task in job],
                                       [self.chain_of[task.config] for task in job], self.X, self.y,
                                       self.scoring, self.classes)
        if len(job) == 1:
            return delayed(run_fit)(job[0], estimator, params[0], *data)
        return delayed(run_chain)(job, estimator, params, *data)


def _inner_tasks(layout: Layout, n_configs: int) -> Iterable[FitTask]:
    for s, split in enumerate(layout.splits):
        for i, (train, test) in enumerate(split.inner):
            for c in range(n_configs):
                yield FitTask(("inner", s, i, c), c, train, test)


def _outer_tasks(layout: Layout, configs, predict: bool) -> list[FitTask]:
    return _outer_tasks_for(layout, [(s, c) for s in range(len(layout.splits)) for c in configs], predict)


def _outer_tasks_for(layout: Layout, pairs, predict: bool, keep=frozenset()) -> list[FitTask]:
    return [FitTask(("outer", s, c), c, layout.splits[s].train, layout.splits[s].test, predict,
                    (s, c) in keep) for s, c in pairs]


def _select(layout: Layout, space: Space, results: dict, metric: str) -> list[tuple[list, int | None]]:
    """Each outer fold's family winners and overall winner (None where every configuration failed: the
    fold then counts as failed, its fits' messages in the failures), by ``definitions.select_in_fold``."""
    families = [space.positions_of(family) for family in space.estimators]
    n_configs, choices = len(space.candidates), []
    for s in range(len(layout.splits)):
        inner = np.array([[results[("inner", s, i, c)].scores[metric] for i in range(layout.n_inner_folds)]
                          for c in range(n_configs)])
        chosen = select_in_fold(inner, families)
        choices.append((chosen.family, chosen.overall))
    return choices


def resolve_metrics(scoring, classifier: bool) -> list[str]:
    """The metric names ``scoring`` gives (``foldwise.runner.scoring.resolve_scoring``)."""
    return resolve_scoring(scoring, None, classifier=classifier).metrics



def _task_of(space: Space) -> bool:
    kinds = {family: is_classifier(estimator) for family, estimator in space.estimators.items()}
    if len(set(kinds.values())) > 1:
        classifiers = [family for family, is_one in kinds.items() if is_one]
        regressors = [family for family, is_one in kinds.items() if not is_one]
        raise ValueError(f"families mix classifiers {classifiers} and regressors {regressors}; one assessment "
                         f"holds one task, so run them as two")
    return next(iter(kinds.values()))


def _check_lengths(X, y, groups) -> None:
    n_X, n = _num_samples(X), _num_samples(y)  # len() refuses sparse matrices
    n_groups = None if groups is None else _num_samples(groups)
    if n_X != n or n_groups not in (None, n):
        raise ValueError(f"X, y and groups must have the same number of rows, got {n_X}, {n} and {n_groups}")


def _n_features(X) -> int | None:
    shape = getattr(X, "shape", None)
    return int(shape[1]) if shape is not None and len(shape) == 2 else None


def _failed_folds(layout: Layout, choices) -> list[str]:
    return [f"repeat {split.repeat}, outer fold {split.outer_fold}"
            for split, (_, overall) in zip(layout.splits, choices, strict=True) if overall is None]


def _warn_failures(records: list[FitResult], failed_folds: list[str]) -> None:
    """One warning at the end: how many fits failed or lost a part, counted by message, and the folds
    left without a winner."""
    failed = [record for record in records if record.error]
    partly = [record for record in records if not record.error and record.problems]
    if not failed and not partly and not failed_folds:
        return
    said = []
    if failed:
        said.append(f"{len(failed)} of {len(records)} fits failed and were recorded with NaN scores")
    if partly:
        said.append(f"{len(partly)} {'more ' if failed else ''}fits lost a metric or their predictions (NaN or "
                    f"missing there alone)")
    counts = Counter(_headline(message) for record in records
                     for message in ([record.error] if record.error else [p.message for p in record.problems]))
    shown = [f"{count} × {message}" for message, count in counts.most_common(_MESSAGES_SHOWN)]
    if len(counts) > _MESSAGES_SHOWN:
        shown.append(f"{len(counts) - _MESSAGES_SHOWN} other messages")
    text = "; ".join(said) + (": " + "; ".join(shown) if shown else "") + "."
    if failed_folds:
        text += (f" Every configuration failed in {len(failed_folds)} outer "
                 f"{'fold' if len(failed_folds) == 1 else 'folds'} ({'; '.join(failed_folds)}): no fold winner "
                 f"there, and the nested estimate counts {'it' if len(failed_folds) == 1 else 'them'} as failed.")
    warnings.warn(text + " See Assessment.failures.", RuntimeWarning, stacklevel=3)


_MESSAGES_SHOWN = 5


def _headline(message: str) -> str:
    """A message's first line, cut short: what the end-of-run warning counts by."""
    line = (message.strip().splitlines() or [""])[0]
    return line if len(line) <= 200 else line[:199] + "…"
