"""The review page: one self-contained HTML file about a front, to send before a design meeting.

This module decides what goes on the page, in which order, with which numbers
and words, as a context of plain values; the Jinja2 templates in
``templates/`` (``review.html.j2`` and the partials it includes) write the
markup. The page carries its figures as inline SVG, its styles
(``review.css``) and its one small sorting script (``sort.js``) inline, and a
Content-Security-Policy that forbids loading anything from elsewhere, so it
opens the same with or without a network. The template engine escapes every
value it writes (autoescape on); only the SVG figures drawn by
:func:`tradewise.plots.to_svg` are written as they are.

About 900 lines, over the usual 800: besides the page's parts it still holds
reading a shortlist back onto the front and the safety-word check, which no
other module owns yet.
"""

from __future__ import annotations

import base64
import contextlib
import datetime as _dt
import functools
import hashlib
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import replace
from html import escape
from pathlib import Path
from typing import Any

import jinja2
import numpy as np
import pandas as pd
from jinja2.ext import Extension
from markupsafe import Markup

from tradewise import choose as _choose
from tradewise import format as _format
from tradewise import plots
from tradewise import represent as _represent
from tradewise.errors import DataError
from tradewise.front import (
    ROW_COLUMN,
    Front,
    failures_text,
    hypervolume_box,
    objective_matrix,
    tradeoff_rates,
)

__all__ = ["build_report", "write_report", "safety_domains"]

#: Words that mark a case as touching structures, electrical packs or heat
#: (matched as whole words in the title, description, cautions, names and units).
_DOMAIN_WORDS: dict[str, tuple[str, ...]] = {
    "structures": (
        "beam", "beams", "girder", "girders", "bridge", "footbridge", "truss", "trusses", "column",
        "columns", "frame", "structural", "structure", "stress", "stresses", "deflection", "buckling",
        "weld", "welded", "load", "loads", "kN", "MPa", "GPa", "kPa",
    ),
    "electrical packs": (
        "battery", "batteries", "cell", "cells", "lithium", "li-ion", "pack", "packs", "charging", "Wh",
        "kWh", "mAh", "voltage",
    ),
    "heat": (
        "heat", "thermal", "temperature", "temperatures", "fin", "fins", "cooling", "coolant", "fan",
        "K/W", "degC", "\u00b0C", "W/(m^2 K)",
    ),
}  # fmt: skip


#: Columns of the archive that say how an evaluation ran, not what the design is.
_BOOKKEEPING = frozenset(
    {
        "duration",
        "worker",
        "cached",
        "message",
        "status",
        "run_id",
        "feasible",
        "violation",
        "design_key",
        "data_row",
    }
)


#: The folder of the page's templates, styles and script (shipped inside the package).
_TEMPLATES = Path(__file__).with_name("templates")


# --------------------------------------------------------------------------------- templates
class _LayoutOnlyLineBreaks(Extension):
    """In a ``.j2`` template, a line break and the indentation after it only lay out the source.

    They are taken out before the template is read, so the markup can be
    indented for people while the page keeps no whitespace between its tags.
    A space the page needs is written inside a line (or as ``{{ " " }}`` where
    a sentence goes on on the next line); a line break the page needs is
    written as ``{{ newline }}``. Files included verbatim (the styles,
    the script) are left as they are.
    """

    def preprocess(self, source: str, name: str | None, filename: str | None = None) -> str:
        if name is not None and name.endswith(".j2"):
            return re.sub(r"\n[ \t]*", "", source)
        return source


def _escaped(value: Any) -> Markup:
    """Escape one value the template writes, the way :func:`html.escape` does.

    The engine's own autoescape writes quotes as ``&#34;`` and ``&#39;``; the
    page has always used ``&quot;`` and ``&#x27;``, so every value is escaped
    here and handed on as already safe. Only what is already markup (a
    figure's SVG marked ``|safe``, the output of a macro) passes unchanged.
    """
    if hasattr(value, "__html__"):
        return value
    return Markup(escape(str(value), quote=True))


@functools.cache
def _environment() -> jinja2.Environment:
    environment = jinja2.Environment(
        loader=jinja2.FileSystemLoader(_TEMPLATES),
        autoescape=True,
        finalize=_escaped,
        undefined=jinja2.StrictUndefined,
        extensions=[_LayoutOnlyLineBreaks],
    )
    environment.globals["newline"] = "\n"
    return environment


def _script_hash() -> str:
    """The SHA-256 of the sort script as the page inlines it, for the Content-Security-Policy."""
    script = _environment().get_template("sort.js").render()
    return base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")


# --------------------------------------------------------------------------------- public
def safety_domains(front: Front) -> list[str]:
    """The safety-relevant domains a front's case touches (structures, electrical packs, heat, ...).

    What the case declares (``hazards = [...]`` in case.toml, recorded with the run) decides. A
    case that declares nothing is judged by whole words in its own title and description only,
    never by what a column or an output happens to be called.
    """
    info = front.info
    if info.hazards:
        return [_HAZARD_WORDS.get(h, h) for h in info.hazards]
    text = " " + " ".join(str(v or "") for v in (info.title, info.description)) + " "
    found = []
    for domain, words in _DOMAIN_WORDS.items():
        for word in words:
            if re.search(
                r"(?<![\w/])" + re.escape(word) + r"(?![\w/])",
                text,
                flags=re.IGNORECASE if word.islower() else 0,
            ):
                found.append(domain)
                break
    return found


