"""What pins a front (variables at their bounds, limits that bind, variables that never change),
and what other limits would give, answered from the archive without new evaluations.

:func:`what_pins` works on any front: one from a run knows its design space and
its constraint limits (``front.info``); one read from a plain CSV knows neither,
and then only columns that hold one value on every design are reported.
:func:`what_if` reads a run's evaluations from a table it is handed (as
:func:`tradewise.runfolder.read_run` returns it) and never evaluates a design.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from tradewise import format as _format
from tradewise.choose import find_knees
from tradewise.errors import DataError
from tradewise.front import Front, nondominated
from tradewise.limits import Limit, parse_limit
from tradewise.runinfo import LimitSpec, VariableSpec

__all__ = [
    "BOUND_SHARE",
    "LIMIT_SHARE",
    "NEAR",
    "Finding",
    "what_pins",
    "pins_lines",
    "WhatIfAnswer",
    "what_if",
    "loosening_rule",
]

#: A variable is reported at a bound when at least this share of the front sits there. Our own
#: rule of thumb: the designs at the ends of a front often reach a bound, which is normal; only
#: when most of the front pushes against it is the range likely to be too tight.
BOUND_SHARE = 0.5
#: A limit is reported as active when it binds on at least this share of the front. Our own rule
#: of thumb, lower than for bounds: the designer sets a limit, and one that binds on a fifth of the
#: front already decides a whole stretch of it.
LIMIT_SHARE = 0.2
#: "At" a bound or limit means within this share of the scale: for a real variable, its range;
#: for a limit, the larger of the limit's size (1 for a zero limit) and the span of its column on
#: the front. Our own choice; integers count only when exactly at the bound.
NEAR = 0.01

#: The order of kinds when two findings have the same share: what the designer can loosen first.
_KIND_ORDER = {"limit": 0, "bound": 1, "constant": 2}
#: Columns tradewise itself writes into tables of designs (never a design's own variable).
_BOOKKEEPING = frozenset(
    {
        "eval_id",
        "run_id",
        "generation",
        "status",
        "message",
        "duration",
        "worker",
        "cached",
        "feasible",
        "violation",
        "design_key",
        "data_row",
        "rank",
        "seed",
        "pick_order",
        "front_row",
    }
)


# --------------------------------------------------------------------------- what pins a front
def pins_lines(front: Front, *, most: int = 6) -> list[str]:
    """What pins ``front`` as sentences for a person: the ``most`` strongest findings, or one
    sentence saying that nothing does (with the thresholds, so the reader knows what was looked for).

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [1.0, 2.0], "mass": [2.0, 1.0], "alloy": ["a", "b"]})
    >>> pins_lines(Front.from_table(table, [Objective("cost"), Objective("mass")], variables=["alloy"]))
    ['Nothing pins this front: no variable holds one value on every design (the run folder also knows bounds and limits).']
    """
    found = what_pins(front)
    if found:
        lines = [f.text for f in found[:most]]
        if len(found) > most:
            lines.append(f"... and {len(found) - most} more of the same kinds.")
        return lines
    if front.info.design_space or front.info.constraint_limits:
        return [
            "Nothing pins this front: no variable sits at a bound on "
            f"{_format.share(BOUND_SHARE, 0)} of it or more, no limit binds on "
            f"{_format.share(LIMIT_SHARE, 0)} of it or more, and every variable varies."
        ]
    return [
        "Nothing pins this front: no variable holds one value on every design "
        "(the run folder also knows bounds and limits)."
    ]


@dataclass(frozen=True)
class Finding:
    """One thing that pins a front, with a sentence saying what the designer can do about it.

    ``kind`` is ``"limit"`` (a constraint binds), ``"bound"`` (a variable sits at an end
    of its range) or ``"constant"`` (a column holds one value on every design). ``side``
    is ``"min"`` or ``"max"`` for a limit, ``"low"`` or ``"high"`` for a bound and ``""``
    for a constant; ``value`` is the limit, the bound or the constant value. ``share``
    (0 to 1) is the part of the front it holds on.
    """

    kind: str
    name: str
    share: float
    text: str
    side: str = ""
    value: Any = None

    @property
    def weight(self) -> tuple[float, int, str]:
        """The sort key: larger share first, then limits, bounds and constants, then by name."""
        return (-self.share, _KIND_ORDER.get(self.kind, len(_KIND_ORDER)), self.name)


def what_pins(
    front: Front,
    *,
    bound_share: float = BOUND_SHARE,
    limit_share: float = LIMIT_SHARE,
    near: float = NEAR,
) -> list[Finding]:
    """Say what pins ``front``: variables at a bound, limits that bind, and columns that never change.

    Parameters
    ----------
    front : Front
        Any front. Bounds come from ``front.info.design_space`` and limits from
        ``front.info.constraint_limits``; a front without them (read from a plain
        CSV) gets only the columns that hold one value on every design.
    bound_share, limit_share : float
        The share of the front a bound or a limit must hold on to be reported
        (default :data:`BOUND_SHARE` and :data:`LIMIT_SHARE`).
    near : float
        What "at" means for real values, as a share of the scale (default :data:`NEAR`).

    Returns
    -------
    list of Finding
        Those that shape most of the front first (see :attr:`Finding.weight`).

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> from tradewise.runinfo import RunInfo, VariableSpec
    >>> table = pd.DataFrame({"turns": [3, 3, 3], "cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 1.0]})
    >>> space = (VariableSpec("turns", "integer", 3, 9),)
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")],
    ...                          variables=["turns"], info=RunInfo(design_space=space))
    >>> print(what_pins(front)[0].text)
    turns sits at its lower bound 3 on every design of the front: the range may be too tight, and widening it may extend the front.
    """
    if len(front) == 0:
        return []
    found: list[Finding] = []
    for spec in front.info.design_space:
        found.extend(_bound_findings(front, spec, share=bound_share, near=near))
    for spec in front.info.constraint_limits:
        found.extend(_limit_findings(front, spec, share=limit_share, near=near))
    pinned_everywhere = {f.name for f in found if f.kind == "bound" and f.share >= 1.0}
    for name in _variable_columns(front):
        if name not in pinned_everywhere:
            finding = _constant_finding(front, name, near=near)
            if finding is not None:
                found.append(finding)
    return sorted(found, key=lambda f: f.weight)


def _bound_findings(
    front: Front, spec: VariableSpec, *, share: float, near: float
) -> list[Finding]:
    if spec.kind not in ("real", "integer") or spec.name not in front.table.columns:
        return []
    if spec.low is None or spec.high is None or not spec.high > spec.low:
        return []
    values = _numbers(front.table[spec.name])
    tolerance = near * (spec.high - spec.low) if spec.kind == "real" else 0.0
    unit = _unit(front, spec.name, spec.unit)
    found = []
    for side, bound, word in (("low", spec.low, "lower"), ("high", spec.high, "upper")):
        at = np.abs(values - bound) <= tolerance
        part = float(np.mean(at))
        if part >= share and at.any():
            within = (
                f" (within {_format.share(near, 0)} of its range)" if spec.kind == "real" else ""
            )
            text = (
                f"{spec.name} sits at its {word} bound {_show(bound)}{unit} on {_share_text(part)}"
                f"{within}: the range may be too tight, and widening it may extend the front."
            )
            found.append(Finding("bound", spec.name, part, text, side, bound))
    return found


def _limit_findings(front: Front, spec: LimitSpec, *, share: float, near: float) -> list[Finding]:
    if spec.name not in front.table.columns:
        return []
    values = _numbers(front.table[spec.name])
    finite = values[np.isfinite(values)]
    span = float(np.ptp(finite)) if len(finite) else 0.0
    unit = _unit(front, spec.name, spec.unit)
    found = []
    for side, limit, word in (("min", spec.min, "minimum"), ("max", spec.max, "maximum")):
        if limit is None:
            continue
        # A zero limit has no size of its own; as in the search's relative violation
        # (case.Constraint.violation), its scale is then 1.
        tolerance = near * max(abs(limit) if limit else 1.0, span)
        at = np.abs(values - limit) <= tolerance
        part = float(np.mean(at))
        if part >= share and at.any():
            where = "the front" if part >= 1.0 else "that part of the front"
            text = (
                f"{spec.name} is at its {word} {_show(limit)}{unit} on {_share_text(part)} "
                f"(within {_format.share(near, 0)}): this limit shapes {where}, and loosening it would move the "
                "front (a what-if on the archive shows by how much)."
            )
            found.append(Finding("limit", spec.name, part, text, side, limit))
    return found


def _variable_columns(front: Front) -> list[str]:
    """The columns checked for a constant: the design space, the front's variables, or (a plain
    CSV) every column that is neither an objective nor tradewise's own."""
    columns = [str(c) for c in front.table.columns]
    if front.info.design_space:
        return [v.name for v in front.info.design_space if v.name in columns]
    if front.variables:
        return [v for v in front.variables if v in columns]
    objectives = set(front.objective_names)
    return [c for c in columns if c not in objectives and c not in _BOOKKEEPING]


