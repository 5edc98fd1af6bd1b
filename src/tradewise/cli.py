"""The ``tradewise`` command line: thin click commands over the library.

Over 800 lines because it holds every verb of the command line (eleven of them) with their
option declarations and help texts, which click wants beside the function; each command body is a
few lines over a library call, and the shared pieces (the progress line, the closing summary,
the checks that an output never overwrites an input) sit above the commands that use them.
"""

from __future__ import annotations

import logging
import math
import sys

import click

from tradewise import format as fmt
from tradewise.errors import CaseError, TradewiseError, one_line


class _Group(click.Group):
    """Turns every TradewiseError into one ``Error: ...`` line and exit status 2, in one place."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except TradewiseError as exc:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            text = one_line(str(exc))
            if isinstance(exc, CaseError) and "case.toml" in text:
                text += " (every key of a case file: docs/case-file.md)"
            click.echo(f"Error: {text}", err=True)
            ctx.exit(exc.exit_code)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show full tracebacks for every error.")
@click.version_option(package_name="tradewise")
@click.pass_context
def main(ctx: click.Context, debug: bool) -> None:
    """Find and weigh the best compromises between competing design goals.

    Start with `tradewise cases` to see the bundled examples, then
    `tradewise run heat-sink` to search one of them.
    """
    ctx.obj = {"debug": debug}
    _show_notices()


class _Notices(logging.Handler):
    """Shows the library's notices (such as waiting for a locked archive) as plain lines on standard error."""

    def emit(self, record: logging.LogRecord) -> None:
        click.echo(one_line(record.getMessage()), err=True)


def _show_notices() -> None:
    logger = logging.getLogger("tradewise")
    if not any(isinstance(h, _Notices) for h in logger.handlers):
        logger.addHandler(_Notices(logging.INFO))
        logger.propagate = False


@main.command("cases")
def cases_command() -> None:
    """List the example cases that come with tradewise."""
    from tradewise.case import bundled_cases, load_case

    cases = bundled_cases()
    width = max((len(name) for name in cases), default=0)
    for name, path in cases.items():
        case = load_case(path)
        click.echo(f"{name:<{width}}  {case.title}")


class _Progress:
    """A progress bar on a terminal, plain lines otherwise, nothing with --quiet."""

    def __init__(self, total: int, *, quiet: bool, initial: int = 0) -> None:
        self.quiet = quiet
        self.bar = None
        self.last_line = 0.0
        if quiet:
            return
        if sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(
                total=total,
                initial=initial,
                unit="eval",
                dynamic_ncols=True,
                leave=True,
                file=sys.stderr,
            )

    def evaluation(self, row: dict) -> None:
        if self.bar is not None and not row.get("cached"):
            self.bar.update(1)

    def generation(self, row: dict) -> None:
        text = f"gen {row['generation']}  evals {row['evaluations']}  front {row['front_size']}"
        share = row.get("hypervolume_share")
        if share is not None and share == share:
            text += f"  covers {fmt.share(share)}"
        if self.bar is not None:
            self.bar.set_postfix_str(text, refresh=True)
        elif not self.quiet:
            import time

            now = time.monotonic()
            if now - self.last_line >= 2.0 or row["generation"] == 1:
                click.echo(text, err=True)
                self.last_line = now

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def _summary(result) -> None:
    from tradewise.front import column_header

    click.echo(result.message)
    front = result.front
    if len(front):
        from tradewise.front import hypervolume_problem

        problem = (
            ""
            if math.isfinite(result.hypervolume)
            else hypervolume_problem(
                front.points(), result.reference, front.maximise, names=front.objective_names
            )
            or "the hypervolume is not a finite number"
        )
        share = front.hypervolume_share(result.reference) if not problem else math.nan
        hv = (
            "hypervolume not computable"
            if problem
            else f"covering {fmt.share(share)} of the box from its best values to the reference point"
            if math.isfinite(share)
            else f"hypervolume {fmt.number(result.hypervolume)}"
        )
        point = ", ".join(
            f"{o.name} {fmt.quantity(r, o.unit)}"
            for o, r in zip(front.objectives, result.reference, strict=True)
        )
        if problem or not math.isfinite(share):
            # the run's message already gives the size and share of a front it could measure
            click.echo(f"Front: {len(front)} designs, {hv}.")
        source = result.info.reference_source
        click.echo(
            f"Reference point: {point} ({source + '; ' if source else ''}a corner beyond the worst "
            "design in every objective, used only to measure the front; not a design or a limit)."
        )
        if problem:
            click.echo(f"Note: {problem[0].upper()}{problem[1:]}.")
        width = max(len(column_header(o.name, o.unit)) for o in front.objectives)
        for o in front.objectives:
            values = front.table[o.name]
            best, worst = (
                (values.max(), values.min()) if o.maximise else (values.min(), values.max())
            )
            click.echo(
                f"  {column_header(o.name, o.unit):<{width}}  {o.goal}  "
                f"best {fmt.number(best)}  worst {fmt.number(worst)}"
            )
        from tradewise.diagnose import pins_lines

        click.echo("What pins the front:")
        for line in pins_lines(front):
            click.echo(f"  {line}")
    elif result.least_infeasible is not None:
        click.echo("The designs closest to feasibility are in least_infeasible.csv.")
    if result.n_cached:
        click.echo(
            f"{result.n_cached} proposed design(s) had been evaluated before (in this run or in the "
            "archive) and were reused instead of being evaluated again."
        )
    from tradewise.compare import convergence_advice

    if advice := convergence_advice(result.history):
        click.echo(advice)
    for line in _caution_lines(result.case):
        click.echo(line)


