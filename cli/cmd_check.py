"""``geosim check``: validate a run spec (and read its inputs) without computing anything."""
from __future__ import annotations

import click

from .common import load, reporter, set_option, spec_argument, table


def _print_keys(ctx, param, value):
    if not value or ctx.resilient_parsing:
        return
    import geosim.config.runspec
    click.echo(geosim.config.runspec.reference())
    ctx.exit(0)


@click.command("check", short_help="Validate a run spec and its input files; compute nothing.")
@spec_argument
@set_option
@click.option("--spec-only", is_flag=True, help="Check the spec file only; do not read the input tables.")
@click.option("--keys", is_flag=True, is_eager=True, expose_value=False, callback=_print_keys,
              help="Print every run-spec key with its expected form and default, and exit.")
@click.pass_context
def check(ctx, spec, overrides, spec_only):
    """Validate the run spec SPEC completely, listing every problem with its key path.

    Unless --spec-only is given, also read the input tables and the domain, load the
    variogram model (or a fit's start values), and check that the samples can condition
    the grid, so everything `geosim run` would refuse before computing shows up now
    rather than an hour into a run. Exit code 0 means the run can start; 2 lists what to
    fix; 5 says the grid will not fit in this machine's memory.

    A run spec has the sections [data], [declustering], [transform], [variogram],
    [grid], [domain], [search], [simulation] and [outputs] (and, for several geological
    units, [units] and one [unit.<name>] each); `geosim check --keys`
    lists every key with its expected form and default, and the sample fields'
    run.toml files are complete examples.
    """
    import geosim.config.runspec
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    rows = [("run spec", run_spec.name), ("spec sha256", run_spec.sha256)]
    rows += geosim.pipeline.describe_spec(run_spec)
    if not spec_only and geosim.config.runspec.has_units(run_spec):
        import geosim.units_run
        rows += geosim.units_run.describe_units(geosim.units_run.prepare_units(run_spec, progress=reporter(ctx)))
    elif not spec_only:
        data = geosim.pipeline.prepare_data(run_spec, progress=reporter(ctx))
        grid = geosim.pipeline.make_grid(run_spec, data)
        data.notes.extend(geosim.pipeline.preflight(run_spec, data, grid))
        rows += geosim.pipeline.describe_data(data)
        rows.append(("grid", " x ".join(map(str, grid.shape)) + f" nodes, {grid.n_active} inside the domain"))
    table(rows, title="run spec is valid")
