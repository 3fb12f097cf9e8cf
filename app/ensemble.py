"""A saved ensemble of fold winners as something that predicts.

- ``ensemble_spec``: the members as plain JSON (family, estimator class path, parameters);
- ``build_ensemble``: every member refit on all the data given, combined in a fitted scikit-learn
  ``VotingClassifier`` (soft voting where every member has probabilities) or ``VotingRegressor``;
- ``prefit_ensemble``: the kept fold winners themselves, fitted on their outer training sets, averaged.

Estimators and models come out of the store as skops files, loaded by ``load_skops``, which refuses
any type that is not a scikit-learn or numpy class, a builtin class, or an estimator class the
assessment recorded: a store from elsewhere cannot make this machine run its code.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import skops.io
from sklearn.base import clone
from sklearn.ensemble import VotingClassifier, VotingRegressor

from foldwise.payload import Configuration, Family
from foldwise.stats.ensembles import ESTIMATE_CAUTION
from foldwise.trust import refused_types

SPEC_FORMAT = "foldwise ensemble specification"
SPEC_VERSION = 1


class UntrustedTypes(ValueError):
    """A skops file holds types foldwise will not load without being told to."""


def load_skops(source: bytes | str | Path, *, allowed: Iterable[str] = (), libraries: Iterable[str] = (),
               what: str = "the skops file"):
    """Load a skops file, trusting only scikit-learn, numpy and builtin classes plus ``allowed`` and the
    classes of ``libraries`` (``foldwise.trust``).

    ``allowed`` names further classes by import path (an assessment's own estimator classes);
    ``libraries`` the top-level modules the user trusted when running it (``design.trusted``).
    Every name must resolve to a class: functions are never trusted beyond skops' own defaults.
    Anything else raises ``UntrustedTypes`` naming the types; a file one trusts can still be read
    with ``skops.io.loads(..., trusted=[...])``.
    """
    data = Path(source).read_bytes() if isinstance(source, str | Path) else source
    allowed, libraries = set(allowed), sorted(set(libraries))
    refused = refused_types(data, allowed=allowed, libraries=libraries)
    if refused:
        trusted = f" nor classes of the libraries trusted when it ran ({libraries})" if libraries else ""
        raise UntrustedTypes(
            f"refused to load {what}: it holds {refused}, which are not scikit-learn, numpy or builtin "
            f"classes nor estimator classes of the assessment ({sorted(allowed) or 'none recorded'}){trusted}; "
            f"loading them could run code from the file. If you trust where it came from, read it with "
            f"skops.io.loads(data, trusted={refused!r})")
    return skops.io.loads(data, trusted=skops.io.get_untrusted_types(data=data))


def ensemble_spec(record, ensemble) -> dict:
    """The ensemble as plain JSON: enough to rebuild it with scikit-learn alone.

    ``record`` is the assessment's ``AssessmentRecord``, ``ensemble`` its ``EnsembleRecord``.
    Parameters are as the payload keeps them: JSON values, with objects written as their repr.
    """
    families = {family.name: family for family in record.families}
    configs = {config.id: config for config in record.configurations}
    task = record.design.task
    combiner = f"sklearn.ensemble.{'VotingRegressor' if task == 'regression' else 'VotingClassifier'}"
    voting = "" if task == "regression" else f", voting={ensemble.voting!r}"
    members = [_member_spec(i, configs[member], families[configs[member].family])
               for i, member in enumerate(ensemble.members)]
    return {
        "format": SPEC_FORMAT, "spec_version": SPEC_VERSION,
        "id": ensemble.id, "name": ensemble.name, "note": ensemble.note,
        "created_at": ensemble.created_at.isoformat(),
        "assessment": {"uuid": record.uuid, "name": record.name, "dataset": record.dataset},
        "task": task, "classes": record.design.classes, "combiner": combiner, "voting": ensemble.voting,
        "how_to_build": (f"Make each member an instance of its estimator_class as written in `estimator`, "
                         f"call set_params(**params), then fit {combiner}(estimators=[(name, member), ...]"
                         f"{voting}) on your data."),
        "estimate": {"metric": ensemble.metric, "mean": ensemble.estimate_mean, "sd": ensemble.estimate_sd,
                     "over": "outer folds of every repeat", "caution": ESTIMATE_CAUTION},
        "members": members,
    }


def build_ensemble(ensemble, X, y, *, store: str | None = None, space=None):
    """Refit every member of a saved ensemble on all of ``X, y``; return the fitted voting ensemble.

    Parameters
    ----------
    ensemble : str, dict or path
        With ``store``: the ensemble's id. With ``space``: its specification (the dict of
        ``ensemble_spec`` or the path of the downloaded JSON file).
    X, y : array-like
        The data to fit every member on.
    store : str, optional
        A store path or SQLAlchemy URL. The members' estimators are the ones the runner stored.
    space : dict or search object, optional
        The space given to ``nested_cv``: members are found in it by configuration id, so parameter
        values that JSON cannot hold (estimators in a grid, tuples) come back exactly.

    Returns
    -------
    VotingClassifier or VotingRegressor
        Fitted; soft voting when the saved estimate used soft voting.
    """
    if (store is None) == (space is None):
        raise TypeError("build_ensemble needs either store= (a store path or URL, with the ensemble id) or "
                        "space= (your own space, with the ensemble's specification), not "
                        + ("both" if store is not None else "neither"))
    spec, estimators = _from_store(ensemble, store) if store is not None else _from_space(ensemble, space)
    named = [(member["name"], estimator)
             for member, estimator in zip(spec["members"], estimators, strict=True)]
    if spec["task"] == "regression":
        return VotingRegressor(named).fit(X, y)
    if spec["voting"] == "soft":
        lacking = [name for name, estimator in named if not hasattr(estimator, "predict_proba")]
        if lacking:
            raise ValueError(f"the ensemble votes soft but members {lacking} have no predict_proba")
    return VotingClassifier(named, voting=spec["voting"]).fit(X, y)


def prefit_ensemble(record, ensemble, models) -> VotingClassifier | VotingRegressor:
    """The kept fold winners of the members, as fitted on their outer training sets, averaged.

    Each member weighs the same, shared evenly among its fold models (``models``: the store's
    ``StoredModel`` list for the members). The result predicts at once; nothing is refit.
    """
    from sklearn.frozen import FrozenEstimator  # scikit-learn >= 1.6

    by_member = {member: [model for model in models if model.config == member] for member in ensemble.members}
    missing = [member for member, kept in by_member.items() if not kept]
    if missing:
        raise LookupError(f"no fitted fold winner was kept for members {missing}: a model file needs a run "
                          f"with keep_models=True in which each member won its family in some outer fold")
    allowed = _estimator_classes(record.families)
    named, weights = [], []
    for i, member in enumerate(ensemble.members):
        base = _member_name(_family_of(record, member), i)
        for model in by_member[member]:
            where = f"the fitted {member} of repeat {model.repeat}, outer fold {model.outer_fold}"
            fitted = load_skops(model.skops, allowed=allowed, libraries=record.design.trusted, what=where)
            named.append((f"{base}_r{model.repeat}_o{model.outer_fold}", FrozenEstimator(fitted)))
            weights.append(1 / len(by_member[member]))
    if record.design.task == "regression":
        return VotingRegressor(named, weights=weights).fit(np.zeros((1, 1)), np.zeros(1))
    classes = np.asarray(record.design.classes)
    _check_classes(named, classes, ensemble.voting)
    combined = VotingClassifier(named, voting=ensemble.voting, weights=weights)
    return combined.fit(np.zeros((len(classes), 1)), classes)


def _from_store(ensemble_id, store: str):
    from foldwise.store import db_url_from, family_estimators_for, get_assessment, get_ensemble, make_engine

    if "://" not in store and not Path(store).expanduser().exists():
        raise FileNotFoundError(f"no store at {store!r}; give the path of a foldwise store or a "
                                f"SQLAlchemy URL")
    engine = make_engine(db_url_from(store))
    try:
        ensemble = get_ensemble(engine, str(ensemble_id))
        if ensemble is None:
            raise LookupError(f"no ensemble {ensemble_id!r} in the store at {store!r}; the assessment "
                              f"page lists its saved ensembles with their ids")
        record = get_assessment(engine, ensemble.assessment_uuid)
        stored = family_estimators_for(engine, ensemble.assessment_uuid)
    finally:
        engine.dispose()
    allowed, configs = _estimator_classes(record.families), {c.id: c for c in record.configurations}
    estimators = []
    for member in ensemble.members:
        config = configs[member]
        if stored.get(config.family) is None:
            raise LookupError(f"the store keeps no estimator of family {config.family!r} (it was recorded "
                              f"without foldwise.nested_cv, or before estimators were kept); pass the "
                              f"specification and your own space: build_ensemble(spec, X, y, space=...)")
        estimator = load_skops(stored[config.family], allowed=allowed, libraries=record.design.trusted,
                               what=f"family {config.family!r}'s estimator")
        estimators.append(estimator.set_params(**_settable(estimator, config.params, member)))
    return ensemble_spec(record, ensemble), estimators


def _from_space(spec, space):
    from foldwise.runner.space import space_from

    if isinstance(spec, str | Path):
        spec = json.loads(Path(spec).read_text(encoding="utf-8"))
    if not isinstance(spec, dict) or spec.get("format") != SPEC_FORMAT:
        raise ValueError(f"expected an ensemble specification (a dict or JSON file with format "
                         f"{SPEC_FORMAT!r}); received {type(spec).__name__}")
    resolved = space_from(space)
    candidates = {candidate.id: candidate for candidate in resolved.candidates}
    unknown = [member["config"] for member in spec["members"] if member["config"] not in candidates]
    if unknown:
        raise ValueError(f"members {unknown} are not configurations of the space given; pass the space the "
                         f"assessment was run with (its families {sorted(resolved.estimators)})")
    estimators = []
    for member in spec["members"]:
        candidate = candidates[member["config"]]
        estimator = clone(resolved.estimators[candidate.family])
        estimators.append(estimator.set_params(**clone(candidate.params, safe=False)))
    return spec, estimators


def _settable(estimator, params: dict, member: str) -> dict:
    """Parameters from the payload's JSON, back in the types the estimator holds where JSON changed them."""
    current = estimator.get_params(deep=True)
    fixed = {}
    for key, value in params.items():
        now = current.get(key)
        if isinstance(value, list) and isinstance(now, tuple):
            value = tuple(value)
        elif isinstance(value, str) and not isinstance(now, str):
            if isinstance(now, float | int) and value in ("inf", "-inf", "nan"):
                value = float(value)
            elif "(" in value or value.startswith("<"):  # the repr of an object put in a grid
                raise ValueError(f"member {member}: parameter {key!r} was kept only as the text {value!r}, "
                                 f"the repr of an object; rebuild from the specification with your own "
                                 f"space: build_ensemble(spec, X, y, space=...)")
        fixed[key] = value
    return fixed


