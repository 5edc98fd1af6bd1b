"""A design case: its variables, objectives, constraints and model, loaded and checked from TOML."""

from __future__ import annotations

import ast
import difflib
import hashlib
import itertools
import math
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from tradewise import format as _format
from tradewise.errors import CaseError, quote, undecodable

__all__ = [
    "Variable",
    "Objective",
    "Constraint",
    "SearchSettings",
    "Case",
    "load_case",
    "bundled_cases",
    "RESERVED_NAMES",
    "HAZARDS",
]

#: Column names that tradewise itself writes into design tables; no variable,
#: objective, constraint or output may use them.
RESERVED_NAMES = frozenset(
    {
        "eval_id",
        "run_id",
        "status",
        "message",
        "generation",
        "feasible",
        "violation",
        "duration",
        "worker",
        "design_key",
        "data_row",
        "cached",
        "rank",
        "seed",
        # the columns of a shortlist and of the representative set
        "pick_order",
        "front_row",
        "chosen_as",
    }
)

#: What a case may declare it touches (``hazards = [...]``): the review page then says plainly that
#: its numbers are screening estimates to be checked by a qualified, licensed professional.
HAZARDS = ("structures", "electrical", "heat", "pressure", "stored energy", "moving parts")

VARIABLE_TYPES = ("real", "integer", "discrete", "choice", "flag")
GOALS = ("min", "max")
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]{0,63}$")

_TOP_KEYS = (
    "title",
    "description",
    "cautions",
    "hazards",
    "model",
    "command",
    "timeout",
    "batch",
    "variables",
    "objectives",
    "constraints",
    "outputs",
    "search",
)
_VARIABLE_KEYS = {
    "real": ("type", "low", "high", "step", "unit", "description"),
    "integer": ("type", "low", "high", "unit", "description"),
    "discrete": ("type", "values", "unit", "description"),
    "choice": ("type", "options", "unit", "description"),
    "flag": ("type", "description"),
}
_OBJECTIVE_KEYS = ("goal", "unit", "worst", "description")
_CONSTRAINT_KEYS = ("min", "max", "unit", "description")
_OUTPUT_KEYS = ("unit", "description")
_SEARCH_KEYS = (
    "population",
    "evaluations",
    "generations",
    "seed",
    "time_limit",
    "stall_generations",
    "stall_tolerance",
    "representatives",
    "surrogate",
)


@dataclass(frozen=True)
class Variable:
    """One design variable.

    ``kind`` is ``"real"``, ``"integer"``, ``"discrete"``, ``"choice"`` or
    ``"flag"``. Reals and integers have inclusive ``low`` and ``high`` bounds; a
    real may have a ``step`` (its values are then ``low``, ``low + step``, ...
    up to ``high``); a discrete variable takes one of its sorted ``values``
    (standard sizes: wire gauges, plate thicknesses), with ``low`` and ``high``
    its smallest and largest; a choice has its ``options``; a flag is a boolean.
    """

    name: str
    kind: str
    low: float | int | None = None
    high: float | int | None = None
    options: tuple[Any, ...] = ()
    unit: str = ""
    description: str = ""
    values: tuple[float, ...] = ()
    step: float | None = None

    @property
    def grid(self) -> tuple[float, ...]:
        """The ordered legal values of a discrete variable or a real with a step (else empty)."""
        if self.kind == "discrete":
            return self.values
        if self.kind == "real" and self.step is not None:
            n = math.floor((self.high - self.low) / self.step * (1 + 1e-12) + 1e-9)
            return tuple(self.low + k * self.step for k in range(n + 1))
        return ()

    def contains(self, value: Any) -> bool:
        """Say whether ``value`` is a legal value of this variable."""
        if self.kind == "flag":
            return isinstance(value, bool)
        if self.kind == "choice":
            return value in self.options
        if isinstance(value, bool) or not isinstance(value, int | float):
            return False
        if self.kind == "integer" and not float(value).is_integer():
            return False
        if self.grid:
            return any(math.isclose(value, g, rel_tol=1e-9, abs_tol=1e-12) for g in self.grid)
        return self.low <= value <= self.high


