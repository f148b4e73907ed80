"""``geosim crossvalidate``: leave-one-out kriging of the samples."""
from __future__ import annotations

import click

from .common import load, out_option, overwrite_option, reporter, set_option, spec_argument, table
from .report import crossval_text, files_text


@click.command("crossvalidate", short_help="Leave-one-out kriging of the samples with the model and search.")
@spec_argument
@out_option
@set_option
@overwrite_option
@click.pass_context
def crossvalidate(ctx, spec, out_dir, overrides, overwrite):
    """Krige each sample of the run spec SPEC from the others (drillholes: each hole from
    the other holes) with its variogram model and neighbourhood, in normal scores, and
    back-transform each estimate to data units (the conditional mean).
    Writes cross_validation.csv and cross_validation.png into --out.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    cv = geosim.pipeline.cross_validate(run_spec, out_dir=out_dir, overwrite=overwrite, progress=reporter(ctx))
    table([("cross-validation", crossval_text(cv.summary)),
           ("correlation", f"{cv.summary['data_units']['correlation']:.3f} in data units, "
                           f"{cv.summary['normal_scores']['correlation']:.3f} in normal scores "
                           "(estimate vs sample)"),
           ("files", files_text(cv.files, out_dir))], title="cross-validation")