#: How the page names a declared hazard.
_HAZARD_WORDS = {"electrical": "electrical packs"}


def build_report(
    front: Front,
    *,
    history: pd.DataFrame | None = None,
    evaluations: pd.DataFrame | None = None,
    shortlist: Front | pd.DataFrame | None = None,
    seeds: pd.DataFrame | None = None,
    attainment: pd.DataFrame | Mapping[str, Any] | None = None,
    generated: _dt.datetime | None = None,
) -> str:
    """The review page of a front as one self-contained HTML document.

    Parameters
    ----------
    front : Front
        The whole front, with the run's description in ``front.info`` (as
        read back from a run folder by :func:`tradewise.front.read_front`).
    history : pandas.DataFrame, optional
        The run's generation history (``history.csv``), for the convergence
        figure; with a ``seed`` column, one line per seed.
    evaluations : pandas.DataFrame, optional
        Every evaluation of the run, drawn faintly behind the front.
    shortlist : Front or pandas.DataFrame, optional
        Designs of ``front`` a designer chose to carry forward, as written by
        ``tradewise pick --out`` or the notebook picker's shortlist export
        (columns ``pick_order`` and ``front_row`` where present,
        ``info.shortlist`` for how they were chosen). Each is found on the
        front by ``front_row``, else ``eval_id``, else its objective values.
        The page keeps the whole front and adds a section on the shortlist,
        in pick order, with the designs ringed on a figure of the front.
    seeds : pandas.DataFrame, optional
        One row a seed of a run made with several seeds (``seeds.csv``: at
        least ``seed`` and ``hypervolume``), for a section on the spread.
    attainment : pandas.DataFrame or mapping, optional
        The attainment surfaces of those seeds (``attainment.csv``, or
        ``{"best": ..., "median": ..., "worst": ...}`` corner arrays), drawn
        for two objectives.
    generated : datetime, optional
        When the page was made (default now, in UTC).

    Returns
    -------
    str
        The HTML text.

    Raises
    ------
    DataError
        When the front holds no designs, or a shortlisted design is not on
        the front, or the seeds table has no hypervolume column.

    Examples
    --------
    >>> from tradewise.case import Objective
    >>> from tradewise.runinfo import RunInfo
    >>> table = pd.DataFrame({"cost": [1.0, 2, 4], "mass": [5.0, 3, 2]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")], info=RunInfo(title="A <b> test"))
    >>> "A &lt;b&gt; test" in build_report(front)
    True
    >>> page = build_report(front, shortlist=pd.DataFrame({"cost": [4.0], "mass": [2.0]}))
    >>> "1 of the 3 designs on the front" in page
    True
    """
    if len(front) == 0:
        raise DataError(
            "front: holds no designs; the run found no feasible design, so there is nothing to review"
        )
    generated = generated or _dt.datetime.now(_dt.UTC)
    marks = _marks(front)
    listed = _shortlisted(front, shortlist)
    spread = _seed_spread(front, seeds)
    figures = _figures(front, history, evaluations, marks, listed, attainment)
    context = {
        "title": str(front.info.title or "Untitled trade-off study"),
        "script_hash": _script_hash(),
        "figures": figures,
        "masthead": _masthead(front),
        "facts": _facts(front, listed, spread),
        "case": _case(front),
        "shortlist": _shortlist(front, listed, marks),
        "picks": _picks(front, marks),
        "binds": _binds(front, evaluations),
        "run": _run(front, history, spread, evaluations),
        "representatives": _representatives(front, marks, listed),
        "front_table": _front_table(front, marks, listed),
        "assumptions": _assumptions(front),
        "cautions": _cautions(front),
        "footer": _footer(front, generated),
    }
    return _environment().get_template("review.html.j2").render(context)


def write_report(
    front: Front,
    path: str | Path,
    *,
    history: pd.DataFrame | None = None,
    evaluations: pd.DataFrame | None = None,
    shortlist: Front | pd.DataFrame | None = None,
    seeds: pd.DataFrame | None = None,
    attainment: pd.DataFrame | Mapping[str, Any] | None = None,
) -> Path:
    """Write the review page of ``front`` to ``path`` (see :func:`build_report` for the options)."""
    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm"):
        raise DataError(f"{path}: the review page is an HTML file; give a name ending in .html")
    text = build_report(
        front,
        history=history,
        evaluations=evaluations,
        shortlist=shortlist,
        seeds=seeds,
        attainment=attainment,
    )
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


# -------------------------------------------------------------------------------- values
def _fmt(value: Any) -> str:
    return _format.value(value)


def _unit(front: Front, name: str) -> str:
    return front.units.get(name, "") or ""


