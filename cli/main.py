"""The ``geosim`` command: one click group whose subcommands load through entry points.

Every subcommand, geosim's own included, is registered in the entry-point group
``geosim.commands`` and loaded only when it is asked for, exactly as a
third-party package would add one.  The group maps exceptions to one line on
stderr and an exit code:

====  ===========================================================================
code  meaning
====  ===========================================================================
0     success
2     bad input: a run spec, an input file, a command-line option (fix and rerun)
3     geosim could not do what was asked with this input (e.g. a covariance
      model that is not positive definite)
4     internal error (a bug); rerun with ``--debug`` for the traceback
5     the machine's limits: the disk is full or the job needs more memory than
      there is (free space or memory, or ask for less, and rerun)
130   interrupted (Ctrl-C)
====  ===========================================================================

An output folder that cannot be written is bad input (2, naming the folder), never
an internal error; so is an output folder another run is using.

The caution text is printed on stderr at the end of every command that started
work, whether it succeeded or failed.
"""
from __future__ import annotations

import contextlib
import difflib
import errno
import logging
import os
import sys
import traceback
import warnings
from dataclasses import dataclass
from importlib.metadata import entry_points

import click

from geosim.cautions import CAUTION
from geosim.errors import GeosimError, GeosimWarning, InputError, ResourceError, SpecError

COMMAND_GROUP = "geosim.commands"

EXIT_OK, EXIT_INPUT, EXIT_GEOSIM, EXIT_INTERNAL, EXIT_RESOURCES, EXIT_INTERRUPTED = 0, 2, 3, 4, 5, 130


@dataclass
class Session:
    """Options of the group that every subcommand sees as ``ctx.obj``."""

    debug: bool = False
    quiet: bool = False
    started: bool = False


class _FailedCommand(click.Command):
    """Stands in for a subcommand whose entry point failed to load."""

    def __init__(self, name: str, source: str, error: BaseException):
        self.error_text = f"{type(error).__name__}: {error}"
        super().__init__(name, help=f"(failed to load from {source}: {self.error_text})",
                         callback=self._fail, add_help_option=False, context_settings={
                             "ignore_unknown_options": True, "allow_extra_args": True})
        self.source = source

    def _fail(self):
        raise InputError(f"the command {self.name!r} could not be loaded from {self.source}: "
                         f"{self.error_text}", fix="reinstall or remove the package that provides it")


class EntryPointGroup(click.Group):
    """A click group that lists and loads its subcommands from ``geosim.commands``."""

    def _entry_points(self):
        return {ep.name: ep for ep in entry_points(group=COMMAND_GROUP)}

    def list_commands(self, ctx):
        return sorted(set(self.commands) | set(self._entry_points()))

    def get_command(self, ctx, name):
        if name in self.commands:
            return self.commands[name]
        ep = self._entry_points().get(name)
        if ep is None:
            return None
        try:
            command = ep.load()
        except Exception as exc:  # a broken plugin must not take the whole command line down
            return _FailedCommand(name, ep.value, exc)
        if not isinstance(command, click.Command):
            return _FailedCommand(name, ep.value, TypeError("the entry point is not a click command"))
        return command

    def resolve_command(self, ctx, args):
        name = args[0] if args else None
        if name and not name.startswith("-") and self.get_command(ctx, name) is None:
            close = difflib.get_close_matches(name, self.list_commands(ctx), n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            ctx.fail(f"no command {name!r}.{hint} Commands: {', '.join(self.list_commands(ctx))}")
        return super().resolve_command(ctx, args)

    def invoke(self, ctx):
        session = ctx.ensure_object(Session)
        try:
            with warnings.catch_warnings(), _log_handler(session):
                warnings.showwarning = _warning_printer(session)
                return super().invoke(ctx)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException):
            raise
        except BaseException as exc:
            code = _report(exc, session.debug)
        finally:
            if session.started:
                click.echo("\n" + CAUTION, err=True)
        ctx.exit(code)