def _caution_lines(case) -> list[str]:
    """The case's own cautions, and for a case that declares what it touches (hazards) the plain
    reminder the review page gives, so that a terminal reader sees it too."""
    lines = []
    if case.cautions:
        lines.append(f"Caution: {case.cautions.strip()}")
    if case.hazards:
        touches = " and ".join(case.hazards)
        lines.append(
            f"This case touches {touches}: its numbers are screening estimates from the model, not a "
            "verified design. Check a chosen design against the applicable codes and standards and "
            "have it reviewed by a qualified, licensed professional before anything is built, bought "
            "or put in service."
        )
    return lines


def _run_folder(case, out: str | None) -> str:
    import time

    if out:
        return out
    return f"runs/{case.folder.name}-{time.strftime('%Y%m%d-%H%M%S')}"


@main.command("run")
@click.argument("case", metavar="CASE")
@click.option(
    "--out",
    "out",
    type=click.Path(file_okay=False),
    help="Run folder to write (default runs/NAME-TIME).",
)
@click.option("--seed", type=int, help="Random seed (default from the case).")
@click.option(
    "--seeds",
    "n_seeds",
    type=click.IntRange(min=1),
    metavar="K",
    help="Make K independent runs with seeds SEED, SEED+1, ... and merge their fronts.",
)
@click.option("--evaluations", type=click.IntRange(min=1), help="Budget of model evaluations.")
@click.option("--generations", type=click.IntRange(min=1), help="Stop after this many generations.")
@click.option("--population", type=click.IntRange(min=4), help="Designs per generation.")
@click.option(
    "--time-limit",
    type=click.FloatRange(min=0, min_open=True),
    help="Stop after this many seconds.",
)
@click.option(
    "--store", type=click.Path(dir_okay=False), help="Archive file (default OUT/archive.sqlite)."
)
@click.option(
    "--workers", type=click.IntRange(min=1), help="Evaluate in this many local processes."
)
@click.option("--dask", is_flag=True, help="Start a local Dask cluster of --workers processes.")
@click.option(
    "--scheduler", metavar="ADDRESS", help="Join an existing Dask scheduler, e.g. tcp://host:8786."
)
@click.option(
    "--representatives",
    type=click.IntRange(min=1),
    metavar="N",
    help="How many designs at most stand for the front in representatives.csv (default from "
    "the case, else 20).",
)
@click.option(
    "--surrogate",
    is_flag=True,
    help="For slow models: fit Gaussian-process models to the evaluations and let them propose "
    "each round's designs (as many as workers), for a good front in a few hundred evaluations.",
)
@click.option("--quiet", is_flag=True, help="No progress output.")
def run_command(
    case,
    out,
    seed,
    n_seeds,
    evaluations,
    generations,
    population,
    time_limit,
    store,
    workers,
    dask,
    scheduler,
    representatives,
    surrogate,
    quiet,
) -> None:
    """Search CASE for its best compromises and write a run folder.

    CASE is a case folder, its case.toml, or the name of a bundled case
    (see `tradewise cases`). The run folder gets front.csv, front.json,
    representatives.csv (a few designs spread over the front, with the
    extremes and the knee, that stand for it in a review), history.csv and
    the archive of every evaluation.
    """
    from pathlib import Path

    from tradewise import search
    from tradewise.case import load_case
    from tradewise.runfolder import save_run

    loaded = load_case(case).with_search(
        representatives=representatives, surrogate=True if surrogate else None
    )
    folder = Path(_run_folder(loaded, out))
    store_path = Path(store) if store else folder / "archive.sqlite"
    budget = evaluations or loaded.search.evaluations
    if n_seeds:
        return _run_seeds(
            loaded,
            n_seeds,
            folder,
            store_path,
            quiet=quiet,
            workers=workers,
            seed=seed,
            evaluations=evaluations,
            generations=generations,
            population=population,
            time_limit=time_limit,
            dask=dask,
            scheduler=scheduler,
        )
    bar = _Progress(budget, quiet=quiet)
    try:
        result = search.run(
            loaded,
            seed=seed,
            evaluations=evaluations,
            generations=generations,
            population=population,
            time_limit=time_limit,
            store=store_path,
            workers=workers,
            dask=dask,
            scheduler=scheduler,
            progress=bar.generation,
            on_evaluation=bar.evaluation,
        )
    finally:
        bar.close()
    written = save_run(result, folder)
    _summary(result)
    click.echo(
        f"Wrote {', '.join(p.name for p in written.values())} and {store_path.name} to {folder}"
    )
    _remove_stale(folder, written.values())
    if result.status == "interrupted":
        click.echo(f"Continue it with: tradewise resume {store_path}", err=True)
        sys.exit(130)