def _heading(front: Front, name: str) -> dict[str, str]:
    """A column heading: the name, and the unit the template shows beside it in brackets."""
    return {"name": str(name), "unit": str(_unit(front, name))}


def _naming(front: Front) -> str:
    """One sentence on how the page names a design, the same name pick, the notebook and the files use."""
    column = front.identity_column()
    if column == "eval_id":
        return (
            "A design is named by its evaluation number, the eval_id column of front.csv, as pick "
            "and the notebook name it."
        )
    if column == ROW_COLUMN:
        return "A design is named by its data row in the table it came from (the data_row column)."
    if column is not None:
        return f"A design is named by its {column}."
    return "A design is named by its row in the front's file, counting from 1."


def _fmt_id(value: Any) -> str:
    # an identity is a name, not a quantity: whole, without thousands separators
    return str(value)


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _number_or_none(value: Any) -> float | None:
    if isinstance(value, bool | np.bool_):
        return None
    if isinstance(value, int | float | np.integer | np.floating):
        value = float(value)
        return value if math.isfinite(value) else None
    return None


def _marks(front: Front) -> dict[str, Any]:
    """The knee, the agreement of knee methods and the first pick of every other method."""
    out: dict[str, Any] = {"knee": None, "knees": {}, "picks": {}, "methods": {}}
    if len(front) < 3:
        return out
    out["methods"] = dict(_choose.METHODS)
    try:
        out["knees"] = _choose.knee_agreement(front)
        out["knee"] = out["knees"].get("knee")
        picks = _choose.all_picks(front)
    except (DataError, ValueError) as exc:
        out["error"] = str(exc)
        return out
    out["picks"] = {m: r for m, r in picks.items() if m not in _choose.KNEE_METHODS}
    return out


def _shortlisted(front: Front, shortlist: Front | pd.DataFrame | None) -> dict[str, Any] | None:
    """The shortlisted designs as (number in pick order, row of the front), and how they were chosen."""
    if shortlist is None:
        return None
    if isinstance(shortlist, Front):
        theirs = [(o.name, o.goal) for o in shortlist.objectives]
        ours = [(o.name, o.goal) for o in front.objectives]
        if theirs != ours:
            raise DataError(
                f"shortlist: its objectives {theirs} differ from the front's {ours}; "
                "give a shortlist made from this run's front"
            )
        table, settings = shortlist.table, dict(shortlist.info.shortlist or {})
    elif isinstance(shortlist, pd.DataFrame):
        table, settings = shortlist, {}
    else:
        raise DataError(
            f"shortlist: got a {type(shortlist).__name__}; expected a Front or a table of designs"
        )
    if len(table) == 0:
        raise DataError("shortlist: holds no designs; shortlist at least one design of the front")
    if "pick_order" in table.columns:
        order = pd.to_numeric(table["pick_order"], errors="coerce")
        if order.isna().any():
            position = int(np.flatnonzero(order.isna().to_numpy())[0])
            raise DataError(
                f"shortlist: row {position + 1} column 'pick_order': expected a whole number, "
                f"got {table['pick_order'].iloc[position]!r}"
            )
        table = table.iloc[np.argsort(order.to_numpy(), kind="stable")]
    values = objective_matrix(table, front.objectives, where="shortlist")
    points = front.points()
    scale = np.where(np.ptp(points, axis=0) > 0, np.ptp(points, axis=0), 1.0)
    designs: list[tuple[int, int]] = []
    for position in range(len(table)):
        record = table.iloc[position]
        row = _find_on_front(front, record, values[position], points, scale)
        if row is None:
            shown = ", ".join(
                f"{o.name} {_fmt(float(v))}"
                for o, v in zip(front.objectives, values[position], strict=True)
            )
            raise DataError(
                f"shortlist: design {position + 1} ({shown}) is not on this front; "
                "give a shortlist made from this run's front"
            )
        if row not in [r for _, r in designs]:
            designs.append((len(designs) + 1, row))
    return {"designs": designs, "settings": settings}


def _find_on_front(front: Front, record, values, points, scale) -> int | None:
    """The front row of a shortlisted design: by front_row, then eval_id, then its objective values."""
    same = np.all(np.abs(points - values) <= 1e-9 * scale, axis=1)
    if "front_row" in record.index:
        number = _number_or_none(record["front_row"])
        valid = number is not None and number == int(number) and 1 <= number <= len(front)
        if valid and same[int(number) - 1]:
            return int(number) - 1
    if "eval_id" in record.index and "eval_id" in front.table.columns:
        found = np.flatnonzero(front.table["eval_id"].to_numpy() == record["eval_id"])
        if len(found) and same[found[0]]:
            return int(found[0])
    found = np.flatnonzero(same)
    return int(found[0]) if len(found) else None


