"""An assessment that agrees with itself: the checks every payload passes at the edge, and its fold winners.

The payload's validator runs :func:`settle` after its reference checks, so the push route (JSON or
packed), ``save()``, the runner and the ``Recorder`` all pass through here, and the store only ever
holds assessments that follow these rules:

- ``outer_folds`` holds every (repeat, outer fold) of the design (``n_repeats`` × ``n_outer_folds``);
  the outer test folds of a repeat are disjoint (no row is tested twice in one repeat).
- ``inner_scores`` holds exactly one row per (repeat, outer fold, inner fold, configuration, metric)
  of the design: a failed fit is a row whose score is null, never a missing row.
- ``outer_scores`` holds at most one row per (repeat, outer fold, configuration, metric); with
  ``design.refit_all`` every configuration has its rows, otherwise at least every family winner.
- ``predictions`` hold at most one block per (repeat, outer fold, configuration).
- The fold winners follow from the inner scores by ``foldwise.definitions.select_in_fold``: one overall
  winner per fold, one winner per family and fold, except where every configuration (of the family)
  failed on the selection metric, which then has none. Winners left out of a payload are computed
  here; winners sent must be the ones the rule chooses. An assessment whose search object chose by
  its own rule (``design.selected_by == "search"``: successive halving, a callable ``refit``) keeps
  the winners it names, one per fold and family as above.
- The final selection (``final``, the selection over every row) holds one inner row per (inner fold,
  configuration, metric), and its winners are the ones the rule picks from them.

A refusal is a pydantic ``ValidationError`` located at the JSON path of the first problem found, its
message counting the others, so the push route answers it as every other 422. The checks work on
numpy arrays of the score columns: a payload of 600,000 inner scores is checked in a few tens of ms.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from pydantic import ValidationError
from pydantic_core import PydanticCustomError

from foldwise.definitions import FoldWinners, inner_mean, select_in_fold

ERROR_TYPE = "inconsistent_assessment"
_LARGEST_GRID = 2**62  # keys of a grid up to this size are int64 without overflow


def settle(payload) -> None:
    """Refuse ``payload`` unless it agrees with itself; fill in fold winners it leaves out.

    Raises ``pydantic.ValidationError`` (type ``inconsistent_assessment``) at the first problem.
    """
    found = _Findings()
    design = payload.design
    folds_complete = _check_outer_folds(payload, found)
    inner = _Grid.of_inner(payload)
    _check_rows(found, "inner_scores", inner, complete=folds_complete, design_fields="design.n_repeats, "
                "design.n_outer_folds, design.n_inner_folds, configurations and design.metrics")
    outer = _Grid.of_outer(payload)
    _check_rows(found, "outer_scores", outer, complete=folds_complete and design.refit_all,
                design_fields="design.refit_all with design.n_repeats, design.n_outer_folds, configurations "
                              "and design.metrics")
    _check_unique_predictions(payload, found)
    found.raise_if_any()

    computed = fold_winners(payload, inner)
    _settle_family(payload, computed, found)
    _settle_overall(payload, computed, found)
    found.raise_if_any()

    if not design.refit_all:
        _check_winners_refit(payload, outer, found)
        found.raise_if_any()

    if payload.final is not None:
        _check_final(payload, found)
        found.raise_if_any()


def fold_winners(payload, inner: _Grid | None = None) -> list[FoldWinners]:
    """The selection rule's winners of every outer fold, in design order (repeat, then outer fold).

    Needs a complete inner grid (``settle`` checks that first)."""
    inner = inner or _Grid.of_inner(payload)
    design = payload.design
    n_configs, n_inner = len(payload.configurations), design.n_inner_folds
    n_folds = design.n_repeats * design.n_outer_folds
    scores = np.empty(inner.size)
    scores[inner.flat] = payload.inner_scores.score  # NaN where a fit failed
    # (fold, inner fold, config, metric) → one contiguous (config, inner fold) matrix per fold, as the runner's
    selection = np.ascontiguousarray(scores.reshape(n_folds, n_inner, n_configs, -1)[..., 0].transpose(0, 2, 1))
    members = _family_members(payload)
    return [select_in_fold(selection[fold], members) for fold in range(n_folds)]


@dataclass
class _Findings:
    """Problems found so far: (JSON path, message, how many like it)."""

    problems: list[tuple[tuple, str, int]] = field(default_factory=list)

    def add(self, loc: tuple, message: str, count: int = 1) -> None:
        self.problems.append((loc, message, count))

    def raise_if_any(self) -> None:
        if not self.problems:
            return
        loc, message, _ = self.problems[0]
        others = sum(count for _, _, count in self.problems) - 1
        if others:
            message += f" (and {others} other problem{'s' if others > 1 else ''} of consistency)"
        error = PydanticCustomError(ERROR_TYPE, "{reason}", {"reason": message})
        raise ValidationError.from_exception_data("AssessmentPayload", [{"type": error, "loc": loc, "input": None}])


def _check_outer_folds(payload, found: _Findings) -> bool:
    """Every (repeat, outer fold) of the design present, test folds of a repeat disjoint; True when complete."""
    design = payload.design
    present = {(fold.repeat, fold.outer_fold) for fold in payload.outer_folds}
    expected = design.n_repeats * design.n_outer_folds
    complete = len(present) == expected  # the reference checks keep every fold inside the design, once
    if not complete:
        position = 0
        while divmod(position, design.n_outer_folds) in present:
            position += 1
        repeat, outer_fold = divmod(position, design.n_outer_folds)
        found.add(("outer_folds",), f"outer_folds: repeat {repeat}, outer fold {outer_fold} is missing: "
                  f"design.n_repeats {design.n_repeats} × design.n_outer_folds {design.n_outer_folds} makes "
                  f"{expected} outer folds, and {len(present)} were sent", expected - len(present))

    sizes = [len(fold.test_indices) for fold in payload.outer_folds]
    rows = np.fromiter((row for fold in payload.outer_folds for row in fold.test_indices), dtype=np.int64,
                       count=sum(sizes))
    fold_position = np.repeat(np.arange(len(sizes)), sizes)
    repeats = np.array([fold.repeat for fold in payload.outer_folds], dtype=np.int64)[fold_position]
    order = np.lexsort((fold_position, rows, repeats))  # by repeat, then row, then fold in payload order
    again = (rows[order][1:] == rows[order][:-1]) & (repeats[order][1:] == repeats[order][:-1])
    if again.any():
        later, earlier = order[1:][again], order[:-1][again]
        first = int(np.argmin(later))
        at, before = int(later[first]), int(earlier[first])
        starts = np.r_[0, np.cumsum(sizes)]
        fold, other = payload.outer_folds[fold_position[at]], payload.outer_folds[fold_position[before]]
        where = "earlier in the same fold" if fold is other else \
            f"in the test fold of outer fold {other.outer_fold} (outer_folds[{fold_position[before]}])"
        found.add(("outer_folds", int(fold_position[at]), "test_indices", int(at - starts[fold_position[at]])),
                  f"outer_folds[{fold_position[at]}].test_indices: row {rows[at]} is tested twice in repeat "
                  f"{fold.repeat}: it is also {where}; the outer test folds of a repeat are disjoint", len(later))
    return complete


@dataclass(frozen=True)
class _Grid:
    """A score block's rows as positions in the grid of the design: (repeat, outer fold, [inner fold,]
    configuration, metric) in that order, the runner's order of rows."""

    names: tuple[str, ...]
    sizes: tuple[int, ...]
    flat: np.ndarray | None  # each row's position in the grid; None when the grid is too large to number
    n_rows: int

    @property
    def size(self) -> int:
        return int(np.prod(self.sizes, dtype=object))

    @classmethod
    def of_inner(cls, payload) -> _Grid:
        design = payload.design
        return cls._of(payload.inner_scores, ("repeat", "outer_fold", "inner_fold", "config", "metric"),
                       (design.n_repeats, design.n_outer_folds, design.n_inner_folds, len(payload.configurations),
                        len(design.metrics)))

    @classmethod
    def of_outer(cls, payload) -> _Grid:
        design = payload.design
        return cls._of(payload.outer_scores, ("repeat", "outer_fold", "config", "metric"),
                       (design.n_repeats, design.n_outer_folds, len(payload.configurations), len(design.metrics)))

    @classmethod
    def _of(cls, columns, names: tuple[str, ...], sizes: tuple[int, ...]) -> _Grid:
        n_rows = len(columns)
        if int(np.prod(sizes, dtype=object)) >= _LARGEST_GRID:
            return cls(names, sizes, None, n_rows)
        flat = np.zeros(n_rows, dtype=np.int64)
        for name, size in zip(names, sizes, strict=True):  # the reference checks keep each key in range
            flat *= size
            flat += getattr(columns, name)
        return cls(names, sizes, flat, n_rows)

    def key(self, position: int) -> dict[str, int]:
        """The grid's key at ``position``."""
        key = {}
        for name, size in zip(reversed(self.names), reversed(self.sizes), strict=True):
            position, key[name] = divmod(position, size)
        return dict(reversed(key.items()))