@main.command("resume")
@click.argument("store", metavar="STORE")
@click.option(
    "--run", "run_id", type=click.IntRange(min=1), help="Which run in STORE (default the newest)."
)
@click.option(
    "--evaluations", type=click.IntRange(min=1), help="New total budget, to extend a finished run."
)
@click.option(
    "--out",
    "out",
    type=click.Path(file_okay=False),
    help="Run folder to write (default STORE's folder).",
)
@click.option(
    "--case", "case", metavar="CASE", help="The case, if its folder moved since the run started."
)
@click.option(
    "--workers", type=click.IntRange(min=1), help="Evaluate in this many local processes."
)
@click.option("--dask", is_flag=True, help="Start a local Dask cluster of --workers processes.")
@click.option(
    "--scheduler", metavar="ADDRESS", help="Join an existing Dask scheduler, e.g. tcp://host:8786."
)
@click.option("--quiet", is_flag=True, help="No progress output.")
def resume_command(store, run_id, evaluations, out, case, workers, dask, scheduler, quiet) -> None:
    """Continue an interrupted run from its archive, or extend a finished one.

    STORE is the run folder, or the archive file of the run (archive.sqlite
    in its run folder, or the file given to `run --store`). Nothing already
    evaluated is evaluated again, and a run stopped part-way ends with the
    front it would have had without the stop. The run folder is written
    again.
    """
    from pathlib import Path

    from tradewise import search
    from tradewise.errors import DataError
    from tradewise.runfolder import save_run
    from tradewise.store import open_store

    if Path(store).is_dir():
        if not (Path(store) / "archive.sqlite").is_file():
            raise DataError(
                f"{store}: this folder holds no archive.sqlite; give the archive file the run "
                "wrote (run --store), or the run folder it was written into"
            )
        store = str(Path(store) / "archive.sqlite")
    with open_store(store, create=False) as archive:
        run_id = run_id or archive.latest_run()
        record = archive.run(run_id)
        done = archive.count_evaluations(run_id)
    folder = Path(out) if out else Path(store).parent
    if (record["settings"] or {}).get("seed_set"):
        return _resume_seeds(
            store,
            run_id,
            folder,
            evaluations=evaluations,
            case=case,
            workers=workers,
            dask=dask,
            scheduler=scheduler,
            quiet=quiet,
        )
    status = record.get("status")
    if (
        status in search.STATUS_TEXT
        and status != "interrupted"
        and (evaluations is None or evaluations <= done)
        and all((folder / name).is_file() for name in ("front.csv", "front.json"))
    ):
        search._case_of_run(Path(store), record, case)  # a changed or other case is still refused
        click.echo(
            f"Run {run_id} had already finished ({search.STATUS_TEXT[status]}) after {done:,} "
            f"evaluations: nothing to do, and {folder} was left as it is. To extend the run, give "
            f"--evaluations N with N above {done:,}."
        )
        return
    budget = evaluations or record["settings"]["evaluations"]
    bar = _Progress(max(budget, done), quiet=quiet, initial=done)
    try:
        result = search.resume(
            store,
            run_id=run_id,
            evaluations=evaluations,
            case=case,
            workers=workers,
            dask=dask,
            scheduler=scheduler,
            progress=bar.generation,
            on_evaluation=bar.evaluation,
        )
    finally:
        bar.close()
    written = save_run(result, folder)
    _summary(result)
    click.echo(
        f"Resumed run {run_id}; wrote {', '.join(p.name for p in written.values())} to {folder}"
    )
    if result.status == "interrupted":
        sys.exit(130)


def _resume_seeds(store, run_id, folder, *, quiet: bool, **options) -> None:
    """``resume`` of a run made with --seeds: every seed of the set is finished, and the folder written anew."""
    from pathlib import Path

    from tradewise.repeats import resume_seeds

    click.echo(
        f"Run {run_id} is one of a set of seeds: resuming every unfinished seed of the set.",
        err=True,
    )
    result = resume_seeds(store, run_id=run_id, on_run=_seed_finished(quiet), **options)
    _write_seeds(result, folder, Path(store))


