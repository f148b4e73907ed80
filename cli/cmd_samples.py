"""``geosim samples``: list the invented sample fields, or copy one to run it."""
from __future__ import annotations

import click

from .common import session


@click.command("samples", short_help="List the invented sample fields or copy one into a folder.")
@click.argument("name", required=False)
@click.argument("folder", required=False, type=click.Path(file_okay=False, path_type=str))
@click.option("--overwrite", is_flag=True, help="Copy into an existing folder, replacing the sample's files.")
@click.pass_context
def samples(ctx, name, folder, overwrite):
    """Without arguments, list the sample fields shipped with geosim; with NAME and FOLDER,
    copy that sample's data, domain, run spec and README into FOLDER, ready for
    `geosim run FOLDER/run.toml --out FOLDER-run`.
    """
    import geosim.demo

    if name is None:
        for sample in geosim.demo.sample_names():
            click.echo(sample)
        return
    if folder is None:
        raise click.UsageError("give the folder to copy the sample into: geosim samples NAME FOLDER")
    session(ctx)
    target = geosim.demo.copy_sample(name, folder, overwrite=overwrite)
    click.echo(f"copied {name} to {target}; run it with: geosim run {target / 'run.toml'} --out {target}-run")