def _seed_spread(front: Front, seeds: pd.DataFrame | None) -> dict[str, Any] | None:
    """The seeds table with the median, lowest and highest single-seed hypervolume."""
    if seeds is None:
        return None
    if "hypervolume" not in seeds.columns or len(seeds) == 0:
        raise DataError(
            "seeds: expected one row a seed with a 'hypervolume' column (as in seeds.csv), "
            f"got columns {', '.join(map(str, seeds.columns)) or 'none'} and {len(seeds)} rows"
        )
    hv = pd.to_numeric(seeds["hypervolume"], errors="coerce").to_numpy(dtype=float)
    known = hv[np.isfinite(hv)]
    merged = front.info.hypervolume
    if merged is None and front.reference is not None:
        merged = front.hypervolume()
    box = (
        hypervolume_box(front.points(), front.reference, front.maximise)
        if front.reference is not None
        else math.nan
    )
    return {
        "box": box,
        "table": seeds,
        "n": len(seeds),
        "median": float(np.median(known)) if len(known) else None,
        "min": float(known.min()) if len(known) else None,
        "max": float(known.max()) if len(known) else None,
        "merged": merged,
    }


def _grouped(picks: Mapping[str, int]) -> list[tuple[int, list[str]]]:
    """Methods grouped by the row they pick, largest group first, then by row."""
    return sorted(_choose.agreeing_groups(picks), key=lambda item: (-len(item[1]), item[0]))


def _method_labels(marks: dict[str, Any]) -> dict[int, list[str]]:
    """Row to the methods that pick it: the knee first, then the compromise methods."""
    labels: dict[int, list[str]] = {}
    if marks["knee"] is not None:
        labels.setdefault(int(marks["knee"]), []).append("knee")
    for row, methods in _grouped(marks["picks"]):
        labels.setdefault(int(row), []).extend(methods)
    return labels


def _figures(front: Front, history, evaluations, marks, listed, attainment) -> dict[str, str]:
    """The page's figures as SVG text from :func:`tradewise.plots.to_svg`, by name."""
    knee, info = marks["knee"], front.info
    picks = {", ".join(methods): row for row, methods in _grouped(marks["picks"]) if row != knee}
    drawings = {
        "front": (
            lambda: plots.plot_front(
                front, evaluations=evaluations, knee=knee, picks=picks or None
            ),
            "The front with the knee and the compromise picks marked",
        ),
        "parallel": (
            lambda: plots.plot_parallel(front, highlight=knee, variables=_few_variables(front)),
            "Parallel coordinates of the front",
        ),
    }
    if history is not None and len(history):
        budget = info.settings.get("evaluations")
        drawings["history"] = (
            lambda: plots.plot_history(history, stop_reason=info.stop_reason, budget=budget),
            "Hypervolume and front size against evaluations",
        )
    if listed:
        rows = [row for _, row in listed["designs"]]
        drawings["shortlist"] = (
            lambda: plots.plot_front(front, evaluations=evaluations, knee=knee, shortlist=rows),
            "The whole front with the shortlisted designs numbered",
        )
    if attainment is not None and len(front.objectives) == 2:
        objectives = [replace(o, unit=_unit(front, o.name) or o.unit) for o in front.objectives]
        drawings["attainment"] = (
            lambda: plots.plot_attainment(attainment, objectives),
            "Attainment surfaces of the seeds",
        )
    figures: dict[str, str] = {}
    for name, (draw, label) in drawings.items():
        # a figure that cannot be drawn (values near the float limit) is left out; the tables remain
        with contextlib.suppress(DataError):
            figures[name] = plots.to_svg(draw(), prefix=name, label=label)
    return figures


def _few_variables(front: Front) -> bool | list[str]:
    # beyond about ten axes the lines become unreadable, so only the objectives are drawn then
    present = [v for v in front.variables if v in front.table.columns]
    return present if 0 < len(present) + len(front.objectives) <= 10 else False


# -------------------------------------------------------------------------------- parts
# Each function below gives one part of the page as plain values (strings, numbers, lists and
# dicts of them) for the template of the same name; None or an empty value leaves a part out.
def _masthead(front: Front) -> dict[str, str]:
    names = ", ".join(
        f"{o.name} ({'lower' if o.goal == 'min' else 'higher'} is better)" for o in front.objectives
    )
    finished = front.info.finished
    when = ""
    if isinstance(finished, int | float):
        when = f" Run finished {_dt.datetime.fromtimestamp(finished, _dt.UTC):%Y-%m-%d %H:%M UTC}."
    return {"names": names, "when": when}


def _cautions(front: Front) -> dict[str, Any]:
    """The safety sentence (for a case that touches structures, packs or heat) and the case file's cautions."""
    domains = safety_domains(front)
    return {
        "safety": _safety_sentence(domains) if domains else None,
        "text": str(front.info.cautions or "").strip(),
    }


def _safety_sentence(domains: Sequence[str]) -> str:
    return (
        f"This case touches {' and '.join(domains)}. Every number on this page is a screening estimate from "
        "the designer's own model, not a verified design: before anything is built, bought or put in service, "
        "a chosen design must be checked against the applicable codes and standards by a qualified, licensed "
        "professional."
    )