@main.command("check")
@click.argument("case", metavar="CASE")
def check_command(case) -> None:
    """Check CASE and evaluate one design in the middle of its ranges."""
    from tradewise.case import load_case
    from tradewise.errors import ModelError
    from tradewise.models import make_model
    from tradewise.search import middle_design

    loaded = load_case(case)
    click.echo(f"{loaded.path} is a valid case:")
    for line in loaded.plain_lines():
        click.echo(f"  {line}")
    design = middle_design(loaded)
    model = make_model(loaded)
    outcome = model([design])[0] if loaded.batch else model(design)
    units = loaded.units
    click.echo("A design in the middle of every range:")
    for name, value in design.items():
        click.echo(f"  {name} = {fmt.quantity(value, units.get(name))}")
    if not outcome.ok:
        raise ModelError(f"{loaded.path}: the model failed on the middle design: {outcome.message}")
    click.echo(f"The model answered in {fmt.seconds(outcome.duration)}:")
    limits = {c.name: c for c in loaded.constraints}
    for name, value in outcome.results.items():
        text = f"  {name} = {fmt.quantity(value, units.get(name))}"
        if name in limits:
            c = limits[name]
            text += f"  (must be {c.plain()}: {'met' if c.met_by(float(value)) else 'NOT met'})"
        click.echo(text)
    from tradewise.surrogate import MOST_VARIABLES, SLOW_EVALUATION

    if (
        outcome.duration >= SLOW_EVALUATION
        and len(loaded.variables) <= MOST_VARIABLES
        and not loaded.search.surrogate
    ):
        click.echo(
            f"At {fmt.seconds(outcome.duration)} an evaluation, {loaded.search.evaluations} "
            f"evaluations take about {fmt.seconds(outcome.duration * loaded.search.evaluations)}; "
            "`tradewise run CASE --surrogate` fits models to the evaluations and usually finds a "
            "good front in a few hundred."
        )


def _same_file(a, b) -> bool:
    import os

    if a.resolve() == b.resolve():
        return True
    try:
        return os.path.samefile(a, b)  # hard links
    except OSError:
        return False


def _check_out(out, inputs=(), *, with_json: bool = False) -> None:
    """Refuse an --out that would replace one of the command's inputs or a run folder's data.

    Paths are compared resolved (symlinks followed). With ``with_json`` the
    ``.json`` written beside ``out`` is checked as well.
    """
    from pathlib import Path

    from tradewise.errors import DataError
    from tradewise.runfolder import DATA_FILES, is_run_folder

    if out is None:
        return
    targets = [Path(out)] + ([Path(out).with_suffix(".json")] if with_json else [])
    for target in targets:
        for given in inputs:
            if given is not None and _same_file(target, Path(given)):
                also = (
                    "" if target == Path(out) else f" (the .json written beside it, {target.name})"
                )
                raise DataError(
                    f"--out: {out}{also} is the input file {given}; writing there would replace "
                    "it, choose another file"
                )
        resolved = target.resolve()
        if resolved.name in DATA_FILES and is_run_folder(resolved.parent):
            raise DataError(
                f"--out: {target} is the {resolved.name} of the run folder {resolved.parent}, which "
                "holds the run's data; choose another file name"
            )


def _front_inputs(path) -> list:
    """The files that reading the front at ``path`` (a run folder or a CSV) takes in."""
    from pathlib import Path

    path = Path(path)
    table = path / "front.csv" if path.is_dir() else path
    return [table, table.with_suffix(".json")]


@main.command("front")
@click.argument("table", metavar="TABLE.csv")
@click.option(
    "--min",
    "minimise",
    multiple=True,
    metavar="COL",
    help="A column to make small (repeat for more).",
)
@click.option(
    "--max",
    "maximise",
    multiple=True,
    metavar="COL",
    help="A column to make large (repeat for more).",
)
@click.option(
    "--keep", multiple=True, metavar="COL", help="Keep only these other columns (default: all)."
)
@click.option(
    "--id-column",
    metavar="COL",
    help="A column that names each design (e.g. a part number); by default a design is named by "
    "its data row, the first row below the header being 1.",
)
@click.option(
    "--out", type=click.Path(dir_okay=False), help="Write the front here, with its .json beside it."
)
def front_command(table, minimise, maximise, keep, id_column, out) -> None:
    """Keep the rows of TABLE.csv that no other row beats in every objective.

    Name the objectives with --min and --max (at least two in all; the --min
    ones come first); a header such as "mass [g]" can be named as mass. Every
    other column is kept
    unless --keep lists the ones wanted, and a column data_row comes first:
    each design's row in TABLE.csv, the first row below the header being 1
    (unless --id-column names a column of your own). Without --out the front
    is printed as CSV.
    """
    from tradewise.front import column_header, front_from_csv

    _check_out(out, [table], with_json=True)
    front = front_from_csv(
        table, minimise=minimise, maximise=maximise, keep=keep or None, key=id_column
    )
    summary = f"{len(front)} of {front.info.n_rows} rows are on the front"
    if out:
        written = front.to_csv(out)
        click.echo(f"{summary}; wrote {written[0]} and {written[1].name}")
    else:
        shown = front.table.rename(
            columns=lambda c: column_header(str(c), front.units.get(str(c), ""))
        )
        click.echo(shown.to_csv(index=False), nl=False)
        click.echo(summary, err=True)