@dataclass(frozen=True)
class Objective:
    """One goal: its name, sense (``"min"`` or ``"max"``), unit and optional reference value."""

    name: str
    goal: str = "min"
    unit: str = ""
    worst: float | None = None
    description: str = ""

    @property
    def maximise(self) -> bool:
        return self.goal == "max"


@dataclass(frozen=True)
class Constraint:
    """A limit on one model result: ``min <= value <= max`` (either end may be absent)."""

    name: str
    min: float | None = None
    max: float | None = None
    unit: str = ""
    description: str = ""

    def violation(self, value: float) -> float:
        """Relative amount by which ``value`` breaks the limit (0 when it holds).

        The excess is divided by the size of the limit (or 1 for a zero limit),
        so constraints of very different units weigh alike in the search.
        """
        total = 0.0
        if self.min is not None and value < self.min:
            total += (self.min - value) / max(abs(self.min), 1e-12 if self.min else 1.0)
        if self.max is not None and value > self.max:
            total += (value - self.max) / max(abs(self.max), 1e-12 if self.max else 1.0)
        return total

    def plain(self) -> str:
        """The limit in words: 'at least 2 mm', 'at most 90 degC', 'from 1 to 3 mm'."""
        low, high = (_format.quantity(x, self.unit) for x in (self.min, self.max))
        if self.min is not None and self.max is not None:
            return f"from {_format.number(self.min)} to {high}"
        return f"at least {low}" if self.min is not None else f"at most {high}"

    def met_by(self, value: float) -> bool:
        """Whether ``value`` keeps to the limit."""
        return self.violation(value) <= 0

    def describe(self) -> str:
        unit = f" {self.unit}" if self.unit else ""
        if self.min is not None and self.max is not None:
            return f"{self.min:g} <= {self.name} <= {self.max:g}{unit}"
        if self.min is not None:
            return f"{self.name} >= {self.min:g}{unit}"
        return f"{self.name} <= {self.max:g}{unit}"


@dataclass(frozen=True)
class SearchSettings:
    """How long and how wide the search runs; command-line options override these.

    ``population`` of ``None`` means automatic: 60 designs a generation for two
    objectives, 100 for three, 120 for more (tuned on the ZDT and DTLZ2 problems).

    ``evaluations`` counts model evaluations (designs served from the archive
    are free). ``stall_generations`` and ``stall_tolerance`` stop a run whose
    hypervolume gained less than that relative amount over that many
    generations; ``stall_generations = 0`` turns the rule off.

    ``representatives`` is how many designs at most the run folder's
    ``representatives.csv`` holds to stand for the whole front.
    """

    population: int | None = None
    evaluations: int = 6000
    generations: int | None = None
    seed: int = 1
    time_limit: float | None = None
    stall_generations: int = 40
    stall_tolerance: float = 1e-4
    representatives: int = 20
    surrogate: bool = False

    def as_dict(self) -> dict[str, Any]:
        return {
            "population": self.population,
            "evaluations": self.evaluations,
            "generations": self.generations,
            "seed": self.seed,
            "time_limit": self.time_limit,
            "stall_generations": self.stall_generations,
            "stall_tolerance": self.stall_tolerance,
            "representatives": self.representatives,
            "surrogate": self.surrogate,
        }