def _check_rows(found: _Findings, where: str | tuple[str, ...], grid: _Grid, *, complete: bool,
                design_fields: str) -> None:
    """Each key at most once; with ``complete``, every key of the grid once. ``where``: the block's path."""
    where = (where,) if isinstance(where, str) else where
    block = ".".join(where)
    if grid.flat is None:  # a grid this large is never complete: say how far apart they are
        if complete:
            found.add(where, f"{block}: holds {grid.n_rows} rows, where {design_fields} ask for {grid.size}")
        return
    if complete and grid.n_rows == grid.size and (np.bincount(grid.flat, minlength=grid.size) == 1).all():
        return  # the usual case, in one pass
    order = np.argsort(grid.flat, kind="stable")
    ordered = grid.flat[order]
    again = ordered[1:] == ordered[:-1]
    if again.any():
        later = order[1:][again]
        row = int(later.min())
        earlier = int(np.flatnonzero(grid.flat == grid.flat[row])[0])
        found.add((*where, "score", row), f"{block}.score[{row}]: {_described(grid.key(int(grid.flat[row])))} "
                  f"appears twice (first at row {earlier}); a score block holds one row per key", len(later))
    if complete:
        keys = ordered[np.r_[True, ~again]] if len(ordered) else ordered
        missing = grid.size - len(keys)
        if missing:
            gaps = np.flatnonzero(keys != np.arange(len(keys)))
            position = int(gaps[0]) if len(gaps) else len(keys)
            found.add(where, f"{block}: no row for {_described(grid.key(position))}; {design_fields} ask "
                      f"for {grid.size} rows, one per key (a failed fit is a row with a null score), and "
                      f"{missing} are missing", missing)