@main.command("pick")
@click.argument("front_path", metavar="FRONT")
@click.option(
    "--method",
    default="knee",
    show_default=True,
    metavar="[knee|trade-off|kneedle|pseudo-weights|asf|topsis|weighted-sum]",
    help="How to choose (any case; see the list of methods in the output).",
)
@click.option(
    "--weights", metavar="NAME=W,...", help="Importance of each objective, e.g. cost=2,mass=1."
)
@click.option("--target", metavar="NAME=V,...", help="Target values for asf, e.g. cost=900,mass=8.")
@click.option(
    "--limit",
    "limits",
    multiple=True,
    metavar="RULE",
    help='Keep designs with e.g. "mass<=12" (repeat for more).',
)
@click.option(
    "--top",
    default=1,
    show_default=True,
    type=int,
    help="How many designs to show; they differ from each other by more than --tolerance.",
)
@click.option(
    "--tolerance",
    metavar="NAME=AMOUNT,...",
    help="Designs closer than this in every objective count as one, in the objectives' units, "
    "e.g. mass=0.1,stiffness=1 (default 5 % of each objective's range on the front).",
)
@click.option(
    "--min",
    "minimise",
    multiple=True,
    metavar="COL",
    help="For a plain CSV: a column to make small.",
)
@click.option(
    "--max",
    "maximise",
    multiple=True,
    metavar="COL",
    help="For a plain CSV: a column to make large.",
)
@click.option(
    "--id-column",
    metavar="COL",
    help="For a plain CSV: a column that names each design (default: its data row, the first "
    "row below the header being 1).",
)
@click.option(
    "--out",
    type=click.Path(dir_okay=False),
    help="Write the chosen designs to this CSV (with .json).",
)
def pick_command(
    front_path, method, weights, target, limits, top, tolerance, minimise, maximise, id_column, out
) -> None:
    """Point at the designs of FRONT worth discussing and say what each costs.

    FRONT is a run folder, a front CSV with its .json beside it, or any CSV
    with --min/--max. Limits are applied first; then --method chooses among
    the designs left. Weights say how much each objective matters (larger
    means more important); a target is the point asf aims at. With --top,
    the next designs shown are the method's next favourites that differ
    from those already shown by more than --tolerance in some objective,
    never neighbours on the front.

    A design of a run is named by its evaluation number (eval_id); a design
    of a plain CSV by its data row there, the first row below the header
    being 1, or by the column --id-column names.
    """
    import warnings

    from tradewise.choose import NonConvexWarning, choose, describe_choice, method_name
    from tradewise.errors import DataError
    from tradewise.front import front_from_csv, read_front
    from tradewise.limits import parse_values
    from tradewise.represent import distinct_picks, separation

    _check_out(out, _front_inputs(front_path), with_json=True)
    if minimise or maximise:
        front = front_from_csv(front_path, minimise=minimise, maximise=maximise, key=id_column)
    elif id_column:
        raise DataError("--id-column: give it with --min/--max, for a plain CSV")
    else:
        front = read_front(front_path)
    method = method_name(method)
    weights = parse_values(weights, what="--weights") or None
    target = parse_values(target, what="--target") or None
    given = parse_values(tolerance, what="--tolerance")
    gaps = separation(front, given, what="--tolerance")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NonConvexWarning)
        # the whole ranking, so that --top can pass over designs too close to those shown
        ranking = choose(
            front,
            method,
            weights=weights,
            target=target,
            limits=limits,
            top=top if top <= 1 else max(top, len(front)),
        )
    rows = distinct_picks(front, ranking, top=top, tolerance=gaps)
    for line in describe_choice(
        front, rows, method=method, weights=weights, target=target, limits=limits
    ):
        click.echo(line)
    if top > 1:
        click.echo("")
        click.echo(_separation_line(front, gaps, given, top=top, shown=len(rows)))
    for warning in caught:
        if issubclass(warning.category, NonConvexWarning):
            click.echo(f"Note: {warning.message}", err=True)
    from tradewise.diagnose import pins_lines

    click.echo("")
    click.echo("What pins the front:")
    for line in pins_lines(front):
        click.echo(f"  {line}")
    if out:
        from tradewise.runfolder import shortlist_front

        settings = {
            "method": method,
            "weights": weights,
            "target": target,
            "limits": [str(x) for x in limits],
        }
        if top > 1:
            settings["separation"] = gaps
        written = shortlist_front(front, rows, settings=settings).to_csv(out)
        click.echo(f"Wrote {written[0]} and {written[1].name}")


def _separation_line(front, gaps: dict, given: dict, *, top: int, shown: int) -> str:
    """One sentence saying how far apart the designs shown by ``pick --top`` are."""
    from tradewise.represent import DISTINCT_SHARE

    parts = []
    for o in front.objectives:
        amount = fmt.quantity(gaps[o.name], o.unit)
        parts.append(f"{o.name} {amount}{' (given)' if o.name in given else ''}")
    rule = (
        ""
        if len(given) == len(gaps)
        else f"; {fmt.share(DISTINCT_SHARE, 0)} of an objective's range on the front where no "
        "tolerance is given, a rule of thumb of our own"
    )
    first = front.objectives[0].name
    fewer = (
        f" Only {shown} {'design stands' if shown == 1 else 'designs are that far'} apart, "
        f"fewer than the {top} asked for; smaller tolerances (such as --tolerance "
        f"{first}={fmt.number(gaps[first] / 4)}) show designs closer together."
        if shown < top
        else ""
    )
    return (
        f"Separation: each design shown differs from the others by more than "
        f"{' or '.join(parts)}{rule}.{fewer}"
    )