@dataclass(frozen=True)
class Case:
    """A loaded and checked case; build it with :func:`load_case`."""

    path: Path
    title: str
    variables: tuple[Variable, ...]
    objectives: tuple[Objective, ...]
    constraints: tuple[Constraint, ...] = ()
    model: str | None = None
    command: tuple[str, ...] | None = None
    timeout: float | None = None
    #: The model takes a DataFrame of designs and returns one row of results per design.
    batch: bool = False
    outputs: dict[str, str] = field(default_factory=dict)
    search: SearchSettings = field(default_factory=SearchSettings)
    description: str = ""
    cautions: str = ""
    hazards: tuple[str, ...] = ()
    text: str = ""
    hash: str = ""

    @property
    def folder(self) -> Path:
        return self.path.parent

    @property
    def variable_names(self) -> list[str]:
        return [v.name for v in self.variables]

    @property
    def objective_names(self) -> list[str]:
        return [o.name for o in self.objectives]

    @property
    def constraint_names(self) -> list[str]:
        return [c.name for c in self.constraints]

    @property
    def maximise(self) -> list[bool]:
        return [o.maximise for o in self.objectives]

    @property
    def units(self) -> dict[str, str]:
        """Unit of every named variable, objective, constraint and output ('' when none)."""
        units = {v.name: v.unit for v in self.variables}
        units.update({o.name: o.unit for o in self.objectives})
        units.update({c.name: c.unit for c in self.constraints})
        for name, unit in self.outputs.items():
            units.setdefault(name, unit)
        return units

    def with_search(self, **changes: Any) -> Case:
        """Return a copy whose search settings have ``changes`` applied (``None`` values are ignored)."""
        changes = {k: v for k, v in changes.items() if v is not None}
        unknown = sorted(set(changes) - set(_SEARCH_KEYS))
        if unknown:
            raise CaseError(
                f"unknown search setting {unknown[0]!r}; allowed: {', '.join(_SEARCH_KEYS)}"
            )
        settings = replace(self.search, **changes)
        _check_search_values(settings, f"{self.path}: [search]")
        return replace(self, search=settings)

    def plain_lines(self) -> list[str]:
        """The case in plain words, a line an item, for ``tradewise check`` and other people.

        Examples
        --------
        >>> case = Case(Path("case.toml"), "Bracket", (Variable("t", "real", 1.0, 5.0, unit="mm"),),
        ...             (Objective("mass", unit="g"), Objective("stiffness", "max", "N/mm")),
        ...             (Constraint("stress", max=120.0, unit="MPa"),), model="model.py:evaluate")
        >>> print(chr(10).join(case.plain_lines()))
        Bracket
        Model: the Python function model.py:evaluate
        Variables (1):
          t: a real number from 1 to 5 mm
        Objectives (2):
          mass: as low as possible, in g
          stiffness: as high as possible, in N/mm
        Constraints (1):
          stress: at most 120 MPa
        """
        lines = [self.title]
        if self.model:
            lines.append(
                f"Model: the Python function {self.model}"
                + (", called with a table of designs" if self.batch else "")
            )
        elif self.command:
            lines.append(f"Model: the program {' '.join(self.command)}")
        if self.timeout:
            lines[-1] += f" (stopped after {_format.seconds(self.timeout)})"
        lines.append(f"Variables ({len(self.variables)}):")
        for v in self.variables:
            lines.append(f"  {v.name}: {_plain_variable(v)}")
        lines.append(f"Objectives ({len(self.objectives)}):")
        for o in self.objectives:
            sense = "as high as possible" if o.maximise else "as low as possible"
            unit = f", in {o.unit}" if o.unit else ""
            worst = (
                f"; worst acceptable {_format.quantity(o.worst, o.unit)}"
                if o.worst is not None
                else ""
            )
            lines.append(f"  {o.name}: {sense}{unit}{worst}")
        if self.constraints:
            lines.append(f"Constraints ({len(self.constraints)}):")
            for c in self.constraints:
                lines.append(f"  {c.name}: {c.plain()}")
        if self.outputs:
            lines.append(f"Other outputs kept: {', '.join(self.outputs)}")
        return lines

    def __repr__(self) -> str:
        return (
            f"Case({self.title!r}, {len(self.variables)} variables, "
            f"{len(self.objectives)} objectives, {len(self.constraints)} constraints)"
        )


def bundled_cases() -> dict[str, Path]:
    """Map the name of every case shipped with tradewise to its ``case.toml``."""
    # Installed from a wheel they sit inside the package (pyproject's force-include); in a source
    # checkout and an editable install they are the repository's top-level cases/ folder. A folder
    # without a case.toml does not count: a checkout from before the move keeps an untracked
    # src/tradewise/cases/ of __pycache__ folders, which must not hide the repository's cases.
    repository = Path(__file__).resolve().parents[2]
    roots = [Path(__file__).parent / "cases"]
    if (repository / "pyproject.toml").is_file():
        roots.append(repository / "cases")
    for root in roots:
        found = sorted(root.glob("*/case.toml"))
        if found:
            return {p.parent.name: p for p in found}
    return {}