def _facts(
    front: Front, listed: dict[str, Any] | None, spread: dict[str, Any] | None
) -> list[tuple[str, str]]:
    """The headline numbers as (value, what it counts)."""
    info = front.info
    items = [(_fmt(len(front)), "designs on the front")]
    if listed:
        items.append((_fmt(len(listed["designs"])), "designs on the shortlist"))
    if spread:
        items.append((_fmt(spread["n"]), "independent runs (seeds), merged"))
    for value, label in ((info.n_evals, "evaluations of the model"), (info.n_gen, "generations")):
        if value is not None:
            items.append((_fmt(value), label))
    share = front.hypervolume_share() if front.reference is not None else math.nan
    if math.isfinite(share):
        items.append(
            (
                _format.share(share),
                "of the box from the best values to the reference point, covered",
            )
        )
    if info.n_failed:
        items.append((_fmt(info.n_failed), "evaluations failed"))
    return items


def _case(front: Front) -> dict[str, Any]:
    """The case: description, objectives, variables and constraints as tables of text."""
    info = front.info
    reference = (
        list(front.reference) if front.reference is not None else [None] * len(front.objectives)
    )
    objectives = [
        [
            str(o.name),
            "make as low as possible" if o.goal == "min" else "make as high as possible",
            str(_unit(front, o.name) or o.unit or "\u2014"),
            _fmt(o.worst),
            _fmt(ref),
        ]
        for o, ref in zip(front.objectives, reference, strict=True)
    ]
    variables = []
    for v in info.design_space:
        kind = v.kind
        if kind == "discrete" or (kind == "real" and v.options):
            allowed = ", ".join(_fmt(o) for o in v.options)
            if len(v.options) > 12:
                allowed = f"{len(v.options)} sizes from {_fmt(v.low)} to {_fmt(v.high)}"
        elif kind in ("real", "integer"):
            allowed = f"{_fmt(v.low)} to {_fmt(v.high)}"
        elif kind == "choice":
            allowed = ", ".join(map(str, v.options))
        elif kind == "flag":
            allowed = "yes or no"
        else:
            allowed = "\u2014"
        variables.append([str(v.name), str(kind), allowed, str(v.unit or "\u2014")])
    constraints = []
    for c in info.constraint_limits:
        bounds = []
        if c.min is not None:
            bounds.append(f"at least {_fmt(c.min)}")
        if c.max is not None:
            bounds.append(f"at most {_fmt(c.max)}")
        constraints.append([str(c.name), " and ".join(bounds) or "\u2014", str(c.unit or "\u2014")])
    return {
        "description": str(info.description or "").strip(),
        "case_file": str(info.case_file) if info.case_file else None,
        "case_hash": str(info.case_hash or ""),
        "objectives": objectives,
        "variables": variables,
        "variable_names": ", ".join(map(str, front.variables)) if front.variables else None,
        "constraints": constraints,
        "constraint_names": ", ".join(map(str, front.constraints)) if front.constraints else None,
    }


def _card(front: Front, row: int, heading: str, *, also: str = "", knee: bool = False) -> dict:
    """One design as a card: its objective and variable values, the methods that ``also`` pick it, its rates."""
    record = front.table.iloc[int(row)]

    def value(name: str) -> dict[str, str]:
        return {"name": str(name), "value": _fmt(record[name]), "unit": str(_unit(front, name))}

    return {
        "heading": heading,
        "knee": knee,
        "objectives": [value(o.name) for o in front.objectives],
        "variables": [value(name) for name in front.variables if name in front.table.columns],
        "also": also,
        "rates": _rates(front, row),
    }


def _rates(front: Front, row: int) -> list[str]:
    if len(front) < 2:
        return []
    try:
        rates = tradeoff_rates(front, int(row))
    except (DataError, ValueError):
        return []
    lines = []
    for _, rate in rates.iterrows():
        if int(rate["neighbour"]) >= 0:
            lines.append(f"to {front.design_name(int(rate['neighbour']))}: {rate['text']}")
        else:
            lines.append(f"locally: {rate['text']}")
    return lines


def _shortlist(
    front: Front, listed: dict[str, Any] | None, marks: dict[str, Any]
) -> dict[str, Any] | None:
    """The shortlist in pick order: how it was made, a table and a card a design."""
    if not listed:
        return None
    designs, settings = listed["designs"], listed["settings"]
    made_from = settings.get("n_front")
    others = _method_labels(marks)
    rows = [
        [str(number), front.design_name(row), ", ".join(others.get(row, []))]
        + [_fmt(front.table.iloc[row][o.name]) for o in front.objectives]
        for number, row in designs
    ]
    cards = [
        _card(
            front, row, f"{number}. {front.design_name(row)}", also=", ".join(others.get(row, []))
        )
        for number, row in designs
    ]
    return {
        "n": len(designs),
        "were": "were" if len(designs) != 1 else "was",
        "n_front": len(front),
        "how": _shortlist_how(settings),
        "made_from": (
            _fmt(int(made_from))
            if isinstance(made_from, int | float) and int(made_from) != len(front)
            else None
        ),
        "knee": marks["knee"] is not None,
        "heads": [_heading(front, o.name) for o in front.objectives],
        "rows": rows,
        "numeric": [0, *range(3, 3 + len(front.objectives))],
        "cards": cards,
    }