def _run_inputs(run) -> list:
    """The data files of a run folder and of its seeds (or the front CSV and its .json, for a file)."""
    from pathlib import Path

    from tradewise.runfolder import DATA_FILES

    path = Path(run)
    if not path.is_dir():
        return _front_inputs(path)
    folders = [path, *sorted(p for p in (path / "seeds").glob("seed-*") if p.is_dir())]
    return [folder / name for folder in folders for name in sorted(DATA_FILES)]


#: Every figure kind `plot --kind all` tries, in the order drawn.
_PLOT_KINDS = ("front", "parallel", "history", "attainment")


@main.command("plot")
@click.argument("run", metavar="RUN")
@click.option(
    "--kind",
    type=click.Choice([*_PLOT_KINDS, "all"]),
    default="front",
    show_default=True,
    help="front: the best designs over all the others; parallel: one line a design; "
    "history: hypervolume and front size as the search went (a line per seed); "
    "attainment: what the best, median and worst of several seeds reached (run --seeds); "
    "all: every one of these that RUN has the data for.",
)
@click.option(
    "--out",
    type=click.Path(dir_okay=False),
    help="PNG, SVG or PDF file to write (default RUN/KIND.png, or NAME-KIND.png beside a CSV); "
    "with --kind all, each figure's kind is added to the name.",
)
@click.option(
    "--design",
    metavar="N",
    help="Mark design N: its evaluation number (eval_id) in a run, its data row or key in a CSV.",
)
@click.option("--variables", is_flag=True, help="parallel: add an axis for each variable.")
@click.option(
    "--min",
    "minimise",
    multiple=True,
    metavar="COL",
    help="For a plain CSV: a column to make small.",
)
@click.option(
    "--max",
    "maximise",
    multiple=True,
    metavar="COL",
    help="For a plain CSV: a column to make large.",
)
def plot_command(run, kind, out, design, variables, minimise, maximise) -> None:
    """Draw a figure of RUN: a run folder, or a front CSV written by `front` or `pick`.

    A CSV needs its .json beside it, or --min/--max naming its objectives
    (as for pick). The knee design is marked when the choosing methods find
    one; --design marks another. Axes carry each objective's unit and which
    way is better. With --kind all, a figure RUN has no data for is skipped
    with one line saying why.
    """
    from pathlib import Path

    from tradewise.errors import DataError
    from tradewise.plots import save_figure

    path = Path(run)
    is_csv = path.is_file()
    if not is_csv and not path.is_dir():
        raise DataError(
            f"{run}: not a run folder or a front CSV; give the folder that `tradewise run` wrote, "
            "or a CSV written by `front` or `pick`"
        )
    kinds = _PLOT_KINDS if kind == "all" else (kind,)
    targets = {k: _figure_path(path, k, out, is_csv=is_csv, several=kind == "all") for k in kinds}
    for target in targets.values():
        _check_out(target, _run_inputs(run))
    if is_csv:
        from tradewise.front import front_from_csv, read_front

        if minimise or maximise:
            front = front_from_csv(path, minimise=minimise, maximise=maximise)
        else:
            front = read_front(path)
        history = evaluations = None
    else:
        from tradewise.runfolder import read_run

        front, history, evaluations = read_run(run, evaluations="front" in kinds)
    row = None
    if design is not None:
        ids = [str(i) for i in front.design_ids()]
        if design.strip() not in ids:
            shown = ", ".join(ids[:8]) + (", ..." if len(ids) > 8 else "")
            raise DataError(
                f"--design: {design} is not a design of this front; its designs: {shown}"
            )
        row = ids.index(design.strip())
    for k in kinds:
        drawn = _figure(
            k, run, front, history, evaluations, is_csv=is_csv, row=row, variables=variables
        )
        if isinstance(drawn, str):
            if kind != "all":
                raise DataError(drawn)
            click.echo(f"Skipped {k}: {drawn}")
            continue
        click.echo(f"Wrote {save_figure(drawn, targets[k])}")


def _figure_path(path, kind: str, out, *, is_csv: bool, several: bool):
    """Where `plot` writes the figure of ``kind``: --out (its name plus the kind, for several), or beside RUN."""
    from pathlib import Path

    if out:
        out = Path(out)
        return out.with_name(f"{out.stem}-{kind}{out.suffix}") if several else out
    return path.with_name(f"{path.stem}-{kind}.png") if is_csv else path / f"{kind}.png"