def load_case(path: str | Path) -> Case:
    """Load and check a case from a folder, its ``case.toml``, or the name of a bundled case.

    Parameters
    ----------
    path : str or Path
        A case folder, a ``case.toml`` file, or a bundled case name such as ``"heat-sink"``.

    Returns
    -------
    Case

    Raises
    ------
    CaseError
        With one line naming the file, the table and the key at fault.

    Examples
    --------
    >>> case = load_case("heat-sink")          # doctest: +SKIP
    >>> case.objective_names                   # doctest: +SKIP
    ['resistance', 'mass', 'pressure_drop']
    """
    file = _find_case_file(path)
    try:
        raw = file.read_bytes()
    except OSError as exc:
        raise CaseError(f"{file}: cannot be read ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise CaseError(f"{file}: {undecodable(raw, exc)}; save it as UTF-8") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(f"{file}: TOML syntax error: {exc}") from None
    return _build_case(data, file, text)


def _find_case_file(path: str | Path) -> Path:
    p = Path(path)
    if p.is_dir():
        file = p / "case.toml"
        if not file.is_file():
            raise CaseError(f"{p}: folder has no case.toml")
        return file
    if p.is_file():
        return p
    bundled = bundled_cases()
    if str(path) in bundled:
        return bundled[str(path)]
    hint = _suggest(str(path), bundled)
    names = ", ".join(bundled) or "none"
    raise CaseError(f"{p}: no such case folder, file or bundled case{hint} (bundled: {names})")


# Words an engineer may write for an allowed value, which spelling alone would not lead to.
_SYNONYMS = {
    "float": "real",
    "double": "real",
    "continuous": "real",
    "number": "real",
    "int": "integer",
    "whole": "integer",
    "bool": "flag",
    "boolean": "flag",
    "switch": "flag",
    "categorical": "choice",
    "category": "choice",
    "enum": "choice",
    "option": "choice",
    "sizes": "discrete",
    "list": "discrete",
    "standard": "discrete",
    "minimise": "min",
    "minimize": "min",
    "minimum": "min",
    "lower": "min",
    "maximise": "max",
    "maximize": "max",
    "maximum": "max",
    "higher": "max",
}


def _suggest(name: str, allowed: Any) -> str:
    allowed = [str(a) for a in allowed]
    meant = _SYNONYMS.get(str(name).strip().lower())
    if meant in allowed:
        return f" (did you mean {meant!r}?)"
    lowered = {a.lower(): a for a in allowed}
    if str(name).lower() in lowered:
        return f" (did you mean {lowered[str(name).lower()]!r}?)"
    close = difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _check_keys(table: dict[str, Any], allowed: tuple[str, ...], where: str) -> None:
    for key in table:
        if key not in allowed:
            raise CaseError(
                f"{where}: unknown key {key!r}{_suggest(key, allowed)}; allowed: {', '.join(allowed)}"
            )


def _number(value: Any, where: str, *, integer: bool = False) -> float | int:
    if isinstance(value, bool) or not isinstance(value, int | float):
        kind = "an integer" if integer else "a number"
        raise CaseError(f"{where}: expected {kind}, got {value!r}")
    if integer and not isinstance(value, int):
        raise CaseError(f"{where}: expected an integer, got {value!r}")
    if not math.isfinite(value):
        raise CaseError(f"{where}: expected a finite number, got {value!r}")
    return value


def _text(value: Any, where: str) -> str:
    if not isinstance(value, str):
        raise CaseError(f"{where}: expected text, got {value!r}")
    return value


def _table(data: dict[str, Any], key: str, where: str) -> dict[str, Any]:
    value = data.get(key, {})
    if not isinstance(value, dict):
        raise CaseError(f"{where}: [{key}] must be a table, got {type(value).__name__}")
    return value


def _entries(data: dict[str, Any], key: str, file: Path) -> dict[str, dict[str, Any]]:
    table = _table(data, key, str(file))
    for name, entry in table.items():
        where = f"{file}: [{key}] {name}"
        if not isinstance(entry, dict):
            raise CaseError(f"{where}: must be an inline table such as {{ ... }}, got {entry!r}")
        if not _NAME.match(name):
            raise CaseError(
                f"{where}: name must start with a letter or '_' and hold only letters, digits, '_' or '-'"
            )
        if name in RESERVED_NAMES:
            raise CaseError(
                f"{where}: {name!r} is a reserved column name; reserved: {', '.join(sorted(RESERVED_NAMES))}"
            )
    return table


def _build_case(data: dict[str, Any], file: Path, text: str) -> Case:
    _check_keys(data, _TOP_KEYS, str(file))
    title = _text(data.get("title", file.parent.name), f"{file}: title")
    description = _text(data.get("description", ""), f"{file}: description")
    cautions = _text(data.get("cautions", ""), f"{file}: cautions")
    hazards = _hazards(data.get("hazards", []), file)

    variables = tuple(
        _variable(name, entry, f"{file}: [variables] {name}")
        for name, entry in _entries(data, "variables", file).items()
    )
    if not variables:
        raise CaseError(
            f"{file}: [variables] is missing or empty; a case needs at least one variable"
        )
    objectives = tuple(
        _objective(name, entry, f"{file}: [objectives] {name}")
        for name, entry in _entries(data, "objectives", file).items()
    )
    if len(objectives) < 2:
        raise CaseError(
            f"{file}: [objectives] has {len(objectives)} objective(s); a trade-off needs at least two"
        )
    constraints = tuple(
        _constraint(name, entry, f"{file}: [constraints] {name}")
        for name, entry in _entries(data, "constraints", file).items()
    )
    outputs: dict[str, str] = {}
    for name, entry in _entries(data, "outputs", file).items():
        where = f"{file}: [outputs] {name}"
        _check_keys(entry, _OUTPUT_KEYS, where)
        outputs[name] = _text(entry.get("unit", ""), f"{where}: unit")

    seen: dict[str, str] = {}
    for table, items in (
        ("variables", variables),
        ("objectives", objectives),
        ("constraints", constraints),
    ):
        for item in items:
            if item.name in seen:
                raise CaseError(
                    f"{file}: [{table}] {item.name}: name already used in [{seen[item.name]}]; "
                    "names must be unique across variables, objectives and constraints"
                )
            seen[item.name] = table
    for name in outputs:
        if name in seen and seen[name] == "variables":
            raise CaseError(f"{file}: [outputs] {name}: name already used in [variables]")

    search = _search(_table(data, "search", str(file)), f"{file}: [search]")
    model, command, timeout = _model(data, file)
    batch = _batch(data, file, command, timeout)

    digest = hashlib.sha256(text.encode("utf-8"))
    for extra in _model_files(file.parent, model, command):
        digest.update(b"\0" + extra.name.encode() + b"\0" + extra.read_bytes())
    return Case(
        path=file,
        title=title,
        variables=variables,
        objectives=objectives,
        constraints=constraints,
        model=model,
        command=command,
        timeout=timeout,
        batch=batch,
        outputs=outputs,
        search=search,
        description=description,
        cautions=cautions,
        hazards=hazards,
        text=text,
        hash=digest.hexdigest()[:16],
    )


def _variable(name: str, entry: dict[str, Any], where: str) -> Variable:
    kind = entry.get("type")
    if kind is None:
        # a misspelt key is the likelier mistake than a forgotten one: name it first
        known = tuple(dict.fromkeys(k for keys in _VARIABLE_KEYS.values() for k in keys))
        _check_keys(entry, known, where)
        raise CaseError(f"{where}: missing 'type'; allowed: {', '.join(VARIABLE_TYPES)}")
    if kind not in VARIABLE_TYPES:
        raise CaseError(
            f"{where}: type {kind!r} is not allowed{_suggest(kind, VARIABLE_TYPES)}; "
            f"allowed: {', '.join(VARIABLE_TYPES)}"
        )
    _check_keys(entry, _VARIABLE_KEYS[kind], where)
    unit = _text(entry.get("unit", ""), f"{where}: unit")
    description = _text(entry.get("description", ""), f"{where}: description")
    if kind == "flag":
        return Variable(name, kind, description=description)
    if kind == "choice":
        options = entry.get("options")
        if not isinstance(options, list) or not options:
            raise CaseError(f"{where}: 'options' must be a non-empty list, got {options!r}")
        for option in options:
            if isinstance(option, bool) or not isinstance(option, str | int | float):
                raise CaseError(f"{where}: option {option!r} must be text or a number")
        repeated = sorted({str(o) for o in options if options.count(o) > 1})
        if repeated:
            raise CaseError(f"{where}: option {repeated[0]!r} is repeated; options must be unique")
        if len(options) < 2:
            raise CaseError(f"{where}: a choice needs at least two options, got {options!r}")
        return Variable(name, kind, options=tuple(options), unit=unit, description=description)
    if kind == "discrete":
        return _discrete(name, entry, where, unit, description)
    integer = kind == "integer"
    for key in ("low", "high"):
        if key not in entry:
            raise CaseError(f"{where}: missing {key!r}")
    low = _number(entry["low"], f"{where}: low", integer=integer)
    high = _number(entry["high"], f"{where}: high", integer=integer)
    if low >= high:
        raise CaseError(f"{where}: 'low' ({low}) must be below 'high' ({high})")
    if not math.isfinite(float(high) - float(low)):
        raise CaseError(
            f"{where}: the range from {low:g} to {high:g} is too wide to compute with (high - low overflows "
            "a float); narrow it or change the variable's unit"
        )
    if integer:
        return Variable(name, kind, low=low, high=high, unit=unit, description=description)
    step = None
    if "step" in entry:
        step = float(_number(entry["step"], f"{where}: step"))
        if not (math.isfinite(step) and 0 < step <= float(high) - float(low)):
            raise CaseError(
                f"{where}: 'step' must be above 0 and at most high - low ({float(high) - float(low):g}), "
                f"got {step:g}"
            )
    return Variable(
        name, kind, low=float(low), high=float(high), unit=unit, description=description, step=step
    )


def _hazards(value: Any, file: Path) -> tuple[str, ...]:
    if not isinstance(value, list) or not all(isinstance(h, str) for h in value):
        raise CaseError(
            f'{file}: hazards must be a list of text, e.g. ["heat"]; allowed: {", ".join(HAZARDS)}'
        )
    for h in value:
        if h not in HAZARDS:
            raise CaseError(
                f"{file}: hazards: {h!r} is not one of them{_suggest(h, HAZARDS)}; "
                f"allowed: {', '.join(HAZARDS)}"
            )
    return tuple(dict.fromkeys(value))


def _plain_variable(v: Variable) -> str:
    unit = f" {v.unit}" if v.unit else ""
    if v.kind == "flag":
        return "yes or no"
    if v.kind == "choice":
        return "one of " + ", ".join(str(o) for o in v.options)
    if v.kind == "discrete":
        sizes = ", ".join(_format.number(x) for x in v.values)
        return f"one of the sizes {sizes}{unit}"
    if v.kind == "integer":
        return f"a whole number from {_format.number(v.low)} to {_format.number(v.high)}{unit}"
    step = f" in steps of {_format.number(v.step)}" if v.step is not None else ""
    return f"a real number from {_format.number(v.low)} to {_format.number(v.high)}{unit}{step}"


def _discrete(
    name: str, entry: dict[str, Any], where: str, unit: str, description: str
) -> Variable:
    """A variable that takes one of a sorted list of numbers (standard sizes)."""
    values = entry.get("values")
    if not isinstance(values, list):
        raise CaseError(
            f"{where}: 'values' must be a list of numbers in rising order, e.g. [0.8, 1.0, 1.25], "
            f"got {values!r}"
        )
    numbers = [float(_number(v, f"{where}: values[{i}]")) for i, v in enumerate(values)]
    if len(numbers) < 2:
        raise CaseError(f"{where}: 'values' needs at least two sizes, got {len(numbers)}")
    for i, (a, b) in enumerate(itertools.pairwise(numbers)):
        if not math.isfinite(a) or not math.isfinite(b):
            raise CaseError(f"{where}: values[{i}] is not a finite number")
        if b == a:
            raise CaseError(f"{where}: value {a:g} is repeated; the sizes must be distinct")
        if b < a:
            raise CaseError(
                f"{where}: 'values' must rise: values[{i + 1}] ({b:g}) comes after {a:g}"
            )
    return Variable(
        name,
        "discrete",
        low=numbers[0],
        high=numbers[-1],
        unit=unit,
        description=description,
        values=tuple(numbers),
    )


def _objective(name: str, entry: dict[str, Any], where: str) -> Objective:
    _check_keys(entry, _OBJECTIVE_KEYS, where)
    goal = entry.get("goal")
    if goal is None:
        raise CaseError(f"{where}: missing 'goal'; allowed: {', '.join(GOALS)}")
    if goal not in GOALS:
        raise CaseError(
            f"{where}: goal {goal!r} is not allowed{_suggest(goal, GOALS)}; allowed: min, max"
        )
    worst = entry.get("worst")
    if worst is not None:
        worst = float(_number(worst, f"{where}: worst"))
    return Objective(
        name,
        goal,
        unit=_text(entry.get("unit", ""), f"{where}: unit"),
        worst=worst,
        description=_text(entry.get("description", ""), f"{where}: description"),
    )


def _constraint(name: str, entry: dict[str, Any], where: str) -> Constraint:
    _check_keys(entry, _CONSTRAINT_KEYS, where)
    low, high = entry.get("min"), entry.get("max")
    if low is None and high is None:
        raise CaseError(f"{where}: needs 'min', 'max' or both")
    if low is not None:
        low = float(_number(low, f"{where}: min"))
    if high is not None:
        high = float(_number(high, f"{where}: max"))
    if low is not None and high is not None and low > high:
        raise CaseError(f"{where}: 'min' ({low:g}) must not exceed 'max' ({high:g})")
    return Constraint(
        name,
        low,
        high,
        unit=_text(entry.get("unit", ""), f"{where}: unit"),
        description=_text(entry.get("description", ""), f"{where}: description"),
    )


def _search(table: dict[str, Any], where: str) -> SearchSettings:
    _check_keys(table, _SEARCH_KEYS, where)
    values: dict[str, Any] = {}
    for key in (
        "population",
        "evaluations",
        "generations",
        "seed",
        "stall_generations",
        "representatives",
    ):
        if key in table:
            values[key] = _number(table[key], f"{where} {key}", integer=True)
    for key in ("time_limit", "stall_tolerance"):
        if key in table:
            values[key] = float(_number(table[key], f"{where} {key}"))
    if "surrogate" in table:
        if not isinstance(table["surrogate"], bool):
            raise CaseError(
                f"{where} surrogate: got {table['surrogate']!r}, allowed: true or false"
            )
        values["surrogate"] = table["surrogate"]
    settings = SearchSettings(**values)
    _check_search_values(settings, where)
    return settings


def _check_search_values(settings: SearchSettings, where: str) -> None:
    checks = (
        ("population", settings.population, 4, "at least 4"),
        ("evaluations", settings.evaluations, 1, "at least 1"),
        ("generations", settings.generations, 1, "at least 1"),
        ("seed", settings.seed, 0, "0 or more"),
        ("stall_generations", settings.stall_generations, 0, "0 (off) or more"),
        ("representatives", settings.representatives, 1, "at least 1"),
    )
    for key, value, least, allowed in checks:
        if value is not None and value < least:
            raise CaseError(f"{where} {key}: got {value}, allowed: {allowed}")
    if settings.time_limit is not None and settings.time_limit <= 0:
        raise CaseError(
            f"{where} time_limit: got {settings.time_limit:g}, allowed: seconds above 0"
        )
    if settings.stall_tolerance < 0:
        raise CaseError(
            f"{where} stall_tolerance: got {settings.stall_tolerance:g}, allowed: 0 or more"
        )


def _batch(data: dict[str, Any], file: Path, command: Any, timeout: float | None) -> bool:
    batch = data.get("batch", False)
    if not isinstance(batch, bool):
        raise CaseError(f"{file}: batch: got {batch!r}, allowed: true or false")
    if batch and command is not None:
        raise CaseError(
            f"{file}: batch: got true with a 'command'; allowed: true only with a Python 'model'"
        )
    if batch and timeout is not None:
        raise CaseError(
            f"{file}: batch: got true with a timeout of {timeout:g} s; allowed: a batch model "
            "without 'timeout' (a timeout stops one design, and a batch call holds many)"
        )
    return batch


def _model(
    data: dict[str, Any], file: Path
) -> tuple[str | None, tuple[str, ...] | None, float | None]:
    model, command = data.get("model"), data.get("command")
    if model is None and command is None:
        raise CaseError(
            f'{file}: needs \'model\' ("file.py:function") or \'command\' (["program", "{{input}}", "{{output}}"])'
        )
    if model is not None and command is not None:
        raise CaseError(f"{file}: give either 'model' or 'command', not both")
    timeout = data.get("timeout")
    if timeout is not None:
        timeout = float(_number(timeout, f"{file}: timeout"))
        if timeout <= 0:
            raise CaseError(f"{file}: timeout: got {timeout:g}, allowed: seconds above 0")
    if command is not None:
        if (
            not isinstance(command, list)
            or not command
            or not all(isinstance(a, str) and a for a in command)
        ):
            raise CaseError(
                f"{file}: command must be a non-empty list of text arguments, got {command!r}"
            )
        if not any("{input}" in a for a in command) or not any("{output}" in a for a in command):
            raise CaseError(
                f"{file}: command must contain the placeholders {{input}} and {{output}}, got {command!r}"
            )
        return None, tuple(command), timeout
    model = _text(model, f"{file}: model")
    if model.count(":") != 1:
        raise CaseError(f'{file}: model must look like "model.py:evaluate", got {model!r}')
    module_name, function = model.split(":")
    module_file = _inside_case_folder(module_name, file)
    if not module_name.endswith(".py") or not module_file.is_file():
        raise CaseError(
            f"{file}: model file {quote(module_name)} not found in the case folder {file.parent}"
        )
    if not function.isidentifier():
        raise CaseError(f"{file}: model function {function!r} is not a Python name")
    try:
        tree = ast.parse(module_file.read_text(encoding="utf-8"), filename=str(module_file))
    except SyntaxError as exc:
        raise CaseError(
            f"{module_file}: Python syntax error at line {exc.lineno}: {exc.msg}"
        ) from None
    defined = _top_level_names(tree)
    if function not in defined:
        raise CaseError(
            f"{file}: model function {function!r} not found in {module_name}{_suggest(function, defined)}"
        )
    return model, None, timeout


def _inside_case_folder(name: str, file: Path) -> Path:
    """The model file ``name`` in the case folder of ``file``; it may sit in a subfolder, never outside.

    A case folder is meant to be moved and shared whole, and a case file must
    not be able to point tradewise at code elsewhere on the machine.
    """
    relative = Path(name)
    if relative.is_absolute() or relative.drive or ".." in relative.parts or "\\" in name:
        raise CaseError(
            f"{file}: model file {quote(name)} must be a path inside the case folder "
            '(such as "model.py" or "src/model.py"), without \'..\' or an absolute path'
        )
    folder = file.parent.resolve()
    found = (folder / relative).resolve()
    if not found.is_relative_to(folder):
        raise CaseError(
            f"{file}: model file {quote(name)} leads outside the case folder {file.parent} (through a link)"
        )
    return file.parent / relative


def _top_level_names(tree: ast.Module) -> list[str]:
    names: list[str] = []
    for node in tree.body:
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef):
            names.append(node.name)
        elif isinstance(node, ast.Assign):
            names.extend(t.id for t in node.targets if isinstance(t, ast.Name))
        elif isinstance(node, ast.ImportFrom | ast.Import):
            names.extend((a.asname or a.name).split(".")[0] for a in node.names)
    return names


def _model_files(folder: Path, model: str | None, command: tuple[str, ...] | None) -> list[Path]:
    """Files whose content decides the results, so that they enter the case hash."""
    if model is not None:
        return [folder / model.split(":")[0]]
    files = []
    for arg in command or ():
        candidate = folder / arg
        if "{" not in arg and candidate.is_file():
            files.append(candidate)
    return files