def _report(exc: BaseException, debug: bool) -> int:
    """Print one line (or the spec's problem list) for an exception; return the exit code."""
    if debug:
        traceback.print_exception(exc)
    if isinstance(exc, SpecError):
        _say(f"error: {exc.file}: {len(exc.problems)} problem(s) in the run spec:")
        for problem in exc.problems:
            _say(f"  {problem}")
        return EXIT_INPUT
    if isinstance(exc, OSError):
        exc = _environment_error(exc)
    if isinstance(exc, MemoryError):
        exc = ResourceError("the job ran out of memory", fix="use larger cells, a smaller grid or fewer "
                            "workers, then rerun the same command (finished realizations are kept)")
    if isinstance(exc, InputError):
        _say(f"error: {exc}")
        return EXIT_INPUT
    if isinstance(exc, ResourceError):
        _say(f"error: {exc}")
        return EXIT_RESOURCES
    if isinstance(exc, GeosimError):
        _say(f"error: {exc}")
        return EXIT_GEOSIM
    if isinstance(exc, KeyboardInterrupt):
        _say("interrupted; rerun the same command to resume (finished realizations are kept)")
        return EXIT_INTERRUPTED
    if not isinstance(exc, Exception):
        raise exc
    _say(f"internal error: {type(exc).__name__}: {exc}")
    if not debug:
        _say("this is a bug in geosim or a plugin; rerun with --debug for the traceback and report it")
    return EXIT_INTERNAL


def _environment_error(exc: OSError) -> BaseException:
    """A full disk or a refused file as geosim's own error; other OS errors as they are.

    The library explains the files it writes itself; this catches the rest (a plugin's
    writer, a read the operating system refused).
    """
    where = exc.filename
    if exc.errno in (errno.ENOSPC, errno.EDQUOT):
        return ResourceError("the disk is full", folder=None if where is None else os.path.dirname(where),
                             fix="free space on that disk, then rerun the same command")
    if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS) and where is not None:
        return InputError(f"the operating system refused access ({exc.strerror})", file=where,
                          fix="check the permissions of the file and its folder, or choose another")
    return exc


def _say(text: str) -> None:
    click.echo(f"geosim: {text}", err=True)


@contextlib.contextmanager
def _log_handler(session: Session):
    """The library's "geosim" logger printed as the command line's own lines: warnings as notes
    (today's look), its INFO notes of a run only with --debug."""
    class Say(logging.Handler):
        def emit(self, record):
            if record.levelno >= logging.WARNING:
                _say(f"note: {record.getMessage()}")
            elif session.debug:  # read when the record comes: --debug is parsed after this is attached
                _say(record.getMessage())

    logger = logging.getLogger("geosim")
    handler = Say(level=logging.INFO)
    old_level = logger.level
    logger.addHandler(handler)
    logger.setLevel(logging.INFO)
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.setLevel(old_level)


def _warning_printer(session: Session):
    """Show geosim's own Python warnings (retired names of settings) as one-line notes, like the
    notes of its logger; other libraries' warnings only with --debug."""
    default = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, GeosimWarning):
            _say(f"note: {message}")
        elif session.debug:
            default(message, category, filename, lineno, file, line)
    return show


@click.group("geosim", cls=EntryPointGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--debug", is_flag=True, help="Show tracebacks of errors.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bars or step lines; errors and the caution only.")
@click.version_option(package_name="geosim", prog_name="geosim",
                      message="%(prog)s %(version)s")
@click.pass_context
def cli(ctx, debug, quiet):
    """Geostatistical conditional simulation from borehole data to GeoTIFF uncertainty maps.

    Most commands take a run spec (a TOML file; see `geosim check --help`). Start with
    `geosim check SPEC`, then `geosim run SPEC --out FOLDER`.
    """
    session = ctx.ensure_object(Session)
    session.debug = debug
    session.quiet = quiet


def main(argv: list[str] | None = None) -> int:
    """Run the ``geosim`` command line and return its exit code (the console script)."""
    try:
        result = cli.main(args=argv, prog_name="geosim", standalone_mode=False)
    except click.exceptions.Exit as exc:  # raised by ctx.exit inside nested contexts
        return exc.exit_code
    except click.exceptions.Abort:
        click.echo("geosim: aborted", err=True)
        return EXIT_INTERRUPTED
    except click.ClickException as exc:
        exc.show()
        return exc.exit_code  # usage errors are 2, the code of bad input
    return result if isinstance(result, int) else EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
