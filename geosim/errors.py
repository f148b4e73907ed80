"""Exceptions raised by geosim.

The library never prints and never exits; it raises one of these with a message
that says what was expected, what was found and how to fix it.
"""
from __future__ import annotations

from collections.abc import Sequence


class GeosimError(Exception):
    """Base class of every error geosim raises on purpose."""


class GeosimWarning(UserWarning):
    """Base class of geosim's Python warnings: words for the people who write specs and scripts
    (:class:`RetiredNameWarning`).

    What geosim changed or chose for the user while working (merged duplicates, a picked
    CRS) is a note on the ``geosim`` logger instead (:mod:`logging`, level WARNING).
    """


class RetiredNameWarning(GeosimWarning, FutureWarning):
    """An old spelling of a setting was used; it still works for this release only.

    The message names the new key or keyword.  A :class:`FutureWarning` too, so Python
    shows it by default (it is meant for the people who write run specs and scripts).
    """


class InputError(GeosimError, ValueError):
    """Bad user input: a file, a row, a field, and what would fix it.

    Examples
    --------
    >>> str(InputError("value 'abc' is not a number", file="assays.csv", row=12,
    ...                field="au_gpt", fix="correct the cell or leave it empty"))
    "assays.csv, row 12, field 'au_gpt': value 'abc' is not a number; fix: correct the cell or leave it empty"
    """

    def __init__(self, message: str, *, file: str | None = None, row: int | None = None,
                 field: str | None = None, fix: str | None = None):
        self.message = message
        self.file = None if file is None else str(file)
        self.row = row
        self.field = field
        self.fix = fix
        super().__init__(str(self))

    def __reduce__(self):
        # rebuilt from its fields, so file, row and fix survive the trip back from a worker
        return _rebuild_input_error, (type(self), self.message, self.file, self.row, self.field, self.fix)

    def __str__(self) -> str:
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.field is not None:
            where.append(f"field '{self.field}'")
        text = (", ".join(where) + ": " if where else "") + self.message
        if self.fix:
            text += f"; fix: {self.fix}"
        return text


def _rebuild_input_error(cls, message, file, row, field, fix):
    error = InputError.__new__(cls)
    InputError.__init__(error, message, file=file, row=row, field=field, fix=fix)
    return error


class SpecError(InputError):
    """A run spec with one or more problems, each with its key path and the expected form."""

    def __init__(self, file: str, problems: Sequence[str]):
        self.problems = list(problems)
        super().__init__(
            f"{len(self.problems)} problem(s) in the run spec: " + "; ".join(self.problems),
            file=file,
        )

    def __reduce__(self):
        return type(self), (self.file, self.problems)


class ResourceError(GeosimError):
    """The machine cannot do what was asked: the disk is full or memory too small.

    Not a fault of the input and not a bug: free space or memory, or ask for less
    (larger cells, fewer workers), and rerun.  ``folder`` is where writing failed,
    ``needed`` and ``available`` are byte counts when known.

    Examples
    --------
    >>> str(ResourceError("the disk is full", folder="out", needed=3_000_000, available=1_000_000,
    ...                   fix="free space on that disk"))
    'out: the disk is full (needed about 3.0 MB, 1.0 MB available); fix: free space on that disk'
    """

    def __init__(self, message: str, *, folder: str | None = None, needed: int | None = None,
                 available: int | None = None, fix: str | None = None):
        self.message = message
        self.folder = None if folder is None else str(folder)
        self.needed = needed
        self.available = available
        self.fix = fix
        text = (f"{self.folder}: " if self.folder else "") + message
        sizes = []
        if needed is not None:
            sizes.append(f"needed about {format_bytes(needed)}")
        if available is not None:
            sizes.append(f"{format_bytes(available)} available")
        if sizes:
            text += f" ({', '.join(sizes)})"
        if fix:
            text += f"; fix: {fix}"
        super().__init__(text)

    def __reduce__(self):
        return type(self), (self.message,), {"folder": self.folder, "needed": self.needed,
                                             "available": self.available, "fix": self.fix}

    def __setstate__(self, state):
        self.__init__(self.message, **state)


def format_bytes(n: float) -> str:
    """A byte count for messages, in decimal units (``1.5 GB``)."""
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if abs(n) < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
    return f"{n:.1f} TB"


class RunAbandoned(GeosimError):
    """The run a task belongs to has ended (its client died or cancelled it): the task
    stops and writes nothing further.

    Raised in workers (see :func:`geosim.io.atomic.writes_wanted_while`); nobody is left
    to receive it, so it only ends the task.
    """


class InvalidStructureError(GeosimError, ValueError):
    """A covariance structure that fails geosim's checks (e.g. not positive definite)."""


class NotPositiveDefiniteError(GeosimError, ArithmeticError):
    """A covariance matrix that Cholesky cannot factor (a pivot <= 0).

    Parameters
    ----------
    pivot : int
        Index of the first pivot that was not positive.
    value : float
        The value found at that pivot.
    ids : sequence, optional
        Identifiers of the samples or nodes involved, for the message.
    context : str, optional
        Where the system came from (kriging at node ..., exact engine, ...).
    """

    def __init__(self, pivot: int, value: float, ids: Sequence | None = None,
                 context: str | None = None):
        self.pivot = int(pivot)
        self.value = float(value)
        self.ids = list(ids) if ids is not None else []
        self.context = context
        msg = (f"covariance matrix is not positive definite: pivot {self.pivot} is "
               f"{self.value:.3g} (must be > 0)")
        if context:
            msg = f"{context}: {msg}"
        if self.ids:
            msg += f"; samples involved: {', '.join(map(str, self.ids[:10]))}"
        msg += (". Likely causes: coincident or nearly coincident samples, a model "
                "without nugget at very small spacing, or an invalid covariance model. "
                "Merge duplicates, add a small nugget, or enable regularization.")
        super().__init__(msg)

    def __reduce__(self):
        # rebuilt from its fields, so the error survives the trip back from a worker process
        return type(self), (self.pivot, self.value, self.ids or None, self.context)