def _shortlist_how(settings: Mapping[str, Any]) -> str:
    """How a shortlist was chosen, from the settings its export records."""
    bits = []
    if settings.get("method"):
        bits.append(f"the {settings['method']} method")
    for key, word in (("weights", "weights"), ("target", "target")):
        value = settings.get(key)
        if isinstance(value, Mapping) and value:
            bits.append(f"{word} " + ", ".join(f"{k} {_fmt(v)}" for k, v in value.items()))
    limits = settings.get("limits") or []
    if limits:
        bits.append("limits " + ", ".join(map(str, limits)))
    return "; ".join(bits)


#: What the figure of the front shows, by the number of objectives (four standing for four or more).
_SHAPES = {
    3: "Left: the front in three dimensions; right: each pair of objectives.",
    4: "Each panel shows two objectives against each other.",
}


def _picks(front: Front, marks: dict[str, Any]) -> dict[str, Any]:
    """The knee and the compromise designs: what the knee methods say, a table, cards and the methods."""
    entries: list[tuple[int, list[str]]] = []
    if marks["knee"] is not None:
        knee_methods = [m for m, r in marks["knees"].items() if r == marks["knee"]]
        entries.append((marks["knee"], ["knee"] + [m for m in knee_methods if m != "knee"]))
    for row, methods in _grouped(marks["picks"]):
        if row == marks["knee"]:
            entries[0][1].extend(methods)
        else:
            entries.append((row, methods))
    agree = disagree = None
    if marks["knees"]:
        groups = _grouped(marks["knees"])
        if len(groups) == 1:
            agree = {"methods": ", ".join(groups[0][1]), "row": front.design_name(groups[0][0])}
        else:
            disagree = "; ".join(f"{', '.join(ms)} at {front.design_name(r)}" for r, ms in groups)
    cards = []
    for k, (row, _methods) in enumerate(entries):
        knee = k == 0 and marks["knee"] is not None
        heading = f"{'Knee design' if knee else 'Compromise design'}: {front.design_name(row)}"
        cards.append(_card(front, row, heading, knee=knee))
    return {
        "error": marks.get("error"),
        "few": len(front) < 3,
        "agree": agree,
        "disagree": disagree,
        "knee": marks["knee"] is not None,
        "no_knee": not (marks["knees"] or marks.get("error") or len(front) < 3),
        "knee_margin": f"{_choose.KNEE_MARGIN:g}",
        "shape": _SHAPES.get(min(len(front.objectives), 4), ""),
        "heads": [_heading(front, o.name) for o in front.objectives],
        "rows": [
            [front.design_name(row), ", ".join(methods)]
            + [_fmt(front.table.iloc[int(row)][o.name]) for o in front.objectives]
            for row, methods in entries
        ],
        "numeric": list(range(2, 2 + len(front.objectives))),
        "cards": cards,
        "methods": [
            (m, str(marks["methods"].get(m, ""))) for _, methods in entries for m in methods
        ],
    }


def _run(
    front: Front, history, spread: dict[str, Any] | None, evaluations: pd.DataFrame | None = None
) -> dict[str, Any]:
    """How the search ran: its message, its settings and counts as (label, value), and the seeds."""
    info, settings = front.info, front.info.settings
    several = bool(spread) or info.n_seeds > 1
    each = " (each seed)" if several else ""
    together = " (all seeds together)" if several else ""
    entries = []
    if info.algorithm:
        entries.append(("method", str(info.algorithm)))
    for label, key, unit in (
        ("evaluation budget" + each, "evaluations", ""),
        ("designs per generation", "population", ""),
        ("generation limit", "generations", ""),
        ("time limit", "time_limit", " s"),
    ):
        if settings.get(key):
            entries.append((label, _fmt(settings[key]) + unit))
    if settings.get("stall_generations"):
        entries.append((
            "stall rule",
            f"stop when the front gains less than {_fmt(settings.get('stall_tolerance'))} of its hypervolume, "
            f"judged on its own scale, over {_fmt(settings['stall_generations'])} generations",
        ))  # fmt: skip
    if several and info.seeds is not None:
        entries.append(("seeds", ", ".join(_fmt(v) for v in info.seeds.seeds)))
    elif info.seed is not None:
        entries.append(("seed", _fmt(info.seed)))
    for label, value in (
        ("evaluations used" + together, info.n_evals),
        ("generations" + together, info.n_gen),
    ):
        if value is not None:
            entries.append((label, _fmt(value)))
    if info.stop_reason:
        entries.append(("why it stopped", str(info.stop_reason)))
    if info.n_failed is not None:
        entries.append(("failed evaluations", _failed_text(info.n_failed, evaluations)))
    if info.n_cached:
        n = int(info.n_cached)
        said = f"{n} design{'s' if n != 1 else ''} seen before {'were' if n != 1 else 'was'}"
        entries.append(("served from the archive", said + " not evaluated again"))
    if front.reference is not None:
        ref = ", ".join(
            f"{o.name} {_format.quantity(r, o.unit)}"
            for o, r in zip(front.objectives, front.reference, strict=True)
        )
        source = f" ({info.reference_source})" if info.reference_source else ""
        entries.append((
            "hypervolume reference point",
            ref + source + "; a corner beyond the worst design in every objective that "
            "only bounds the measure, not a design or a limit",
        ))  # fmt: skip
        hv = info.hypervolume if info.hypervolume is not None else front.hypervolume()
        share = front.hypervolume_share()
        if math.isfinite(share):
            entries.append((
                "hypervolume",
                f"{_format.share(share)} of the box from the front's best values to the reference point "
                f"(raw value {_fmt(hv)}, in the product of the objectives' units)",
            ))  # fmt: skip
    started, finished = info.started, info.finished
    if (
        isinstance(started, int | float)
        and isinstance(finished, int | float)
        and finished >= started
    ):
        entries.append(("run time", _format.seconds(finished - started)))
    if info.versions:
        entries.append(("software", ", ".join(f"{k} {v}" for k, v in info.versions.items())))
    per_seed = history is not None and "seed" in history.columns and history["seed"].nunique() > 1
    return {
        "message": str(info.message) if info.message else None,
        "entries": entries,
        "per_seed": per_seed,
        "no_history": history is None,
        "seeds": _seeds(front, spread) if spread else None,
    }


