"""``geosim explore``: look at the data as geosim will use them."""
from __future__ import annotations

import click

from .common import load, reporter, set_option, spec_argument, table


@click.command("explore", short_help="Read, reproject, decluster and transform the data; print what was found.")
@spec_argument
@set_option
@click.pass_context
def explore(ctx, spec, overrides):
    """Read the samples of the run spec SPEC (points, or drillholes desurveyed and
    composited), put them in the working CRS, decluster and fit the normal-score
    transform; print counts, statistics, the declustering scan and intake notes.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    data = geosim.pipeline.prepare_data(run_spec, progress=reporter(ctx))
    table(geosim.pipeline.describe_data(data), title="samples")
    dc = data.declustering
    if dc is not None:
        rows = [(f"{size:g} m", f"{mean:.4g}" + ("  <- chosen" if size == dc.cell_size else ""))
                for size, mean in zip(dc.cell_sizes, dc.means)]
        table(rows, title="declustering scan (cell size: declustered mean)")
