"""``geosim run``: the whole job of a run spec, resumable."""
from __future__ import annotations

import time

import click

from .common import (cluster_option, load, out_option, overwrite_option, reporter, set_option, spec_argument,
                     table, workers_option)
from .report import crossval_text, decision_text, files_text, seconds


@click.command("run", short_help="Run the whole job of a run spec: data to rasters, plots and report.")
@spec_argument
@out_option
@set_option
@workers_option
@cluster_option
@overwrite_option
@click.option("--no-resume", is_flag=True,
              help="Recompute every realization even if an interrupted run of this spec left some.")
@click.option("--check", "check_only", is_flag=True,
              help="Validate the spec and read the inputs and domain, then stop (as `geosim check`).")
@click.pass_context
def run(ctx, spec, out_dir, overrides, workers, cluster, overwrite, no_resume, check_only):
    """Read the data, fit the variogram, cross-validate, krige, simulate and summarize, as the
    run spec SPEC says, writing everything into the folder --out.

    Rerunning the same command after an interruption keeps the realizations already
    written (verified by checksum) and computes only the rest. A folder holding a
    run of a different spec is refused unless --overwrite is given.
    """
    import geosim.config.runspec
    import geosim.outputs
    import geosim.pipeline

    run_spec = load(ctx, spec, overrides, workers=workers, cluster=cluster)
    progress = reporter(ctx)
    units = geosim.config.runspec.has_units(run_spec)
    if check_only and units:
        import geosim.units_run
        rows = geosim.pipeline.describe_spec(run_spec)
        rows += geosim.units_run.describe_units(geosim.units_run.prepare_units(run_spec, progress))
        table(rows, title="run spec and inputs are valid; nothing was computed")
        return
    if check_only:
        data = geosim.pipeline.prepare_data(run_spec, progress)
        grid = geosim.pipeline.make_grid(run_spec, data)
        data.notes.extend(geosim.pipeline.preflight(run_spec, data, grid))
        rows = geosim.pipeline.describe_spec(run_spec) + geosim.pipeline.describe_data(data)
        rows.append(("grid", " x ".join(map(str, grid.shape)) + f" nodes, {grid.n_active} inside the domain"))
        table(rows, title="run spec and inputs are valid; nothing was computed")
        return
    start = time.perf_counter()
    if units:  # several geological units: each modelled on its own, joined
        import geosim.units_run
        job = geosim.units_run.run
    else:
        job = geosim.pipeline.run
    result = job(run_spec, out_dir, overwrite=overwrite, resume=not no_resume, progress=progress)
    progress.close()
    n = len(result.kept) + len(result.computed)
    realizations = f"{n} ({len(result.computed)} computed"
    realizations += f", {len(result.kept)} kept from an earlier run)" if result.kept else ")"
    rows = [("output folder", str(result.out_dir)),
            ("variogram model" + (" per unit" if units else ""), result.model.text(result.ndim).strip())]
    if result.crossval:
        for name, summary in result.crossval.get("by_unit", {}).items():
            rows.append((f"cross-validation, unit {name}", crossval_text(summary)))
        rows.append(("cross-validation" + (", all units" if units else ""), crossval_text(result.crossval)))
    rows.append(("realizations", realizations))
    if result.decision:
        rows.append(("decision figures", decision_text(result.decision, units=run_spec["data.units"],
                                                       metal_unit=geosim.outputs.metal_unit(run_spec))))
    rows += [("note", note) for note in result.notes]
    rows += [("files", files_text(result.files, result.out_dir)),
             ("time", seconds(time.perf_counter() - start) + " (" + ", ".join(
                 f"{k} {seconds(v)}" for k, v in sorted(result.timings.items(), key=lambda kv: -kv[1])[:3]) + ")")]
    table(rows, title="run complete")
