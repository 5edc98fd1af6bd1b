"""The review page: one self-contained HTML file about a front, to send before a design meeting.

The page carries its figures as inline SVG, its styles and its one small
sorting script inline, and a Content-Security-Policy that forbids loading
anything from elsewhere, so it opens the same with or without a network.
Every piece of text that comes from a case file or a table is HTML-escaped.
"""

from __future__ import annotations

import base64
import contextlib
import datetime as _dt
import hashlib
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import replace
from html import escape
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from tradewise import choose as _choose
from tradewise import plots
from tradewise.errors import DataError
from tradewise.front import Front, objective_matrix, tradeoff_rates

__all__ = ["build_report", "write_report", "safety_domains"]

#: Words that mark a case as touching structures, electrical packs or heat
#: (matched as whole words in the title, description, cautions, names and units).
_DOMAIN_WORDS: dict[str, tuple[str, ...]] = {
    "structures": (
        "beam",
        "beams",
        "girder",
        "girders",
        "bridge",
        "footbridge",
        "truss",
        "trusses",
        "column",
        "columns",
        "frame",
        "structural",
        "structure",
        "stress",
        "stresses",
        "deflection",
        "buckling",
        "weld",
        "welded",
        "load",
        "loads",
        "kN",
        "MPa",
        "GPa",
        "kPa",
    ),
    "electrical packs": (
        "battery",
        "batteries",
        "cell",
        "cells",
        "lithium",
        "li-ion",
        "pack",
        "packs",
        "charging",
        "Wh",
        "kWh",
        "mAh",
        "voltage",
    ),
    "heat": (
        "heat",
        "thermal",
        "temperature",
        "temperatures",
        "fin",
        "fins",
        "cooling",
        "coolant",
        "fan",
        "K/W",
        "degC",
        "°C",
        "W/(m^2 K)",
    ),
}

#: Stand-ins for section and figure numbers, numbered in page order once the page is put together.
#: Escaped user text cannot contain them, since escaping turns "<" into "&lt;".
_SECTION = "<!--section-number-->"
_FIGURE = "<!--figure-number-->"

#: Columns a shortlist export adds in front of the designs' own columns.
_SHORTLIST_COLUMNS = ("pick_order", "front_row")

#: Columns of the archive that say how an evaluation ran, not what the design is.
_BOOKKEEPING = frozenset(
    {"duration", "worker", "cached", "message", "status", "run_id", "feasible", "violation"}
)

_SORT_SCRIPT = """
(function () {
  var table = document.getElementById("front-table");
  if (!table) { return; }
  var heads = table.tHead.rows[0].cells;
  function key(cell) {
    var v = cell.getAttribute("data-value");
    if (v !== null && v !== "" && !isNaN(Number(v))) { return [0, Number(v)]; }
    return [1, cell.textContent.trim().toLowerCase()];
  }
  function sortBy(index) {
    var head = heads[index];
    var down = head.getAttribute("aria-sort") === "ascending";
    for (var i = 0; i < heads.length; i++) { heads[i].removeAttribute("aria-sort"); }
    head.setAttribute("aria-sort", down ? "descending" : "ascending");
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.sort(function (a, b) {
      var x = key(a.cells[index]), y = key(b.cells[index]);
      var order = x[0] - y[0] || (x[1] < y[1] ? -1 : x[1] > y[1] ? 1 : 0);
      return down ? -order : order;
    });
    rows.forEach(function (row) { body.appendChild(row); });
  }
  Array.prototype.forEach.call(heads, function (head, index) {
    var button = head.querySelector("button");
    if (button) { button.addEventListener("click", function () { sortBy(index); }); }
  });
  table.classList.add("sortable");
})();
""".strip()

