"""``geosim check``: validate a run spec (and read its inputs) without computing anything."""
from __future__ import annotations

import click

from .common import load, reporter, set_option, spec_argument, table


@click.command("check", short_help="Validate a run spec and its input files; compute nothing.")
@spec_argument
@set_option
@click.option("--spec-only", is_flag=True, help="Check the spec file only; do not read the input tables.")
@click.pass_context
def check(ctx, spec, overrides, spec_only):
    """Validate the run spec SPEC completely, listing every problem with its key path.

    Unless --spec-only is given, also read the input tables and the domain, so bad
    columns or values show up now rather than an hour into a run. Exit code 0 means the
    run can start; 2 lists what to fix.

    A run spec has the sections [data], [declustering], [transform], [variogram],
    [grid], [domain], [search], [simulation] and [outputs]; the README's Usage section
    lists their keys, `python -m pydoc geosim.io.runspec` describes each, and the
    sample fields' run.toml files are complete examples.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    rows = [("run spec", run_spec.name), ("spec sha256", run_spec.sha256)]
    rows += geosim.pipeline.describe_spec(run_spec)
    if not spec_only:
        data = geosim.pipeline.prepare_data(run_spec, progress=reporter(ctx))
        grid = geosim.pipeline.make_grid(run_spec, data)
        rows += geosim.pipeline.describe_data(data)
        rows.append(("grid", " x ".join(map(str, grid.shape)) + f" nodes, {grid.n_active} inside the domain"))
    table(rows, title="run spec is valid")