def _constant_finding(front: Front, name: str, *, near: float) -> Finding | None:
    if len(front) < 2:
        return None
    column = front.table[name]
    if column.isna().all():
        return None
    unit = _unit(front, name, "")
    if column.nunique(dropna=False) == 1:
        value = column.iloc[0]
        text = (
            f"{name} is {_show(value, quoted=True)}{unit if _is_number(value) else ''} on every "
            "design of the front: every best compromise uses it, so fixing it loses none of them."
        )
        return Finding("constant", name, 1.0, text, "", _plain(value))
    spec = next((v for v in front.info.design_space if v.name == name), None)
    if spec is None or spec.kind != "real" or spec.low is None or spec.high is None:
        return None
    values = _numbers(column)
    if not np.isfinite(values).all() or np.ptp(values) > near * (spec.high - spec.low):
        return None
    low, high = float(values.min()), float(values.max())
    text = (
        f"{name} stays between {_show(low)} and {_show(high)}{unit} on every design of the front "
        f"(within {_format.share(near, 0)} of its range): every best compromise uses about this value."
    )
    return Finding("constant", name, 1.0, text, "", (low + high) / 2)


# --------------------------------------------------------------------------- what-if limits
@dataclass(frozen=True)
class WhatIfAnswer:
    """What the archive says the front would be under other limits, without new evaluations.

    ``before`` is the front the archive gives under the case's own limits (the
    run's front) and ``front`` the one under the what-if limits; both hold archived
    designs only. ``joined`` and ``left`` are the ``eval_id`` of designs that join
    and leave the front. ``best_before`` and ``best_after`` map each objective to its
    best value on each front (NaN for an empty front); ``knee_before`` and
    ``knee_after`` are row positions in those fronts (None when a front has no
    knee). ``rules`` describe each limit against the case's; ``newly_allowed`` gives,
    for each loosened limit, the band it opens and how many archived designs lie
    there and meet every other limit. :meth:`lines` says it all in short sentences.
    """

    limits: tuple[Limit, ...]
    rules: tuple[str, ...]
    before: Front
    front: Front
    joined: tuple[int, ...]
    left: tuple[int, ...]
    best_before: dict[str, float]
    best_after: dict[str, float]
    knee_before: int | None
    knee_after: int | None
    n_evaluated: int
    n_eligible_before: int
    n_eligible_after: int
    newly_allowed: tuple[tuple[str, int], ...] = ()
    n_tightened: int = 0
    case_title: str | None = None

    def __repr__(self) -> str:
        return (
            f"WhatIfAnswer({'; '.join(str(limit) for limit in self.limits)}: "
            f"{len(self.front)} designs on the front, {len(self.joined)} join, {len(self.left)} leave)"
        )

    def lines(self) -> list[str]:
        """The answer in short plain sentences, with units."""
        front, before = self.front, self.before
        out = [f"What if {'; '.join(self.rules)}?"]
        out.append(
            f"Of the {self.n_evaluated:,} archived designs that evaluated, "
            f"{self.n_eligible_after:,} meet these limits ({self.n_eligible_before:,} met the case's)."
        )
        if len(front) == 0:
            out.append(
                "No archived design meets these limits, so the archive has no front to offer."
            )
        else:
            out.append(
                f"The front would hold {len(front):,} designs ({len(before):,} before): "
                f"{len(self.joined):,} join{_ids(self.joined)}, {len(self.left):,} leave{_ids(self.left)}."
            )
            for objective in front.objectives:
                name, unit = objective.name, _unit(front, objective.name, objective.unit)
                was, now = self.best_before[name], self.best_after[name]
                if _same(was, now):
                    out.append(f"Best {name}: {_show(now)}{unit}, unchanged.")
                else:
                    out.append(f"Best {name}: {_show(now)}{unit} (before: {_show(was)}{unit}).")
            out.append(
                f"Knee: {_knee_text(front, self.knee_after)}; "
                f"before: {_knee_text(before, self.knee_before)}."
            )
        for band, count in self.newly_allowed:
            design_word = "design lies" if count == 1 else "designs lie"
            out.append(
                f"Caveat: only {count:,} archived {design_word} in the band the change opens "
                f"({band}) and meet every other limit; the search kept to the case's limit, so it "
                "seldom evaluated designs there, and designs it never evaluated near the new limit "
                "are unknown and may do better."
            )
        if self.newly_allowed:
            case = f" of the case {self.case_title!r}" if self.case_title else ""
            out.append(
                f"To search there, change the limit in the case.toml{case} and run "
                "`tradewise run CASE` again; the edited case is a new case to the archive, which "
                "serves only runs of the unchanged case file, so that run evaluates afresh."
            )
        if self.n_tightened:
            out.append(
                "Caveat: the search aimed at the case's own limits, not at the added or tightened "
                "ones here; designs it never evaluated may do better within them."
            )
        return out


