"""``geosim estimate``: kriging maps of the conditional mean and variance."""
from __future__ import annotations

import click

from .common import load, out_option, overwrite_option, reporter, set_option, spec_argument, table
from .report import files_text


@click.command("estimate", short_help="Krige the grid: conditional mean and standard deviation maps.")
@spec_argument
@out_option
@set_option
@overwrite_option
@click.pass_context
def estimate(ctx, spec, out_dir, overrides, overwrite):
    """Krige the normal scores at every grid node of the run spec SPEC and convert to data
    units under the multi-Gaussian model. Writes estimate.tif (bands: conditional mean,
    conditional standard deviation, kriged normal score, kriging variance) into --out.
    """
    import numpy as np

    import geosim.pipeline
    import geosim.results

    run_spec = load(ctx, spec, overrides)
    est = geosim.pipeline.estimate(run_spec, out_dir=out_dir, overwrite=overwrite, progress=reporter(ctx))
    units = run_spec["data.units"]
    done = np.isfinite(est.mean)
    table([("nodes estimated", f"{int(done.sum())}"),
           ("search", geosim.results.short_note(est.n_short, int(done.sum()) + est.n_unestimated, "grid nodes",
                                                 run_spec, est.n_unestimated)),
           ("mean of the map", f"{float(np.nanmean(est.mean)):.4g} {units}".strip()),
           ("files", files_text(est.files, out_dir))], title="kriging estimate")
