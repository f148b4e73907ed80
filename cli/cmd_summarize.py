"""``geosim summarize``: summary rasters, decision figures and the report from realizations."""
from __future__ import annotations

import click

from .common import load, out_option, reporter, set_option, spec_argument, table
from .report import files_text


@click.command("summarize", short_help="Summary raster, decision figures and report from simulated realizations.")
@spec_argument
@out_option
@set_option
@click.pass_context
def summarize(ctx, spec, out_dir, overrides):
    """Stream the realizations that `geosim simulate` wrote into --out for the run spec
    SPEC into realizations.tif, summary.tif (mean, std, P10, P50, P90, probability above
    each cut-off), decision-figure tables and report.json.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    progress = reporter(ctx)
    files = geosim.pipeline.summarize(run_spec, out_dir, progress=progress)
    progress.close()
    table([("files", files_text(files, out_dir))], title="summaries written")