def loosening_rule(front: Front, finding: Finding, *, by: float = 0.1) -> str | None:
    """A rule that loosens the limit of a binding-limit finding by ``by`` of its scale, for a what-if.

    The scale is the larger of the limit's size and its column's span on the front
    (1 for a zero limit), as for :data:`NEAR`. None for findings of other kinds.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> table = pd.DataFrame({"cost": [1.0, 2.0], "mass": [2.0, 1.0], "gap": [2.0, 2.5]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")])
    >>> loosening_rule(front, Finding("limit", "gap", 0.5, "", "min", 2.0))
    'gap>=1.8'
    """
    if finding.kind != "limit" or finding.value is None:
        return None
    limit = float(finding.value)
    values = _numbers(front.table[finding.name]) if finding.name in front.table else np.array([])
    finite = values[np.isfinite(values)]
    span = float(np.ptp(finite)) if len(finite) else 0.0
    step = by * max(abs(limit) if limit else 1.0, span)
    new = limit - step if finding.side == "min" else limit + step
    op = ">=" if finding.side == "min" else "<="
    return f"{finding.name}{op}{_format.number(new).replace(',', '')}"


def what_if(evaluations: pd.DataFrame, front: Front, limits: Iterable[Limit | str]) -> WhatIfAnswer:
    """The front the archive gives under other limits, without evaluating any design.

    A limit on one of the case's constraints replaces the case's limit on that
    side (``>=`` or ``>`` its minimum, ``<=`` or ``<`` its maximum): ``"index >= 3.5"``
    where the case says ``index >= 4`` loosens it, and archived designs that failed
    only on that limit become eligible. A limit on any other column (an objective,
    a variable, an output) is added. Every archived design that evaluated (status
    ``ok``) is judged again; the non-dominated set of those meeting every limit is
    the new front.

    Parameters
    ----------
    evaluations : pandas.DataFrame
        Every evaluation of the run, as :meth:`tradewise.store.Store.evaluations`
        gives it (the third value of :func:`tradewise.runfolder.read_run`).
    front : Front
        The run's front: its objectives, units, reference point and the case's
        constraint limits (``front.info.constraint_limits``).
    limits : iterable of Limit or str
        Such as ``"index >= 3.5"`` or ``"mass <= 5"`` (see :func:`tradewise.limits.parse_limit`).

    Returns
    -------
    WhatIfAnswer

    Raises
    ------
    DataError
        When no limit is given, a limit is malformed, names a column the archive
        does not have (the message lists those it has) or a column of text, or
        puts ``==`` on a constraint of the case.

    Examples
    --------
    >>> import pandas as pd
    >>> from tradewise.case import Objective
    >>> from tradewise.runinfo import LimitSpec, RunInfo
    >>> archive = pd.DataFrame({"eval_id": [1, 2, 3], "status": ["ok"] * 3,
    ...                         "cost": [1.0, 2.0, 3.0], "mass": [3.0, 2.0, 1.0],
    ...                         "gap": [1.5, 2.5, 2.5]})
    >>> info = RunInfo(constraint_limits=(LimitSpec("gap", min=2.0),))
    >>> front = Front.from_table(archive[archive["gap"] >= 2], [Objective("cost"), Objective("mass")],
    ...                          constraints=["gap"], info=info)
    >>> answer = what_if(archive, front, ["gap >= 1"])
    >>> answer.joined, answer.best_after["cost"]
    ((1,), 1.0)
    """
    limits = tuple(parse_limit(limit) for limit in limits)
    if not limits:
        raise DataError("what-if: no limit given; give at least one, such as 'mass <= 12'")
    if not isinstance(evaluations, pd.DataFrame):
        raise DataError("what-if: the run's archive of evaluations is needed, and none was given")
    if len(evaluations) == 0:
        raise DataError(
            "what-if: the archive holds no evaluation of this run, so it has nothing to judge"
        )
    _check_columns(evaluations, front, limits)
    table = evaluations
    if "status" in table.columns:
        table = table[table["status"] == "ok"]
    points = np.column_stack([_numbers(table[name]) for name in front.objective_names])
    table = table[np.isfinite(points).all(axis=1)]

    case_rules = _case_rules(front, table)
    constraints = {spec.name for spec in front.info.constraint_limits if spec.name in table.columns}
    new_rules = dict(case_rules)
    added: list[Limit] = []
    replaced: dict[tuple[str, str], list[Limit]] = {}
    for limit in limits:
        if limit.column in constraints:
            if limit.op == "==":
                raise DataError(
                    f"limit '{limit}': {limit.column!r} is a constraint of the case; give it a new "
                    "minimum (>=) or maximum (<=), not =="
                )
            replaced.setdefault((limit.column, _side(limit)), []).append(limit)
        else:
            added.append(limit)
    for key, given in replaced.items():
        new_rules[key] = given

    before_mask = _meets(table, [r for rules in case_rules.values() for r in rules])
    after_mask = _meets(table, [r for rules in new_rules.values() for r in rules] + added)
    preferred = set(_ids_of(front.table))
    scale = _tie_scale(front, table)
    before = _archive_front(table[before_mask], front, preferred, front.info, scale)
    after_info = front.info.but(
        constraint_limits=_new_limit_specs(front, replaced),
        hypervolume=None,
        message="what-if from the archive: " + "; ".join(str(limit) for limit in limits),
    )
    after = _archive_front(table[after_mask], front, preferred, after_info, scale)
    ids_before, ids_after = _ids_of(before.table), _ids_of(after.table)

    newly_allowed = []
    n_tightened = len(added)
    for (name, side), given in replaced.items():
        old = case_rules.get((name, side), [])
        band = _opened_band(name, side, old, given, front)
        if band is None:
            if old == [] or _tighter(side, given, old):
                n_tightened += 1
            continue
        text, lower, upper = band
        others = [r for key, rules in new_rules.items() if key != (name, side) for r in rules]
        values = _numbers(table[name])
        with np.errstate(invalid="ignore"):
            inside = (values >= lower) & (values <= upper)
            inside &= ~_meets(table, old)
        inside &= _meets(table, others + added) & _meets(table, given)
        newly_allowed.append((text, int(inside.sum())))

    return WhatIfAnswer(
        limits=limits,
        rules=tuple(_rule_text(limit, front, case_rules, constraints) for limit in limits),
        before=before,
        front=after,
        joined=tuple(i for i in ids_after if i not in set(ids_before)),
        left=tuple(i for i in ids_before if i not in set(ids_after)),
        best_before=_bests(before),
        best_after=_bests(after),
        knee_before=_knee(before),
        knee_after=_knee(after),
        n_evaluated=len(table),
        n_eligible_before=int(before_mask.sum()),
        n_eligible_after=int(after_mask.sum()),
        newly_allowed=tuple(newly_allowed),
        n_tightened=n_tightened,
        case_title=front.info.title,
    )


