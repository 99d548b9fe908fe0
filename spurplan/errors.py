"""Exception tree of spurplan.

Every error a user can cause derives from :class:`SpurplanError`; the CLI turns any
of them into one line on stderr and exit status 2.  Each class also subclasses the
builtin it stands for (``ValueError`` for bad input, ``OSError`` for files that
cannot be written or found) so library callers can catch either.

Every class pickles with its fields (yield batches run on Dask workers and their
errors come back pickled).  ``BaseException`` pickles ``self.args``, which a
dataclass ``__init__`` never sets, so the dataclass errors carry a ``__reduce__``
that rebuilds them from their fields (:class:`_Fields`).

The modules that raise an error re-export its name where it used to live
(``spurplan.analyses.sweep.SweepError``, ``spurplan.output.files.OutputError``, ...).
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, fields

# A call's argument named in a message: "{@step}" is the parameter ``step``.
_ARGUMENT = re.compile(r"\{@([A-Za-z_][A-Za-z0-9_]*)\}")


class SpurplanError(Exception):
    """Root of all errors raised for bad input.

    A message about the arguments of a call names each one as ``{@name}``, ``name``
    being the parameter of the library function (``{@step}``, ``{@margin_db}``).  The
    library shows the parameter's own name (``str(error)``); the command line shows its
    option instead (:meth:`shown` with its options), so that no library module needs
    to know the command line's spelling.
    """

    #: The command line's options for the arguments (``{"step": "--step"}``), set by the
    #: CLI on the way out of a command; ``None`` in the library.
    options: Mapping[str, str] | None = None

    def shown(self, names: Mapping[str, str] | None = None) -> str:
        """The message with each argument named by ``names`` (its own name where absent).

        Parameters
        ----------
        names : mapping of str to str, optional
            Parameter name to the name to show, e.g. ``{"step": "--step"}``.

        Returns
        -------
        str
            The message.
        """
        names = names or {}
        return _ARGUMENT.sub(lambda m: names.get(m.group(1), m.group(1)), self._template())

    def _template(self) -> str:
        return super().__str__()

    def __str__(self) -> str:
        return self.shown()


class _Fields:
    """Pickling for dataclass exceptions: rebuild from the fields, not from ``args``."""

    def __reduce__(self):
        # Mixed only into dataclasses, which mypy cannot see from this class alone.
        return (self.__class__, tuple(getattr(self, f.name) for f in fields(self)))  # type: ignore[arg-type]


@dataclass(eq=False)
class UnitError(_Fields, SpurplanError, ValueError):
    """A quantity string could not be read with the unit that was expected.

    Parameters
    ----------
    value : str
        The text as given.
    expected : str
        What was expected, for example ``"a frequency in Hz, kHz, MHz or GHz"``.
    hint : str
        A did-you-mean for a near miss, e.g. ``" (did you mean 'MHz'?)"``; ``""`` if none.
        Kept apart so that callers that re-word ``expected`` can pass it on.
    """

    value: object
    expected: str
    hint: str = ""

    def _template(self) -> str:
        return f"{self.value!r}: expected {self.expected}{self.hint}"


@dataclass(eq=False)
class LineupError(_Fields, SpurplanError, ValueError):
    """A lineup file (or one of its parts) is not valid.

    The message names the file, the stage (name and position), the field, the value
    and what was expected, so that it can stand alone on one line.
    """

    message: str
    file: str | None = None
    stage: str | None = None
    field: str | None = None

    def _template(self) -> str:
        parts = [p for p in (self.file, self.stage) if p]
        if self.field:
            parts.append(f"field '{self.field}'")
        prefix = ": ".join(parts)
        text = f"{prefix}: {self.message}" if prefix else self.message
        # One line, whatever a value holds (a name with a line break, say).
        return " ".join(text.split())


@dataclass(eq=False)
class OutOfDataRange(_Fields, SpurplanError, ValueError):
    """A response was asked for outside the frequency range that a data file covers."""

    stage: str
    freq_hz: float
    data_start_hz: float
    data_stop_hz: float
    product: str = ""
    hint: str = ""
    file: str | None = None
    data_file: str | None = None

    def _template(self) -> str:
        what = f"product {self.product} at " if self.product else ""
        tail = f"; {self.hint}" if self.hint else ""
        head = f"{self.file}: " if self.file else ""
        data = f" of {self.data_file}" if self.data_file else ""
        text = (
            f"{head}stage '{self.stage}': {what}{self.freq_hz:.6g} Hz is outside the "
            f"S-parameter data{data} ({self.data_start_hz:.6g} to {self.data_stop_hz:.6g} Hz){tail}"
        )
        return " ".join(text.split())


class SweepError(SpurplanError, ValueError):
    """Sweep arguments that do not make a sweep (raised by :mod:`spurplan.analyses.sweep`)."""


class YieldError(SpurplanError, ValueError):
    """Yield arguments that do not make a run: seed, sample budget, workers, scheduler.

    Raised by :mod:`spurplan.analyses.montecarlo`.
    """


class TouchstoneFault(SpurplanError, ValueError):
    """A Touchstone file that cannot be read without guessing; the message says where.

    Raised by :mod:`spurplan.io.touchstone`; the filter stage turns it into a
    :class:`LineupError` naming the lineup file, stage and field.
    """


class OutputError(SpurplanError, OSError):
    """An output file could not be written, or its target is not one to write.

    Raised by :mod:`spurplan.output.files`.
    """


class ResourceError(SpurplanError, FileNotFoundError):
    """A folder that ships with spurplan (``examples/``, ``bands/``) is missing.

    Raised by :mod:`spurplan.io.resources`: the installation is incomplete.
    """