def _described(key: dict[str, int]) -> str:
    words = {"repeat": "repeat", "outer_fold": "outer fold", "inner_fold": "inner fold", "config": "config",
             "metric": "metric"}
    return ", ".join(f"{words[name]} {value}" for name, value in key.items())


def _check_unique_predictions(payload, found: _Findings) -> None:
    seen: dict[tuple[int, int, int], int] = {}
    for position, prediction in enumerate(payload.predictions):
        key = (prediction.repeat, prediction.outer_fold, prediction.config)
        if key in seen:
            found.add(("predictions", position), f"predictions[{position}]: repeat {key[0]}, outer fold {key[1]}, "
                      f"config {key[2]} has a block already (predictions[{seen[key]}]); one block per fold and "
                      "configuration")
            return
        seen[key] = position


def _family_members(payload) -> list[list[int]]:
    members: dict[str, list[int]] = {family.name: [] for family in payload.families}
    for position, config in enumerate(payload.configurations):
        members[config.family].append(position)
    return list(members.values())


def _fold_position(payload, choice) -> int:
    return choice.repeat * payload.design.n_outer_folds + choice.outer_fold


def _config(payload, position: int) -> str:
    ident = payload.configurations[position].id
    return f"config {position} ({ident if len(ident) <= 60 else ident[:57] + '...'!r})"


def _inner_mean_text(means: np.ndarray, position: int) -> str:
    value = means[position]
    return "failed" if np.isnan(value) else repr(float(value))


_RULE = ("by the selection rule (greatest inner mean on design.metrics[0], {metric!r}; the first in grid order "
         "on ties; a configuration with a failed inner fit never wins)")
_LEAVE_OUT = "leave family_winners and overall_winners out to have them computed from the inner_scores"


