"""Typed errors of brace.

Every error a user can cause derives from :class:`InputError` and carries the
file, the field path inside it, what was expected and what arrived, so the
command line can print one clear line and exit with code 2. Solver failures
are :class:`SolveFailed` (exit code 1); a task the pre-solve checks prove
impossible is :class:`InfeasibleTask` (exit code 2).
"""
from __future__ import annotations


def plain(value):
    """``value`` with NumPy scalars and arrays turned into Python numbers and lists, for messages.

    ``(np.int64(0), np.int64(5))`` reads ``(0, 5)``; anything else is unchanged.
    """
    if hasattr(value, "tolist") and callable(value.tolist):
        return value.tolist()
    if isinstance(value, (tuple, list)):
        return type(value)(plain(v) for v in value)
    return value


class BraceError(Exception):
    """Base class of every error brace raises on purpose."""

    exit_code = 1


class InputError(BraceError):
    """A file or value given by the user is not what brace expects.

    Parameters
    ----------
    file : str or path-like or None
        The file the bad value came from (None for values given in Python).
    field : str
        Dotted path of the field inside the file, e.g. ``contacts.lf_foot.friction``.
        Empty when the whole file is at fault.
    expected : str
        What a valid value looks like, in plain words.
    got : object, optional
        What arrived (shown with ``repr``, shortened).
    """

    exit_code = 2

    def __init__(self, file, field: str, expected: str, got=None, hint: str | None = None):
        self.file = None if file is None else str(file)
        self.field = field
        self.expected = expected
        self.got = got
        self.hint = hint
        super().__init__(self._message())

    def _message(self) -> str:
        where = self.file or "<input>"
        if self.field:
            where += f": field '{self.field}'"
        text = f"{where}: expected {self.expected}"
        if self.got is not None:
            got = repr(plain(self.got))
            text += f", got {got[:120] + '...' if len(got) > 120 else got}"
        if self.hint:
            text += f" ({self.hint})"
        return text


class ModelError(InputError):
    """A robot description (URDF or robot YAML) is invalid."""


class TaskError(InputError):
    """A task file is invalid."""


class SweepError(InputError):
    """A sweep file is invalid, or a results folder belongs to another sweep."""


class PlanFileError(InputError):
    """A plan file does not follow the plan/1 contract."""


class OutputError(InputError):
    """An output path given by the user cannot be written."""


class InfeasibleTask(BraceError):
    """A pre-solve check proved the task cannot be satisfied.

    Parameters
    ----------
    message : str
        One line saying what cannot be done.
    findings : list, optional
        The checks' findings (``optimizer.analysis.presolve.Finding``), each
        in plain words with what is short and by how much; they are appended
        to the message, one per line.
    """

    exit_code = 2

    def __init__(self, message: str, findings=None):
        self.findings = list(findings or [])
        lines = [message] + [f"  - {f.text()}" for f in self.findings]
        super().__init__("\n".join(lines))


class TooLargeForMemory(BraceError):
    """A solve's estimated memory exceeds what the machine has or the limit the user set.

    The message gives the estimate, the ceiling and the largest knot count
    that fits; nothing has been built (exit code 2, like other input the
    run cannot take).
    """

    exit_code = 2


class SolveFailed(BraceError):
    """The NLP solver did not reach a feasible point."""

    exit_code = 1
