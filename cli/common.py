"""Options and helpers shared by geosim's own subcommands."""
from __future__ import annotations

from collections.abc import Iterable, Sequence

import click

from .main import Session
from .progress import ProgressReporter

spec_argument = click.argument("spec", type=click.Path(dir_okay=False, path_type=str))
set_option = click.option(
    "--set", "overrides", multiple=True, metavar="KEY=VALUE",
    help="Override a run-spec key for this run, e.g. --set simulation.realizations=5 "
         "--set 'grid.cell=[50, 50]' (repeatable; TOML values).")
out_option = click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=str),
                          help="Output folder (created if missing).")
workers_option = click.option("--workers", type=click.IntRange(1), default=None,
                              help="Local worker processes for the realizations (default: the spec's, "
                                   "else every core).")
cluster_option = click.option("--cluster", metavar="ADDRESS", default=None,
                              help="Run the realizations on this Dask scheduler, e.g. tcp://10.0.0.5:8786.")
overwrite_option = click.option("--overwrite", is_flag=True,
                                help="Replace existing outputs, including a finished or different run.")


def session(ctx: click.Context) -> Session:
    """The group's options; marks the command as started so the caution follows it."""
    s = ctx.find_object(Session) or ctx.ensure_object(Session)
    s.started = True
    return s


def load(ctx: click.Context, spec_path: str, overrides: Sequence[str], *, workers: int | None = None,
         cluster: str | None = None):
    """Load and validate the spec with the command line's overrides (a SpecError is
    mapped to exit 2 by the group)."""
    import geosim.config.runspec
    session(ctx)
    values = geosim.config.runspec.parse_overrides(overrides)
    if workers is not None:
        values.update({"simulation.workers": workers, "simulation.cluster": None})
    if cluster is not None:
        values.update({"simulation.cluster": cluster, "simulation.workers": None})
    return geosim.config.runspec.load_spec(spec_path, values)


def reporter(ctx: click.Context) -> ProgressReporter:
    return ProgressReporter(quiet=session(ctx).quiet)


def table(rows: Iterable[tuple[str, str]], title: str | None = None) -> None:
    """Print a two-column table on stdout: the short summary at the end of a command."""
    rows = [(str(a), str(b)) for a, b in rows]
    if title:
        click.echo(title)
    if not rows:
        return
    width = max(len(a) for a, _ in rows)
    for a, b in rows:
        lines = b.splitlines() or [""]
        click.echo(f"  {a:<{width}}  {lines[0]}")
        for more in lines[1:]:
            click.echo(f"  {'':<{width}}  {more}")
