"""Errors raised on bad input, each rendered as one line for the command line."""

from __future__ import annotations

from typing import Any

__all__ = ["InputError", "Note", "RunTooShortError"]


class Note(str):
    """A message that says what was done or assumed, not a caution about the result.

    Producers put notes among the messages they return (``Estimate.warnings``, a series'
    warnings) wrapped in this type; :class:`~transport.Estimate` moves them to its
    ``notes``, and the JSON document lists them under ``notes``, so that its ``warnings``
    hold only warnings (a pipeline can gate on an empty list). A plain ``str`` is a
    warning. Formatting a note (f-strings, ``+``) gives a plain ``str``: wrap the final text.

    Examples
    --------
    >>> isinstance(Note("3 independent pieces"), str)
    True
    """

    __slots__ = ()


class InputError(ValueError):
    """Bad input: names the file, the line, what was expected and the fix.

    Parameters
    ----------
    message : str
        What is wrong, including the value seen.
    path : str, optional
        The file the problem is in.
    line : int, optional
        1-based line number in that file, where it applies.
    expected : str, optional
        What was expected there.
    fix : str, optional
        How the user can fix it (an option to pass, a file to repair).

    Examples
    --------
    >>> str(InputError("no column Pxy", path="log.lammps", line=42,
    ...                expected="P_xy", fix="add pxy to thermo_style"))
    'log.lammps:42: no column Pxy; expected P_xy; fix: add pxy to thermo_style'
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        line: int | None = None,
        expected: str | None = None,
        fix: str | None = None,
    ) -> None:
        self.message = message
        self.path = None if path is None else str(path)
        self.line = line
        self.expected = expected
        self.fix = fix
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The error as one line: ``file:line: message; expected ...; fix: ...``."""
        where = ""
        if self.path is not None:
            where = self.path + (f":{self.line}" if self.line is not None else "") + ": "
        text = where + self.message
        if self.expected:
            text += f"; expected {self.expected}"
        if self.fix:
            text += f"; fix: {self.fix}"
        return " ".join(text.split())  # guarantee a single line

    def __str__(self) -> str:
        return self.one_line()


class RunTooShortError(InputError):
    """The run is too short for a trustworthy estimate.

    Carries what was learned: the partial estimate (may be None) and how much longer the
    run must be.

    Parameters
    ----------
    message : str
        What is missing.
    partial : Any, optional
        The best estimate that could be made (an :class:`~transport.Estimate`), if any.
    needed_time : float, optional
        Total run length needed, in the reported time unit.
    extra_time : float, optional
        How much longer the run must be, in the reported time unit.
    time_unit : str
        Unit of `needed_time` and `extra_time`.
    """

    def __init__(
        self,
        message: str,
        *,
        partial: Any = None,
        needed_time: float | None = None,
        extra_time: float | None = None,
        time_unit: str = "",
        path: str | None = None,
        fix: str | None = None,
    ) -> None:
        self.partial = partial
        self.needed_time = needed_time
        self.extra_time = extra_time
        self.time_unit = time_unit
        if fix is None and extra_time is not None:
            fix = f"extend the run by about {extra_time:.3g} {time_unit}".strip()
        super().__init__(message, path=path, fix=fix)