#: Columns of seeds.csv shown on the page, with their headings.
_SEED_COLUMNS = {
    "seed": "seed",
    "status": "stopped because",
    "evaluations": "evaluations",
    "generations": "generations",
    "failed": "failed",
    "front_size": "designs on its front",
    "hypervolume": "share of the merged front's box",
}


def _failed_text(n_failed: Any, evaluations: pd.DataFrame | None) -> str:
    """The failed evaluations told apart by kind when the archive's evaluations are at hand."""
    plain = f"{_fmt(n_failed)} (stored with their message and treated as infeasible)"
    told = failures_text(evaluations) if n_failed and evaluations is not None else ""
    if not told:
        return plain
    return (
        f"{told}; each is stored with its message and design (failed.csv) and treated as infeasible"
    )


def _seeds(front: Front, spread: dict[str, Any]) -> dict[str, Any]:
    """The spread across seeds in words, and the seeds table."""
    n = spread["n"]
    text = (
        f"The front on this page merges {n} independent run{'s' if n != 1 else ''} of the same case, "
        "each with its own seed; a design is on it when no design of any run beats it."
    )
    if spread["median"] is not None:
        box = spread["box"]
        if math.isfinite(box):
            text += (
                " Measured on the same reference point, the single runs cover "
                f"{_format.share(spread['median'] / box)} (median), from {_format.share(spread['min'] / box)} "
                f"to {_format.share(spread['max'] / box)}, of the box from the merged front's best values to "
                "the reference point"
            )
        else:
            text += (
                f" Measured on the same reference point, the single runs reach a hypervolume of "
                f"{_fmt(spread['median'])} (median), from {_fmt(spread['min'])} to {_fmt(spread['max'])}"
            )
        if spread["median"] > 0:
            share = (spread["max"] - spread["min"]) / spread["median"]
            text += f", a spread of {share:.1%} of the median"
        if spread["merged"] is not None and math.isfinite(box):
            text += f"; the merged front covers {_format.share(spread['merged'] / box)}"
        text += (
            ". A small spread says the search found much the same front from every start; a large one says "
            "more evaluations or more seeds would likely still change it."
        )
    table = spread["table"]
    shown = [c for c in _SEED_COLUMNS if c in table.columns]
    return {
        "n": n,
        "text": text,
        "heads": [_SEED_COLUMNS[c] for c in shown],
        "rows": [
            [
                _format.share(float(v) / spread["box"])
                if c == "hypervolume"
                and math.isfinite(spread["box"])
                and _number_or_none(v) is not None
                else _fmt(_plain(v))
                for c, v in zip(shown, record, strict=True)
            ]
            for record in table[shown].itertuples(index=False)
        ],
        "numeric": [k for k, c in enumerate(shown) if c != "status"],
        "many_objectives": len(front.objectives) > 2,
    }


def _binds(front: Front, evaluations: pd.DataFrame | None) -> dict[str, Any]:
    """What pins the front, and for the limit that binds most, what loosening it would give."""
    from tradewise import diagnose

    found = diagnose.what_pins(front)
    answer, rule = [], None
    limit = next((f for f in found if f.kind == "limit"), None)
    if limit is not None:
        rule = diagnose.loosening_rule(front, limit)
    if rule is not None and evaluations is not None and "status" in evaluations.columns:
        try:
            answer = diagnose.what_if(evaluations, front, [rule]).lines()
        except DataError:
            answer = []
    return {"lines": diagnose.pins_lines(front), "rule": rule, "answer": answer}


