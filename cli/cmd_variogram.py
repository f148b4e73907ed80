"""``geosim variogram``: experimental variograms and the model fitted to them."""
from __future__ import annotations

import click

from .common import load, out_option, overwrite_option, reporter, set_option, spec_argument, table
from .report import files_text


@click.command("variogram", short_help="Compute experimental variograms and fit the model; save model and plot.")
@spec_argument
@out_option
@set_option
@overwrite_option
@click.pass_context
def variogram(ctx, spec, out_dir, overrides, overwrite):
    """Compute the experimental variograms of the normal scores in the directions of the
    run spec SPEC and fit its structures to them (or take its fixed model). Writes
    variogram_model.toml and variogram.png into --out; point a spec's
    variogram.model_file at the saved model to reuse it.
    """
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides)
    result = geosim.pipeline.variogram_model(run_spec, out_dir=out_dir, overwrite=overwrite,
                                             progress=reporter(ctx))
    for ev in result.experimental:
        table([(f"{lag:.0f} m", f"{g:.3f}  ({n} pairs)") for lag, g, n in zip(ev.lags, ev.gamma, ev.npairs) if n],
              title=f"experimental semivariogram of the normal scores, {ev.label} (mean lag: gamma)")
    rows = [("model", result.model_text().strip()), ("source", result.source)]
    if result.fit is not None:
        rows.append(("fit RMSE", f"{result.fit.rmse_:.4g} over {result.fit.nbins_} bins"))
        rows += [("warning", w) for w in result.fit.warnings_]
    rows.append(("files", files_text(result.files, out_dir)))
    table(rows, title="variogram model")
