"""The ``tradewise`` command line: thin click commands over the library."""

from __future__ import annotations

import sys

import click

from tradewise.errors import TradewiseError


class _Group(click.Group):
    """Turns every TradewiseError into one ``Error: ...`` line and exit status 2, in one place."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except TradewiseError as exc:
            if ctx.obj and ctx.obj.get("debug"):
                raise
            click.echo(f"Error: {exc}", err=True)
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


@main.command("cases")
def cases_command() -> None:
    """List the example cases that come with tradewise."""
    from tradewise.case import bundled_cases, load_case

    for name, path in bundled_cases().items():
        case = load_case(path)
        click.echo(f"{name:<16} {case.title}")


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

            self.bar = tqdm(total=total, initial=initial, unit="eval", dynamic_ncols=True, leave=True, file=sys.stderr)

    def evaluation(self, row: dict) -> None:
        if self.bar is not None and not row.get("cached"):
            self.bar.update(1)

    def generation(self, row: dict) -> None:
        text = (
            f"gen {row['generation']}  evals {row['evaluations']}  front {row['front_size']}  "
            f"hv {row['hypervolume']:.5g}"
        )
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
        click.echo(f"Front: {len(front)} designs, hypervolume {result.hypervolume:.6g} "
                   f"(reference point {', '.join(f'{r:g}' for r in result.reference)})")
        width = max(len(column_header(o.name, o.unit)) for o in front.objectives)
        for o in front.objectives:
            values = front.table[o.name]
            best, worst = (values.max(), values.min()) if o.maximise else (values.min(), values.max())
            click.echo(f"  {column_header(o.name, o.unit):<{width}}  {o.goal}  best {best:.6g}  worst {worst:.6g}")
    elif result.least_infeasible is not None:
        click.echo("The designs closest to feasibility are in least_infeasible.csv.")
    if result.n_cached:
        click.echo(f"{result.n_cached} design(s) were served from the archive instead of being evaluated again.")
    if result.case.cautions:
        click.echo(f"Caution: {result.case.cautions.strip()}")


def _run_folder(case, out: str | None) -> str:
    import time

    if out:
        return out
    return f"runs/{case.folder.name}-{time.strftime('%Y%m%d-%H%M%S')}"


@main.command("run")
@click.argument("case", metavar="CASE")
@click.option("--out", "out", type=click.Path(file_okay=False), help="Run folder to write (default runs/NAME-TIME).")
@click.option("--seed", type=int, help="Random seed (default from the case).")
@click.option("--evaluations", type=click.IntRange(min=1), help="Budget of model evaluations.")
@click.option("--generations", type=click.IntRange(min=1), help="Stop after this many generations.")
@click.option("--population", type=click.IntRange(min=4), help="Designs per generation.")
@click.option("--time-limit", type=click.FloatRange(min=0, min_open=True), help="Stop after this many seconds.")
@click.option("--store", type=click.Path(dir_okay=False), help="Archive file (default OUT/archive.sqlite).")
@click.option("--workers", type=click.IntRange(min=1), help="Evaluate in this many local processes.")
@click.option("--dask", is_flag=True, help="Start a local Dask cluster of --workers processes.")
@click.option("--scheduler", metavar="ADDRESS", help="Join an existing Dask scheduler, e.g. tcp://host:8786.")
@click.option("--quiet", is_flag=True, help="No progress output.")
def run_command(case, out, seed, evaluations, generations, population, time_limit, store, workers, dask,
                scheduler, quiet) -> None:
    """Search CASE for its best compromises and write a run folder.

    CASE is a case folder, its case.toml, or the name of a bundled case
    (see `tradewise cases`). The run folder gets front.csv, front.json,
    history.csv and the archive of every evaluation.
    """
    from pathlib import Path

    from tradewise.case import load_case
    from tradewise.search import run_study, save_run

    loaded = load_case(case)
    folder = Path(_run_folder(loaded, out))
    store_path = Path(store) if store else folder / "archive.sqlite"
    budget = evaluations or loaded.search.evaluations
    bar = _Progress(budget, quiet=quiet)
    try:
        result = run_study(
            loaded, seed=seed, evaluations=evaluations, generations=generations, population=population,
            time_limit=time_limit, store=store_path, workers=workers, dask=dask, scheduler=scheduler,
            progress=bar.generation, on_evaluation=bar.evaluation,
        )
    finally:
        bar.close()
    written = save_run(result, folder)
    _summary(result)
    click.echo(f"Wrote {', '.join(p.name for p in written.values())} and {store_path.name} to {folder}")
    if result.status == "interrupted":
        sys.exit(130)


@main.command("check")
@click.argument("case", metavar="CASE")
def check_command(case) -> None:
    """Check CASE and evaluate one design in the middle of its ranges."""
    from tradewise.case import load_case
    from tradewise.errors import ModelError
    from tradewise.models import make_model
    from tradewise.search import middle_design

    loaded = load_case(case)
    click.echo(f"{loaded.path}: {loaded!r}")
    design = middle_design(loaded)
    outcome = make_model(loaded)(design)
    units = loaded.units
    for name, value in design.items():
        click.echo(f"  {name} = {value} {units.get(name, '')}".rstrip())
    if not outcome.ok:
        raise ModelError(f"{loaded.path}: the model failed on the middle design: {outcome.message}")
    for name, value in outcome.results.items():
        click.echo(f"  -> {name} = {value} {units.get(name, '')}".rstrip())
    click.echo(f"The case is valid and its model answered in {outcome.duration * 1000:.3g} ms.")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