_CSS = """
:root { --ink: #1f1f24; --muted: #5b5b66; --line: #d9d9df; --paper: #ffffff; --wash: #f4f5f8;
        --blue: #1c4f82; --amber: #e08a00; --warn: #fff4df; --warn-line: #c77700; }
* { box-sizing: border-box; }
html { background: var(--wash); }
body { margin: 0 auto; max-width: 1080px; padding: 0 28px 48px; background: var(--paper); color: var(--ink);
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }
header.masthead { padding: 28px 0 18px; border-bottom: 3px solid var(--blue); }
.kicker { margin: 0; text-transform: uppercase; letter-spacing: .08em; font-size: 12px; color: var(--muted); }
h1 { margin: 4px 0 6px; font-size: 27px; line-height: 1.2; overflow-wrap: anywhere; }
h2 { margin: 34px 0 10px; font-size: 20px; border-bottom: 1px solid var(--line); padding-bottom: 4px; }
h2 .num { color: var(--blue); margin-right: .45em; }
h3 { margin: 20px 0 6px; font-size: 16px; }
p.lede { margin: 0; color: var(--muted); }
.facts { display: grid; grid-template-columns: repeat(auto-fit, minmax(150px, 1fr)); gap: 10px; margin: 18px 0 6px; }
.fact { border: 1px solid var(--line); border-left: 4px solid var(--blue); padding: 8px 10px; }
.fact b { display: block; font-size: 20px; }
.fact span { color: var(--muted); font-size: 12.5px; }
.caution { background: var(--warn); border: 1px solid var(--warn-line); border-left: 6px solid var(--warn-line);
           padding: 10px 14px; margin: 16px 0; }
.caution strong { display: block; margin-bottom: 2px; }
.caution p { margin: 4px 0; white-space: pre-line; }
table { border-collapse: collapse; width: 100%; margin: 6px 0 12px; font-size: 13.5px; }
th, td { border-bottom: 1px solid var(--line); padding: 4px 8px; text-align: left; vertical-align: top; }
th { background: var(--wash); font-weight: 600; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.scroll { overflow-x: auto; max-height: 560px; overflow-y: auto; border: 1px solid var(--line); }
.scroll table { margin: 0; }
.scroll thead th { position: sticky; top: 0; z-index: 1; }
th button { all: unset; cursor: pointer; display: block; width: 100%; }
th button:focus-visible { outline: 2px solid var(--blue); }
table.sortable th button::after { content: " \\2195"; color: var(--muted); font-weight: 400; }
th[aria-sort="ascending"] button::after { content: " \\2191"; color: var(--ink); }
th[aria-sort="descending"] button::after { content: " \\2193"; color: var(--ink); }
tr.marked td { background: #fff7e8; }
.tag { display: inline-block; padding: 0 6px; border-radius: 3px; font-size: 12px; border: 1px solid var(--warn-line);
       background: var(--warn); white-space: nowrap; margin: 1px 2px 1px 0; }
figure { margin: 14px 0 18px; break-inside: avoid; page-break-inside: avoid; }
figure svg { display: block; width: 100%; height: auto; max-height: 640px; }
figcaption { color: var(--muted); font-size: 13px; margin-top: 4px; }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(320px, 1fr)); gap: 10px; margin: 10px 0; }
.pick { border: 1px solid var(--line); border-top: 3px solid var(--ink); padding: 8px 12px; font-size: 14px;
        break-inside: avoid; page-break-inside: avoid; }
.pick.knee { border-top-color: var(--amber); }
.pick.listed { border-top-color: var(--blue); }
.pick h3 { margin: 0 0 4px; font-size: 15px; }
.pick p { margin: 4px 0; }
.pick p.label { margin-top: 8px; font-weight: 600; font-size: 13px; }
.pick ul { margin: 2px 0; padding-left: 18px; }
dl.methods dd { color: var(--ink); }
ul.plain { padding-left: 20px; }
.muted { color: var(--muted); }
dl.run { display: grid; grid-template-columns: max-content 1fr; gap: 3px 16px; margin: 6px 0 12px; }
dl.run dt { color: var(--muted); }
dl.run dd { margin: 0; overflow-wrap: anywhere; }
footer { margin-top: 40px; padding-top: 8px; border-top: 1px solid var(--line); color: var(--muted); font-size: 12.5px; }
@media print {
  @page { size: A4; margin: 14mm 12mm 16mm; }
  html, body { background: #fff; }
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  header.masthead { padding-top: 0; }
  h2 { break-after: avoid; page-break-after: avoid; margin-top: 20px; }
  h3 { break-after: avoid; page-break-after: avoid; }
  .scroll { max-height: none; overflow: visible; border: 0; }
  .scroll thead th { position: static; }
  table { font-size: 8.5pt; }
  thead { display: table-header-group; }
  tr { break-inside: avoid; page-break-inside: avoid; }
  table.sortable th button::after { content: ""; }
  figure svg { max-height: 185mm; }
  .caution, tr.marked td, .tag, th, .fact { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  section.front-table { break-before: page; page-break-before: always; }
  .screen { display: none; }
}
""".strip()


# --------------------------------------------------------------------------------- public
def safety_domains(front: Front) -> list[str]:
    """The safety-relevant domains a front's case touches (structures, electrical packs, heat).

    Whole words are looked for in the title, description, cautions, column
    names and units recorded with the front.
    """
    meta = front.meta
    parts = [str(meta.get(k) or "") for k in ("title", "description", "cautions")]
    parts += [str(c) for c in front.table.columns] + [str(u) for u in front.units.values()]
    parts += [str(o.name) for o in front.objectives] + [str(o.unit) for o in front.objectives]
    text = " " + " ".join(parts) + " "
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
        The whole front, with the run's description in ``front.meta`` (as
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
        ``meta["shortlist"]`` for how they were chosen). Each is found on the
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
    >>> table = pd.DataFrame({"cost": [1.0, 2, 4], "mass": [5.0, 3, 2]})
    >>> front = Front.from_table(table, [Objective("cost"), Objective("mass")], meta={"title": "A <b> test"})
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
    meta = front.meta
    title = str(meta.get("title") or "Untitled trade-off study")
    generated = generated or _dt.datetime.now(_dt.UTC)
    marks = _marks(front)
    listed = _shortlisted(front, shortlist)
    spread = _seed_spread(front, seeds)
    figures = _figures(front, history, evaluations, marks, listed, attainment)
    script_hash = base64.b64encode(hashlib.sha256(_SORT_SCRIPT.encode("utf-8")).digest()).decode(
        "ascii"
    )
    csp = (
        "default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
        f"script-src 'sha256-{script_hash}'; base-uri 'none'; form-action 'none'"
    )
    body = [
        _masthead(front, title),
        _caution_box(front),
        _facts(front, listed, spread),
        _case_section(front),
        _shortlist_section(front, listed, marks, figures),
        _picks_section(front, marks, figures),
        _run_section(front, history, figures, spread),
        _table_section(front, marks, listed),
        _assumptions_section(front),
        _cautions_section(front),
        _footer(front, generated),
    ]
    page = _numbered("\n".join(part for part in body if part))
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            f'<meta http-equiv="Content-Security-Policy" content="{csp}">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            '<meta name="referrer" content="no-referrer">',
            f"<title>{_e(title)} \u2014 review</title>",
            f"<style>\n{_CSS}\n</style>",
            "</head>",
            "<body>",
            page,
            f"<script>{_SORT_SCRIPT}</script>",
            "</body>",
            "</html>",
            "",
        ]
    )


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