def _figure(kind: str, run, front, history, evaluations, *, is_csv: bool, row, variables):
    """The figure of ``kind``, or one sentence saying why RUN cannot give it."""
    from tradewise.plots import TWO_AXES, plot_attainment, plot_kind

    source = "a front CSV holds designs only" if is_csv else f"{run} has no history.csv"
    if kind == "history" and history is None:
        return f"convergence is drawn from a run folder's history.csv, and {source}"
    if kind == "parallel" and len(front.objectives) == 2:
        present = [v for v in front.variables if v in front.table.columns]
        if not present:
            return f"{TWO_AXES}; {run} has no variables to add"
    if kind == "attainment":
        if len(front.objectives) != 2:
            return f"attainment surfaces are drawn for two objectives, and this front has {len(front.objectives)}"
        surfaces = None
        if not is_csv:
            from tradewise.runfolder import read_seeds

            _, surfaces = read_seeds(run, front)
        if surfaces is None:
            where = (
                "a front CSV holds designs only"
                if is_csv
                else (f"{run} has no attainment.csv and no seeds/ folder")
            )
            return (
                f"{where}; attainment surfaces come from several seeds, made with "
                "`tradewise run CASE --seeds K`"
            )
        return plot_attainment(surfaces, front.objectives, title=front.info.title)
    return plot_kind(
        kind,
        front,
        history=history,
        evaluations=evaluations,
        highlight=row,
        variables=variables,
    )


@main.command("report")
@click.argument("run", metavar="RUN")
@click.option(
    "--out", type=click.Path(dir_okay=False), help="HTML file to write (default RUN/review.html)."
)
@click.option(
    "--shortlist",
    "shortlist_path",
    type=click.Path(dir_okay=False),
    metavar="FILE.csv",
    help="Designs chosen to carry forward (from `tradewise pick --out` or the notebook's export).",
)
def report_command(run, out, shortlist_path) -> None:
    """Write one HTML page about the run folder RUN for a design review.

    The page holds the case, how the search ran, the knee and compromise
    designs with their trade-off rates, figures and the whole front. With
    --shortlist it also lists the chosen designs in pick order and rings them
    on the front; for a run made with --seeds it shows the spread across
    seeds. It needs no network to open and prints to a tidy PDF.
    """
    from pathlib import Path

    from tradewise.front import read_front, read_table
    from tradewise.report import write_report
    from tradewise.runfolder import read_run, read_seeds

    _check_out(out, _run_inputs(run) + ([*_front_inputs(shortlist_path)] if shortlist_path else []))
    front, history, evaluations = read_run(run)
    seeds, surfaces = read_seeds(run, front)
    shortlist = None
    if shortlist_path:
        described = Path(shortlist_path).with_suffix(".json").is_file()
        shortlist = read_front(shortlist_path) if described else read_table(shortlist_path)[0]
    path = write_report(
        front,
        Path(out) if out else Path(run) / "review.html",
        history=history,
        evaluations=evaluations,
        shortlist=shortlist,
        seeds=seeds,
        attainment=surfaces,
    )
    click.echo(f"Wrote {path} ({path.stat().st_size // 1024} KiB)")


def _run_seeds(case, n_seeds: int, folder, store_path, *, quiet: bool, workers, **settings) -> None:
    """``run --seeds K``: K runs, their merged front, each seed's own, the attainment surfaces and the spread."""
    from tradewise.repeats import run_seeds

    parallel = bool(
        workers and workers > 1 and not (settings.get("dask") or settings.get("scheduler"))
    )
    budget = (settings.get("evaluations") or case.search.evaluations) * n_seeds
    bar = _Progress(budget, quiet=quiet or parallel)

    try:
        result = run_seeds(
            case,
            n_seeds,
            store=store_path,
            workers=workers,
            progress=bar.generation,
            on_evaluation=bar.evaluation,
            on_run=_seed_finished(quiet),
            **settings,
        )
    finally:
        bar.close()
    _write_seeds(result, folder, store_path)


def _seed_finished(quiet: bool):
    """A line as each seed ends; its hypervolume comes at the end, on the seeds' common reference point."""
    from tradewise.search import STATUS_TEXT

    def finished(run) -> None:
        if not quiet:
            click.echo(
                f"seed {run.seed}: {STATUS_TEXT.get(run.status, run.status)} after {run.n_evals} "
                f"evaluations; front of {len(run.front)} designs",
                err=True,
            )

    return finished


def _remove_stale(folder, written) -> None:
    """Remove what an earlier run left in a re-used folder, and say so."""
    from tradewise.runfolder import remove_stale

    removed = remove_stale(folder, list(written))
    if removed:
        names = ", ".join(p.name for p in removed[:6]) + (", ..." if len(removed) > 6 else "")
        click.echo(
            f"Removed {len(removed)} file(s) an earlier run had left in {folder} ({names}); "
            "its archive was kept."
        )


def _write_seeds(result, folder, store_path) -> None:
    """Write the folder of a set of seeds (merged front, each seed's folder, attainment) and summarise it."""
    from tradewise.runfolder import save_seeds, seed_attainment

    spread = seed_attainment(result)
    written = save_seeds(result, folder, spread=spread)
    from pathlib import Path

    seed_files = [Path(folder) / "seeds" / f"seed-{run.seed}" / "front.json" for run in result.runs]
    _remove_stale(folder, [*written.values(), *seed_files])
    _summary(result)
    from tradewise.front import hypervolume_box

    box = (
        hypervolume_box(result.front.points(), result.reference, result.front.maximise)
        if len(result.front) and result.reference is not None
        else math.nan
    )
    for run, hv in zip(result.runs, result.hypervolumes, strict=True):
        if math.isfinite(box):
            click.echo(
                f"  seed {run.seed}: covers {fmt.share(hv / box)} of the merged front's box "
                "(its best values to the common reference point)"
            )
        else:
            click.echo(
                f"  seed {run.seed}: hypervolume {fmt.number(hv)} on the common reference point"
            )
    for line in spread.lines() if spread is not None else ():
        click.echo(line)
    click.echo(
        f"Wrote {', '.join(p.name for p in written.values())}, seeds/ and {store_path.name} to {folder}"
    )
    if result.status == "interrupted":
        click.echo(f"Continue every seed with: tradewise resume {store_path}", err=True)
        sys.exit(130)