def _check_columns(table: pd.DataFrame, front: Front, limits: Sequence[Limit]) -> None:
    known = [str(c) for c in table.columns if str(c) not in _BOOKKEEPING]
    for name in front.objective_names:
        if name not in table.columns:
            raise DataError(
                f"what-if: the archive has no column for the objective {name!r}; "
                f"it holds: {', '.join(known)}"
            )
    for limit in limits:
        if limit.column not in table.columns:
            close = difflib.get_close_matches(limit.column, known, n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise DataError(
                f"limit '{limit}': the archive has no column {limit.column!r}{hint}; "
                f"known columns: {', '.join(known)}"
            )
        raw = table[limit.column]
        values = pd.to_numeric(raw, errors="coerce")
        text = values.isna() & raw.notna()
        if text.any():
            row = int(np.flatnonzero(text.to_numpy())[0])
            raise DataError(
                f"limit '{limit}': column {limit.column!r} holds {raw.iloc[row]!r} "
                f"(archive row {row + 1}), not a number"
            )


def _case_rules(front: Front, table: pd.DataFrame) -> dict[tuple[str, str], list[Limit]]:
    """The case's constraint limits as limits, by (name, side)."""
    rules: dict[tuple[str, str], list[Limit]] = {}
    for spec in front.info.constraint_limits:
        if spec.name not in table.columns:
            continue
        if spec.min is not None:
            rules[(spec.name, "min")] = [Limit(spec.name, ">=", float(spec.min))]
        if spec.max is not None:
            rules[(spec.name, "max")] = [Limit(spec.name, "<=", float(spec.max))]
    return rules


def _side(limit: Limit) -> str:
    return "min" if limit.op in (">=", ">") else "max"


def _meets(table: pd.DataFrame, limits: Iterable[Limit]) -> np.ndarray:
    mask = np.ones(len(table), dtype=bool)
    for limit in limits:
        column = table[limit.column]
        mask &= limit.holds(column.to_numpy(dtype=object) if limit.is_text else _numbers(column))
    return mask


def _opened_band(
    name: str, side: str, old: list[Limit], given: list[Limit], front: Front
) -> tuple[str, float, float] | None:
    """The band of values a replaced limit allows that the case's did not, or None."""
    if not old:
        return None
    was = old[0].value
    now = max(g.value for g in given) if side == "min" else min(g.value for g in given)
    unit = _unit(front, name, "")
    if side == "min" and now < was:
        return f"{_show(now)} <= {name} < {_show(was)}{unit}", now, was
    if side == "max" and now > was:
        return f"{_show(was)} < {name} <= {_show(now)}{unit}", was, now
    return None


def _tighter(side: str, given: list[Limit], old: list[Limit]) -> bool:
    now = max(g.value for g in given) if side == "min" else min(g.value for g in given)
    return now > old[0].value if side == "min" else now < old[0].value


def _new_limit_specs(
    front: Front, replaced: dict[tuple[str, str], list[Limit]]
) -> tuple[LimitSpec, ...]:
    specs = []
    for spec in front.info.constraint_limits:
        changes: dict[str, float] = {}
        for side in ("min", "max"):
            given = replaced.get((spec.name, side))
            if given:
                values = [g.value for g in given]
                changes[side] = max(values) if side == "min" else min(values)
        specs.append(replace(spec, **changes))
    return tuple(specs)


def _rule_text(
    limit: Limit,
    front: Front,
    case_rules: dict[tuple[str, str], list[Limit]],
    constraints: set[str],
) -> str:
    unit = _unit(front, limit.column, "")
    shown = f"{limit.column} {limit.op} {_show(limit.value)}{unit}"
    if limit.column not in constraints:
        return f"{shown} (added)"
    old = case_rules.get((limit.column, _side(limit)))
    if not old:
        return (
            f"{shown} (the case has no {'minimum' if _side(limit) == 'min' else 'maximum'} on it)"
        )
    was = old[0]
    if was.value == limit.value:
        return f"{shown} (as the case has it)"
    looser = limit.value < was.value if _side(limit) == "min" else limit.value > was.value
    change = "loosened" if looser else "tightened"
    return f"{shown} (the case has {was.column} {was.op} {_show(was.value)}{unit}: {change})"


def _archive_front(
    rows: pd.DataFrame, front: Front, preferred: set[int], info, scale: np.ndarray
) -> Front:
    """The non-dominated rows as a front like ``front``.

    As in the search, values within 1e-9 of an objective's scale (:func:`_tie_scale`) are
    ties, and of tied designs (one served from the archive and one evaluated, or two that
    differ by rounding) the one already on ``front`` is kept, so that an unchanged limit gives
    back the run's front with its ids.
    """
    if "eval_id" in rows.columns and preferred:
        first = rows["eval_id"].isin(preferred).to_numpy()
        rows = pd.concat([rows[first], rows[~first]])
    points = np.column_stack([_numbers(rows[name]) for name in front.objective_names])
    ties = np.round(points / scale, 9)
    kept = rows[nondominated(ties, front.maximise)] if len(rows) else rows
    columns = [c for c in front.table.columns if c in kept.columns]
    if len(columns) <= len(front.objectives):
        columns = [c for c in kept.columns if c not in _BOOKKEEPING or c == "eval_id"]
    return Front.from_table(
        kept[columns],
        front.objectives,
        units=front.units,
        variables=front.variables,
        constraints=front.constraints,
        reference=front.reference,
        info=info,
    )


def _tie_scale(front: Front, table: pd.DataFrame) -> np.ndarray:
    """Each objective's scale for ties: as in the search, the distance from the best value to the
    reference point (here the front's), or the span over the archive where the front has none."""
    if front.reference is not None and len(front):
        best = np.where(front.maximise, front.points().max(axis=0), front.points().min(axis=0))
        scale = np.abs(np.asarray(front.reference, dtype=float) - best)
    else:
        points = np.column_stack([_numbers(table[name]) for name in front.objective_names])
        scale = np.ptp(points, axis=0) if len(points) else np.ones(len(front.objectives))
    return np.where(np.isfinite(scale) & (scale > 0), scale, 1.0)


def _ids_of(table: pd.DataFrame) -> list[int]:
    if "eval_id" not in table.columns:
        return []
    return [int(i) for i in pd.to_numeric(table["eval_id"], errors="coerce").dropna()]


def _bests(front: Front) -> dict[str, float]:
    if len(front) == 0:
        return {name: math.nan for name in front.objective_names}
    points = front.points()
    best = np.where(front.maximise, points.max(axis=0), points.min(axis=0))
    return {name: float(v) for name, v in zip(front.objective_names, best, strict=True)}


def _knee(front: Front) -> int | None:
    if len(front) == 0:
        return None
    verdict = find_knees(front)
    return verdict.knees[0] if verdict.has_knee else None


def _knee_text(front: Front, row: int | None) -> str:
    if len(front) == 0:
        return "no front"
    if row is None:
        return "none, this front has no knee"
    design = front.table.iloc[row]
    values = ", ".join(
        f"{o.name} {_show(design[o.name])}{_unit(front, o.name, o.unit)}" for o in front.objectives
    )
    return f"{front.design_name(row)} ({values})"


def _ids(ids: Sequence[int], limit: int = 5) -> str:
    if not ids:
        return ""
    shown = ", ".join(str(i) for i in ids[:limit]) + (", ..." if len(ids) > limit else "")
    return f" ({'design' if len(ids) == 1 else 'designs'} {shown})"


# --------------------------------------------------------------------------- small helpers
def _numbers(column: pd.Series) -> np.ndarray:
    return pd.to_numeric(column, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _unit(front: Front, name: str, unit: str) -> str:
    unit = unit or front.units.get(name, "")
    return f" {unit}" if unit else ""


def _same(a: float, b: float) -> bool:
    return (math.isnan(a) and math.isnan(b)) or a == b


def _share_text(share: float) -> str:
    if share >= 1.0:
        return "every design of the front"
    if share < 0.005:
        return "under 1 % of the front"
    # never rounded up to 100 % when a design is not there
    percent = min(math.floor(share * 100 + 0.5), 99)
    return f"{percent} % of the front"


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float | np.integer | np.floating) and not isinstance(
        value, bool | np.bool_
    )


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _show(value: Any, *, quoted: bool = False) -> str:
    """A value for a sentence (the one number rule of tradewise.format), text quoted when asked."""
    value = _plain(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return _format.number(value)
    return repr(str(value)) if quoted else str(value)
