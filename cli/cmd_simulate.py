"""``geosim simulate``: the realizations alone, resumable."""
from __future__ import annotations

import click

from .common import (cluster_option, load, out_option, overwrite_option, reporter, set_option, spec_argument,
                     table, workers_option)


@click.command("simulate", short_help="Compute the realizations (one GeoTIFF each), resuming an interrupted run.")
@spec_argument
@out_option
@set_option
@workers_option
@cluster_option
@overwrite_option
@click.option("--no-resume", is_flag=True, help="Recompute every realization.")
@click.pass_context
def simulate(ctx, spec, out_dir, overrides, workers, cluster, overwrite, no_resume):
    """Compute the realizations of the run spec SPEC into --out/realizations/, one file
    each, keeping those an interrupted run of the same spec already wrote. Follow with
    `geosim summarize` on the same folder.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides, workers=workers, cluster=cluster)
    progress = reporter(ctx)
    sim = geosim.pipeline.simulate(run_spec, out_dir=out_dir, overwrite=overwrite, resume=not no_resume,
                                   progress=progress)
    progress.close()
    table([("realizations", f"{len(sim.records)} ({len(sim.computed)} computed, {len(sim.kept)} kept)"),
           ("folder", f"{out_dir}/realizations")], title="simulation complete")