def _settle_overall(payload, computed: list[FoldWinners], found: _Findings) -> None:
    design = payload.design
    rule_decides = design.selected_by == "inner_mean"
    if payload.overall_winners is None:
        if not rule_decides:
            found.add(("overall_winners",), "overall_winners: required when design.selected_by is 'search' (the "
                      "search object's own rule chose them, so they cannot be computed from the inner_scores)")
            return
        payload.overall_winners = [_choice(payload, fold, winners.overall)
                                   for fold, winners in enumerate(computed) if winners.overall is not None]
        return
    sent: dict[int, int] = {}
    for position, choice in enumerate(payload.overall_winners):
        fold = _fold_position(payload, choice)
        if fold in sent:
            found.add(("overall_winners", position), f"overall_winners[{position}]: a second overall winner for "
                      f"repeat {choice.repeat}, outer fold {choice.outer_fold} (the first is "
                      f"overall_winners[{sent[fold]}]); a fold has one")
            continue
        sent[fold] = position
    metric = design.selection_metric
    family_choices = None if payload.family_winners is None else \
        {(_fold_position(payload, choice), choice.config) for choice in payload.family_winners}
    for fold, winners in enumerate(computed):
        repeat, outer_fold = divmod(fold, design.n_outer_folds)
        where = f"repeat {repeat}, outer fold {outer_fold}"
        position = sent.get(fold)
        named = None if position is None else payload.overall_winners[position].config
        if winners.overall is None and named is not None:
            found.add(("overall_winners", position), f"overall_winners[{position}]: {where} names "
                      f"{_config(payload, named)}, but every configuration failed on the selection metric "
                      f"{metric!r} in the inner_scores there, so the fold has no winner")
        elif winners.overall is not None and named is None:
            chosen = f"; the inner_scores choose {_config(payload, winners.overall)}" if rule_decides else ""
            found.add(("overall_winners",), f"overall_winners: {where} has no overall winner{chosen}")
        elif rule_decides and named != winners.overall:
            found.add(("overall_winners", position), _disagreement(payload, fold, f"overall_winners[{position}]",
                                                                   named, winners.overall))
        if named is not None and family_choices is not None and (fold, named) not in family_choices:
            found.add(("overall_winners", position), f"overall_winners[{position}]: {where} names "
                      f"{_config(payload, named)}, which is not a family winner of that fold in family_winners")


def _settle_family(payload, computed: list[FoldWinners], found: _Findings) -> None:
    design = payload.design
    rule_decides = design.selected_by == "inner_mean"
    families = [family.name for family in payload.families]
    if payload.family_winners is None:
        if not rule_decides:
            found.add(("family_winners",), "family_winners: required when design.selected_by is 'search' (the "
                      "search object's own rule chose them, so they cannot be computed from the inner_scores)")
            return
        payload.family_winners = [_choice(payload, fold, config) for fold, winners in enumerate(computed)
                                  for config in winners.family if config is not None]
        return
    family_of = {name: index for index, name in enumerate(families)}
    sent: dict[tuple[int, int], int] = {}
    for position, choice in enumerate(payload.family_winners):
        family = family_of[payload.configurations[choice.config].family]
        key = (_fold_position(payload, choice), family)
        if key in sent:
            found.add(("family_winners", position), f"family_winners[{position}]: a second winner of family "
                      f"{families[family]!r} for repeat {choice.repeat}, outer fold {choice.outer_fold} (the first "
                      f"is family_winners[{sent[key]}], by configurations[].family); a family has one per fold")
            continue
        sent[key] = position
    for fold, winners in enumerate(computed):
        repeat, outer_fold = divmod(fold, design.n_outer_folds)
        for family, expected in enumerate(winners.family):
            where = f"repeat {repeat}, outer fold {outer_fold}, family {families[family]!r}"
            position = sent.get((fold, family))
            named = None if position is None else payload.family_winners[position].config
            if expected is None and named is not None:
                found.add(("family_winners", position), f"family_winners[{position}]: {where} names "
                          f"{_config(payload, named)}, but every configuration of the family failed on the "
                          f"selection metric in the inner_scores there, so it has no winner")
            elif expected is not None and named is None:
                chosen = f"; the inner_scores choose {_config(payload, expected)}" if rule_decides else ""
                found.add(("family_winners",), f"family_winners: {where} has no winner{chosen}")
            elif rule_decides and named != expected:
                found.add(("family_winners", position), _disagreement(payload, fold, f"family_winners[{position}]",
                                                                      named, expected))


