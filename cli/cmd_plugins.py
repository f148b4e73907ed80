"""``geosim plugins``: list the installed structures, engines, writers and commands."""
from __future__ import annotations

import logging
from importlib.metadata import entry_points

import click

from .main import COMMAND_GROUP

_GROUPS = ("structures", "engines", "writers", "commands")


@click.command("plugins", short_help="List installed covariance structures, engines, writers and commands.")
@click.option("--group", "groups", multiple=True, type=click.Choice(_GROUPS),
              help="Only this group (repeatable). Default: all of them.")
def plugins(groups):
    """List what is registered through geosim's entry points, geosim's own included.

    Each line gives the name, the package that provides it, whether geosim can use
    it, and why not (a failed import, a covariance that is not positive definite, a
    name already taken). Unusable plugins are skipped everywhere else in geosim.
    """
    import geosim.plugins

    logger = logging.getLogger("geosim")
    level = logger.level
    logger.setLevel(logging.ERROR)  # the listing itself reports what the notes would say
    try:
        rows = []
        for group in groups or _GROUPS:
            if group == "commands":
                rows += [(group, *row) for row in _command_rows()]
            else:
                rows += [(group, i.name, f"{i.package} {i.version}".strip(), i.status, i.detail)
                         for i in geosim.plugins.installed(group)]
    finally:
        logger.setLevel(level)
    _print(rows)


def _command_rows():
    """Subcommands of ``geosim``: loadable or not (the group itself loads them lazily)."""
    for ep in sorted(entry_points(group=COMMAND_GROUP), key=lambda e: e.name):
        dist = getattr(ep, "dist", None)
        package = f"{dist.metadata['Name']} {dist.version}" if dist is not None else "unknown"
        try:
            command = ep.load()
        except Exception as exc:  # a broken command is reported, never fatal
            yield ep.name, package, "import failed", f"{type(exc).__name__}: {exc}"
            continue
        if isinstance(command, click.Command):
            yield ep.name, package, "ok", command.get_short_help_str(limit=60)
        else:
            yield ep.name, package, "rejected", "the entry point is not a click command"


def _print(rows):
    header = ("group", "name", "package", "status", "notes")
    widths = [max(len(str(r[k])) for r in [header, *rows]) for k in range(4)]
    for row in [header, *rows]:
        click.echo("  ".join(f"{str(v):<{w}}" for v, w in zip(row[:4], widths)) + "  " + str(row[4]))
