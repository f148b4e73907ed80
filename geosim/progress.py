"""Progress adapters: geosim's ``progress(done, total, what)`` callback for notebooks and logs.

Every long geosim call takes ``progress=``, a callable receiving the number of
steps done, the total and what is counted (``"realizations"``, ``"kriging"``,
...).  :func:`tqdm_progress` shows one tqdm bar per kind of step (a widget in
Jupyter, text elsewhere; ``pip install "geosim[progress]"``);
:func:`logging_progress` writes a line to the ``geosim`` logger every so often
instead.

Examples
--------
>>> import geosim.progress
>>> seen = []
>>> report = geosim.progress.logging_progress(every=0.5, log=seen.append)
>>> for done in range(1, 5):
...     report(done, 4, "realizations")
>>> seen
['realizations: 2 of 4', 'realizations: 4 of 4']
"""
from __future__ import annotations

import logging
from collections.abc import Callable

from .errors import InputError

__all__ = ["Progress", "tqdm_progress", "logging_progress", "relabel"]

Progress = Callable[[int, int, str], None]


def relabel(progress: Progress | None, label: str) -> Progress | None:
    """A progress callback that reports under ``label`` whatever a step calls its work."""
    if progress is None:
        return None
    return lambda done, total, what: progress(done, total, label)


class _Bars:
    """One tqdm bar per ``what``, closed when it reaches its total."""

    def __init__(self, factory, options):
        self.factory = factory
        self.options = options
        self.bars = {}

    def __call__(self, done: int, total: int, what: str) -> None:
        bar = self.bars.get(what)
        if bar is None or bar.total != total:
            if bar is not None:
                bar.close()
            bar = self.bars[what] = self.factory(total=total, desc=what, **self.options)
        bar.update(done - bar.n)
        if done >= total:
            bar.close()
            del self.bars[what]


def tqdm_progress(*, notebook: bool | None = None, **options) -> Progress:
    """A progress callback drawing tqdm bars (``tqdm.auto``: widgets in Jupyter).

    Parameters
    ----------
    notebook : bool, optional
        Force notebook widgets (True) or text bars (False); default: tqdm decides.
    **options
        Passed to every ``tqdm`` bar (e.g. ``leave=False``, ``file=sys.stdout``).
    """
    try:
        if notebook is None:
            from tqdm.auto import tqdm
        elif notebook:
            from tqdm.notebook import tqdm
        else:
            from tqdm import tqdm
    except ImportError:
        raise InputError("progress bars need the optional package tqdm", fix='pip install "geosim[progress]"') \
            from None
    return _Bars(tqdm, options)


def logging_progress(*, every: float = 0.1, logger: logging.Logger | None = None,
                     log: Callable[[str], None] | None = None) -> Progress:
    """A progress callback that logs ``"<what>: <done> of <total>"`` each ``every`` fraction of the way.

    Lines go to ``log`` if given, else to ``logger`` (default: the ``geosim`` logger)
    at INFO level.
    """
    write = log if log is not None else (logger or logging.getLogger("geosim")).info
    last: dict[str, int] = {}

    def report(done: int, total: int, what: str) -> None:
        step = max(1, int(total * every))
        if done >= total or done // step > last.get(what, 0) // step:
            write(f"{what}: {done} of {total}")
        last[what] = 0 if done >= total else done
    return report