def _disagreement(payload, fold: int, where: str, named: int, chosen: int) -> str:
    design = payload.design
    repeat, outer_fold = divmod(fold, design.n_outer_folds)
    means = _selection_means(payload, fold)
    return (f"{where}: repeat {repeat}, outer fold {outer_fold} names {_config(payload, named)}, inner mean "
            f"{_inner_mean_text(means, named)}, but the inner_scores choose {_config(payload, chosen)}, "
            f"inner mean {_inner_mean_text(means, chosen)}, " + _RULE.format(metric=design.selection_metric)
            + f"; {_LEAVE_OUT}")


def _selection_means(payload, fold: int) -> np.ndarray:
    """The inner means on the selection metric of every configuration in one fold (for messages)."""
    design = payload.design
    inner = payload.inner_scores
    rows = (inner.repeat * design.n_outer_folds + inner.outer_fold == fold) & (inner.metric == 0)
    table = np.full((len(payload.configurations), design.n_inner_folds), np.nan)
    table[inner.config[rows], inner.inner_fold[rows]] = inner.score[rows]
    return inner_mean(table)


def _choice(payload, fold: int, config: int):
    from foldwise.payload import FoldChoice  # the payload module runs these checks, so it is loaded by now

    repeat, outer_fold = divmod(fold, payload.design.n_outer_folds)
    return FoldChoice(repeat=repeat, outer_fold=outer_fold, config=config)


def _check_winners_refit(payload, outer: _Grid, found: _Findings) -> None:
    """Without ``refit_all``, every family winner has its outer rows, one per metric."""
    if outer.flat is None:
        return
    n_configs, n_metrics = len(payload.configurations), len(payload.design.metrics)
    wanted = np.array([(_fold_position(payload, choice) * n_configs + choice.config) * n_metrics + metric
                       for choice in payload.family_winners for metric in range(n_metrics)], dtype=np.int64)
    missing = wanted[~np.isin(wanted, outer.flat)]
    if len(missing):
        key = outer.key(int(missing[0]))
        found.add(("outer_scores",), f"outer_scores: no row for {_described(key)}, a family winner "
                  "(family_winners); without design.refit_all each family winner is refit and scored on its "
                  "outer fold, every metric a row (a failed refit is a row with a null score)", len(missing))


def _check_final(payload, found: _Findings) -> None:
    """The final selection (every row as one fold): one row per (inner fold, configuration, metric), and,
    chosen by the selection rule, the winners that rule picks from those scores."""
    final, design = payload.final, payload.design
    columns = final.inner_scores
    names, sizes = ("inner_fold", "config", "metric"), (final.n_inner_folds, len(payload.configurations),
                                                       len(design.metrics))
    flat = None
    if int(np.prod(sizes, dtype=object)) < _LARGEST_GRID:  # the reference checks keep each key in range
        flat = np.zeros(len(columns.score), dtype=np.int64)
        for name, size in zip(names, sizes, strict=True):
            flat = flat * size + getattr(columns, name)
    grid = _Grid(names, sizes, flat, len(columns.score))
    before = len(found.problems)
    _check_rows(found, ("final", "inner_scores"), grid, complete=True,
                design_fields="final.n_inner_folds, configurations and design.metrics")
    if len(found.problems) > before or design.selected_by != "inner_mean":
        return
    scores = np.empty(grid.size)
    scores[flat] = columns.score
    selection = np.ascontiguousarray(scores.reshape(sizes)[..., 0].T)  # (config, inner fold), as the runner's
    chosen = select_in_fold(selection, _family_members(payload))
    expected = [config for config in chosen.family if config is not None]
    rule = _RULE.format(metric=design.selection_metric)
    if final.family_winners != expected:
        found.add(("final", "family_winners"), f"final.family_winners: {final.family_winners} (positions in "
                  f"configurations), but the final.inner_scores choose {expected} {rule}")
    if final.config != chosen.overall:
        found.add(("final", "config"), f"final.config: {final.config}, but the final.inner_scores choose "
                  f"{chosen.overall} {rule}")