#: Fronts up to this many designs are shown (and printed) in full; longer ones fold away.
_OPEN_FRONT_ROWS = 60


def _representatives(
    front: Front, marks: dict[str, Any], listed: dict[str, Any] | None
) -> dict[str, Any] | None:
    """The few designs that stand for a long front (none when the front is short enough to read)."""
    n = front.info.settings.get("representatives") or 20
    if len(front) <= max(int(n), 1) or any(
        c in front.table.columns for c in _represent.REPRESENTATIVE_COLUMNS
    ):
        return None
    chosen = _represent.representatives_table(front, int(n))
    order = np.argsort(front.points()[chosen["front_row"].to_numpy() - 1, 0], kind="stable")
    if front.objectives[0].maximise:
        order = order[::-1]
    positions = (chosen["front_row"].to_numpy() - 1)[order]
    reasons = chosen["chosen_as"].to_numpy()[order]
    table = _front_table(front, marks, listed, positions=positions, brief=True)
    for row, reason in zip(table["rows"], reasons, strict=True):
        row["reason"] = str(reason)
    table["n_front"] = _fmt(len(front))
    return table


def _front_table(
    front: Front,
    marks: dict[str, Any],
    listed: dict[str, Any] | None,
    *,
    positions: Sequence[int] | None = None,
    brief: bool = False,
) -> dict[str, Any]:
    """Every design of the front: the columns in page order, and a row a design with its tags.

    A cell holds its shown text and, for a number, the full value the sort
    script orders by (None for text).
    """
    objectives = front.objective_names
    variables = [v for v in front.variables if v in front.table.columns and v not in objectives]
    constraints = [
        c for c in front.constraints if c in front.table.columns and c not in objectives + variables
    ]
    named = set(objectives + variables + constraints)
    ident = front.identity_column()
    trailing = [c for c in ("eval_id", "generation") if c in front.table.columns and c != ident]
    others = [
        c
        for c in front.table.columns
        if c not in named and c not in trailing and c not in _BOOKKEEPING and c != ident
    ]
    # the representative set keeps to what a design is and does; its other outputs are in the CSV
    columns = objectives + variables + constraints + ([] if brief else others + trailing)
    labels = _method_labels(marks)
    for number, row in (listed or {}).get("designs", []):
        labels.setdefault(int(row), []).insert(0, f"shortlist {number}")
    rows = []
    ids = front.design_ids()
    shown = front.table[columns]
    positions = range(len(front)) if positions is None else [int(p) for p in positions]
    for position, record in zip(
        positions, shown.iloc[list(positions)].itertuples(index=False, name=None), strict=True
    ):
        cells = []
        for value in record:
            number = _number_or_none(value)
            cells.append((_fmt(value), None if number is None else repr(number)))
        name = _plain(ids[position])
        number = _number_or_none(name)
        rows.append(
            {
                "number": _fmt_id(name),
                "sort": None if number is None else repr(name if isinstance(name, int) else number),
                "tags": labels.get(position, []),
                "cells": cells,
            }
        )
    goals = "; ".join(
        f"{o.name}: {'lower' if o.goal == 'min' else 'higher'} is better" for o in front.objectives
    )
    return {
        "n": _fmt(len(front)),
        # a front that prints on a page or two is shown; a longer one folds away (front.csv has it)
        "open": len(front) <= _OPEN_FRONT_ROWS,
        "goals": goals,
        "heads": [_heading(front, column) for column in columns],
        "rows": rows,
        "naming": _naming(front),
    }


def _assumptions(front: Front) -> list[str]:
    info = front.info
    items = [
        "Every number comes from the designer's model as the case file describes it; the front is only as "
        "good as that model and its inputs.",
        "The front holds the best designs this search evaluated. The genetic search does not prove that no better "
        "design exists; a larger budget or another seed may move the front.",
        "Constraints are hard limits: a design that breaks one by any amount is left off the front. Evaluations that "
        "failed (an error, a timeout or a missing number) count as infeasible.",
    ]
    if front.reference is not None:
        source = f" ({info.reference_source})" if info.reference_source else ""
        items.append(
            "The hypervolume is measured against a fixed reference point"
            + source
            + "; it compares "
            "fronts of the same case and reference, not designs across cases."
        )
    items.append(
        "Knee and compromise picks scale each objective by its range on this front (best to worst), so "
        "they can change when designs are added or removed, and they weigh the objectives equally "
        "unless weights were given."
    )
    if len(front.objectives) == 2:
        items.append(
            "Trade-off rates compare a design with its neighbours on the front, in the objectives' own units."
        )
    else:
        items.append(
            "With three or more objectives, trade-off rates are read from a plane fitted through a design and "
            "its nearest neighbours, with the other objectives held; they are local estimates."
        )
    return items


def _footer(front: Front, generated: _dt.datetime) -> dict[str, str]:
    version = front.info.versions.get("tradewise")
    return {
        "made": f"tradewise {version}" if version else "tradewise",
        "when": generated.strftime("%Y-%m-%d %H:%M UTC"),
    }