@main.command("whatif")
@click.argument("run", metavar="RUN")
@click.option(
    "--limit",
    "limits",
    multiple=True,
    required=True,
    metavar="RULE",
    help='A limit such as "index>=3.5" or "mass<=5" (repeat for more).',
)
@click.option(
    "--out",
    type=click.Path(dir_okay=False),
    metavar="FILE.csv",
    help="Write the front these limits give to this CSV (with .json).",
)
def whatif_command(run, limits, out) -> None:
    """Say what the front of the run folder RUN would be under other limits.

    No design is evaluated: every design in the run's archive is judged
    again. A limit on one of the case's constraints replaces the case's
    limit on that side (so "index>=3.5" loosens "index >= 4"); a limit on
    any other column is added. The answer says which designs join and leave
    the front, how each objective's best value and the knee move, and how
    little the archive knows where a loosened limit opens new ground.
    """
    from tradewise.diagnose import what_if
    from tradewise.errors import DataError
    from tradewise.runfolder import read_run

    _check_out(out, _run_inputs(run), with_json=True)
    front, _, evaluations = read_run(run)  # for a set of seeds, every seed's evaluations
    if evaluations is None:
        raise DataError(
            f"{run}: no archive of the run's evaluations found beside its front.json; a what-if "
            "needs the archive.sqlite that `tradewise run` writes into the run folder"
        )
    answer = what_if(evaluations, front, limits)
    for line in answer.lines():
        click.echo(line)
    if out:
        written = answer.front.to_csv(out)
        click.echo(f"Wrote {written[0]} and {written[1].name}")


@main.command("compare")
@click.argument("runs", metavar="RUN RUN...", nargs=-1, required=True)
@click.option(
    "--reference",
    "reference",
    type=click.Path(),
    metavar="FRONT.csv",
    help="Measure IGD+ and epsilon against this front (default: the best designs of all RUNs together).",
)
@click.option(
    "--out", type=click.Path(dir_okay=False), help="Also write the table to this CSV file."
)
def compare_command(runs, reference, out) -> None:
    """Compare run folders on one scale and say which did better.

    Each objective is scaled so that 0 is the best value any run reached and
    1 the common reference point. Hypervolume is the share of that box a
    front covers (larger is better); IGD+ and epsilon are distances to the
    reference front in shares of each objective's range (smaller is better).
    A run made with --seeds brings its seed-to-seed spread, which says
    whether a difference is more than the luck of the seed.
    """
    from tradewise.compare import compare_runs

    _check_out(
        out,
        [p for run in runs for p in _run_inputs(run)]
        + (_front_inputs(reference) if reference else []),
    )
    result = compare_runs(runs, reference=reference)
    table = result.table
    width = max(len(str(r)) for r in table["run"])
    click.echo(
        f"{'run':<{width}}  {'designs':>7}  {'evals':>7}  {'failed':>6}  {'hypervolume':>11}  "
        f"{'IGD+':>8}  {'epsilon':>8}  seeds (hypervolume median [min, max])"
    )
    for row in table.to_dict("records"):
        evals = "-" if not math.isfinite(row["evaluations"]) else f"{int(row['evaluations'])}"
        failed = "-" if not math.isfinite(row["failed_share"]) else f"{row['failed_share']:.1%}"
        seeds = ""
        if isinstance(row.get("seeds"), int | float) and math.isfinite(row["seeds"]):
            seeds = (
                f"{int(row['seeds'])}: {fmt.share(row['hv_seed_median'], 2)} "
                f"[{fmt.share(row['hv_seed_min'], 2)}, {fmt.share(row['hv_seed_max'], 2)}]"
            )
        click.echo(
            f"{row['run']:<{width}}  {row['front_size']:>7}  {evals:>7}  {failed:>6}  "
            f"{fmt.share(row['hypervolume'], 2):>11}  {row['igd_plus']:>8.4f}  {row['epsilon']:>8.4f}  {seeds}".rstrip()
        )
    click.echo(
        "Scale: each objective from 0 at the best value reached to 1 at the reference point "
        f"({', '.join(fmt.number(v) for v in result.reference)}); the hypervolume is the share of that "
        f"box covered; IGD+ and epsilon on that scale against {result.reference_set}."
    )
    for line in result.lines:
        click.echo(line)
    if out:
        table.to_csv(out, index=False)
        click.echo(f"Wrote {out}")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