def _check_classes(named, classes: np.ndarray, voting: str) -> None:
    for name, frozen in named:
        own = np.asarray(getattr(frozen.estimator, "classes_", classes))
        if own.shape != classes.shape or not np.array_equal(own, classes):
            raise ValueError(f"fold model {name} knows classes {own.tolist()}, the assessment "
                             f"{classes.tolist()}: its outer training set lacked a class, so its "
                             f"probabilities cannot be averaged")
    if voting == "hard" and classes.tolist() != list(range(len(classes))):
        raise ValueError(f"a prefit hard-voting ensemble needs classes 0..{len(classes) - 1} "
                         f"(VotingClassifier counts the members' labels as positions); these are "
                         f"{classes.tolist()}")


def _member_spec(position: int, config: Configuration, family: Family) -> dict:
    return {"name": _member_name(config.family, position), "family": config.family, "config": config.id,
            "estimator_class": family.estimator_class, "estimator": family.estimator, "params": config.params}


def _member_name(family: str, position: int) -> str:
    # VotingClassifier names may not hold "__" (its parameter separator).
    return f"{re.sub(r'[^0-9A-Za-z]+', '_', family).strip('_') or 'member'}_{position}"


def _family_of(record, member: str) -> str:
    return next(config.family for config in record.configurations if config.id == member)


def _estimator_classes(families: list[Family]) -> set[str]:
    return {family.estimator_class for family in families if family.estimator_class}