# -------------------------------------------------------------------------------- pieces
def _e(value: Any) -> str:
    return escape(str(value), quote=True)


def _fmt(value: Any) -> str:
    if value is None:
        return "\u2014"
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        value = float(value)
        if not math.isfinite(value):
            return "\u2014"
        if value != 0 and not 1e-4 <= abs(value) < 1e9:
            return f"{value:.5g}"
        return np.format_float_positional(
            value, precision=5, unique=True, fractional=False, trim="-"
        )
    return str(value)


def _unit(front: Front, name: str) -> str:
    return front.units.get(name, "") or ""


def _header(front: Front, name: str) -> str:
    unit = _unit(front, name)
    return f'{_e(name)} <span class="muted">[{_e(unit)}]</span>' if unit else _e(name)


def _row(row: int) -> str:
    return f"row {int(row) + 1}"


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


def _numbered(text: str) -> str:
    """Number the sections and figures in the order they appear on the page."""
    for stand_in in (_SECTION, _FIGURE):
        parts = text.split(stand_in)
        text = parts[0] + "".join(f"{k}{part}" for k, part in enumerate(parts[1:], start=1))
    return text


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
        table, settings = shortlist.table, dict(shortlist.meta.get("shortlist") or {})
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
                f"{o.name} {_fmt(float(v))}" for o, v in zip(front.objectives, values[position], strict=True)
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
    merged = front.meta.get("hypervolume")
    if merged is None and front.reference is not None:
        merged = front.hypervolume()
    return {
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


def _figures(front: Front, history, evaluations, marks, listed, attainment) -> dict[str, str]:
    figures: dict[str, str] = {}

    def add(name: str, draw, label: str) -> None:
        # a figure that cannot be drawn (values near the float limit) is left out; the tables remain
        with contextlib.suppress(DataError):
            figures[name] = plots.to_svg(draw(), prefix=name, label=label)

    picks = {
        ", ".join(methods): row for row, methods in _grouped(marks["picks"]) if row != marks["knee"]
    }
    add(
        "front",
        lambda: plots.plot_front(front, evaluations=evaluations, knee=marks["knee"], picks=picks or None),
        "The front with the knee and the compromise picks marked",
    )
    add(
        "parallel",
        lambda: plots.plot_parallel(front, highlight=marks["knee"], variables=_few_variables(front)),
        "Parallel coordinates of the front",
    )
    if history is not None and len(history):
        budget = (front.meta.get("settings") or {}).get("evaluations")
        add(
            "history",
            lambda: plots.plot_history(history, stop_reason=front.meta.get("stop_reason"), budget=budget),
            "Hypervolume and front size against evaluations",
        )
    if listed:
        shortlisted = [row for _, row in listed["designs"]]
        add(
            "shortlist",
            lambda: plots.plot_front(front, evaluations=evaluations, knee=marks["knee"], shortlist=shortlisted),
            "The whole front with the shortlisted designs numbered",
        )
    if attainment is not None and len(front.objectives) == 2:
        objectives = [
            replace(o, unit=_unit(front, o.name) or o.unit) for o in front.objectives
        ]
        add(
            "attainment",
            lambda: plots.plot_attainment(attainment, objectives),
            "Attainment surfaces of the seeds",
        )
    return figures


def _few_variables(front: Front) -> bool | list[str]:
    # beyond about ten axes the lines become unreadable, so only the objectives are drawn then
    present = [v for v in front.variables if v in front.table.columns]
    return present if 0 < len(present) + len(front.objectives) <= 10 else False


def _masthead(front: Front, title: str) -> str:
    meta = front.meta
    names = ", ".join(
        f"{o.name} ({'lower' if o.goal == 'min' else 'higher'} is better)" for o in front.objectives
    )
    finished = meta.get("finished")
    when = ""
    if isinstance(finished, int | float):
        when = (
            " Run finished "
            + _dt.datetime.fromtimestamp(finished, _dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
            + "."
        )
    return (
        '<header class="masthead">'
        '<p class="kicker">Design review \u00b7 trade-off study</p>'
        f'<h1 id="title">{_e(title)}</h1>'
        f'<p class="lede">Weighing {_e(names)}.{_e(when)}</p>'
        "</header>"
    )


def _caution_box(front: Front) -> str:
    domains = safety_domains(front)
    cautions = str(front.meta.get("cautions") or "").strip()
    if not domains and not cautions:
        return ""
    lines = ['<aside class="caution" role="note"><strong>Read before deciding</strong>']
    if domains:
        lines.append(f"<p>{_e(_safety_sentence(domains))}</p>")
    elif cautions:
        lines.append(
            "<p>The case file carries cautions; they are repeated in full at the end of this page.</p>"
        )
    lines.append("</aside>")
    return "".join(lines)


def _safety_sentence(domains: Sequence[str]) -> str:
    return (
        f"This case touches {' and '.join(domains)}. Every number on this page is a screening estimate from "
        "the designer's own model, not a verified design: before anything is built, bought or put in service, "
        "a chosen design must be checked against the applicable codes and standards by a qualified, licensed "
        "professional."
    )


def _facts(front: Front, listed: dict[str, Any] | None, spread: dict[str, Any] | None) -> str:
    meta = front.meta
    items = [(_fmt(len(front)), "designs on the front")]
    if listed:
        items.append((_fmt(len(listed["designs"])), "designs on the shortlist"))
    if spread:
        items.append((_fmt(spread["n"]), "independent runs (seeds), merged"))
    if meta.get("n_evals") is not None:
        items.append((_fmt(meta.get("n_evals")), "evaluations of the model"))
    if meta.get("n_gen") is not None:
        items.append((_fmt(meta.get("n_gen")), "generations"))
    hv = meta.get("hypervolume")
    if hv is None and front.reference is not None:
        hv = front.hypervolume()
    if hv is not None:
        items.append((_fmt(hv), "hypervolume of the front"))
    if meta.get("n_failed"):
        items.append((_fmt(meta.get("n_failed")), "evaluations failed"))
    return (
        '<div class="facts">'
        + "".join(f'<div class="fact"><b>{_e(v)}</b><span>{_e(t)}</span></div>' for v, t in items)
        + "</div>"
    )


def _table(
    headers: Sequence[str],
    rows: Sequence[Sequence[str]],
    *,
    numeric: Sequence[int] = (),
    css_class: str | None = None,
) -> str:
    head = "".join(f"<th>{h}</th>" for h in headers)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="n">{c}</td>' if k in numeric else f"<td>{c}</td>"
            for k, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    opening = f'<table class="{css_class}">' if css_class else "<table>"
    return f"{opening}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _case_section(front: Front) -> str:
    meta = front.meta
    parts = [f'<section id="case"><h2><span class="num">{_SECTION}</span>The case</h2>']
    description = str(meta.get("description") or "").strip()
    if description:
        parts.append(f'<p style="white-space: pre-line">{_e(description)}</p>')
    if meta.get("case_file"):
        parts.append(
            f'<p class="muted">Case file {_e(meta["case_file"])}, fingerprint {_e(meta.get("case_hash", ""))}.</p>'
        )
    reference = (
        list(front.reference) if front.reference is not None else [None] * len(front.objectives)
    )
    rows = [
        [
            _e(o.name),
            "make as low as possible" if o.goal == "min" else "make as high as possible",
            _e(_unit(front, o.name) or o.unit or "\u2014"),
            _e(_fmt(o.worst)),
            _e(_fmt(ref)),
        ]
        for o, ref in zip(front.objectives, reference, strict=True)
    ]
    parts.append("<h3>Objectives</h3>")
    parts.append(
        _table(
            ["objective", "goal", "unit", "worst acceptable (case)", "hypervolume reference"],
            rows,
            numeric=(3, 4),
        )
    )
    space = meta.get("design_space") or []
    if space:
        rows = []
        for v in space:
            kind = v.get("type", "")
            if kind in ("real", "integer"):
                allowed = f"{_fmt(v.get('low'))} to {_fmt(v.get('high'))}"
            elif kind == "choice":
                allowed = ", ".join(map(str, v.get("options") or []))
            elif kind == "flag":
                allowed = "yes or no"
            else:
                allowed = "\u2014"
            rows.append(
                [_e(v.get("name", "")), _e(kind), _e(allowed), _e(v.get("unit") or "\u2014")]
            )
        parts.append("<h3>Variables</h3>")
        parts.append(_table(["variable", "kind", "allowed values", "unit"], rows))
    elif front.variables:
        parts.append("<h3>Variables</h3>")
        parts.append(f"<p>{_e(', '.join(front.variables))}</p>")
    limits = meta.get("constraint_limits") or []
    if limits:
        rows = []
        for c in limits:
            bounds = []
            if c.get("min") is not None:
                bounds.append(f"at least {_fmt(c['min'])}")
            if c.get("max") is not None:
                bounds.append(f"at most {_fmt(c['max'])}")
            rows.append(
                [
                    _e(c.get("name", "")),
                    _e(" and ".join(bounds) or "\u2014"),
                    _e(c.get("unit") or "\u2014"),
                ]
            )
        parts.append("<h3>Constraints</h3>")
        parts.append(_table(["constraint", "must be", "unit"], rows))
    elif front.constraints:
        parts.append("<h3>Constraints</h3>")
        parts.append(f"<p>{_e(', '.join(front.constraints))}</p>")
    else:
        parts.append(
            '<p class="muted">The case has no constraints beyond the variables\u2019 ranges.</p>'
        )
    parts.append("</section>")
    return "".join(parts)


def _design_values(front: Front, row: int) -> str:
    record = front.table.iloc[int(row)]
    bits = []
    for o in front.objectives:
        unit = _unit(front, o.name)
        bits.append(
            f"{_e(o.name)} = <b>{_e(_fmt(record[o.name]))}</b>{(' ' + _e(unit)) if unit else ''}"
        )
    return "; ".join(bits)


def _variable_values(front: Front, row: int) -> str:
    record = front.table.iloc[int(row)]
    bits = []
    for name in front.variables:
        if name in front.table.columns:
            unit = _unit(front, name)
            bits.append(f"{_e(name)} = {_e(_fmt(record[name]))}{(' ' + _e(unit)) if unit else ''}")
    return "; ".join(bits)


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
            lines.append(f"to {_row(int(rate['neighbour']))}: {rate['text']}")
        else:
            lines.append(f"locally: {rate['text']}")
    return lines


def _card(front: Front, row: int, *, kind: str, heading: str, rates_label: str, also: str = "") -> str:
    """One design as a card: its objective and variable values, ``also`` (HTML), then its trade-off rates."""
    parts = [f'<div class="{kind}"><h3>{heading}</h3>', f"<p>{_design_values(front, row)}</p>"]
    variables = _variable_values(front, row)
    if variables:
        parts.append(f'<p class="muted">{variables}</p>')
    parts.append(also)
    rates = _rates(front, row)
    if rates:
        parts.append(
            f'<p class="label">{rates_label}</p><ul>' + "".join(f"<li>{_e(t)}</li>" for t in rates) + "</ul>"
        )
    parts.append("</div>")
    return "".join(parts)


def _shortlist_section(
    front: Front, listed: dict[str, Any] | None, marks: dict[str, Any], figures: Mapping[str, str]
) -> str:
    if not listed:
        return ""
    designs, settings = listed["designs"], listed["settings"]
    n = len(designs)
    parts = [
        f'<section id="shortlist"><h2><span class="num">{_SECTION}</span>The shortlist</h2>',
        f"<p>{n} of the {len(front)} designs on the front {'were' if n != 1 else 'was'} shortlisted "
        "to carry forward. They are numbered in the order they were picked; rows are numbered as in "
        "front.csv, and the table of the whole front below tags them too.</p>",
    ]
    how = _shortlist_how(settings)
    if how:
        parts.append(f'<p class="muted">Settings when the shortlist was written: {_e(how)}.</p>')
    made_from = settings.get("n_front")
    if isinstance(made_from, int | float) and int(made_from) != len(front):
        parts.append(
            f'<p class="muted">The shortlist was made from a front of {_e(_fmt(int(made_from)))} designs; '
            f"this front has {len(front)}. Its designs were found on this front by their values.</p>"
        )
    if "shortlist" in figures:
        knee = " The knee is the amber diamond." if marks["knee"] is not None else ""
        parts.append(
            f'<figure id="figure-shortlist">{figures["shortlist"]}<figcaption>Figure {_FIGURE}. The whole front '
            f"(dark blue dots) with the shortlisted designs ringed and numbered in pick order.{knee}"
            "</figcaption></figure>"
        )
    others = _method_labels(marks)
    heads = ["#", "design", "also"] + [_header(front, o.name) for o in front.objectives]
    rows = []
    for number, row in designs:
        record = front.table.iloc[row]
        rows.append(
            [f"<b>{number}</b>", _row(row), _e(", ".join(others.get(row, [])))]
            + [_e(_fmt(record[o.name])) for o in front.objectives]
        )
    numeric = (0,) + tuple(range(3, 3 + len(front.objectives)))
    parts.append(_table(heads, rows, numeric=numeric, css_class="shortlist"))
    parts.append('<div class="cards">')
    for number, row in designs:
        also = f"<p>Also picked by: {_e(', '.join(others[row]))}.</p>" if others.get(row) else ""
        parts.append(
            _card(front, row, kind="pick listed", heading=f"{number}. {_row(row)}", also=also,
                  rates_label="Trade-off rates on the whole front")
        )  # fmt: skip
    parts.append("</div></section>")
    return "".join(parts)


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


def _method_labels(marks: dict[str, Any]) -> dict[int, list[str]]:
    """Row to the methods that pick it: the knee first, then the compromise methods."""
    labels: dict[int, list[str]] = {}
    if marks["knee"] is not None:
        labels.setdefault(int(marks["knee"]), []).append("knee")
    for row, methods in _grouped(marks["picks"]):
        labels.setdefault(int(row), []).extend(methods)
    return labels


def _picks_section(front: Front, marks: dict[str, Any], figures: Mapping[str, str]) -> str:
    parts = [f'<section id="picks"><h2><span class="num">{_SECTION}</span>Designs worth discussing</h2>']
    if marks.get("error"):
        parts.append(f'<p class="muted">No designs could be picked: {_e(marks["error"])}</p>')
    elif len(front) < 3:
        parts.append(
            '<p class="muted">The front has fewer than three designs; all of them are listed in the table below.</p>'
        )
    entries: list[tuple[int, list[str]]] = []
    if marks["knee"] is not None:
        knee_methods = [m for m, r in marks["knees"].items() if r == marks["knee"]]
        entries.append((marks["knee"], ["knee"] + [m for m in knee_methods if m != "knee"]))
    for row, methods in _grouped(marks["picks"]):
        if row == marks["knee"]:
            entries[0][1].extend(methods)
        else:
            entries.append((row, methods))
    if marks["knees"]:
        groups = _grouped(marks["knees"])
        if len(groups) == 1:
            parts.append(
                f"<p>The knee methods ({_e(', '.join(groups[0][1]))}) all point at "
                f"<b>{_row(groups[0][0])}</b>: near it, a small gain in one objective costs a lot in another.</p>"
            )
        else:
            said = "; ".join(f"{', '.join(ms)} at {_row(r)}" for r, ms in groups)
            parts.append(
                f"<p>The knee methods disagree ({_e(said)}); the front has no single sharp bend, "
                "so treat the knee as one reasonable design among several.</p>"
            )
    if "front" in figures:
        n_obj = len(front.objectives)
        shape = (
            "Each panel shows two objectives against each other."
            if n_obj > 3
            else "Left: the front in three dimensions; right: each pair of objectives."
            if n_obj == 3
            else ""
        )
        parts.append(
            f'<figure id="figure-front">{figures["front"]}<figcaption>Figure {_FIGURE}. The front (dark blue dots) over the '
            "other evaluations (faint grey dots; crosses are infeasible or failed designs). The knee is the amber "
            f"diamond, other picks are hollow markers. {shape}</figcaption></figure>"
        )
    if entries:
        heads = ["design", "picked by"] + [_header(front, o.name) for o in front.objectives]
        rows = []
        for row, methods in entries:
            record = front.table.iloc[int(row)]
            rows.append(
                [f"<b>{_row(row)}</b>", _e(", ".join(methods))]
                + [_e(_fmt(record[o.name])) for o in front.objectives]
            )
        numeric = tuple(range(2, 2 + len(front.objectives)))
        parts.append(_table(heads, rows, numeric=numeric, css_class="picks"))
        parts.append('<div class="cards">')
        for k, (row, _methods) in enumerate(entries):
            is_knee = k == 0 and marks["knee"] is not None
            heading = "Knee design" if is_knee else "Compromise design"
            parts.append(
                _card(front, row, kind="pick knee" if is_knee else "pick", heading=f"{heading}: {_row(row)}",
                      rates_label="Trade-off rates")
            )  # fmt: skip
        parts.append("</div>")
        used = [m for _, methods in entries for m in methods]
        explained = "".join(
            f"<dt>{_e(m)}</dt><dd>{_e(marks['methods'].get(m, ''))}</dd>" for m in used
        )
        parts.append(f'<h3>How each method chooses</h3><dl class="run methods">{explained}</dl>')
    if "parallel" in figures:
        parts.append(
            f'<figure id="figure-parallel">{figures["parallel"]}<figcaption>Figure {_FIGURE}. Every design on the front as '
            "one line across the objectives (better is up on every objective axis) and the variables; the knee "
            "design is drawn in amber.</figcaption></figure>"
        )
    parts.append("</section>")
    return "".join(parts)


def _run_section(
    front: Front, history, figures: Mapping[str, str], spread: dict[str, Any] | None
) -> str:
    meta = front.meta
    settings = meta.get("settings") or {}
    several = bool(spread) or (meta.get("n_seeds") or 0) > 1
    each = " (each seed)" if several else ""
    together = " (all seeds together)" if several else ""
    parts = [f'<section id="run"><h2><span class="num">{_SECTION}</span>How the search ran</h2>']
    if meta.get("message"):
        parts.append(f"<p>{_e(meta['message'])}</p>")
    items = []

    def add(label: str, value: Any) -> None:
        if value is not None and value != "":
            items.append(f"<dt>{_e(label)}</dt><dd>{_e(value)}</dd>")

    add("method", meta.get("algorithm"))
    add(
        "evaluation budget" + each,
        _fmt(settings.get("evaluations")) if settings.get("evaluations") else None,
    )
    add(
        "designs per generation",
        _fmt(settings.get("population")) if settings.get("population") else None,
    )
    add(
        "generation limit",
        _fmt(settings.get("generations")) if settings.get("generations") else None,
    )
    add(
        "time limit",
        f"{_fmt(settings.get('time_limit'))} s" if settings.get("time_limit") else None,
    )
    if settings.get("stall_generations"):
        add(
            "stall rule",
            f"stop when the hypervolume gains less than {_fmt(settings.get('stall_tolerance'))} "
            f"(relative) over {_fmt(settings.get('stall_generations'))} generations",
        )
    if several and meta.get("seeds"):
        add("seeds", ", ".join(_fmt(v) for v in meta["seeds"]))
    else:
        add("seed", _fmt(meta.get("seed")) if meta.get("seed") is not None else None)
    add(
        "evaluations used" + together,
        _fmt(meta.get("n_evals")) if meta.get("n_evals") is not None else None,
    )
    add("generations" + together, _fmt(meta.get("n_gen")) if meta.get("n_gen") is not None else None)
    add("why it stopped", meta.get("stop_reason"))
    if meta.get("n_failed") is not None:
        add(
            "failed evaluations",
            f"{_fmt(meta.get('n_failed'))} (stored with their message and treated as infeasible)",
        )
    if meta.get("n_cached"):
        n_cached = int(meta.get("n_cached"))
        add(
            "served from the archive",
            f"{n_cached} design{'s' if n_cached != 1 else ''} seen before {'were' if n_cached != 1 else 'was'} "
            "not evaluated again",
        )
    if front.reference is not None:
        ref = ", ".join(
            f"{o.name} {_fmt(r)}" for o, r in zip(front.objectives, front.reference, strict=True)
        )
        add(
            "hypervolume reference point",
            ref + (f" ({meta['reference_source']})" if meta.get("reference_source") else ""),
        )
    started, finished = meta.get("started"), meta.get("finished")
    if (
        isinstance(started, int | float)
        and isinstance(finished, int | float)
        and finished >= started
    ):
        add("run time", f"{finished - started:.3g} s")
    versions = meta.get("versions") or {}
    if versions:
        add("software", ", ".join(f"{k} {v}" for k, v in versions.items()))
    if items:
        parts.append(f'<dl class="run">{"".join(items)}</dl>')
    if "history" in figures:
        lines = (
            " One line per seed, each against that seed's own evaluations; a star marks where each seed stopped."
            if history is not None and "seed" in history.columns and history["seed"].nunique() > 1
            else " The star marks where the search stopped."
        )
        parts.append(
            f'<figure id="figure-history">{figures["history"]}<figcaption>Figure {_FIGURE}. Convergence: the hypervolume of '
            "the front (top) and the number of designs on it (bottom) after each generation."
            f"{lines} A curve still rising at its end means more evaluations would likely still "
            "improve the front.</figcaption></figure>"
        )
    elif history is None:
        parts.append(
            '<p class="muted">No generation history was given, so convergence is not shown.</p>'
        )
    if spread:
        parts.append(_seeds_part(front, spread, figures))
    parts.append("</section>")
    return "".join(parts)


#: Columns of seeds.csv shown on the page, with their headings.
_SEED_COLUMNS = {
    "seed": "seed",
    "status": "stopped because",
    "evaluations": "evaluations",
    "generations": "generations",
    "failed": "failed",
    "front_size": "designs on its front",
    "hypervolume": "hypervolume",
}


def _seeds_part(front: Front, spread: dict[str, Any], figures: Mapping[str, str]) -> str:
    n = spread["n"]
    parts = ['<h3 id="seeds">Spread across seeds</h3>']
    text = (
        f"The front on this page merges {n} independent run{'s' if n != 1 else ''} of the same case, "
        "each with its own seed; a design is on it when no design of any run beats it."
    )
    if spread["median"] is not None:
        text += (
            f" Measured on the same reference point, the single runs reach a hypervolume of "
            f"{_fmt(spread['median'])} (median), from {_fmt(spread['min'])} to {_fmt(spread['max'])}"
        )
        if spread["median"] > 0:
            share = (spread["max"] - spread["min"]) / spread["median"]
            text += f", a spread of {share:.1%} of the median"
        if spread["merged"] is not None:
            text += f"; the merged front reaches {_fmt(spread['merged'])}"
        text += (
            ". A small spread says the search found much the same front from every start; a large one says "
            "more evaluations or more seeds would likely still change it."
        )
    parts.append(f"<p>{_e(text)}</p>")
    table = spread["table"]
    shown = [c for c in _SEED_COLUMNS if c in table.columns]
    heads = [_e(_SEED_COLUMNS[c]) for c in shown]
    rows = [[_e(_fmt(_plain(v))) for v in record] for record in table[shown].itertuples(index=False)]
    numeric = tuple(k for k, c in enumerate(shown) if c != "status")
    parts.append(_table(heads, rows, numeric=numeric, css_class="seeds"))
    if "attainment" in figures:
        parts.append(
            f'<figure id="figure-attainment">{figures["attainment"]}<figcaption>Figure {_FIGURE}. Attainment '
            f"surfaces of the {n} runs: the best surface bounds what at least one run reached, the median what at "
            "least half of them reached, the worst what every run reached. The shaded band between best and "
            "worst is where the runs disagree; the narrower it is, the less the front depends on the seed."
            "</figcaption></figure>"
        )
    elif len(front.objectives) > 2:
        parts.append(
            '<p class="muted">With three or more objectives the attainment surfaces are not drawn; for three '
            "objectives they are in attainment.csv beside the front.</p>"
        )
    return "".join(parts)


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _table_section(front: Front, marks: dict[str, Any], listed: dict[str, Any] | None) -> str:
    objectives = front.objective_names
    variables = [v for v in front.variables if v in front.table.columns and v not in objectives]
    constraints = [
        c for c in front.constraints if c in front.table.columns and c not in objectives + variables
    ]
    named = set(objectives + variables + constraints)
    trailing = [c for c in ("eval_id", "generation") if c in front.table.columns]
    others = [
        c
        for c in front.table.columns
        if c not in named and c not in trailing and c not in _BOOKKEEPING
    ]
    columns = objectives + variables + constraints + others + trailing
    labels = _method_labels(marks)
    for number, row in (listed or {}).get("designs", []):
        labels.setdefault(int(row), []).insert(0, f"shortlist {number}")
    heads = [
        '<th scope="col"><button type="button">row</button></th>',
        '<th scope="col"><button type="button">picked by</button></th>',
    ]
    for column in columns:
        heads.append(
            f'<th scope="col"><button type="button">{_header(front, column)}</button></th>'
        )
    body = []
    for position, record in enumerate(front.table[columns].itertuples(index=False, name=None)):
        tags = "".join(f'<span class="tag">{_e(t)}</span>' for t in labels.get(position, []))
        cells = [
            f'<td class="n" data-value="{position + 1}">{position + 1}</td>',
            f"<td>{tags}</td>",
        ]
        for value in record:
            number = _number_or_none(value)
            if number is not None:
                cells.append(
                    f'<td class="n" data-value="{_e(repr(number))}">{_e(_fmt(value))}</td>'
                )
            else:
                cells.append(f"<td>{_e(_fmt(value))}</td>")
        marked = ' class="marked"' if position in labels else ""
        body.append(f"<tr{marked}>{''.join(cells)}</tr>")
    goals = "; ".join(
        f"{o.name}: {'lower' if o.goal == 'min' else 'higher'} is better" for o in front.objectives
    )
    return (
        f'<section id="front" class="front-table"><h2><span class="num">{_SECTION}</span>The front</h2>'
        f"<p>All {len(front)} designs that no other feasible design beats in every objective ({_e(goals)}). "
        'Rows are numbered as in front.csv.<span class="screen"> Click a column heading to sort.</span></p>'
        f'<div class="scroll"><table id="front-table"><thead><tr>{"".join(heads)}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div></section>"
    )


def _number_or_none(value: Any) -> float | None:
    if isinstance(value, bool | np.bool_):
        return None
    if isinstance(value, int | float | np.integer | np.floating):
        value = float(value)
        return value if math.isfinite(value) else None
    return None


def _assumptions_section(front: Front) -> str:
    meta = front.meta
    items = [
        "Every number comes from the designer's model as the case file describes it; the front is only as "
        "good as that model and its inputs.",
        "The front holds the best designs this search evaluated. The genetic search does not prove that no better "
        "design exists; a larger budget or another seed may move the front.",
        "Constraints are hard limits: a design that breaks one by any amount is left off the front. Evaluations that "
        "failed (an error, a timeout or a missing number) count as infeasible.",
    ]
    if front.reference is not None:
        source = f" ({meta['reference_source']})" if meta.get("reference_source") else ""
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
    return (
        f'<section id="assumptions"><h2><span class="num">{_SECTION}</span>Assumptions</h2><ul class="plain">'
        + "".join(f"<li>{_e(t)}</li>" for t in items)
        + "</ul></section>"
    )


def _cautions_section(front: Front) -> str:
    cautions = str(front.meta.get("cautions") or "").strip()
    domains = safety_domains(front)
    parts = [f'<section id="cautions"><h2><span class="num">{_SECTION}</span>Cautions</h2>']
    if domains:
        parts.append(
            f'<div class="caution" role="note"><strong>Screening estimates only</strong><p>'
            f"{_e(_safety_sentence(domains))}</p></div>"
        )
    if cautions:
        parts.append(
            f'<p class="muted">From the case file:</p><div class="caution"><p>{_e(cautions)}</p></div>'
        )
    if not domains and not cautions:
        parts.append(
            "<p>The case file gives no cautions. The results are still estimates from the designer's "
            "model; check a chosen design by test or a detailed analysis before relying on it.</p>"
        )
    parts.append("</section>")
    return "".join(parts)


def _footer(front: Front, generated: _dt.datetime) -> str:
    version = (front.meta.get("versions") or {}).get("tradewise")
    made = f"tradewise {version}" if version else "tradewise"
    return (
        f"<footer>Made by {_e(made)} on {_e(generated.strftime('%Y-%m-%d %H:%M UTC'))}. "
        "This page is self-contained: it loads nothing from a network.</footer>"
    )
